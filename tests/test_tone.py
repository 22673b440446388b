"""Checks of the IEEE 1057 / 1241 sine-fit core (benchfit.measurement.tone)."""

import math

import numpy as np
import pytest

from benchfit.measurement.tone import dft_frequency_seed, fit_harmonics, fit_tone


def test_three_parameter_fit_noise_free():
    # IEEE 1241-2010 Annex B.1 three-parameter fit; check values REFERENCES §1 [C]:
    # y = 2.5 cos(2π·1234.5 t + 0.3) − 0.2, fs = 48 kHz, N = 1000 → (2.5, 0.3, −0.2) to 1e−14.
    fs, n = 48000.0, 1000
    t = np.arange(n) / fs
    y = 2.5 * np.cos(2 * np.pi * 1234.5 * t + 0.3) - 0.2
    fit = fit_harmonics(y, fs, 1234.5, 1)
    assert abs(fit.amplitudes[0] - 2.5) < 1e-13  # rounding of ~1000-term sums, a few 1e-14
    assert abs(fit.phases_rad[0] - 0.3) < 1e-13
    assert abs(fit.dc + 0.2) < 1e-13


def test_four_parameter_fit_converges_from_01_percent_off():
    # IEEE 1057 four-parameter iteration; REFERENCES §1 [C]: started 0.1 % off, returns
    # f = 1234.5 Hz to within 1e−12 relative.
    fs, n = 48000.0, 1000
    t = np.arange(n) / fs
    y = 2.5 * np.cos(2 * np.pi * 1234.5 * t + 0.3) - 0.2
    fit = fit_harmonics(y, fs, 1234.5 * 1.001, 1, fit_frequency=True)
    assert fit.converged
    assert abs(fit.frequency_hz / 1234.5 - 1) < 1e-12


def test_segmented_normal_equations_match_direct_least_squares():
    # independent check against numpy.linalg.lstsq on the explicit design matrix
    rng = np.random.default_rng(7)
    fs, n = 8000.0, 9001  # not a multiple of the segment length: exercises the remainder
    t = np.arange(n) / fs
    f = 61.37
    y = 0.8 * np.cos(2 * np.pi * f * t + 1.0) + 0.1 * np.cos(2 * np.pi * 3 * f * t - 0.4) + 0.05
    y += rng.normal(0, 0.01, n)
    fit = fit_harmonics(y, fs, f, 3)
    cols = [np.ones(n)]
    for k in (1, 2, 3):
        cols += [np.cos(2 * np.pi * k * f * t), np.sin(2 * np.pi * k * f * t)]
    d = np.column_stack(cols)
    beta, *_ = np.linalg.lstsq(d, y, rcond=None)
    expected = beta[1::2] - 1j * beta[2::2]
    np.testing.assert_allclose(fit.phasors, expected, rtol=0, atol=1e-12)
    assert abs(fit.dc - beta[0]) < 1e-12
    rss = float(np.sum((y - d @ beta) ** 2))
    assert fit.rss == pytest.approx(rss, rel=1e-6)


def test_frequency_std_near_cramer_rao_bound_and_honest_uncertainty():
    # Rife & Boorstyn 1974 / Kay 1993 Ex. 3.14 (REFERENCES §2): var(f) ≥ 6σ²fs²/(π²A²N(N²−1)).
    # Worked example: N = 1000, fs = 48 kHz, A = 1, σ = 10 mV → std ≥ 0.011835 Hz.
    fs, n, a, sigma = 48000.0, 1000, 1.0, 0.01
    crlb = math.sqrt(6 * sigma**2 * fs**2 / (math.pi**2 * a**2 * n * (n**2 - 1)))
    assert crlb == pytest.approx(0.011835, rel=1e-4)
    rng = np.random.default_rng(2024)
    t = np.arange(n) / fs
    freqs, us = [], []
    for _ in range(400):
        y = a * np.cos(2 * np.pi * 1234.5 * t + 0.7) + 0.1 + rng.normal(0, sigma, n)
        fit = fit_tone(y, fs)
        freqs.append(fit.frequency_hz)
        us.append(fit.frequency_u_hz)
    std = float(np.std(freqs, ddof=1))
    # 400 trials: the sample std has a relative standard error of 1/sqrt(2·399) ≈ 3.5 %,
    # so 1.2× the bound leaves > 5 standard errors for a near-efficient estimator
    assert std < 1.2 * crlb
    assert std > 0.85 * crlb  # nothing can beat the bound by more than the sampling error
    assert float(np.mean(us)) == pytest.approx(std, rel=0.2)
    # bias: mean within 4 standard errors of the truth
    assert abs(float(np.mean(freqs)) - 1234.5) < 4 * std / math.sqrt(len(freqs))


def test_dft_seed_within_a_fraction_of_a_bin():
    # Grandke's Hann two-bin rule (IEEE TIM 32(2), 1983); REFERENCES §3 table: bias < 1e−7 bin
    # for a complex tone, larger for a real one (negative-frequency leakage) → allow 0.01 bin.
    fs, n = 48000.0, 4096
    t = np.arange(n) / fs
    for f in (437.3, 1234.5, 5000.1):
        y = np.cos(2 * np.pi * f * t + 0.4)
        est = dft_frequency_seed(y, fs)
        assert abs(est - f) < 0.01 * fs / n


def test_silence_gives_no_tone():
    assert fit_tone(np.zeros(1000), 48000.0) is None
