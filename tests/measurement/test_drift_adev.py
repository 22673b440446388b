"""Allan deviation of the drift module: definitions, analytic slopes, the library, the estimator.

Sources beside each check:
* IEEE Std 1139-2008 (definitions of physical quantities for fundamental frequency and time
  metrology — random instabilities): fractional frequency y, Allan variance
  σ²_y(τ) = ½⟨(ȳ_{k+1} − ȳ_k)²⟩, the overlapping estimator on time-error data, and the
  power-law slopes of σ_y(τ): white FM τ^−1/2, random-walk FM τ^+1/2, white PM τ^−1
  [clause numbers from memory].
* The analytic values for discrete series are derived here from that definition:
  white FM with var(y) = σ² gives σ²_y(mτ0) = σ²/m exactly; a random walk y_k = y_{k−1} + ε_k
  with var(ε) = σ² gives σ²_y(mτ0) = σ²(2m² + 1)/(6m) (sum of the squared weights of the
  increments in ȳ_{k+1} − ȳ_k); white phase noise of variance σ_x² gives 3σ_x²/(mτ0)².
* ``allantools`` (PyPI, oadev) is what benchfit calls; it is checked here against a direct
  computation of the IEEE 1139 overlapping estimator written in this file.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from benchfit.measurement.drift import IntervalTracker
from benchfit.measurement.stability import overlapping_adev, stability
from drift_helpers import phase_from_fractional, readings_from_phase, tone_with_fm

F0 = 50.0


def adev_by_definition(x: np.ndarray, tau0: float, m: int) -> float:
    """Overlapping Allan deviation from time-error data (IEEE Std 1139 overlapping estimator):
    σ²_y(mτ0) = Σ_{i=0}^{N−2m−1} (x_{i+2m} − 2x_{i+m} + x_i)² / (2 m² τ0² (N − 2m))."""
    n = x.size
    d = x[2 * m:] - 2 * x[m:n - m] + x[:n - 2 * m]
    return math.sqrt(float(d @ d) / (2.0 * m * m * tau0 * tau0 * (n - 2 * m)))


def _slope(taus, devs) -> float:
    return float(np.polyfit(np.log(taus), np.log(devs), 1)[0])


@pytest.mark.parametrize("kind", ["white", "random-walk"])
def test_library_matches_the_definition(kind):
    """allantools.oadev (through overlapping_adev) equals the IEEE 1139 sum written out here,
    to rounding (both are exact sums of the same terms)."""
    rng = np.random.default_rng(11)
    y = rng.normal(0, 1e-7, 4096)
    if kind == "random-walk":
        y = np.cumsum(y)
    tau0 = 0.5
    x = np.concatenate([[0.0], np.cumsum(y) * tau0])
    ms = [1, 2, 4, 8, 16, 64, 256, 1024]
    taus, dev, ns = overlapping_adev(x, tau0, ms)
    assert np.allclose(taus, np.array(ms) * tau0)
    for m, d, n_terms in zip(ms, dev, ns):
        assert d == pytest.approx(adev_by_definition(x, tau0, m), rel=1e-9)
        assert n_terms == x.size - 2 * m


def test_white_fm_slope_and_level():
    """White FM: σ_y(τ) = σ·(τ/τ0)^−1/2 (IEEE 1139 slope; value σ²/m derived from the definition).

    N = 16384: the overlapping estimate at m ≤ 64 has ≥ 300 equivalent degrees of freedom, a
    relative standard error ≤ 4 %, so 12 % is a 3-sigma band; the fitted log-log slope over
    m = 1…256 is within ±0.04 of −1/2 (its scatter from the same degrees of freedom)."""
    rng = np.random.default_rng(5)
    sigma = 2e-7
    y = rng.normal(0, sigma, 16384)
    readings = readings_from_phase(phase_from_fractional(y, F0, 1.0), F0, 1.0)
    st = stability(readings, interval_s=1.0)
    pts = [p for p in st.adev if p.tau_s <= 256]
    taus = np.array([p.tau_s for p in pts])
    devs = np.array([p.adev for p in pts])
    assert _slope(taus, devs) == pytest.approx(-0.5, abs=0.04)
    for p in pts:
        if p.tau_s <= 64:
            assert p.adev == pytest.approx(sigma / math.sqrt(p.tau_s), rel=0.12)
        assert p.noise == "white FM"  # lag-1 noise identification (allantools.autocorr_noise_id)
    # the 68 % interval holds the truth at most points (about 2 in 3 expected)
    inside = sum(p.ci_low <= sigma / math.sqrt(p.tau_s) <= p.ci_high for p in pts)
    assert inside >= len(pts) // 2


def test_random_walk_fm_slope_and_level():
    """Random-walk FM: σ_y(τ) ∝ τ^+1/2 (IEEE 1139); σ²_y(m) = σ²(2m² + 1)/(6m) (derived above).

    A random walk's Allan deviation scatters more (few effective degrees of freedom at large
    m), so the slope is fitted over m = 1…64 of 16384 points: ±0.08 is about 3 times the
    scatter seen over seeds; each value within 35 % (edf ≥ 30 there: 3 standard errors)."""
    rng = np.random.default_rng(8)
    sigma = 1e-9
    y = np.cumsum(rng.normal(0, sigma, 16384))
    readings = readings_from_phase(phase_from_fractional(y, F0, 1.0), F0, 1.0)
    st = stability(readings, interval_s=1.0)
    pts = [p for p in st.adev if 4 <= p.tau_s <= 64]
    taus = np.array([p.tau_s for p in pts])
    devs = np.array([p.adev for p in pts])
    assert _slope(taus, devs) == pytest.approx(0.5, abs=0.08)
    for p in pts:
        m = p.tau_s
        assert p.adev == pytest.approx(sigma * math.sqrt((2 * m * m + 1) / (6 * m)), rel=0.35)
        assert p.noise == "random-walk FM"


def test_fractional_frequency_is_relative_to_the_mean():
    """The same phase law at 400 Hz and at 50 Hz gives the same σ_y (y is fractional: IEEE 1139)."""
    rng = np.random.default_rng(2)
    y = rng.normal(0, 1e-7, 2048)
    a = stability(readings_from_phase(phase_from_fractional(y, 50.0, 1.0), 50.0, 1.0), interval_s=1.0)
    b = stability(readings_from_phase(phase_from_fractional(y, 400.0, 1.0), 400.0, 1.0), interval_s=1.0)
    assert a.adev_1s == pytest.approx(b.adev_1s, rel=1e-6)


def test_estimator_floor_on_a_steady_tone():
    """A steady tone in white noise: only the fit's phase noise remains, white PM, and the
    stated floor √3·σ_x/τ (derived above) is what the Allan deviation shows (within 15 %:
    the floor uses the median phase u of 300 fits; ADEV at m ≤ 8 has ≥ 100 edf)."""
    fs = 2000.0
    x = tone_with_fm(lambda t, rng: np.zeros(t.size), 300.0, fs, F0, 0.02, seed=3)
    tr = IntervalTracker(fs, n_harmonics=3)
    n = int(fs)
    readings = [tr.push(x[k * n:(k + 1) * n], k * n) for k in range(x.size // n)]
    st = stability(readings, interval_s=1.0)
    assert st.restarts == 0
    for p in st.adev[:4]:
        assert p.adev == pytest.approx(p.floor, rel=0.15)
    assert _slope([p.tau_s for p in st.adev], [p.adev for p in st.adev]) == pytest.approx(-1.0, abs=0.1)
    assert st.adev_1s_floor == pytest.approx(st.adev[0].floor)


def test_chained_phases_recover_white_fm_through_the_tone_fit():
    """End to end: a tone with white FM of σ = 1e-6 at τ0 = 1 s, through the tone fits and the
    phase chain. The midpoint phase of a least-squares fit is the mean phase over its
    interval, so for white FM the expected Allan deviation is σ·(τ/τ0)^−1/2·√(1 − τ0/(2τ))
    (derived here: the second difference of interval-averaged phase weighs the frequency
    noise by (2m − 1)τ0 instead of 2mτ0). Each point must lie within its 99 % interval,
    i.e. the 68 % interval widened 2.6 times (chi-squared with the stated edf)."""
    fs = 1000.0
    sigma = 1e-6

    def white(t, rng):
        return sigma * math.sqrt(50.0) * rng.normal(size=t.size)

    x = tone_with_fm(white, 400.0, fs, F0, 1e-4, seed=21)
    tr = IntervalTracker(fs, n_harmonics=1)
    n = int(fs)
    readings = [tr.push(x[k * n:(k + 1) * n], k * n) for k in range(x.size // n)]
    st = stability(readings, interval_s=1.0)
    assert st.restarts == 0 and st.segments == 1
    for p in st.adev:
        m = p.tau_s
        expected = sigma / math.sqrt(m) * math.sqrt(1 - 1 / (2 * m))
        half = 2.6 * max(p.adev - p.ci_low, p.ci_high - p.adev)
        assert abs(p.adev - expected) < half, (m, p.adev, expected)
        assert p.floor < 0.1 * p.adev  # the estimator's own noise is far below the unit's
