"""Uncertainty budgets (GUM, JCGM 100:2008) and a Monte Carlo check (JCGM 101:2008).

A :class:`Budget` is the table behind one reported value: its :class:`Contribution` rows
(noise/fit, timebase, gain, fixed parts with their tolerances, model/method, quantisation,
card distortion …), each with the standard uncertainty of its input, the distribution that
standard uncertainty was derived from, the sensitivity coefficient ∂y/∂x and the contribution
|c·u|. The combined standard uncertainty follows the law of propagation of uncertainty
(GUM 5.1.2; with correlated inputs 5.2.2), the effective degrees of freedom the
Welch–Satterthwaite formula (GUM G.4.1) and the expanded uncertainty U = k·u (GUM 6.2.1,
k = 2 unless asked for a coverage probability with finite degrees of freedom). Clause
numbers are from memory (REFERENCES §9).

Type B standard uncertainties from a half-width a (GUM 4.3.7, 4.3.9; REFERENCES §9):
rectangular a/√3, triangular a/√6, arcsine (U-shaped) a/√2; "normal" means a is already a
standard uncertainty.

:func:`monte_carlo` propagates distributions by random sampling (JCGM 101:2008, the adaptive
procedure of its clause 7.9 in outline, from memory): trials in blocks until the standard
deviation of the block means of the mean and of u are small against u.

Default figures for inputs nobody has calibrated live here too, each with its provenance, so
that capture, measure, fit and report state the same number.

Pure module: no printing, no files, no globals beyond constants.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Any, Callable, Literal, Mapping, Sequence, get_args

import numpy as np

__all__ = ["Distribution", "EvaluationType", "Contribution", "Budget", "standard_from_half_width",
           "combine", "welch_satterthwaite", "coverage_factor", "MonteCarloResult", "monte_carlo",
           "DEFAULT_TIMEBASE_HALF_WIDTH_PPM", "DEFAULT_TIMEBASE_U_PPM", "DEFAULT_TIMEBASE_NOTE",
           "DEFAULT_GAIN_HALF_WIDTH_REL", "DEFAULT_GAIN_U_REL", "DEFAULT_GAIN_NOTE",
           "DEFAULT_CHANNEL_RATIO_HALF_WIDTH_REL", "DEFAULT_CHANNEL_RATIO_NOTE",
           "DEFAULT_REFERENCE_HALF_WIDTH_PPM", "sample_distribution", "budgets_to_dict", "frozen_budgets"]

Distribution = Literal["normal", "rectangular", "triangular", "arcsine"]
EvaluationType = Literal["A", "B"]
_DISTRIBUTIONS = get_args(Distribution)

#: half-width (ppm) of an uncalibrated sample clock, taken as rectangular. Sound cards and
#: USB scopes clock their converters from a quartz crystal or a crystal-derived PLL; general
#: purpose crystals are sold at ±20…±50 ppm initial tolerance with a similar temperature and
#: ageing allowance on top (common practice, no source). ±100 ppm covers both.
DEFAULT_TIMEBASE_HALF_WIDTH_PPM = 100.0
#: its standard uncertainty, a/√3 (GUM 4.3.7): 57.7 ppm
DEFAULT_TIMEBASE_U_PPM = DEFAULT_TIMEBASE_HALF_WIDTH_PPM / math.sqrt(3.0)
DEFAULT_TIMEBASE_NOTE = (f"timebase not calibrated: the sample clock is taken as nominal "
                         f"± {DEFAULT_TIMEBASE_HALF_WIDTH_PPM:g} ppm (rectangular, u = "
                         f"{DEFAULT_TIMEBASE_U_PPM:.1f} ppm; a crystal clock's usual tolerance, common "
                         "practice, no source) and the frequency uncertainty includes it — run "
                         "'benchfit calibrate timebase' against a trusted tone to remove it")
#: half-width of the relative error of a gain (V per FS) whose calibration states no
#: uncertainty: a handheld multimeter's ac-volts accuracy is typically ±(0.5…1 %) of reading
#: plus digits at 50 Hz…1 kHz (from memory), taken as rectangular ±1 %
DEFAULT_GAIN_HALF_WIDTH_REL = 0.01
DEFAULT_GAIN_U_REL = DEFAULT_GAIN_HALF_WIDTH_REL / math.sqrt(3.0)
DEFAULT_GAIN_NOTE = (f"gain uncertainty not stated: the gain is taken as ± {100 * DEFAULT_GAIN_HALF_WIDTH_REL:g} % "
                     f"(rectangular, u = {100 * DEFAULT_GAIN_U_REL:.2f} %; a handheld meter's ac accuracy, "
                     "from memory)")
#: half-width of the gain ratio between two scope or sound-card inputs nobody matched: 8-bit
#: USB scopes state ±2…±3 % dc gain accuracy per channel (from memory), taken as rectangular ±3 %
DEFAULT_CHANNEL_RATIO_HALF_WIDTH_REL = 0.03
DEFAULT_CHANNEL_RATIO_NOTE = (f"channel gain ratio: drive and output inputs are not matched by a calibration, so "
                              f"their gain ratio is taken as 1 ± {100 * DEFAULT_CHANNEL_RATIO_HALF_WIDTH_REL:g} % "
                              "(rectangular; a USB scope's per-channel gain accuracy, from memory) and "
                              "propagated into the parts")
#: half-width (ppm) of a reference tone whose uncertainty the user did not give: a generator
#: without a stated accuracy is again a crystal, so the same ±100 ppm rectangular
DEFAULT_REFERENCE_HALF_WIDTH_PPM = DEFAULT_TIMEBASE_HALF_WIDTH_PPM


def standard_from_half_width(half_width: float, distribution: Distribution) -> float:
    """Standard uncertainty of a distribution given its half-width (GUM 4.3.7, 4.3.9).

    "normal" returns ``half_width`` unchanged (it is taken as a standard uncertainty).
    """
    a = abs(float(half_width))
    if distribution == "rectangular":
        return a / math.sqrt(3.0)
    if distribution == "triangular":
        return a / math.sqrt(6.0)
    if distribution == "arcsine":
        return a / math.sqrt(2.0)
    if distribution == "normal":
        return a
    raise ValueError(f"distribution {distribution!r}: unknown — use one of {', '.join(_DISTRIBUTIONS)}")


def _clean(v: float | None) -> float | None:
    if v is None:
        return None
    v = float(v)
    return v if math.isfinite(v) else None


@dataclass(frozen=True)
class Contribution:
    """One row of a budget.

    Attributes
    ----------
    name : str
        What the input is, e.g. ``"noise (fit)"``, ``"fixed L (±10 %, rectangular)"``.
    type : {"A", "B"}
        GUM evaluation type: A from the data's own scatter, B from other knowledge.
    distribution : str
        The distribution the input's standard uncertainty was derived from.
    u_input : float
        Standard uncertainty of the input quantity, in ``input_unit``.
    input_unit : str
        Unit of the input ("Hz", "ppm", "H", "1" for a relative value …).
    sensitivity : float
        Sensitivity coefficient c = ∂y/∂x in (unit of y) per ``input_unit``.
    dof : float
        Degrees of freedom of u_input (``math.inf`` for a Type B input taken as exact).
    source : str
        Provenance of the figure (calibration profile, datasheet, "common practice, no source").
    """

    name: str
    type: EvaluationType
    distribution: str
    u_input: float
    input_unit: str
    sensitivity: float
    dof: float = math.inf
    source: str = ""

    @property
    def contribution(self) -> float:
        """|c·u|, in the unit of the budget's quantity."""
        return abs(float(self.sensitivity) * float(self.u_input))

    def to_dict(self) -> dict[str, Any]:
        return {"name": self.name, "type": self.type, "distribution": self.distribution,
                "u_input": _clean(self.u_input), "input_unit": self.input_unit,
                "sensitivity": _clean(self.sensitivity), "contribution": _clean(self.contribution),
                "dof": _clean(self.dof), "source": self.source}


def combine(contributions: Sequence[Contribution],
            correlation: np.ndarray | None = None) -> float:
    """Combined standard uncertainty (GUM 5.1.2; 5.2.2 with a correlation matrix).

    ``correlation`` is the matrix r(x_i, x_j) of the inputs, in the order of
    ``contributions``; with it u_c² = Σᵢ Σⱼ cᵢ uᵢ r_ij cⱼ uⱼ (signs of c matter then).
    """
    cu = np.array([float(c.sensitivity) * float(c.u_input) for c in contributions])
    if cu.size == 0:
        return 0.0
    if correlation is None:
        return float(math.sqrt(float(cu @ cu)))
    r = np.asarray(correlation, dtype=float)
    if r.shape != (cu.size, cu.size):
        raise ValueError(f"correlation: shape {r.shape} does not match {cu.size} contributions")
    return float(math.sqrt(max(float(cu @ r @ cu), 0.0)))


def welch_satterthwaite(contributions: Sequence[Contribution], u_c: float | None = None) -> float:
    """Effective degrees of freedom ν_eff = u_c⁴ / Σ (cᵢuᵢ)⁴/νᵢ (GUM G.4.1); inf when all νᵢ are."""
    uc = combine(contributions) if u_c is None else float(u_c)
    den = 0.0
    for c in contributions:
        if math.isfinite(c.dof) and c.dof > 0:
            den += c.contribution ** 4 / c.dof
    if den <= 0 or uc <= 0:
        return math.inf
    return uc ** 4 / den


def coverage_factor(dof: float = math.inf, probability: float = 0.9545) -> float:
    """k from Student's t for ν degrees of freedom (GUM G.3, Table G.2); 2.00 for ν = ∞, p = 95.45 %."""
    if not math.isfinite(dof):
        if abs(probability - 0.9545) < 1e-9:
            return 2.0
        from scipy.special import ndtri  # (scipy.special: the quantiles without loading scipy.stats)

        return float(ndtri(0.5 + probability / 2))
    from scipy.special import stdtrit

    # GUM G.4.1: truncate ν_eff to the next lower integer
    return float(stdtrit(max(1, int(math.floor(dof))), 0.5 + probability / 2))


@dataclass(frozen=True)
class Budget:
    """The uncertainty budget of one value.

    Attributes
    ----------
    quantity : str
        Name of the value (``"frequency_hz"``, ``"C"`` …).
    value : float
        The estimate.
    unit : str
        Its unit.
    contributions : tuple of Contribution
        The rows.
    correlation : ndarray, optional
        Correlation matrix of the inputs (GUM 5.2.2); None: uncorrelated.
    k : float, optional
        Coverage factor; None: 2 for ν_eff ≥ 50 or infinite, else t(95.45 %, ν_eff).
    conditional_on : tuple of str
        Inputs held exact without a stated tolerance: the value holds only if they are right.
    """

    quantity: str
    value: float
    unit: str
    contributions: tuple[Contribution, ...] = ()
    correlation: np.ndarray | None = field(default=None, compare=False)
    k: float | None = None
    conditional_on: tuple[str, ...] = ()

    def __post_init__(self) -> None:
        object.__setattr__(self, "contributions", tuple(self.contributions))
        object.__setattr__(self, "conditional_on", tuple(self.conditional_on))

    @property
    def u(self) -> float:
        """Combined standard uncertainty u_c (k = 1)."""
        return combine(self.contributions, self.correlation)

    @property
    def dof(self) -> float:
        return welch_satterthwaite(self.contributions, self.u)

    @property
    def coverage(self) -> float:
        if self.k is not None:
            return float(self.k)
        nu = self.dof
        return 2.0 if not math.isfinite(nu) or nu >= 50 else coverage_factor(nu)

    @property
    def expanded(self) -> float:
        """Expanded uncertainty U = k·u_c (GUM 6.2.1)."""
        return self.coverage * self.u

    def largest(self) -> Contribution | None:
        return max(self.contributions, key=lambda c: c.contribution, default=None)

    def with_rows(self, *rows: Contribution) -> "Budget":
        from dataclasses import replace

        return replace(self, contributions=self.contributions + tuple(rows), correlation=None)

    def to_dict(self) -> dict[str, Any]:
        return {"quantity": self.quantity, "value": _clean(self.value), "unit": self.unit,
                "u": _clean(self.u), "k": _clean(self.coverage), "U": _clean(self.expanded),
                "dof_eff": _clean(self.dof),
                "contributions": [c.to_dict() for c in self.contributions],
                "conditional_on": list(self.conditional_on)}

    @classmethod
    def from_dict(cls, d: Mapping[str, Any]) -> "Budget":
        rows = tuple(Contribution(name=str(c["name"]), type=c.get("type", "B"),
                                  distribution=str(c.get("distribution", "normal")),
                                  u_input=float(c.get("u_input") or 0.0), input_unit=str(c.get("input_unit", "")),
                                  sensitivity=float(c.get("sensitivity") or 0.0),
                                  dof=math.inf if c.get("dof") is None else float(c["dof"]),
                                  source=str(c.get("source", "")))
                     for c in d.get("contributions", ()))
        return cls(str(d.get("quantity", "")), float(d.get("value") or math.nan), str(d.get("unit", "")),
                   rows, k=d.get("k"), conditional_on=tuple(d.get("conditional_on", ())))


def budgets_to_dict(budgets: Mapping[str, Budget]) -> dict[str, Any]:
    """``{quantity: budget dict}`` (JSON-safe)."""
    return {k: b.to_dict() for k, b in budgets.items()}


def frozen_budgets(budgets: Mapping[str, Budget] | None) -> Mapping[str, Budget]:
    return MappingProxyType(dict(budgets or {}))


# --- Monte Carlo (JCGM 101) -----------------------------------------------------------------

def sample_distribution(rng: np.random.Generator, distribution: Distribution, mean: float, u: float,
                        n: int) -> np.ndarray:
    """n draws of an input with the given mean and *standard* uncertainty u."""
    if distribution == "normal":
        return rng.normal(mean, u, n)
    if distribution == "rectangular":
        a = u * math.sqrt(3.0)
        return rng.uniform(mean - a, mean + a, n)
    if distribution == "triangular":
        a = u * math.sqrt(6.0)
        return rng.triangular(mean - a, mean, mean + a, n)
    if distribution == "arcsine":
        a = u * math.sqrt(2.0)
        return mean + a * np.sin(rng.uniform(-math.pi / 2, math.pi / 2, n))
    raise ValueError(f"distribution {distribution!r}: unknown — use one of {', '.join(_DISTRIBUTIONS)}")


@dataclass(frozen=True)
class MonteCarloResult:
    """Propagation of distributions: estimate (mean), standard uncertainty, 95 % interval, trials."""

    mean: float
    u: float
    low: float
    high: float
    trials: int

    def to_dict(self) -> dict[str, Any]:
        return {"mean": self.mean, "u": self.u, "low": self.low, "high": self.high, "trials": self.trials}


def monte_carlo(model: Callable[..., np.ndarray],
                inputs: Sequence[tuple[Distribution, float, float]], *, seed: int = 0,
                block: int = 10_000, max_trials: int = 1_000_000, rel_tol: float = 0.01,
                probability: float = 0.95) -> MonteCarloResult:
    """Propagate input distributions through ``model`` (JCGM 101:2008).

    Parameters
    ----------
    model : callable
        ``model(x1, x2, …)`` with one ndarray per input (vectorised), returning an ndarray.
    inputs : sequence of (distribution, mean, standard uncertainty)
    seed : int
        Seed of the generator (results are reproducible).
    block, max_trials : int
        Trials per block and the most trials to run.
    rel_tol : float
        Stop when twice the standard deviation of the block means of the mean and of u falls
        below ``rel_tol·u`` (the adaptive procedure, JCGM 101 7.9, simplified; from memory).
    probability : float
        Coverage probability of the probabilistically symmetric interval [low, high].
    """
    rng = np.random.default_rng(seed)
    values: list[np.ndarray] = []
    means: list[float] = []
    sds: list[float] = []
    while True:
        draws = [sample_distribution(rng, d, m, u, block) for d, m, u in inputs]
        y = np.asarray(model(*draws), dtype=float)
        y = y[np.isfinite(y)]
        values.append(y)
        means.append(float(np.mean(y)))
        sds.append(float(np.std(y, ddof=1)))
        h = len(values)
        n = sum(v.size for v in values)
        if h >= 2:
            u = float(np.mean(sds))
            s_mean = float(np.std(means, ddof=1)) / math.sqrt(h)
            s_u = float(np.std(sds, ddof=1)) / math.sqrt(h)
            if max(2 * s_mean, 2 * s_u) < rel_tol * max(u, 1e-300) or n >= max_trials:
                break
    allv = np.concatenate(values)
    lo, hi = np.quantile(allv, [0.5 - probability / 2, 0.5 + probability / 2])
    return MonteCarloResult(float(np.mean(allv)), float(np.std(allv, ddof=1)), float(lo), float(hi),
                            int(allv.size))
