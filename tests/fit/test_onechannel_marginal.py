"""One-channel (output-only) fit: parts the output cannot pin are marginalised, and the rest is honest.

Exact-model data: the output of the lc-lowpass model (benchfit.model.filter.transfer) driven by
an ideal rectangular wave, summed from its analytic phasors P_k(D) = (2/(kπ))·sin(kπD)·e^{−jkπD}
(REFERENCES §5) up to the last order below Nyquist, plus seeded white noise. With the drive level
unknown the output's shape gives ω0, Q and the ESR zero only, so with L known Rs and Rload cannot
be split (their total damping can) and the ESR shows only through |1 + jωC·ESR|² (information
∝ ESR²); both are integrated out over stated ranges (benchfit.fit.marginal).

Tolerances: over n seeds the sample sd of z = (reported − true)/u of an honest u scatters as
√(χ²_{n−1}/(n−1)); the 99.9 % two-sided band for n = 10 is 0.37 … 1.83 (scipy.stats.chi2), and the
mean of z lies within ±3.3/√n (the normal 99.9 % point). Every |z| must stay below 3 (the k = 3
interval of issue 11's done-when). C and 1/(2π√(LC)) are the exception to the sd and mean checks:
with L fixed they move with the unknown load's share of the damping, so their u is mostly the
prior's spread, constant over the seeds; a rectangular prior's mean lies within √3 of its standard
deviations of any truth inside the range, so there |z| ≤ √3 plus the small noise part.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.stats import chi2

from benchfit.capture.capture import Capture
from benchfit.fit.lowpass import fit_lowpass
from benchfit.fit.marginal import figures_of
from benchfit.model.filter import LowpassParts, rectangular_phasors, transfer

FS, F, N, DUTY = 20000.0, 50.0, 6000, 0.52
PARTS = LowpassParts(0.3, 33e-6, 12.0, 0.8, 10e3)
SEEDS = range(100, 110)


def _output(parts: LowpassParts = PARTS) -> np.ndarray:
    k = np.arange(1, 200)
    t = np.arange(N) / FS
    ph = 12.0 * rectangular_phasors(k.astype(float), DUTY) * transfer(k * F, parts)
    y = (ph[None, :] * np.exp(2j * math.pi * F * t[:, None] * k[None, :])).real.sum(axis=1)
    return y * 0.5 / float(np.max(np.abs(y)))


@pytest.fixture(scope="module")
def fits():
    y0 = _output()
    out = []
    for seed in SEEDS:
        rng = np.random.default_rng(seed)
        cap = Capture((y0 + rng.normal(0.0, 1e-4, N))[None, :], FS, ("output",), ("FS",))
        out.append(fit_lowpass(cap, fix={"L": 0.3}, drive_duty=DUTY))
    return out


def test_rs_and_load_are_reported_not_separated_with_the_total_loss(fits):
    r = fits[0]
    assert r.parameters["Rs"].stderr is None and r.parameters["Rload"].stderr is None
    # the ESR and a core loss (Rp, seen with it only as C·ESR + L/Rp) and the load
    assert set(r.adequacy["marginalised"]) == {"Resr", "Rload", "Rp"}
    # every marginalised part has a warning naming its range, its source and the measurement that pins it
    load = next(w for w in r.warnings if w.startswith("Rload:"))
    assert "marginalised over" in load and "measuring the load" in load
    assert any(w.startswith("Rs:") and "total_loss_ohm" in w for w in r.warnings)
    tl = r.derived["total_loss_ohm"]
    assert tl.stderr is not None and tl.stderr < 0.01 * tl.value
    # the budget of C carries the marginal's row (the unknown load moves C by its (1 + Rs/Rload) factor)
    names = [c.name for c in r.parameters["C"].budget.contributions]
    assert any(n.startswith("undetermined Resr, Rload, Rp, marginalised") for n in names)


def test_z_scores_of_every_reported_value_are_honest(fits):
    truth = {**PARTS.as_dict(), **figures_of(PARTS.as_dict())}
    zs: dict[str, list[float]] = {}
    for r in fits:
        for name, q in list(r.parameters.items()) + list(r.derived.items()):
            if getattr(q, "fixed", False) or name not in truth or q.stderr is None:
                continue
            zs.setdefault(name, []).append((q.value - truth[name]) / q.stderr)
    n = len(SEEDS)
    hi = math.sqrt(chi2.ppf(0.9995, n - 1) / (n - 1))  # 99.9 % band, module docstring
    lo = math.sqrt(chi2.ppf(0.0005, n - 1) / (n - 1))
    for name in ("q_factor", "natural_frequency_hz", "damped_frequency_hz", "decay_rate_per_s", "total_loss_ohm"):
        z = np.asarray(zs[name])
        assert z.size == n, name  # determined in every seed
        assert lo < np.std(z, ddof=1) < hi, (name, np.round(z, 2))
        assert abs(np.mean(z)) < 3.3 / math.sqrt(n), (name, np.round(z, 2))
        assert np.max(np.abs(z)) < 3.0, (name, np.round(z, 2))
    for name in ("C", "resonant_frequency_hz"):  # prior-dominated (module docstring)
        z = np.asarray(zs[name])
        assert z.size == n and np.max(np.abs(z)) < math.sqrt(3.0) + 0.5, (name, np.round(z, 2))
    b = fits[0].parameters["C"].budget
    assert b.largest().name.startswith("undetermined Resr, Rload, Rp, marginalised")


def test_core_loss_is_compared_but_not_told_from_the_esr_by_the_output_alone():
    # a 2 kΩ core loss across L (Rp, the issue-11 iron-core choke), output only. Both a core loss and
    # the ESR turn the roll-off above resonance from 1/f² towards 1/f (H → ESR/(jωL) and → 1/(jωC·Rp)),
    # so the plain model with the ESR absorbing the loss fits as well: the comparison runs and says so
    # (the extra-sum-of-squares F-test finds no support, p > 0.001), the ESR is not reported apart from
    # it, and the total loss is what is given
    y = _output(LowpassParts(0.3, 33e-6, 12.0, 0.8, 10e3, 2000.0))
    rng = np.random.default_rng(7)
    r = fit_lowpass(Capture((y + rng.normal(0.0, 1e-4, N))[None, :], FS, ("output",), ("FS",)),
                    fix={"L": 0.3}, drive_duty=DUTY)
    mc = r.adequacy["model_comparison"]
    assert mc["chosen"] == "lc-lowpass" and mc["p_value"] > 1e-3
    assert len(mc["aic"]) == 2 and len(mc["bic"]) == 2
    assert r.parameters["Resr"].stderr is None
    assert any(w.startswith("Resr:") and "core loss" in w and "ESR meter" in w for w in r.warnings)
    tl = r.derived["total_loss_ohm"]
    assert tl.stderr is not None and tl.stderr < 0.05 * tl.value


def test_a_fixed_l_tolerance_moves_each_value_by_the_power_of_its_unit_only():
    # impedance scaling (common practice, no source): the output's shape is a ratio of impedances, unchanged
    # when L → a·L, C → C/a and every R → a·R, and the nuisance ranges are shares of the fit's own total loss
    # and L/C, which scale alike. So with L the only part held, Q, the frequencies and the decay rate do not
    # depend on it, C goes as 1/L and the losses as L: the fixed-L budget rows carry exactly those
    # sensitivities (the fit's linearised one, with the nuisances held in ohms, gave Q a spurious L term)
    rng = np.random.default_rng(SEEDS[0])
    cap = Capture((_output() + rng.normal(0.0, 1e-4, N))[None, :], FS, ("output",), ("FS",))
    a, b = (fit_lowpass(cap, fix={"L": (big_l, 0.03)}, drive_duty=DUTY) for big_l in (0.3, 0.303))
    for name, power in (("q_factor", 0), ("decay_rate_per_s", 0), ("natural_frequency_hz", 0),
                        ("damped_frequency_hz", 0), ("resonant_frequency_hz", 0), ("total_loss_ohm", 1)):
        da, db = a.derived[name], b.derived[name]
        # the refit converges to about 1e-9 relative; a tenth of the fit's own u is far above that
        assert db.value == pytest.approx(da.value * 1.01 ** power, abs=0.1 * da.u_fit), name
        row = next(c for c in da.budget.contributions if c.name.startswith("fixed L "))
        assert row.sensitivity == pytest.approx(power * da.value / 0.3, rel=1e-9, abs=1e-12), name
    pa, pb = a.parameters["C"], b.parameters["C"]
    assert pb.value == pytest.approx(pa.value / 1.01, abs=0.1 * pa.u_fit)
    row = next(c for c in pa.budget.contributions if c.name.startswith("fixed L "))
    assert row.sensitivity == pytest.approx(-pa.value / 0.3, rel=1e-9)
