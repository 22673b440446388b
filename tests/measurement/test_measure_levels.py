"""Levels, clipping and the other warnings of benchfit.measure; independent cross-checks with sox."""

from __future__ import annotations

import math
import re
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest

from benchfit.capture.capture import Capture, InputCalibration
from benchfit.capture.load import load
from benchfit.measurement.levels import find_clipping, signal_levels
from benchfit.measurement.summary import measure, measure_channel

from _measurement_signals import FS, times, tone, trapezoid

DATA = Path(__file__).resolve().parents[1] / "data"


def _sox_stats(text: str) -> dict[str, float]:
    out = {}
    for line in text.splitlines():
        m = re.match(r"^(DC offset|Min level|Max level|RMS lev dB|Pk lev dB)\s+(-?[\d.]+)", line)
        if m:
            out[m.group(1)] = float(m.group(2))
    return out


@pytest.mark.parametrize("stem", ["measurement_sox_sine_997hz", "measurement_sox_square_50hz"])
def test_levels_against_stored_sox_stats(stem):
    # independent tool: `sox FILE -n stats` (SoX 14.4.2) run on the same stored WAV files
    # (tests/data/README_measurement.md). sox prints RMS in dB to 0.01 dB (±0.058 % in
    # amplitude) and the extremes to 1e-6; sox takes the whole record, we take whole periods
    # (difference < 1e-4 at 25 periods and more).
    stats = _sox_stats((DATA / f"{stem}_stats.txt").read_text())
    m = measure(DATA / f"{stem}.wav")  # a path: measure() reads it with benchfit's loader
    ch = m.channels[0]
    assert ch.vrms == pytest.approx(10 ** (stats["RMS lev dB"] / 20), rel=1.2e-3)
    # robust vpp (0.1/99.9 % percentiles) equals max − min when the extremes repeat ≥ 0.1 %
    # of the time (sox "Pk count"); for the sine the percentiles sit within 1e-4 of the peaks
    assert ch.vpp == pytest.approx(stats["Max level"] - stats["Min level"], abs=2e-4)


def test_levels_against_sox_generated_now(tmp_path):
    sox = shutil.which("sox")
    if sox is None:
        pytest.skip("sox is not installed on this machine")
    # the command from the brief: sox -n -r 48000 out.wav synth 1 sine 1000, then `sox out.wav -n stats`
    wav = tmp_path / "out.wav"
    subprocess.run([sox, "-n", "-r", "48000", str(wav), "synth", "1", "sine", "1000"], check=True,
                   capture_output=True)
    res = subprocess.run([sox, str(wav), "-n", "stats"], check=True, capture_output=True, text=True)
    stats = _sox_stats(res.stderr)
    ch = measure(load(wav)).channels[0]
    assert ch.vrms == pytest.approx(10 ** (stats["RMS lev dB"] / 20), rel=1.2e-3)  # 0.01 dB print
    assert ch.vpp == pytest.approx(stats["Max level"] - stats["Min level"], abs=1e-5)  # 1e-6 print
    assert ch.frequency_hz == pytest.approx(1000.0, rel=1e-9)  # noise-free synth
    assert ch.vdc == pytest.approx(stats["DC offset"], abs=1e-6)  # 1000 whole periods: both 0


def test_whole_period_levels_are_unbiased_by_a_partial_period():
    # 2.3 periods of a sine: over whole periods vrms = A/√2 exactly (up to the sample grid);
    # the naive whole-record rms is visibly off
    f, a = 50.0, 1.0
    x = tone(times(2.3 / f), f, a, 0.0)
    lv = signal_levels(x, FS, f)
    assert lv.whole_periods == 2
    assert lv.vrms == pytest.approx(a / math.sqrt(2), rel=1e-9)  # 2 periods of 960 samples each
    assert lv.vdc == pytest.approx(0.0, abs=1e-12)  # sum of 1920 sine samples: rounding only
    assert abs(math.sqrt(np.mean(x ** 2)) - a / math.sqrt(2)) > 1e-3  # the partial period shows


def test_vpp_ignores_a_single_spike():
    x = tone(times(0.5), 50.0, 1.0, 0.0)
    x[1234] = 5.0
    assert signal_levels(x, FS, 50.0).vpp == pytest.approx(2.0, abs=1e-4)  # arcsine tails: 5e-6


def test_vrms_uncertainty_is_honest():
    # vrms_u from the noise (var(mean x²) = (4·P·σ² + 2σ⁴)/N) against the spread over 50 records;
    # ±33 % covers 3.3× the Monte Carlo error of a 50-run std (10 %)
    vals, us = [], []
    for seed in range(50):
        rng = np.random.default_rng(seed)
        x = tone(times(0.1), 50.0, 1.5, rng.uniform(0, 6), 0.05, rng)
        ch = measure_channel(x, FS, unit="V")
        vals.append(ch.vrms)
        us.append(ch.extra["vrms_u"])
    assert float(np.mean(us)) == pytest.approx(float(np.std(vals, ddof=1)), rel=0.33)


def test_full_scale_clipping_is_flagged():
    # a sine driven 1.5× past full scale of an audio input, clipped at ±1 FS
    x = np.clip(tone(times(0.3), 50.0, 1.5, 0.0), -1.0, 1.0)
    ch = measure_channel(x, FS, unit="FS")
    assert ch.clipped
    assert any("clipped" in w and "full scale" in w for w in ch.warnings)
    assert not measure_channel(tone(times(0.3), 50.0, 0.9, 0.0), FS, unit="FS").clipped


def test_calibrated_card_clipping_uses_its_gain():
    # volts from a card with 2.5 V per FS: full scale is 2.5 V
    x = np.clip(tone(times(0.3), 50.0, 3.0, 0.0), -2.5, 2.5)
    cap = Capture(x, FS, ("output",), ("V",), calibration=InputCalibration(gain_v_per_fs=(2.5,)))
    assert measure(cap).channels[0].clipped
    cap_ok = Capture(tone(times(0.3), 50.0, 2.0, 0.0), FS, ("output",), ("V",),
                     calibration=InputCalibration(gain_v_per_fs=(2.5,)))
    assert not measure(cap_ok).channels[0].clipped


def test_recorder_rail_clipping_in_volts():
    # a logger saturating at 3.3 V repeats its top code; a clean square's flat tops do not count
    x = np.clip(tone(times(0.3), 50.0, 4.0, 0.0, 1e-3, np.random.default_rng(2)), -10, 3.3)
    ch = measure_channel(x, FS, unit="V")
    assert ch.clipped and any("rail" in w for w in ch.warnings)
    sq = trapezoid(times(0.3), 50.0, 0.5, 1e-4, 0.0, 12.0)
    assert not measure_channel(sq, FS, unit="V").clipped
    assert find_clipping(sq, "V", rails=True).clipped  # the raw check alone would flag it


def test_silence_gives_nulls_and_a_warning():
    ch = measure_channel(np.zeros(4800), FS, unit="FS")
    d = ch.to_dict()
    for key in ("frequency_hz", "frequency_u_hz", "amplitude", "duty_cycle_pct", "rise_time_s",
                "fall_time_s", "thd_pct", "thd_n_pct", "sinad_db"):
        assert d[key] is None, key
    assert d["harmonics"] == []
    assert d["vdc"] == 0.0 and d["vrms"] == 0.0 and d["vpp"] == 0.0
    assert any("silence" in w for w in d["warnings"])


def test_noise_only_is_not_periodic():
    rng = np.random.default_rng(9)
    ch = measure_channel(rng.normal(0, 0.1, 48000), FS, unit="V")
    assert ch.frequency_hz is None
    assert any("no periodic signal" in w for w in ch.warnings)
    assert ch.vrms == pytest.approx(0.1, rel=0.02)  # 48 000 samples: rms known to 0.3 %


def test_low_snr_warns_but_still_measures():
    # SNR = A²/(2σ²) = 0 dB: still clearly periodic over 1 s (amplitude/u ≈ 200), but flagged
    rng = np.random.default_rng(13)
    a = 0.5
    x = tone(times(1.0), 50.0, a, 0.0, a / math.sqrt(2), rng)
    ch = measure_channel(x, FS, unit="V")
    assert ch.frequency_hz == pytest.approx(50.0, abs=5 * ch.frequency_u_hz)  # 5 u: noise bound
    assert any("signal-to-noise" in w for w in ch.warnings)
    clean = measure_channel(tone(times(1.0), 50.0, a, 0.0, 0.01 * a, rng), FS, unit="V")
    assert not any("signal-to-noise" in w for w in clean.warnings)


def test_capture_warnings_are_carried_over():
    cap = Capture(tone(times(0.2), 50.0, 1.0, 0.0), FS, warnings=("file truncated after 9600 samples",))
    assert "file truncated after 9600 samples" in measure(cap).channels[0].warnings


@pytest.mark.parametrize("lsb", [0.005, 0.02, 0.05])
def test_quantised_peaks_are_not_rails(lsb):
    # a scope's 8-bit codes make a slow sine repeat its top code for dozens of samples; that
    # is not clipping (the next code down holds a comparable count: ≤ 2.4× fewer for a sine,
    # from the arcsine law), while a real rail piles samples up at one code
    t = np.arange(20000) / 1e5
    for phase in (0.0, 0.3, 1.1):
        x = np.round(np.sin(2 * math.pi * 50 * t + phase) / lsb) * lsb
        assert not find_clipping(x, "V").clipped
        clipped = np.clip(np.round(1.2 * np.sin(2 * math.pi * 50 * t + phase) / lsb) * lsb, -1.0, 1.0)
        assert find_clipping(clipped, "V").clipped
