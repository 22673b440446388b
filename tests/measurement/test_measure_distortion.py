"""Distortion of benchfit.measure: Fourier-series facts (REFERENCES §5) on synthesized waves at
non-coherent frequencies, an independent scipy.signal cross-check, THD+N and SINAD."""

from __future__ import annotations

import math

import numpy as np
import pytest

from benchfit.errors import MeasureError
from benchfit.capture.capture import Capture
from benchfit.measurement.summary import measure, measure_channel

from _measurement_signals import FS, fourier_wave, times, tone, trapezoid


@pytest.mark.parametrize("kind, thd_ref", [
    # REFERENCES §5 truncated sums, H = 10 [C]: square 0.428795, triangle 0.120477,
    # sawtooth 0.741463 (derived from the Fourier series; Blagouchine & Moreau 2011 for the
    # untruncated values)
    ("square", 0.428795),
    ("triangle", 0.120477),
    ("sawtooth", 0.741463),
])
def test_thd_of_fourier_waves_at_noncoherent_frequency(kind, thd_ref):
    f = 50.37  # 2 s holds 100.74 periods: not coherent with the record
    x = fourier_wave(times(2.0), f, kind, amplitude=1.3)
    ch = measure_channel(x, FS, unit="V", harmonics=10)
    assert ch.extra["harmonics_h"] == 10
    # harmonics above H are not fitted and leak into the fitted ones by O(1/periods):
    # ~1e-5 at 100 periods (module docstring of distortion.py); the reference has 6 digits
    assert ch.thd_pct / 100 == pytest.approx(thd_ref, abs=2e-5)


def test_square_thd_n_is_all_harmonics_below_nyquist():
    # THD+N over the full band of a band-limited square: √(Σ_{odd k ≥ 3, k f < fs/2} 1/k²)
    # relative to the fundamental (Fourier series, REFERENCES §5)
    f = 61.7
    kmax = int(math.ceil(0.5 * FS / f)) - 1
    ref = math.sqrt(sum(1.0 / k ** 2 for k in range(3, kmax + 1, 2)))
    ch = measure_channel(fourier_wave(times(0.5), f, "square"), FS, unit="V")
    # the fundamental's fit carries the leakage of unfitted harmonics (~3e-5 at 31 periods)
    assert ch.thd_n_pct / 100 == pytest.approx(ref, rel=1e-4)
    assert ch.sinad_db == pytest.approx(-20 * math.log10(ref), abs=1e-3)  # 1e-4 relative ≈ 1e-3 dB
    # with infinitely many harmonics it would be √(π²/8 − 1) = 0.4834258 (REFERENCES §5)
    assert ch.thd_n_pct / 100 < 0.4834258


@pytest.mark.parametrize("duty", [0.25, 1 / 3, 0.1])
def test_rectangular_pulse_harmonic_amplitudes(duty):
    # rectangular pulse train, levels 0 and A: a_k = (2A/(kπ))·|sin(kπD)| (REFERENCES §5,
    # derivable). A trapezoid with very short edges (1 µs) scaled by its sinc(k·τr/T) factor
    # (REFERENCES §5, trapezoid) is sampled directly — no band limit, so aliases of the
    # harmonics above Nyquist fall near the measured ones; 2e-3 relative covers them.
    amp, f, edge = 2.0, 47.3, 1e-6
    x = trapezoid(times(1.0), f, duty, edge, 0.0, amp, delay_s=0.37e-3)
    ch = measure_channel(x, FS, unit="V", harmonics=10)
    for h in ch.harmonics:
        k = h.order
        sinc_edge = np.sinc(k * edge * f)
        expected = 2 * amp / (k * math.pi) * abs(math.sin(k * math.pi * duty)) * abs(sinc_edge)
        assert h.amplitude == pytest.approx(expected, abs=2e-3 * 2 * amp / math.pi)
    assert ch.vdc == pytest.approx(amp * duty, rel=2e-3)  # a₀ = A·D; whole periods used


def test_harmonic_table_frequency_and_phase():
    # cosine phase at the first sample: x = A cos(2π f t + φ) gives phase φ (tone.py convention)
    t = times(0.4)
    x = tone(t, 123.45, 0.8, math.radians(-40.0)) + 0.1 * np.cos(2 * math.pi * 2 * 123.45 * t + math.radians(75.0))
    ch = measure_channel(x, FS, unit="V", harmonics=5)
    h1, h2 = ch.harmonics[0], ch.harmonics[1]
    assert h1.phase_deg == pytest.approx(-40.0, abs=1e-7)  # noise-free: rounding only
    assert h2.phase_deg == pytest.approx(75.0, abs=1e-6)  # smaller component: 1e-6° rounding
    assert h2.frequency_hz == pytest.approx(2 * 123.45, rel=1e-10)  # noise-free frequency fit
    assert ch.thd_pct == pytest.approx(100 * 0.1 / 0.8, rel=1e-8)  # exact two-tone ratio, rounding
    assert [h.order for h in ch.harmonics] == [1, 2, 3, 4, 5]


def test_harmonics_stop_below_nyquist():
    # 3.1 kHz at 48 kHz: orders with k·f < 24 kHz are 1…7, so H drops from 10 to 7
    ch = measure_channel(tone(times(0.1), 3100.0, 1.0, 0.0), FS, unit="V", harmonics=10)
    assert ch.extra["harmonics_h"] == 7
    assert ch.extra["harmonics_h_requested"] == 10
    assert len(ch.harmonics) == 7


def test_amplitude_and_harmonics_against_scipy_flattop_periodogram():
    # independent tool: scipy.signal.periodogram with a flat-top window and 'spectrum'
    # scaling gives each line's power (rms²) with < 0.01 dB scalloping loss, regardless of
    # coherence; our least-squares amplitudes must agree within 0.2 % (0.017 dB).
    from scipy import signal

    rng = np.random.default_rng(11)
    f = 50.137
    t = times(4.0)
    x = (1.41 * np.cos(2 * math.pi * f * t + 0.4) + 0.06 * np.cos(2 * math.pi * 3 * f * t - 1.0)
         + 0.025 * np.cos(2 * math.pi * 5 * f * t + 2.0) + rng.normal(0, 1e-3, t.size))
    ch = measure_channel(x, FS, unit="V", harmonics=5)
    freqs, pxx = signal.periodogram(x, FS, window="flattop", scaling="spectrum")
    for h in (ch.harmonics[0], ch.harmonics[2], ch.harmonics[4]):
        band = np.abs(freqs - h.frequency_hz) < 2.0  # the flat-top main lobe is ±5 bins of 0.25 Hz
        peak_amp = math.sqrt(2 * float(np.max(pxx[band])))
        assert h.amplitude == pytest.approx(peak_amp, rel=2e-3)
    thd_scipy = math.sqrt(sum(2 * float(np.max(pxx[np.abs(freqs - k * f) < 2.0])) for k in (2, 3, 4, 5))) / (
        math.sqrt(2 * float(np.max(pxx[np.abs(freqs - f) < 2.0]))))
    # harmonics 2 and 4 are absent: the periodogram's noise peaks add at most 1e-4 of the fundamental
    assert ch.thd_pct / 100 == pytest.approx(thd_scipy, abs=3e-4)


def test_sinad_of_sine_in_white_noise():
    # IEEE 1241 SINAD = fundamental rms / rms of everything else; for A cos + white noise σ
    # that is 20·log10(A/(√2 σ)). With 96 000 samples the noise rms is known to ±0.23 %
    # (1/√(2N)), i.e. ±0.02 dB; 0.05 dB allows 2.5σ.
    rng = np.random.default_rng(3)
    a, sigma = 1.2, 0.012
    ch = measure_channel(tone(times(2.0), 59.91, a, 0.3, sigma, rng), FS, unit="V")
    assert ch.sinad_db == pytest.approx(20 * math.log10(a / (math.sqrt(2) * sigma)), abs=0.05)
    assert ch.thd_n_pct == pytest.approx(100 * 10 ** (-ch.sinad_db / 20), rel=1e-12)  # definition


def test_thd_uncertainty_matches_spread():
    # thd_u_pct (linearised from the fit covariance) against the spread over 60 seeded records
    # of a 4 % third harmonic in noise; ±30 % covers the Monte Carlo error of a 60-run std (9 %)
    rng = np.random.default_rng(21)
    t = times(0.2)
    values, reported = [], []
    for _ in range(60):
        x = tone(t, 50.05, 1.0, rng.uniform(0, 6)) + 0.04 * np.cos(2 * math.pi * 150.15 * t + 0.3)
        x = x + rng.normal(0, 0.02, t.size)
        ch = measure_channel(x, FS, unit="V", harmonics=3)
        values.append(ch.thd_pct)
        reported.append(ch.extra["thd_u_pct"])
    assert float(np.mean(reported)) == pytest.approx(float(np.std(values, ddof=1)), rel=0.3)
    assert float(np.mean(values)) == pytest.approx(4.0, abs=0.05)  # 4 % third harmonic, noise-floor bias small


def test_harmonics_option_is_validated():
    cap = Capture(tone(times(0.1), 50.0, 1.0, 0.0), FS)
    with pytest.raises(MeasureError, match="harmonics"):
        measure(cap, harmonics=0)
    assert measure(cap, harmonics=1).channels[0].thd_pct is None  # H = 1: no harmonic to sum


def test_harmonics_beyond_nyquist_are_the_orders_below_it():
    # asking for 10²³ orders (the command line caps it; the library did not) fits the orders below
    # Nyquist, as any count above them does: 8 kHz, 50.37 Hz → orders 1…79 (79·50.37 < 4000 < 80·50.37)
    fs = 8000.0
    t = np.arange(int(0.5 * fs)) / fs
    x = fourier_wave(t, 50.37, "square", amplitude=1.0)
    huge = measure_channel(x, fs, unit="V", harmonics=10 ** 23)
    below = measure_channel(x, fs, unit="V", harmonics=80)
    assert huge.extra["harmonics_h"] == below.extra["harmonics_h"] == 79
    assert huge.thd_pct == below.thd_pct and huge.frequency_hz == below.frequency_hz
