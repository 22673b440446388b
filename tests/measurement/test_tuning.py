"""benchfit.measurement.tuning on its own: purity, the old import path, and the parts of the readout
that tests/live/test_live_windows.py does not pin (clipping, dBFS floor, uncertainty budget, JSON
record of ``tune --json``, boundaries of the hint). Signals are generated here; noise is seeded."""

from __future__ import annotations

import json
import math
import subprocess
import sys

import numpy as np
import pytest

from benchfit.capture.calibration import CLIP_FS
from benchfit.measurement import tuning
from benchfit.measurement.tuning import (TuneReading, Windower, analyse_window, direction_hint, iter_windows,
                                         to_dbfs)

FS = 48000.0
MOVED = ("Window", "Windower", "iter_windows", "TuneReading", "direction_hint", "analyse_window", "to_dbfs")


def _sine(f: float, amplitude: float, n: int = 48000, noise: float = 0.0, seed: int = 50) -> np.ndarray:
    rng = np.random.default_rng(seed)
    t = np.arange(n) / FS
    return amplitude * np.sin(2 * np.pi * f * t + 0.4) + noise * rng.standard_normal(n)


def test_old_import_path_gives_the_same_objects():
    from benchfit.capture import live

    for name in MOVED:
        assert getattr(live, name) is getattr(tuning, name), name
        assert name in live.__all__ and name in tuning.__all__


def test_module_loads_no_audio_display_or_file_libraries():
    # pure computation: importing it must not pull in the sound card, rich, soundfile or plotting
    code = ("import sys, benchfit.measurement.tuning; "
            "print(sorted(m for m in ('sounddevice', 'soundfile', 'rich', 'matplotlib', 'typer') if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=60, check=True)
    assert out.stdout.strip() == "[]"


@pytest.mark.parametrize("peak,dbfs", [
    (1.0, 0.0),
    (0.5, 20 * math.log10(0.5)),    # −6.02 dB: level of a field quantity, 20·log10 of the ratio (IEC 60027-3)
    (1e-3, -60.0),
    (1e-7, -140.0),
])
def test_to_dbfs(peak, dbfs):
    assert to_dbfs(peak) == pytest.approx(dbfs, abs=1e-12)  # float rounding of log10 only


@pytest.mark.parametrize("peak", [0.0, 1e-9, 10 ** (-150 / 20)])
def test_to_dbfs_floors_silence_at_minus_150(peak):
    assert to_dbfs(peak) == -150.0


def test_windower_takes_one_dimensional_blocks_for_one_channel():
    x = np.arange(1000, dtype=float)
    w = Windower(1, 300, 100)
    got = w.push(x[:450]) + w.push(x[450:])
    assert [s for s, _ in got] == list(range(0, 701, 100))
    for s, seg in got:
        assert seg.shape == (1, 300)
        np.testing.assert_array_equal(seg[0], x[s:s + 300])


def test_iter_windows_end_times_are_in_seconds_and_carry_no_stream_counts():
    wins = list(iter_windows(np.zeros((2, 48000)), FS, window_s=0.5, hop_s=0.125))
    assert [w.start_frame for w in wins] == [0, 6000, 12000, 18000, 24000]
    assert [w.end_s for w in wins] == [0.5, 0.625, 0.75, 0.875, 1.0]
    assert all(w.overflow_count == 0 and w.dropped == 0 for w in wins)


def test_clipping_is_samples_stuck_at_full_scale():
    # a 50 Hz sine sampled at 48 kHz has a sample within 5.4e-6 (relative) of its crest: 1 − cos(π·50/48000)
    hot = analyse_window(_sine(50.0, 1.001 * CLIP_FS), FS, 50.0)
    assert hot.peak_dbfs == pytest.approx(to_dbfs(1.001 * CLIP_FS), abs=1e-4)  # crest missed by ≤ 5.4e-6 = 4.7e-5 dB
    # its crest passes above −0.1 dBFS without sticking there: a headroom warning, not a clip
    assert not hot.clipped and any("near full scale" in w and "not clipped" in w for w in hot.warnings)
    cool = analyse_window(_sine(50.0, 0.999 * CLIP_FS), FS, 50.0)
    assert not cool.clipped and not any("clipped" in w or "full scale" in w for w in cool.warnings)
    # driven past full scale, the samples stick at the end codes (IEEE 1241 clipping at the range)
    cut = analyse_window(np.clip(_sine(50.0, 1.5), -1.0, 1.0), FS, 50.0)
    assert cut.clipped and any(w.startswith("input clipped (samples stuck flat") for w in cut.warnings)


def test_timebase_uncertainty_adds_in_quadrature():
    # GUM (JCGM 100:2008) 5.1.2 and 5.1.6: uncorrelated relative uncertainties of a product add as
    # a root sum of squares; the true rate is nominal·(1 + ppm·1e-6), so u_f,timebase = f·u_ppm·1e-6
    x = _sine(50.13, 0.4, noise=1e-3, seed=1057)
    bare = analyse_window(x, FS, 50.0)
    with_tb = analyse_window(x, FS, 50.0, timebase_u_ppm=20.0)
    assert with_tb.frequency_hz == bare.frequency_hz  # the same fit: only the budget changes
    expected = math.hypot(bare.frequency_u_hz, bare.frequency_hz * 20e-6)
    assert with_tb.frequency_u_hz == pytest.approx(expected, rel=1e-12)  # float rounding only
    assert with_tb.frequency_u_hz > 2 * bare.frequency_u_hz  # 1 mHz of timebase dominates the fit's µHz


def test_reading_to_dict_is_the_tune_json_record():
    x = _sine(49.87, 0.3, noise=1e-3, seed=7)
    r = analyse_window(x, FS, 50.0, gain_v_per_fs=1.5, tolerance_hz=0.25)
    d = r.to_dict()
    assert set(d) == {f.name for f in TuneReading.__dataclass_fields__.values()}
    assert json.loads(json.dumps(d)) == d  # plain JSON types only (warnings as a list)
    assert d["unit"] == "V" and d["duty_cycle_pct"] is None  # a sine is not a two-level wave
    # 0.3 FS × 1.5 V/FS; the fit's noise is σ·√(2/N) = 6.5e-6 FS (2e-5 relative), 10σ allowed
    assert d["amplitude"] == pytest.approx(0.45, rel=2e-4)
    # sine rms = peak/√2; the window holds 49.87 periods, and the partial one biases the mean of sin² by
    # up to 1/(4π·49.87) = 1.6e-3 (relative); the noise adds only 1e-5
    assert d["rms"] == pytest.approx(0.45 / math.sqrt(2), rel=2e-3)
    assert d["status"] == "within-tolerance" and "slow" in d["hint"]


@pytest.mark.parametrize("dev,u,tol,status", [
    (0.002, 0.001, None, "on-target"),             # exactly 2 u: still on target (≤)
    (0.0020001, 0.001, None, "off-target"),
    (-0.25, 0.001, 0.25, "within-tolerance"),      # exactly at the tolerance: inside
    (-0.2500001, 0.001, 0.25, "off-target"),
])
def test_direction_hint_boundaries(dev, u, tol, status):
    assert direction_hint(dev, u, tol)[1] == status
