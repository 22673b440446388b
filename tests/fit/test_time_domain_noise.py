"""The noise estimates that whiten the two-channel time-domain residual (benchfit.fit.tdnoise) are honest.

Each estimate states a relative uncertainty; over seeded repeats of white noise the z-scores
(estimate − truth)/(u·truth) must have mean 0 and sd 1. With N repeats the sample mean of z has sd 1/√N and
the sample sd of z a relative sd of 1/√(2N) (normal z, common practice, no source): the bands are 4 of those.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.signal import lfilter

from benchfit.fit.tdnoise import chi2_red_limit, difference_floor, noise_gain, periodic_floor
from benchfit.measurement.tone import fit_harmonics

FS, F, N = 48000.0, 50.0, 48000
SEEDS = 40
SIGMA = 1e-3
#: a 0 … 1 V square of 960 samples a period (edges on samples, so the record is exactly periodic)
SQUARE = ((np.arange(N) % int(FS / F)) < int(FS / F) // 2).astype(float)


def _z_bands(z: list[float]) -> None:
    z_arr = np.asarray(z)
    assert abs(z_arr.mean()) < 4.0 / math.sqrt(z_arr.size), z_arr.mean()
    assert abs(z_arr.std(ddof=1) - 1.0) < 4.0 / math.sqrt(2 * z_arr.size), z_arr.std(ddof=1)


def test_floor_between_the_harmonics_has_an_honest_uncertainty():
    # the square's orders up to 49 fitted, the white floor between them estimated; the stated u includes the
    # Hann window's correlation of neighbouring bins (without it, u would be 1.24× too small)
    z = []
    for seed in range(SEEDS):
        x = SQUARE + np.random.default_rng(seed).normal(0.0, SIGMA, N)
        got = periodic_floor(fit_harmonics(x, FS, F, 49), x, FS)
        assert got is not None
        var, u = got
        z.append((var / SIGMA ** 2 - 1.0) / u)
    _z_bands(z)


def test_floor_from_third_differences_has_an_honest_uncertainty():
    # a drive of steps (the square): its edges touch 1 block in 240, which the median ignores
    z = []
    for seed in range(SEEDS):
        got = difference_floor(SQUARE + np.random.default_rng(100 + seed).normal(0.0, SIGMA, N))
        assert got is not None
        var, u = got
        z.append((var / SIGMA ** 2 - 1.0) / u)
    _z_bands(z)


def test_noise_gain_is_the_impulse_response_energy():
    # a one-pole filter g_n = aⁿ: Σ g_n² = 1/(1 − a²) (geometric series); its response on the rfft grid of an
    # n-sample record, and the impulse response from scipy.signal.lfilter, give the same energy (Parseval)
    a, n = 0.9, 4096
    freq = np.fft.rfftfreq(n)
    resp = 1.0 / (1.0 - a * np.exp(-2j * np.pi * freq))
    g = lfilter([1.0], [1.0, -a], np.r_[1.0, np.zeros(n - 1)])
    assert math.isclose(noise_gain(resp, n), 1.0 / (1.0 - a * a), rel_tol=1e-9)
    assert math.isclose(noise_gain(resp, n), float(g @ g), rel_tol=1e-9)
    # an odd record: its last rfft bin is not Nyquist and counts twice
    resp_odd = 1.0 / (1.0 - a * np.exp(-2j * np.pi * np.fft.rfftfreq(n + 1)))
    assert math.isclose(noise_gain(resp_odd, n + 1), 1.0 / (1.0 - a * a), rel_tol=1e-9)


def test_limit_is_the_f_quantile():
    # against scipy.stats: F(ν, ν_σ) with the noise estimated, χ²/ν with it known
    from scipy.stats import chi2, f

    assert math.isclose(chi2_red_limit(96000, 3050.0), float(f.ppf(0.999, 96000, 3050.0)), rel_tol=1e-9)
    assert math.isclose(chi2_red_limit(46), float(chi2.ppf(0.999, 46) / 46), rel_tol=1e-9)
