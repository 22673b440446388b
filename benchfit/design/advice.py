"""Trim advice judged by the whole spec: a search over actions, each predicted on every limit.

The unit is the one model of :mod:`benchfit.model.unit` (drive + filter). Its state comes
from the fit (L, C, Rs, Resr, Rload with their covariance), the measurement (frequency,
levels, THD, harmonics) and, for timer advice, the timer's nominal parts.

Drive calibration. The measured output harmonics A_k divided by the fitted |H(j·2π·k·f)|
are the drive's harmonics; their ratios give the duty (|X_k|/|X_1| = |sin kπD|/(k·sin πD),
REFERENCES §5) and the fundamental gives the swing S = |X_1|·π/(2 sin πD). A rectangular
wave and its complement have the same amplitude spectrum, so D is taken ≤ 0.5.

Prediction of a measured quantity q after a change (vrms, amplitude, THD): the measured value
times the model's ratio, q_after = q_meas · m(after)/m(before), both m computed with the same
Monte Carlo draw of the fitted parts. The capture chain's calibration, and most of the model's
own error, cancel in the ratio. Frequency: the measured one, or after a timer change the
measured one scaled by the ratio of the timer's periods (the measurement calibrates the
existing parts: the period is proportional to C1, so C1's error and the timer's initial error
cancel in the ratio, and only the added part's tolerance and the present resistors' tolerance
enter the uncertainty; :mod:`benchfit.design.actions`).

Uncertainty (JCGM 101:2008, propagation of distributions by Monte Carlo; seeded): the fitted
parameters are drawn from a normal with the fit's standard errors and correlations; parts
fixed in the fit are drawn rectangular within an assumed tolerance (``fixed_tolerance``) and,
because a one-channel fit determines only the filter's shape, a fixed C (or L) that is off by
a factor a makes the fitted impedances off by 1/a (impedance scaling: L/a, Rs/a, Resr/a);
added parts are drawn rectangular within their tolerance (GUM 4.3.7). ``p_pass`` is the
fraction of draws in which every limit of the spec holds (the probability that the unit
conforms after the change, not the guard-banded decision of the re-measurement).

Ranking (issue 10): plans whose stresses are flagged come last; then plans that pass with
probability ≥ 0.95, then ≥ 0.5, then the rest; within a tier fewer parts first, then the
smallest change. A fitted part outside its nominal tolerance by more than two standard
uncertainties makes the verdict "replace" with that replacement listed first. A unit whose
measured values pass every limit with the guard band (ILAC-G8:09/2019 4.2.3, w = U) gets
"no change".
"""

from __future__ import annotations

import dataclasses
import math
import re
from dataclasses import dataclass
from typing import Any, Mapping, Sequence

import numpy as np

from benchfit.design.actions import (CHOKE_RS_SPREAD, CHOKE_TOLERANCE, RESISTOR_TOLERANCE, Change,
                                     TimerParts, _Action, _c_parallel, _c_series, _continuous, _q, _r_damp,
                                     _replace, _snap, _State, _timer_actions)
from benchfit.design.parts import SERIES_TOLERANCE, check_series
from benchfit.errors import DesignError
from benchfit.model.filter import LowpassParts, transfer
from benchfit.model.stress import CAUTIONS, Ratings, StressCheck, stress_checks
from benchfit.model.unit import CaptureChain, Drive, UnitModel, predict, predict_quantities

__all__ = ["TimerParts", "Change", "Plan", "Advice", "advise", "Verdict", "P_HIGH", "P_MIN"]

#: "passes with high probability"
P_HIGH = 0.95
#: below this no plan "reaches the spec"
P_MIN = 0.5

#: assumed tolerance (fraction, rectangular) of a value fixed in the fit (from memory: a bench
#: LCR meter reading of a bank or choke, ±2 %; a 1 % load resistor)
FIXED_TOLERANCE: Mapping[str, float] = {"L": 0.02, "C": 0.02, "Rload": 0.01, "Rs": 0.05, "Resr": 0.5}

_MEASURED = ("frequency_hz", "amplitude", "vrms", "thd_pct", "vdc")
_FITTED = ("L", "C", "Rs", "Resr", "Rload", "resonant_frequency_hz", "q_factor",
           "damped_frequency_hz", "decay_rate_per_s")

Verdict = str  # "no change" | "adjust" | "replace" | "cannot meet spec"


@dataclass(frozen=True)
class Plan:
    """A set of changes meant to be done together, and its predicted effect on every limit."""

    changes: tuple[Change, ...]
    predicted: Mapping[str, tuple[float, float]]
    p_pass: float
    p_limits: Mapping[str, float]
    stress: tuple[StressCheck, ...]
    warnings: tuple[str, ...] = ()
    n_parts: int = 0
    size: float = 0.0

    @property
    def flagged(self) -> tuple[StressCheck, ...]:
        return tuple(s for s in self.stress if s.flagged)

    def to_dict(self) -> dict[str, Any]:
        return {"changes": [c.to_dict() for c in self.changes],
                "predicted": {q: {"value": v, "u": u} for q, (v, u) in self.predicted.items()},
                "p_pass": self.p_pass, "p_limits": dict(self.p_limits),
                "stress": [s.to_dict() for s in self.flagged],
                "stress_checks": [s.to_dict() for s in self.stress],
                "warnings": list(self.warnings)}


@dataclass(frozen=True)
class Advice:
    """The verdict, the plan to do, the alternatives, and what the advice rests on."""

    verdict: Verdict
    plan: Plan
    alternatives: tuple[Plan, ...]
    warnings: tuple[str, ...]
    notes: tuple[str, ...]
    blocking: str | None = None
    source: str = ""
    cautions: tuple[str, ...] = CAUTIONS

    def to_dict(self) -> dict[str, Any]:
        d = self.plan.to_dict()
        return {"verdict": self.verdict, "changes": d["changes"], "predicted": d["predicted"],
                "p_pass": d["p_pass"], "p_limits": d["p_limits"], "stress": d["stress"],
                "stress_checks": d["stress_checks"],
                "warnings": list(self.warnings) + d["warnings"],
                "alternatives": [a.to_dict() for a in self.alternatives],
                "blocking_limit": self.blocking, "notes": list(self.notes),
                "cautions": list(self.cautions), "source": self.source}

    def summary_lines(self) -> list[str]:
        """Readable sentences: the verdict, the changes in order, the predictions, stresses."""
        lines = [f"verdict: {self.verdict}"]
        if self.verdict == "no change":
            lines.append("no change: the unit meets every limit of the spec with margin — leave it as it is")
        for i, c in enumerate(self.plan.changes, start=1):
            lines.append(f"{i}. {c.text}")
        if self.verdict == "cannot meet spec" and self.blocking:
            lines.append(f"no action found reaches the spec: {self.blocking} blocks it")
        pred = ", ".join(_fmt_pred(q, v, u) for q, (v, u) in self.plan.predicted.items())
        if pred:
            lines.append(f"predicted{' after the changes' if self.plan.changes else ''} (k = 1): {pred}; "
                         f"probability of meeting the spec {self.plan.p_pass * 100:.1f} %")
        lines += [f"stress: {s.text}" for s in self.plan.flagged]
        lines += list(self.warnings) + list(self.plan.warnings)
        lines += [f"basis: {n}" for n in self.notes]
        for a in self.alternatives[:3]:
            what = "; ".join(c.text for c in a.changes) or "no change"
            lines.append(f"alternative: {what} — probability of meeting the spec {a.p_pass * 100:.1f} %"
                         + (" (stress flagged: not recommended)" if a.flagged else ""))
        return lines


def _fmt_pred(q: str, v: float, u: float) -> str:
    unit = {"frequency_hz": "Hz", "thd_pct": "%", "vrms": "V", "amplitude": "V", "vdc": "V", "vpp": "V",
            "L": "H", "C": "F", "Rs": "Ω", "resonant_frequency_hz": "Hz"}.get(q, "")
    from benchfit.units import format_with_uncertainty

    return f"{q} {format_with_uncertainty(v, u, unit)}"


# --- inputs ------------------------------------------------------------------------------

def _channel(measurement: Mapping[str, Any] | None, spec) -> Mapping[str, Any] | None:
    if measurement is None:
        return None
    chans = list(measurement.get("channels", []))
    if not chans:
        return None
    for lim in spec.limits:
        if isinstance(lim.channel, int) and lim.channel < len(chans):
            return chans[lim.channel]
        if isinstance(lim.channel, str):
            for c in chans:
                if str(c.get("name", "")).lower() == lim.channel.lower():
                    return c
    if len(chans) == 1:
        return chans[0]
    return next((c for c in chans if str(c.get("name", "")).lower() == "output"), chans[-1])


def _u(ch: Mapping[str, Any], q: str) -> float | None:
    from benchfit.report.spec import uncertainty_keys

    extra = ch.get("extra") or {}
    for key in uncertainty_keys(q):
        v = ch.get(key, extra.get(key))
        if v is not None and math.isfinite(float(v)):
            return float(v)
    return None


def _stated_tolerance(fit, name: str, value: float) -> float | None:
    """Relative half-width of a fixed part's tolerance as the fit was given it, or None."""
    spec = (getattr(fit, "inputs", None) or {}).get(name) or {}
    hw = spec.get("half_width")
    if spec.get("role") != "fixed" or hw is None or not value or not math.isfinite(value):
        return None
    return abs(float(hw)) / abs(value)


def _u_without(param, prefixes: Sequence[str]) -> float:
    """A fitted part's standard uncertainty less the budget rows named by ``prefixes`` (in quadrature)."""
    u = float(param.stderr)
    budget = getattr(param, "budget", None)
    if budget is None or not prefixes:
        return u
    drop = sum(float(c.contribution) ** 2 for c in budget.contributions
               if any(c.name.startswith(p) for p in prefixes))
    return math.sqrt(max(u * u - drop, 0.0))


def _fit_draws(fit, n: int, rng, fixed_tol: Mapping[str, float], notes: list[str]) -> _State:
    names = ("L", "C", "Rs", "Resr", "Rload")
    vals = {}
    for k in names:
        p = fit.parameters.get(k)
        v = None if p is None else p.value
        if k in ("L", "C") and (v is None or not v > 0):
            raise DesignError(f"{fit.file}: the fit has no {k} — fit with fit_lowpass() (fix one part)")
        vals[k] = float(v) if v is not None else (math.inf if k == "Rload" else 0.0)
    free = [k for k in names if fit.parameters.get(k) is not None and not fit.parameters[k].fixed
            and fit.parameters[k].stderr is not None and math.isfinite(vals[k])]
    # a fixed part whose tolerance the fit stated (--fix C=33u±10%) is drawn within that tolerance
    # below, coherently with the parts it moves; its row is taken out of their fitted u so that it
    # is not counted twice
    stated = {k: _stated_tolerance(fit, k, vals[k]) for k in ("L", "C", "Rload")}
    fixed_tol = {**fixed_tol, **{k: t for k, t in stated.items() if t is not None}}
    mean = np.array([vals[k] for k in free])
    sd = np.array([_u_without(fit.parameters[k], [f"fixed {x} " for x, t in stated.items() if t is not None])
                   for k in free])
    corr = np.eye(len(free))
    for i, a in enumerate(free):
        for j, b in enumerate(free):
            if i != j:
                r = fit.correlations.get(f"{a},{b}", fit.correlations.get(f"{b},{a}"))
                corr[i, j] = 0.0 if r is None or not math.isfinite(float(r)) else float(r)
    draws = {k: np.full(n, vals[k]) for k in names}
    asym = _fit_asymmetry(fit)
    if asym is not None:
        # r_high − r_low of a switched drive: drawn normal with its own u (its correlations with the parts
        # are not in the fit's table), scaled below with the impedances like Rs
        draws[ASYM] = asym[0] + asym[1] * rng.standard_normal(n)
        draws[ASYM][0] = asym[0]
    if free:
        cov = corr * np.outer(sd, sd)
        w, v = np.linalg.eigh(cov)
        z = rng.standard_normal((n, len(free))) @ (v * np.sqrt(np.clip(w, 0, None))).T
        z[0] = 0.0  # draw 0 is the nominal (best-estimate) unit
        for i, k in enumerate(free):
            draws[k] = mean[i] + z[:, i]
    for k in ("L", "C"):
        p = fit.parameters[k]
        if p.fixed:
            tol = fixed_tol.get(k, 0.0)
            a = 1.0 + tol * rng.uniform(-1, 1, n)
            a[0] = 1.0
            draws[k] = draws[k] * a
            other = [x for x in ("L", "C") if x != k][0]
            # impedance scaling: the data fixed the filter's shape, so the fitted impedances scale
            s = 1.0 / a if k == "C" else a
            draws[other] = draws[other] / a if k == "C" else draws[other] / a
            draws["Rs"] = draws["Rs"] * s
            draws["Resr"] = draws["Resr"] * s
            if ASYM in draws:
                draws[ASYM] = draws[ASYM] * s
            if tol:
                how = ("as stated in the fit" if stated.get(k) is not None
                       else "assumed meter reading")
                notes.append(f"{k} was fixed in the fit at {_q(vals[k], 'H' if k == 'L' else 'F')}: taken as "
                             f"±{tol * 100:g} % (rectangular, {how}); the fitted {other}, Rs and "
                             "ESR scale with it")
    if fit.parameters.get("Rload") is not None and fit.parameters["Rload"].fixed and math.isfinite(vals["Rload"]):
        tol = fixed_tol.get("Rload", 0.0)
        a = 1.0 + tol * rng.uniform(-1, 1, n)
        a[0] = 1.0
        draws["Rload"] = draws["Rload"] * a
    for k in names:
        draws[k] = np.maximum(draws[k], 0.0) if k in ("Rs", "Resr") else np.maximum(draws[k], 1e-300)
    extra = {ASYM: draws[ASYM]} if ASYM in draws else {}
    return _State(draws["L"], draws["C"], draws["Rs"], draws["Resr"], draws["Rload"], np.zeros(n), extra)


#: the drive's r_high − r_low (Ω) in a unit state's extra draws
ASYM = "drive_asymmetry_ohm"


def _fit_asymmetry(fit) -> tuple[float, float, float] | None:
    """(r_high − r_low in Ω, its u, duty of the phase r_high belongs to) of a fit that chose the
    switched-source drive (benchfit.fit.asymmetry), else None."""
    dv = fit.derived.get(ASYM)
    duty_high = (fit.adequacy.get("drive_asymmetry") or {}).get("duty_high")
    if dv is None or dv.value is None or duty_high is None or not math.isfinite(float(dv.value)):
        return None
    return float(dv.value), float(dv.stderr or 0.0), float(duty_high)


def _estimate_drive(ch: Mapping[str, Any], parts: LowpassParts, f: float, chain: CaptureChain
                    ) -> tuple[float, float] | None:
    """(duty ≤ 0.5, swing S in V) from the measured output harmonics through the fitted filter."""
    harm = [(int(h["order"]), float(h["amplitude"])) for h in ch.get("harmonics", []) if h.get("amplitude")]
    if not harm or harm[0][0] != 1:
        return None
    k = np.array([o for o, _ in harm], dtype=float)
    a = np.array([v for _, v in harm])
    x = a / np.abs(transfer(k * f, parts) * chain.response(k * f))
    sel = (k >= 2) & (k <= 7)
    if not np.any(sel):
        return None
    grid = np.linspace(0.02, 0.5, 4801)
    s1 = np.sin(np.pi * grid)
    best, dbest = math.inf, 0.5
    for i, d in enumerate(grid):
        r = np.abs(np.sin(k[sel] * np.pi * d)) / (k[sel] * s1[i])
        e = float(np.sum((x[sel] / x[0] - r) ** 2))
        if e < best:
            best, dbest = e, float(d)
    return dbest, float(x[0] * math.pi / (2.0 * math.sin(math.pi * dbest)))


def _fit_duty(fit) -> float | None:
    for w in getattr(fit, "warnings", ()):
        m = re.search(r"duty cycle was fitted as ([0-9.]+)", w)
        if m:
            d = float(m.group(1)) / 100.0
            return min(d, 1 - d)
    return None


# --- the model over draws ----------------------------------------------------------------

class _Evaluator:
    def __init__(self, duty: float, swing: float, v_low: float, chain: CaptureChain, rp: float = math.inf,
                 phase_known: bool = False):
        self.duty, self.swing, self.v_low, self.chain = duty, swing, v_low, chain
        self.rp = rp  # the choke's fitted core loss (a resistance across L), inf when none was fitted
        # a given duty says which phase is high; a duty from the output's spectrum does not (it fits its
        # complement as well), so the stresses are then the worse of the two (_stresses_either_phase)
        self.phase_known = phase_known

    def unit(self, s: _State, i: int) -> UnitModel:
        # a switched drive (r_high ≠ r_low): the fitted Rs holds the time average D·r_high + (1 − D)·r_low,
        # so the drive adds (1 − D)·Δr while high and −D·Δr while low (benchfit.fit.asymmetry)
        dr = float(s.extra[ASYM][i]) if ASYM in s.extra else 0.0
        return UnitModel(Drive(float(s.f[i]), self.duty, self.v_low + self.swing, self.v_low,
                               (1.0 - self.duty) * dr, -self.duty * dr),
                         LowpassParts(float(s.L[i]), float(s.C[i]), float(s.Rs[i]), float(s.Resr[i]),
                                      float(s.Rload[i]), self.rp))

    def quantities(self, s: _State) -> dict[str, np.ndarray]:
        rows = [predict_quantities(self.unit(s, i), self.chain) for i in range(s.L.size)]
        return {k: np.array([r[k] for r in rows]) for k in rows[0]}


# --- scoring -----------------------------------------------------------------------------

def _margin(q: Mapping[str, float], limits) -> float:
    """Smallest normalised distance inside the limits (1 = at the centre, < 0 = outside)."""
    m = math.inf
    for lim in limits:
        v = q.get(lim.quantity)
        if v is None or not math.isfinite(v):
            continue
        if lim.lower is not None and lim.upper is not None:
            half = (lim.upper - lim.lower) / 2.0
            m = min(m, (half - abs(v - (lim.lower + half))) / half)
        elif lim.upper is not None:
            m = min(m, (lim.upper - v) / max(abs(lim.upper), 1e-300))
        elif lim.lower is not None:
            m = min(m, (v - lim.lower) / max(abs(lim.lower), 1e-300))
    return m


class _Search:
    def __init__(self, spec, limits, ev: _Evaluator, base: _State, meas: Mapping[str, float],
                 meas_u: Mapping[str, float], n: int, seed: int, ratings: Ratings | None):
        self.spec, self.limits, self.ev, self.base = spec, limits, ev, base
        self.meas, self.meas_u, self.n, self.seed, self.ratings = meas, meas_u, n, seed, ratings
        self.has_filter = True
        self.before = ev.quantities(base)
        rng = np.random.default_rng(seed + 7919)
        self.noise = {q: rng.standard_normal(n) for q in _MEASURED}
        for z in self.noise.values():
            z[0] = 0.0

    def predicted(self, after: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
        out = {}
        for lim in self.limits:
            q = lim.quantity
            if q in self.meas and q in ("vrms", "amplitude", "thd_pct"):
                m = self.meas[q] + self.meas_u.get(q, 0.0) * self.noise[q]
                out[q] = m * after[q] / self.before[q]
            elif q == "frequency_hz":
                out[q] = after["frequency_hz"] + self.meas_u.get(q, 0.0) * self.noise[q]
            elif q in after:
                out[q] = after[q]
        return out

    def evaluate(self, actions: Sequence[_Action], index: int) -> Plan:
        rng = np.random.default_rng(self.seed + 1000 * (index + 1))
        s = self.base
        for a in actions:
            s = a.apply(s, rng)
        after = self.ev.quantities(s) if actions else self.before
        pred = self.predicted(after)
        ok = np.ones(self.n, dtype=bool)
        p_lim = {}
        for lim in self.limits:
            v = pred.get(lim.quantity)
            if v is None:
                continue
            good = np.ones(self.n, dtype=bool)
            if lim.lower is not None:
                good &= v >= lim.lower
            if lim.upper is not None:
                good &= v <= lim.upper
            p_lim[lim.quantity] = float(np.mean(good))
            ok &= good
        summary = {}
        for q, v in pred.items():
            sd = float(np.std(v[1:], ddof=1)) if v.size > 2 else 0.0
            summary[q] = (float(v[0]), sd if sd > 1e-12 * abs(float(v[0])) else 0.0)
        stress: tuple[StressCheck, ...] = ()
        if self.has_filter:
            unit = self.ev.unit(s, 0)
            stress = (stress_checks(predict(unit, self.ev.chain), self.ratings) if self.ev.phase_known
                      else _stresses_either_phase(unit, self.ev.chain, self.ratings))
        changes = []
        for a in actions:
            c = a.change
            if c.new_value == 0.0 and c.part == "C":
                c = dataclasses.replace(c, new_value=float(s.C[0]))
            changes.append(c)
        return Plan(tuple(changes), summary, float(np.mean(ok)), p_lim, stress,
                    n_parts=sum(a.n_parts for a in actions), size=sum(a.size for a in actions))

    def nominal_margin(self, actions: Sequence[_Action]) -> float:
        s = self.base.nominal()
        rng = np.random.default_rng(0)
        for a in actions:
            s = a.apply(s, rng)
        after = self.ev.quantities(s)
        pred = {}
        for lim in self.limits:
            q = lim.quantity
            if q in self.meas and q in ("vrms", "amplitude", "thd_pct"):
                pred[q] = self.meas[q] * float(after[q][0]) / float(self.before[q][0])
            elif q in after:
                pred[q] = float(after[q][0])
        return _margin(pred, self.limits)


def _stresses_either_phase(unit: UnitModel, chain: CaptureChain, ratings: Ratings | None) -> tuple[StressCheck, ...]:
    """The stresses of ``unit`` and of its complement (the other phase taken as high), the worse of each.

    The output's amplitude spectrum does not tell a drive from its complement (duty 1 − D, the phases'
    resistances swapped), so the advice's duty is a choice (≤ 0.5); the two share every harmonic but not the
    DC, and so not the peaks: the capacitor's peak differs by 8 % between them on the asymmetric ngspice unit
    of tests/design/test_design_advice_ngspice.py. Each stress is the worse of the two (the larger magnitude,
    the lower capacitor minimum).
    """
    d = unit.drive
    other = unit.with_drive(duty=1.0 - d.duty, r_high=d.r_low, r_low=d.r_high)
    a, b = stress_checks(predict(unit, chain), ratings), stress_checks(predict(other, chain), ratings)
    out = []
    for x, y in zip(a, b):  # the same checks in the same order (stress_checks lists them by the ratings only)
        worse = y.value < x.value if x.quantity == "capacitor_min_v" else abs(y.value) > abs(x.value)
        out.append(y if y.flagged > x.flagged or (y.flagged == x.flagged and worse) else x)
    return tuple(out)


def _rank_key(p: Plan) -> tuple:
    tier = 0 if p.p_pass >= P_HIGH else (1 if p.p_pass >= P_MIN else 2)
    return (bool(p.flagged), tier, p.n_parts, round(p.size, 3), -p.p_pass)


# --- the front door ----------------------------------------------------------------------

def advise(spec, *, fit=None, measurement: Mapping[str, Any] | None = None,
           timer: TimerParts | None = None, timer_frequency_hz: float | None = None,
           timer_frequency_u_hz: float | None = None, nominal: Mapping[str, float] | None = None,
           tolerance: Mapping[str, float] | None = None, duty: float | None = None,
           drive_swing_v: float | None = None, cap_series: str = "E12", resistor_series: str = "E24",
           part_tolerance: float | None = None, resistor_tolerance: float = RESISTOR_TOLERANCE,
           fixed_tolerance: Mapping[str, float] | None = None, ratings: Ratings | None = None,
           n_trials: int = 1000, seed: int = 0) -> Advice:
    """Search the actions that bring the unit inside every limit of ``spec``; see the module text.

    Parameters
    ----------
    spec : benchfit.report.spec.Spec
        The limits (output frequency, THD, level, fitted quantities).
    fit : FitResult, optional
        The unit's lc-lowpass fit; without it only timer advice is possible.
    measurement : mapping, optional
        ``benchfit measure --json`` object (or ``Measurement.to_dict()``) of the output.
    timer : TimerParts, optional
        The timer's nominal parts, for timer advice.
    timer_frequency_hz, timer_frequency_u_hz : float, optional
        Measured frequency (Hz) and its standard uncertainty when no measurement is given.
    nominal, tolerance : mapping, optional
        Nominal values of the filter parts (``{"L": 0.3, "C": 33e-6}``) and their tolerances as
        fractions (default L ±10 %, C ±20 %); a fitted part outside its tolerance is replaced.
    duty, drive_swing_v : float, optional
        The drive's duty (the high phase's share of the period, 0–1) and swing (V) when they cannot be
        estimated from the measurement. A given duty also says which phase is high: the stresses are
        then this drive's, not the worse of it and its complement (which the output's spectrum
        cannot tell apart).
    cap_series, resistor_series : str
        E-series for added capacitors and resistors.
    part_tolerance : float, optional
        Tolerance of added capacitors (default: the series').
    resistor_tolerance : float
        Tolerance of added resistors.
    fixed_tolerance : mapping, optional
        Assumed tolerance of parts fixed in the fit (default :data:`FIXED_TOLERANCE`).
    ratings : Ratings, optional
        Stress ratings (default: NE555 output current only).
    n_trials : int
        Monte Carlo draws (≥ 200).
    seed : int
        Seed of the random generator.
    """
    if n_trials < 200:
        raise DesignError(f"trials: {n_trials!r} is too few — use at least 200")
    cseries = check_series(cap_series)
    rseries = check_series(resistor_series)
    ctol = SERIES_TOLERANCE[cseries] if part_tolerance is None else float(part_tolerance)
    fixed_tol = dict(FIXED_TOLERANCE if fixed_tolerance is None else fixed_tolerance)
    nominal = dict(nominal or {})
    tolerance = {"L": CHOKE_TOLERANCE, "C": 0.20, **dict(tolerance or {})}
    notes: list[str] = []
    warnings: list[str] = []
    ch = _channel(measurement, spec)
    limits = []
    for lim in spec.limits:
        if lim.quantity in _MEASURED or lim.quantity in _FITTED:
            limits.append(lim)
        else:
            warnings.append(f"limit {lim.quantity}: not predicted by the unit model — re-measure it after "
                            "any change")
    rng = np.random.default_rng(seed)
    n = int(n_trials)
    # frequency
    f_meas = None if ch is None else ch.get("frequency_hz")
    f_u = None if ch is None else ch.get("frequency_u_hz")
    if timer_frequency_hz is not None:
        f_meas, f_u = float(timer_frequency_hz), timer_frequency_u_hz
    if f_meas is None:
        lim = spec.limit_for("frequency_hz")
        if lim is None or lim.nominal is None:
            raise DesignError("trim: the unit's frequency is unknown — give the measurement (measurement=) or "
                              "timer_frequency_hz=")
        f_meas, f_u = float(lim.nominal), None
        warnings.append(f"the drive frequency is taken as the spec's nominal {f_meas:g} Hz (not measured)")
    f_meas = float(f_meas)
    meas: dict[str, float] = {}
    meas_u: dict[str, float] = {"frequency_hz": float(f_u or 0.0)}
    if ch is not None:
        for q in ("vrms", "amplitude", "thd_pct", "vdc"):
            if ch.get(q) is not None:
                meas[q] = float(ch[q])
                u = _u(ch, q)
                if u is not None:
                    meas_u[q] = u
        if "vrms" in meas and "vrms" not in meas_u:
            notes.append("the measured level carries no uncertainty in the measurement file: the prediction's "
                         "u covers the fit and the parts only")
    meas["frequency_hz"] = f_meas
    # the unit state
    if fit is not None:
        if fit.model != "lc-lowpass":
            raise DesignError(f"{fit.file}: model {fit.model!r} — trim advice needs an lc-lowpass fit "
                              "(fit_lowpass())")
        base = _fit_draws(fit, n, rng, fixed_tol, notes)
        if fit.method == "two-channel":
            warnings.append("two-channel fit: its Rs excludes the source's own resistance (the drive was measured "
                            "at the filter input), so predictions after a change take that drive as stiff — a "
                            "one-channel fit of the output includes the source and predicts level changes better")
    else:
        base = _State(np.full(n, 1.0), np.full(n, 1e-6), np.full(n, 1e3), np.full(n, 0.0), np.full(n, math.inf),
                      np.full(n, 0.0))
        others = [lim.quantity for lim in limits if lim.quantity != "frequency_hz"]
        if others:
            warnings.append(f"no fit given: only the frequency is predicted; {', '.join(others)} are not — "
                            "re-measure them after the change (a 1 % frequency change moves a tuned filter's "
                            "level and THD)")
    base.f = np.full(n, f_meas)
    rp_param = None if fit is None else fit.parameters.get("Rp")
    rp = math.inf if rp_param is None or rp_param.value is None else float(rp_param.value)
    if math.isfinite(rp) and rp_param is not None and rp_param.stderr is None:
        # an output-only fit integrates a core loss out with the ESR: Rp is its posterior value, not a measurement
        notes.append(f"the core loss Rp ≈ {_q(rp, 'Ω')} (a resistance across L; not separated from the ESR by the "
                     "fit, which integrated it out with it) is kept in every plan with the fit's ESR; a replacement "
                     "choke's own core loss is not known")
    elif math.isfinite(rp):
        notes.append(f"the fitted core loss Rp = {_q(rp, 'Ω')} (a resistance across L) is kept in every plan; "
                     "a replacement choke's own core loss is not known")
    nom_parts = LowpassParts(float(base.L[0]), float(base.C[0]), float(base.Rs[0]), float(base.Resr[0]),
                             float(base.Rload[0]), rp)
    ac = ch is not None and abs(float(ch.get("vdc") or 0.0)) < 0.1 * float(ch.get("vrms") or 1.0)
    chain = CaptureChain(ac_coupled=bool(ac))
    est = None if (ch is None or fit is None) else _estimate_drive(ch, nom_parts, f_meas, chain)
    asym = None if fit is None else _fit_asymmetry(fit)
    if duty is not None:
        d = float(duty)  # the high phase's share as given: the complement's DC and peaks are not this unit's
    elif asym is not None:
        # the switched fit's own duty: the harmonic ratios through the time-invariant filter are biased
        # by the asymmetry (on the ngspice unit of the tests: 47.2 % for a true 48.0 %)
        d = min(asym[2], 1.0 - asym[2])
    elif est is not None:
        d = est[0]
    else:
        fitted_duty = _fit_duty(fit) if fit is not None else None
        d = 0.5 if fitted_duty is None else fitted_duty
    if asym is not None:
        # Δr belongs to the fit's high phase: the advice's high phase (of duty d) may be its complement
        if abs(d - asym[2]) > abs(d - (1.0 - asym[2])):
            base.extra[ASYM] = -base.extra[ASYM]
        dr0 = float(base.extra[ASYM][0])
        if drive_swing_v is None and ch is not None and ch.get("amplitude"):
            per_volt = predict_quantities(UnitModel(Drive(f_meas, d, 1.0, 0.0, (1 - d) * dr0, -d * dr0),
                                                    nom_parts), chain)["amplitude"]
            est = (d, float(ch["amplitude"]) / per_volt)
        notes.append(f"drive: the timer's source resistance differs high and low (r_high − r_low = "
                     f"{_q(dr0, 'Ω')} ± {_q(asym[1], 'Ω')} for the phase of duty {d * 100:.2f} %, from the fit): "
                     "every plan is predicted with the exact switched-source model (benchfit.model.switched)")
    if drive_swing_v is not None:
        swing = float(drive_swing_v)
    elif est is not None:
        swing = est[1]
    else:
        supply = spec.conditions.get("supply_v")
        swing = (float(supply) - 1.7) if isinstance(supply, (int, float)) else 10.0
        if fit is not None:
                warnings.append(f"drive swing taken as {swing:g} V (NE555 output high about 1.7 V below the "
                            "supply, TI SLFS022) — give the measurement for a calibrated level")
    if fit is not None:
        notes.append(f"drive: rectangular, duty {d * 100:.2f} %"
                     + (" as given" if duty is not None else " (or its complement)") + f", swing {swing:.4g} V "
                     + ("estimated from the measured harmonics through the fitted filter" if est else "as given")
                     + "; the source resistance is inside the fitted Rs")
    ev = _Evaluator(d, swing, 0.0, chain, rp, phase_known=duty is not None)
    if fit is None:
        limits_eval = [lim for lim in limits if lim.quantity == "frequency_hz"]
    else:
        limits_eval = limits
    if fit is None:
        ev.quantities = lambda s: {"frequency_hz": s.f.copy()}  # type: ignore[method-assign]
    search = _Search(spec, limits_eval, ev, base, meas, meas_u, n, seed, ratings)
    if fit is None:
        search.has_filter = False
    notes.append(f"probabilities from {n} Monte Carlo draws (seed {seed}, JCGM 101 propagation); their own "
                 f"standard error is at most {50.0 / math.sqrt(n):.1f} percentage points")
    # far-off parts
    far: list[_Action] = []
    if fit is not None:
        for part in ("L", "C"):
            nom = nominal.get(part)
            p = fit.parameters.get(part)
            if nom is None or p is None or p.fixed or p.value is None:
                continue
            tol = tolerance.get(part, 0.1)
            u = float(p.stderr or 0.0)
            if abs(p.value - nom) > tol * nom + 2 * u:
                far.append(_replace(part, float(nom), float(p.value), CHOKE_TOLERANCE if part == "L"
                                    else tolerance.get("C", 0.2)))
    if any(a.change.part == "L" for a in far):
        notes.append(f"a replacement choke's winding resistance is unknown: Rs is taken as unchanged "
                     f"±{CHOKE_RS_SPREAD * 100:g} % (rectangular) and its inductance as nominal "
                     f"±{CHOKE_TOLERANCE * 100:g} %, both in the prediction's uncertainty")
    # the unit as it is
    keep = search.evaluate((), 0)
    passes = _measured_pass(spec, limits, ch, fit, f_meas, f_u)
    if passes is None:
        passes = keep.p_pass >= P_HIGH
    if passes:
        w = [f"{a.change.text.removeprefix('replace: ')} — outside its tolerance although the unit passes: check "
             "it" for a in far]
        return Advice("no change", keep, (), tuple(warnings + w), tuple(notes + [
            "no change: every limit passes with the guard band (ILAC-G8 4.2.3, w = U); an adjustment would "
            "only add the new parts' errors"]), source="" if fit is None else fit.file)
    # candidate actions
    target = _centre(spec.limit_for("frequency_hz"), f_meas)
    timer_acts: list[_Action] = []
    if timer is not None and spec.limit_for("frequency_hz") is not None:
        timer_acts = _timer_actions(timer, f_meas, target, rseries, resistor_tolerance)
        timer_acts.sort(key=lambda a: -search.nominal_margin([a]))
        # the best of each kind first (series R, parallel R, fresh RB, trimmer, control pin), then the rest
        kinds: dict[tuple[str, str], _Action] = {}
        for a in timer_acts:
            kinds.setdefault((a.change.part, a.change.action), a)
        firsts = list(kinds.values())
        timer_acts = (firsts + [a for a in timer_acts if a not in firsts])[:8]
    elif spec.limit_for("frequency_hz") is not None and keep.p_limits.get("frequency_hz", 1.0) < P_HIGH:
        warnings.append("the frequency is off and no timer parts were given (timer=TimerParts(ra=…, rb=…, c1=…)): the filter "
                        "cannot move the frequency")
    plans: list[Plan] = []
    combos: list[list[_Action]] = []
    nothing: list[_Action] = []
    for first in [nothing] + [[a] for a in far]:
        for t in [nothing] + [[a] for a in timer_acts]:
            pre = first + t
            if fit is not None:
                for fa in _filter_actions(search, pre, cseries, ctol, resistor_tolerance, rseries):
                    combos.append(pre + [fa])
            if pre:
                combos.append(pre)
    margins = [search.nominal_margin(c) for c in combos]
    order = sorted(range(len(combos)), key=lambda i: (margins[i] < 0, len(combos[i]), -margins[i]))
    scored = [combos[i] for i in order]
    # every replacement and timer action alone is always judged; then the best combinations
    chosen = [c for c in combos if all(a.group != "filter" for a in c)]
    chosen += [c for c in scored if c not in chosen][:max(0, 14 - len(chosen))]
    for i, c in enumerate(chosen):
        plans.append(search.evaluate(c, i + 1))
    plans.sort(key=_rank_key)
    far_parts = {a.change.part for a in far}
    replace_plans = [p for p in plans if any(c.action == "replace" and c.part in far_parts for c in p.changes)]
    verdict = "adjust"
    best = plans[0] if plans else keep
    alone = [p for p in replace_plans if all(c.action == "replace" for c in p.changes)]
    if alone and alone[0].p_pass >= P_MIN and not alone[0].flagged:
        # a trim computed now would rest on the new part's nominal value: replace first, re-measure,
        # then trim (the combined plans stay among the alternatives)
        best, verdict = alone[0], "replace"
        notes.append("after the replacement, re-measure and run the trim again: the new part's tolerance "
                     "dominates the prediction")
    elif replace_plans and replace_plans[0].p_pass >= P_MIN and not replace_plans[0].flagged:
        best, verdict = replace_plans[0], "replace"
    elif not plans or best.p_pass < P_MIN or best.flagged:
        verdict = "cannot meet spec"
    if verdict != "cannot meet spec" and best.p_pass <= keep.p_pass + 0.01:
        # no action makes conformity more likely than leaving the unit alone
        if keep.p_pass >= P_MIN:
            warnings.append(f"the unit is within its uncertainty of a limit and conforms with probability "
                            f"{keep.p_pass * 100:.1f} %; no action found raises that — leave it and re-measure")
            best, verdict = keep, "no change"
        else:
            verdict = "cannot meet spec"
    blocking = None
    if verdict == "cannot meet spec":
        cand = best if plans else keep
        if cand.p_limits:
            blocking = min(cand.p_limits, key=lambda q: cand.p_limits[q])
        warnings.append(f"no action reaches the spec: the best plan meets it with probability "
                        f"{cand.p_pass * 100:.1f} %; {blocking} blocks it")
        best = keep
    elif best.p_pass < P_HIGH and verdict != "no change":
        which = "the advised replacement" if verdict == "replace" else "the best plan"
        warnings.append(f"{which} meets the spec with probability {best.p_pass * 100:.1f} % only — "
                        "re-measure after the change")
    if verdict == "replace":
        likelier = [p for p in plans if p is not best and not p.flagged and p.p_pass > best.p_pass + 0.01
                    and not any(c.action == "replace" and c.part in far_parts for c in p.changes)]
        if likelier:
            # the replacement is advised although a trim around the far part is likelier to pass: say why
            around = "; ".join(c.text for c in likelier[0].changes)
            parts = ", ".join(sorted(far_parts))
            notes.append(f"the part outside its tolerance ({parts}) is replaced first although a trim around it "
                         f"is likelier to meet the spec ({around}: probability {likelier[0].p_pass * 100:.1f} %, "
                         "among the alternatives): a part that far from its nominal value is a wrong or faulty "
                         "part, and a trim would hide it (common practice, no source)")
    if far and verdict != "replace":
        warnings.insert(0, "; ".join(a.change.text for a in far))
    alternatives = tuple(p for p in plans if p is not best)[:8]
    return Advice(verdict, best, alternatives, tuple(warnings), tuple(notes), blocking,
                  source="" if fit is None else fit.file)


def _centre(lim, default: float) -> float:
    if lim is None:
        return default
    if lim.nominal is not None:
        return float(lim.nominal)
    if lim.lower is not None and lim.upper is not None:
        return 0.5 * (lim.lower + lim.upper)
    return default


def _measured_pass(spec, limits, ch, fit, f_meas, f_u) -> bool | None:
    """True when every limit passes with the guard band on the measured/fitted values; None if unknown."""
    from benchfit.report.spec import decide

    if ch is None:
        return None
    for lim in limits:
        q = lim.quantity
        if q in _FITTED:
            if fit is None or (q not in fit.parameters and q not in fit.derived):
                return None
            src = fit.parameters.get(q) or fit.derived.get(q)
            v, u = src.value, src.stderr
        else:
            v = ch.get(q)
            u = _u(ch, q) if q != "frequency_hz" else f_u
        if v is None:
            return None
        big_u = None if u is None else 2.0 * float(u)
        d = decide(float(v), big_u, lim.lower, lim.upper, spec.decision_rule)
        if d.decision != "pass":
            return False
    return True


def _filter_actions(search: _Search, pre: list[_Action], series: str, ctol: float, rtol: float,
                    rseries: str) -> list[_Action]:
    """Best C-parallel, C-series and damping-resistor actions for the unit after ``pre``."""
    s0 = search.base.nominal()
    rng = np.random.default_rng(0)
    for a in pre:
        s0 = a.apply(s0, rng)
    c0, r0 = float(s0.C[0]), float(max(s0.Rs[0], 1.0))
    out: list[_Action] = []
    kinds = (("par", np.geomspace(c0 * 0.01, c0 * 3.0, 48)),
             ("ser", np.geomspace(c0 * 0.3, c0 * 100.0, 48)),
             ("damp", np.geomspace(r0 * 0.02, r0 * 20.0, 48)))
    for kind, grid in kinds:
        best, xbest = -math.inf, None
        for x in grid:
            fake = _continuous(kind, float(x))
            m = search.nominal_margin(pre + [fake])
            if m > best:
                best, xbest = m, float(x)
        if xbest is None or best < -0.5:
            continue
        k = "R" if kind == "damp" else "C"
        for combo in _snap(xbest, k, rseries if kind == "damp" else series):
            val = combo.value
            if kind == "par":
                a, size = _c_parallel(combo, ctol), val / c0
            elif kind == "ser":
                a, size = _c_series(combo, ctol), 1.0 - val / (c0 + val)
            else:
                a, size = _r_damp(combo, rtol), val / r0
            out.append(dataclasses.replace(a, size=abs(size)))
    return out
