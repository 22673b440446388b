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
SEEDS = 50
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
    # one harmonic fit for all seeds: what it removes lies on the harmonics' bins (the record holds whole
    # periods), which the floor leaves out with their neighbours, so each seed's floor is that of its own fit
    h = fit_harmonics(SQUARE + np.random.default_rng(0).normal(0.0, SIGMA, N), FS, F, 49)
    z = []
    for seed in range(SEEDS):
        x = SQUARE + np.random.default_rng(seed).normal(0.0, SIGMA, N)
        got = periodic_floor(h, x, FS)
        assert got is not None
        z.append((got.var / SIGMA ** 2 - 1.0) / got.u_rel)
    _z_bands(z)


def test_floor_from_third_differences_has_an_honest_uncertainty():
    # a drive of steps (the square): its edges touch 1 block in 240, which the median ignores
    z = []
    for seed in range(SEEDS):
        got = difference_floor(SQUARE + np.random.default_rng(100 + seed).normal(0.0, SIGMA, N))
        assert got is not None
        z.append((got.var / SIGMA ** 2 - 1.0) / got.u_rel)
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


def test_channel_floor_takes_the_estimate_signal_does_not_raise():
    from benchfit.fit.tdnoise import channel_floor

    rng = np.random.default_rng(7)
    # edges that wander by a sample (each period's rising edge early or late at random): broadband content
    # between the harmonics, which the simulation of those very samples reproduces — not noise
    jitter = SQUARE.copy()
    period = int(FS / F)
    for start in range(0, N, period):
        if rng.random() < 0.5:
            jitter[start + period // 2] = 1.0  # the falling edge one sample late
    x = jitter + rng.normal(0.0, SIGMA, N)
    h = fit_harmonics(x, FS, F, 49)
    got = channel_floor(h, x, FS)
    assert got is not None and got.estimator == "third differences"
    assert periodic_floor(h, x, FS).var > 2.0 * SIGMA ** 2  # the floor between the harmonics counts the jitter
    assert abs(got.var / SIGMA ** 2 - 1.0) < 3.29 * got.u_rel  # two-sided 99.9 % (z-scores honest, above)
    # a band-limited square (its Fourier series to 0.45·fs): lines near Nyquist raise the third differences
    t = np.arange(N) / FS
    k = np.arange(1, int(0.45 * FS / F) + 1, 2)
    band = 0.5 + (2.0 / (np.pi * k[:, None]) * np.sin(np.pi * k[:, None] / 2)
                  * np.cos(2 * np.pi * F * k[:, None] * t)).sum(axis=0)
    x = band + rng.normal(0.0, SIGMA, N)
    h = fit_harmonics(x, FS, F, 49)
    got = channel_floor(h, x, FS)
    assert got is not None and got.estimator == "between the harmonics"
    assert difference_floor(x).var > 2.0 * SIGMA ** 2
    assert abs(got.var / SIGMA ** 2 - 1.0) < 3.29 * got.u_rel
