"""Fixed parts carry tolerances (issue 11): parsing, propagation, a JCGM 101 Monte Carlo check.

The circuit is simulated with the package's exact discretisation (checked against ngspice
and the textbook in tests/model and tests/fit/test_lowpass_ngspice.py) and seeded noise.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from benchfit.capture.capture import Capture, InputCalibration
from benchfit.fit.lowpass import fit_lowpass
from benchfit.fit.tolerance import FixedValue, parse_fixed
from benchfit.model.filter import LowpassParts, simulate
from benchfit.uncertainty import monte_carlo

FS = 20000.0
N = 6000
SETTLE = 8000
TRUE = LowpassParts(0.3, 33e-6, 20.0, 1.5, 10e3)


def _capture(parts=TRUE, seed=0):
    drive = 12.0 * ((np.arange(SETTLE + N) % 400) < 208)
    out = simulate(drive, FS, parts)[SETTLE:]
    rng = np.random.default_rng(seed)
    # both channels calibrated with 0.1 % gains: the gain ratio's u is then 0.14 % (normal)
    return Capture(np.vstack([drive[SETTLE:] + rng.normal(0, 0.02, N), out + rng.normal(0, 0.01, N)]), FS,
                   ("drive", "output"), ("V", "V"),
                   calibration=InputCalibration(profile="bench", gain_v_per_fs=(10.0, 10.0),
                                                gain_u_rel=(0.001, 0.001), timebase_u_ppm=1.0))


@pytest.mark.parametrize("text,value,half", [("300m±10%", 0.3, 0.03), ("300m+-5m", 0.3, 0.005),
                                             ("10k ± 1%", 10e3, 100.0), ("33u", 33e-6, None)])
def test_parse_fixed(text, value, half):
    fv = parse_fixed(text, "L")
    assert fv.value == pytest.approx(value, rel=1e-12)
    assert (fv.half_width is None) if half is None else fv.half_width == pytest.approx(half, rel=1e-12)
    if half is not None:  # a tolerance band read as rectangular: u = a/√3 (GUM 4.3.7)
        assert fv.u == pytest.approx(half / math.sqrt(3), rel=1e-12)


@pytest.mark.parametrize("text", ["300m±", "300m±0%", "300m±150%", "300m±400m"])
def test_parse_fixed_refuses_bad_tolerances(text):
    with pytest.raises(ValueError):
        parse_fixed(text, "L")


def test_cli_accepts_tolerances_and_says_when_results_are_conditional(tmp_path):
    from benchfit.cli.fit_cmd import parse_fix_options

    fixed = parse_fix_options(["L=300m±10%", "Rload=10k"], ("L", "C", "Rs", "Resr", "Rload"))
    assert fixed["L"].half_width == pytest.approx(0.03) and fixed["Rload"].half_width is None


def test_tolerance_of_a_fixed_L_reaches_C_with_the_right_sensitivity():
    r = fit_lowpass(_capture(), fix={"L": FixedValue(0.3, 0.03), "Rload": FixedValue(10e3, 100.0)})
    c = r.parameters["C"]
    rows = {row.name: row for row in c.budget.contributions}
    row = rows["fixed L (±0.03, rectangular)"] if "fixed L (±0.03, rectangular)" in rows else \
        next(v for k, v in rows.items() if k.startswith("fixed L"))
    # the data fix L·C (the resonance) far better than 10 %: ∂C/∂L ≈ −C/L (derivable)
    assert row.sensitivity == pytest.approx(-c.value / 0.3, rel=0.02)
    assert c.stderr == pytest.approx(c.budget.u, rel=1e-12) and c.stderr > 10 * c.u_fit
    assert r.parameters["L"].fixed and r.parameters["L"].stderr == pytest.approx(0.03 / math.sqrt(3))
    assert r.conditional_on == ()
    # the L-C resonance hardly moves with L when C follows it: its budget says so
    f0 = r.derived["resonant_frequency_hz"]
    assert f0.stderr < 0.001 * f0.value


def test_monte_carlo_of_C_over_the_L_tolerance_agrees_with_the_linear_budget():
    # JCGM 101:2008 (propagation of distributions): draw L from its ±10 % rectangular band, refit
    # with L held at each draw, and compare the spread of C with the linearised L row of the budget.
    # 20 draws: the sd of a sd is √((κ − 1)/(4n)) with kurtosis κ = 1.8 for this near-uniform output
    # (≈ 10 %), so 35 % is beyond a 3σ bound; the non-linearity (C ∝ 1/L over ±10 %) is a 1 % effect.
    cap = _capture(seed=3)
    lin = fit_lowpass(cap, fix={"L": FixedValue(0.3, 0.03), "Rload": 10e3})
    row = next(v for v in lin.parameters["C"].budget.contributions if v.name.startswith("fixed L"))

    def refit(ls):
        return np.array([fit_lowpass(cap, fix={"L": float(x), "Rload": 10e3}).parameters["C"].value for x in ls])

    mc = monte_carlo(refit, [("rectangular", 0.3, 0.03 / math.sqrt(3))], seed=7, block=10, max_trials=20,
                     rel_tol=1e-9)
    assert mc.trials == 20
    assert mc.u == pytest.approx(row.contribution, rel=0.35)


def test_z_scores_with_a_real_choke_inside_its_tolerance():
    # 10 units whose chokes lie anywhere in 300 mH ± 10 % (rectangular), fitted with --fix L=300m±10%:
    # z = (C − C_true)/u(C) must stay below 3; its spread is set by the L term (|z| ≤ √3 by construction)
    rng = np.random.default_rng(5)
    z = []
    for seed in range(10):
        L = 0.3 * (1 + rng.uniform(-0.1, 0.1))
        p = LowpassParts(L, 33e-6, 20.0, 1.5, 10e3)
        r = fit_lowpass(_capture(p, seed), fix={"L": FixedValue(0.3, 0.03), "Rload": 10e3})
        z.append((r.parameters["C"].value - p.C) / r.parameters["C"].stderr)
    z = np.asarray(z)
    assert np.max(np.abs(z)) < 3.0
    assert 0.4 < float(np.std(z)) < 1.3  # uniform population: sd 1 expected; 10 draws scatter ±25 %
