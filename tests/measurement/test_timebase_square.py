"""``calibrate timebase`` from a square reference: the clock error within its stated u.

A counter's or generator's reference output is often a square. Fitting one sine to it leaves
the odd harmonics in the residual and biases the frequency (the closing note measured +244 ppm
on an exact 50 Hz square); the estimator now measures the tone as ``measure`` does — the
IEEE 181 period from every 50 % crossing for a two-level wave (IEEE Std 181-2011, the
reference level instants; clause from memory). Squares here are synthesised with known
frequency, known clock error and seeded noise, with edges slowed as a cable and a card's input
slow them (a one-pole low-pass; the z-score test) or sharp (the grid bound).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.signal import lfilter

from benchfit.errors import MeasureError
from benchfit.measurement.calibration import estimate_timebase

FS = 48000.0


def _square(ppm: float, seconds: float, seed: int, *, tau_s: float | None, sigma: float,
            f_ref: float = 50.0, amp: float = 0.4) -> np.ndarray:
    """A ±amp square of f_ref (random phase) seen by a card whose clock runs fast by ``ppm``:
    the card's sample k is taken at k/(FS·(1 + ppm·1e-6)) true seconds. ``tau_s``: the edges
    go through a one-pole low-pass of that time constant (a generator's output into a cable and
    a card's input), simulated on a 16× finer grid; None keeps them sharp. Then white noise."""
    rng = np.random.default_rng(seed)
    n = int(seconds * FS)
    phase = rng.uniform()
    if tau_s is None:
        t = np.arange(n) / (FS * (1 + ppm * 1e-6))
        x = np.where((f_ref * t + phase) % 1.0 < 0.5, amp, -amp)
    else:
        up = 16
        t = np.arange(n * up) / (FS * up * (1 + ppm * 1e-6))
        sq = np.where((f_ref * t + phase) % 1.0 < 0.5, amp, -amp)
        a = math.exp(-1.0 / (FS * up * tau_s))
        x = lfilter([1 - a], [1, -a], sq)[::up]
    return x + sigma * rng.standard_normal(n)


def _z(ppm_true: float, seeds: range, **kw) -> np.ndarray:
    z = []
    for seed in seeds:
        est = estimate_timebase(_square(ppm_true, 1.0, seed, **kw), FS, 50.0)
        assert est.method.startswith("edge regression")
        z.append((est.ppm - ppm_true) / est.u_ppm)
    return np.asarray(z)


@pytest.mark.parametrize("seconds,phase", [(0.5, 0.0), (1.013, 0.3 / (2 * np.pi))])
def test_an_exact_square_reads_zero_ppm_where_a_sine_fit_did_not(seconds, phase):
    # an exact 50 Hz square, no noise, a perfect clock: 0 ppm within u. The one-sine fit read
    # +244.1 ± 68.9 ppm on the 0.5 s case (3.5 u off) and +60.6 ± 24.3 ppm on 1 s
    t = np.arange(int(seconds * FS)) / FS
    x = 0.5 * np.where((50.0 * t + phase) % 1.0 < 0.5, 1.0, -1.0)
    est = estimate_timebase(x, FS, 50.0)
    assert est.method.startswith("edge regression")
    assert abs(est.ppm) < 2.0 and abs(est.ppm) <= 2 * est.u_ppm  # no noise: only the grid's quantisation


@pytest.mark.parametrize("ppm_true", [37.5, 244.0])
def test_square_reference_gives_the_clock_error_within_u(ppm_true):
    """Edges of ~3 samples (τ = 30 µs) and 20 mV of noise on 0.4 V: the u is the regression's
    own scatter. z = (ppm − truth)/u over 30 seeds: for an honest u, mean(z) scatters by
    1/√30 ≈ 0.18 and sd(z) by ≈ 0.13, so |mean| < 0.7 and 0.55 < sd < 1.5 hold at ≈ 3.5σ."""
    z = _z(ppm_true, range(30), tau_s=30e-6, sigma=0.02)
    assert abs(float(z.mean())) < 0.7, z
    assert 0.55 < float(z.std(ddof=1)) < 1.5, z


def test_sharp_square_stays_within_its_grid_bound():
    """Edges within one sample: each 50 % instant is quantised by the sampling grid, which the
    period's u bounds as a rectangular Ts/n (GUM 4.3.7) — an upper bound, so |z| stays below 2
    for every seed (it is smaller than 1 in practice)."""
    z = _z(244.0, range(15), tau_s=None, sigma=5e-3)
    assert float(np.max(np.abs(z))) < 2.0, z


def test_a_sine_reference_still_uses_the_harmonic_fit():
    rng = np.random.default_rng(7)
    t = np.arange(96000) / (FS * (1 + 80e-6))
    x = 0.5 * np.sin(2 * np.pi * 1000.0 * t + 1.1) + 2e-3 * rng.standard_normal(t.size)
    est = estimate_timebase(x, FS, 1000.0)
    assert est.method == "multi-harmonic fit"
    assert abs(est.ppm - 80.0) < 4 * est.u_ppm  # 4σ for one seeded draw


def test_bad_reference_uncertainty_is_one_line():
    x = _square(0.0, 0.5, 1, tau_s=None, sigma=1e-3)
    with pytest.raises(MeasureError, match=r"^--frequency-u: .* — give the reference's stated"):
        estimate_timebase(x, FS, 50.0, reference_u_hz=-1.0)
