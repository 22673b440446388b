"""Sliding windows and the tuning readout (pure parts of benchfit.capture.live; no audio device)."""

from __future__ import annotations

import math

import numpy as np
import pytest

from benchfit.capture.live import Windower, analyse_window, direction_hint, iter_windows, to_dbfs
from benchfit.errors import MeasureError

FS = 48000.0


def test_windower_matches_direct_slicing_for_any_block_sizes():
    rng = np.random.default_rng(181)
    x = rng.standard_normal((2, 20000))
    win, hop = 4000, 1000
    w = Windower(2, win, hop)
    got = []
    pos = 0
    while pos < x.shape[1]:
        size = int(rng.integers(1, 1500))
        got.extend(w.push(x[:, pos:pos + size].T))
        pos += size
    starts = [s for s, _ in got]
    assert starts == list(range(0, x.shape[1] - win + 1, hop))
    for s, seg in got:
        np.testing.assert_array_equal(seg, x[:, s:s + win])
    # the buffer holds less than one window plus one block: memory stays bounded
    assert w._buf.shape[1] < win + 1500


def test_iter_windows_hops_and_timestamps():
    x = np.arange(10_000, dtype=float)
    wins = list(iter_windows(x, 1000.0, window_s=2.0, hop_s=0.5))
    assert [w.start_frame for w in wins] == list(range(0, 8001, 500))
    assert wins[0].end_s == 2.0 and wins[-1].end_s == 10.0
    assert all(w.samples.shape == (1, 2000) for w in wins)


def test_windower_rejects_bad_shapes():
    with pytest.raises(ValueError, match="window"):
        Windower(1, 1, 1)
    w = Windower(2, 10, 5)
    with pytest.raises(ValueError, match="2"):
        w.push(np.zeros((4, 3)))


@pytest.mark.parametrize("dev,u,tol,status,words", [
    (+0.132, 0.001, None, "off-target", "running 0.132 Hz fast — lower the frequency: increase RB or C1"),
    (-0.400, 0.001, 0.25, "off-target", "running 0.400 Hz slow — raise the frequency: decrease RB or C1"),
    (-0.100, 0.001, 0.25, "within-tolerance", "within ±0.25 Hz; running 0.100 Hz slow"),
    (+0.0015, 0.001, 0.25, "on-target", "on target"),
])
def test_direction_hint(dev, u, tol, status, words):
    # direction from the astable's f ≈ 1.44/((RA + 2RB)·C1) (NE555 datasheets): more RB or C1 → lower f
    hint, st = direction_hint(dev, u, tol)
    assert st == status and words in hint


def _pulse_train(f: float, duty: float, n: int, fs: float, kmax: int, phase: float = 0.3) -> np.ndarray:
    """Band-limited rectangular pulse train, levels 0 and 1, from its Fourier series
    a_k = (2/(kπ))·sin(kπD) (REFERENCES §5; derivable), harmonics 1…kmax, so nothing aliases."""
    t = np.arange(n) / fs
    x = np.full(n, duty)
    for k in range(1, kmax + 1):
        x += 2 / (k * math.pi) * math.sin(k * math.pi * duty) * np.cos(k * (2 * math.pi * f * t + phase - math.pi * duty))
    return x


def test_analyse_window_on_a_555_like_pulse_train():
    rng = np.random.default_rng(555)
    f, duty = 50.13, 0.30
    x = 0.4 * _pulse_train(f, duty, 48000, FS, kmax=300) - 0.2 + 1e-3 * rng.standard_normal(48000)
    r = analyse_window(x, FS, 50.0, gain_v_per_fs=2.0, timebase_u_ppm=0.5, n_harmonics=10, tolerance_hz=0.25)
    assert abs(r.frequency_hz - f) < 4 * r.frequency_u_hz  # 4σ, one seeded draw
    assert r.frequency_u_hz >= f * 0.5e-6  # the timebase's 0.5 ppm is in the budget
    assert r.deviation_hz == pytest.approx(r.frequency_hz - 50.0)
    assert r.deviation_ppm == pytest.approx(r.deviation_hz / 50.0 * 1e6)
    assert r.status == "within-tolerance" and "fast" in r.hint
    # THD_F over orders 2…10 of the pulse train: √(Σ a_k²)/a_1 with a_k ∝ |sin(kπD)|/k (REFERENCES §5)
    a = np.array([abs(math.sin(k * math.pi * duty)) / k for k in range(1, 11)])
    thd_truth = 100 * math.sqrt(np.sum(a[1:] ** 2)) / a[0]
    assert r.thd_pct == pytest.approx(thd_truth, rel=2e-3)  # noise 1e-3 FS on harmonics of ≥ 0.02 FS
    # IEEE 181 duty (high time / period) of the band-limited train: the 50 % crossings sit at the ideal edges
    assert r.duty_cycle_pct == pytest.approx(30.0, abs=0.1)  # Gibbs ripple moves the mode levels slightly
    # amplitude in volts through the gain: fundamental peak 0.4·(2/π)·sin(πD), ×2 V/FS
    assert r.unit == "V"
    assert r.amplitude == pytest.approx(2 * 0.4 * 2 / math.pi * math.sin(math.pi * duty), rel=1e-3)
    assert r.peak_dbfs == pytest.approx(to_dbfs(np.max(np.abs(x))))
    assert not r.clipped


def test_analyse_window_on_a_filtered_sine_has_no_duty():
    t = np.arange(24000) / FS
    x = 0.5 * np.sin(2 * np.pi * 49.9 * t) + 0.01 * np.sin(2 * np.pi * 3 * 49.9 * t)
    r = analyse_window(x, FS, 50.0)
    assert r.duty_cycle_pct is None and r.unit == "FS"
    assert r.thd_pct == pytest.approx(2.0, rel=1e-6)  # 0.01/0.5 exactly, noise-free
    assert "slow" in r.hint and r.status == "off-target"


def test_analyse_window_without_a_tone():
    with pytest.raises(MeasureError, match="no tone"):
        analyse_window(np.zeros(4800), FS, 50.0)


def test_previous_reading_seed_is_used_only_when_close():
    rng = np.random.default_rng(1057)
    t = np.arange(48000) / FS
    x = 0.4 * np.sin(2 * np.pi * 50.2 * t) + 1e-3 * rng.standard_normal(t.size)
    fresh = analyse_window(x, FS, 50.0)
    near = analyse_window(x, FS, 50.0, seed_hz=fresh.frequency_hz + 1e-4)
    stale = analyse_window(x, FS, 50.0, seed_hz=47.0)  # the unit was swapped: 3 bins away
    # the iteration stops at a 1e-10 relative step, so every start lands on the same least-squares point
    assert near.frequency_hz == pytest.approx(fresh.frequency_hz, rel=1e-9)
    assert stale.frequency_hz == pytest.approx(fresh.frequency_hz, rel=1e-9)
    assert abs(fresh.frequency_hz - 50.2) < 4 * fresh.frequency_u_hz  # 4σ, seeded noise
