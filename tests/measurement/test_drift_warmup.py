"""Warm-up time, drift rate and level drift of the stability summary, with honest uncertainties.

The model f(t) = f∞ + D·t + A·exp(−t/τw) and the warm-up time t_w = τw·ln(|A|/band) are this
project's definitions (benchfit.measurement.stability); the checks are synthetic recovery:
known τw, A and D, seeded white FM, and z = (estimate − truth)/u over seeded repeats, whose
mean and spread must look like N(0, 1) (common practice for checking a stated uncertainty,
no source). Tolerances: with 30 repeats the mean of z has a standard error of 0.18, so
|mean| < 0.6 is a 3.3-sigma band; the sample standard deviation of z lies within 0.65…1.4
with probability > 99 % for 30 normal draws.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from benchfit.errors import MeasureError
from benchfit.measurement.drift import IntervalTracker
from benchfit.measurement.stability import stability
from drift_helpers import phase_from_fractional, readings_from_phase, tone_with_fm

F0 = 50.0
TAU_W = 90.0          # s
STEP = -800e-6        # fractional frequency at t = 0
DRIFT = 40e-6 / 3600  # fractional per second (40 ppm/h)
BAND_PPM = 20.0


def _warm_series(rng, n=600, sigma=2e-6):
    # y[j] is the mean from midpoint j to midpoint j + 1 (readings_from_phase puts midpoints at
    # k + 1/2 s), a span centred on t = j + 1 s: evaluate the law there
    t = np.arange(n) + 1.0
    y = STEP * np.exp(-t / TAU_W) + DRIFT * t + rng.normal(0, sigma, n)
    return y


def test_warmup_and_drift_z_scores():
    zs = {"tau": [], "drift": [], "warm": []}
    true_warm = TAU_W * math.log(abs(STEP) / (BAND_PPM * 1e-6))
    for seed in range(30):
        rng = np.random.default_rng(100 + seed)
        y = _warm_series(rng)
        st = stability(readings_from_phase(phase_from_fractional(y, F0, 1.0), F0, 1.0), interval_s=1.0,
                       band_ppm=BAND_PPM)
        assert st.model == "exponential+linear"
        # the model is in Hz of the mean frequency; the truth in ppm of F0: convert via the mean
        fbar = st.mean_frequency_hz
        zs["tau"].append((st.warmup_tau_s - TAU_W) / st.warmup_tau_u_s)
        zs["drift"].append((st.drift_ppm_per_h - DRIFT * F0 / fbar * 3600e6) / st.drift_u_ppm_per_h)
        zs["warm"].append((st.warmup_s - (TAU_W * math.log(abs(STEP) * F0 / (BAND_PPM * 1e-6 * fbar))))
                          / st.warmup_u_s)
        assert st.warmup_s == pytest.approx(true_warm, abs=5 * st.warmup_u_s + 1.0)
    for name, z in zs.items():
        z = np.array(z)
        assert abs(z.mean()) < 0.6, (name, z.mean())
        assert 0.65 < z.std(ddof=1) < 1.4, (name, z.std(ddof=1))


def test_no_warmup_gives_a_line_and_zero():
    """A run that starts settled: the exponential is not significant, the straight line is
    used, warm-up 0 s, and the drift's z-score over seeds behaves (same bands as above)."""
    z = []
    for seed in range(30):
        rng = np.random.default_rng(400 + seed)
        y = DRIFT * np.arange(600) + rng.normal(0, 2e-6, 600)
        st = stability(readings_from_phase(phase_from_fractional(y, F0, 1.0), F0, 1.0), interval_s=1.0)
        assert st.warmup_s == 0.0
        z.append((st.drift_ppm_per_h - DRIFT * 3600e6 * F0 / st.mean_frequency_hz) / st.drift_u_ppm_per_h)
    z = np.array(z)
    assert abs(z.mean()) < 0.6 and 0.65 < z.std(ddof=1) < 1.4


def test_flicker_like_residuals_inflate_the_drift_uncertainty():
    """Correlated residuals (a slow random walk on top of white FM) must widen u(D): the AR(1)
    correction (stated in the module) makes u larger than the plain least-squares value."""
    rng = np.random.default_rng(9)
    white = rng.normal(0, 1e-6, 600)
    walk = np.cumsum(rng.normal(0, 3e-7, 600))
    a = stability(readings_from_phase(phase_from_fractional(white, F0, 1.0), F0, 1.0), interval_s=1.0)
    b = stability(readings_from_phase(phase_from_fractional(white + walk, F0, 1.0), F0, 1.0), interval_s=1.0)
    assert b.drift_u_ppm_per_h > 2.0 * a.drift_u_ppm_per_h


def test_not_settled_by_the_end_is_said():
    rng = np.random.default_rng(4)
    t = np.arange(300.0)
    y = -3000e-6 * np.exp(-t / 200.0) + rng.normal(0, 1e-6, 300)
    st = stability(readings_from_phase(phase_from_fractional(y, F0, 1.0), F0, 1.0), interval_s=1.0, band_ppm=1.0)
    assert st.warmup_s is None
    assert any("had not settled" in w for w in st.warnings)


def test_level_drift_and_thd_range():
    """Amplitude falling 2 %/h (straight line) and THD between 1 % and 3 %."""
    n = 600
    t = np.arange(n) + 0.5
    amp = 1.2 * (1 - 0.02 / 3600 * t) + np.random.default_rng(1).normal(0, 1e-5, n)
    thd = np.linspace(1.0, 3.0, n)
    y = np.random.default_rng(2).normal(0, 1e-7, n - 1)  # n phases
    readings = readings_from_phase(phase_from_fractional(y, F0, 1.0), F0, 1.0, amplitude=amp, thd_pct=thd)
    st = stability(readings, interval_s=1.0)
    # relative to the mean amplitude (1.2·(1 − 0.02·300.5/3600)), so the slope in % of the mean is a bit larger
    expected = -0.02 * 1.2 / float(np.mean(1.2 * (1 - 0.02 / 3600 * t))) * 100
    assert st.level_drift_pct_per_h == pytest.approx(expected, abs=4 * st.level_drift_u_pct_per_h)
    assert (st.thd_min_pct, st.thd_max_pct) == (1.0, 3.0)


def test_too_short_a_run_is_refused():
    y = np.zeros(5)
    with pytest.raises(MeasureError, match="at least 8"):
        stability(readings_from_phase(phase_from_fractional(y, F0, 1.0), F0, 1.0), interval_s=1.0)


def test_warmup_through_the_tone_fit():
    """End to end: a 10-minute tone warming up (τw = 90 s, −800 ppm, +40 ppm/h, white FM 1e-6)
    at 1 kHz sampling; warm-up time and drift recovered within 4 standard uncertainties."""
    fs = 1000.0

    def law(t, rng):
        return STEP * np.exp(-t / TAU_W) + DRIFT * t + 1e-6 * math.sqrt(50.0) * rng.normal(size=t.size)

    x = tone_with_fm(law, 600.0, fs, F0, 1e-3, seed=17, harmonics=((3, 0.05),))
    tr = IntervalTracker(fs, n_harmonics=5)
    n = int(fs)
    readings = [tr.push(x[k * n:(k + 1) * n], k * n) for k in range(x.size // n)]
    st = stability(readings, interval_s=1.0, band_ppm=BAND_PPM)
    fbar = st.mean_frequency_hz
    true_warm = TAU_W * math.log(abs(STEP) * F0 / (BAND_PPM * 1e-6 * fbar))
    assert st.restarts == 0
    assert abs(st.warmup_s - true_warm) < 4 * st.warmup_u_s
    assert abs(st.drift_ppm_per_h - DRIFT * 3600e6 * F0 / fbar) < 4 * st.drift_u_ppm_per_h
    assert st.thd_max_pct == pytest.approx(5.0, rel=0.01)  # THD_F of a 5 % third harmonic (definition)
