"""Clipping is a flat top stuck at full scale, not a sagging top that comes near it.

IEEE 1241 / IEEE 1057 (clause numbers from memory) count samples at the converter's range
limits as clipped: a card or scope driven past its range returns its end code again and
again. A square through an AC-coupled input (first-order high-pass, τ = 10 ms on 50 Hz here)
starts each half period at up to 2/(1 + e^(−T/2τ)) = 1.46× its amplitude and sags from there:
its peaks come near full scale without sticking to it, and must not be called clipped. A
sine driven past full scale must still be. Signals are synthetic and seeded.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from benchfit.measurement.calibration import estimate_timebase
from benchfit.measurement.levels import clipped_sample_count, find_clipping
from benchfit.measurement.summary import measure_channel


def _ac_square(fs: float, peak_fs: float, seconds: float = 0.5, tau: float = 10e-3, f: float = 50.0,
               bits: int | None = None, seed: int = 0, sigma: float = 0.0) -> np.ndarray:
    """A 50 % square through a one-pole high-pass (y[n] = a·(y[n−1] + x[n] − x[n−1]), a = e^(−1/(fs·τ)),
    the exact response to a sampled step), settled for 10 periods, scaled so its highest sample is
    ``peak_fs``; then optional noise and a ``bits`` quantiser of ±1 FS."""
    from scipy.signal import lfilter

    n_pre = int(10 * fs / f)
    n = int(seconds * fs)
    t = np.arange(n_pre + n) / fs
    sq = np.where((f * t + 0.13) % 1.0 < 0.5, 1.0, -1.0)
    a = math.exp(-1.0 / (fs * tau))
    y = lfilter([a, -a], [1.0, -a], sq)[n_pre:]
    y = y * (peak_fs / np.max(np.abs(y)))
    if sigma:
        y = y + sigma * np.random.default_rng(seed).standard_normal(n)
    if bits:
        q = 2.0 / 2 ** bits
        y = np.clip(np.round(y / q) * q, -1.0, 1.0 - q)
    return y


@pytest.mark.parametrize("fs,bits", [(384000.0, None), (384000.0, 24), (48000.0, 16)])
def test_sagging_ac_coupled_square_near_full_scale_is_not_clipped(fs, bits):
    x = _ac_square(fs, 0.9999, bits=bits)
    sag = 1.0 - np.max(x[int(fs / 50 / 4):int(fs / 50 / 2)]) / np.max(x)
    assert sag > 0.3  # strongly AC-coupled: the top falls by a third before the next edge
    ch = measure_channel(x, fs, unit="FS")
    assert not ch.clipped and not any("clipped" in w for w in ch.warnings), ch.warnings
    assert clipped_sample_count(x, 10 ** (-0.1 / 20)) == 0  # the recorder's live count agrees


def test_the_old_threshold_alone_would_have_flagged_it():
    # at 384 kHz the sag is 0.026 % a sample: four samples in a row stay above 0.999 FS — runs of
    # ≥ 3 above the threshold are what the check used to count; none of them repeats a value
    x = _ac_square(384000.0, 0.9999)
    above = np.abs(x) >= 0.999
    longest = max(len(r) for r in "".join("1" if a else "0" for a in above).split("0"))
    assert longest >= 3
    assert not find_clipping(x, "FS").clipped


@pytest.mark.parametrize("fs,bits", [(48000.0, 16), (384000.0, None)])
def test_a_clipped_sine_still_warns(fs, bits):
    t = np.arange(int(0.3 * fs)) / fs
    x = np.clip(1.5 * np.sin(2 * np.pi * 50.0 * t), -1.0, 1.0)
    if bits:
        x = np.round(x * 32767) / 32767
    ch = measure_channel(x, fs, unit="FS")
    assert ch.clipped and any(w.startswith("clipped —") and "full scale" in w for w in ch.warnings)
    assert clipped_sample_count(x, 10 ** (-0.1 / 20)) > 0.3 * x.size  # |1.5 sin| ≥ 1 for 46 % of the time


def test_an_ac_coupled_square_driven_past_full_scale_is_clipped():
    # the same square 30 % hotter: its peaks are cut flat at the converter's end codes
    x = np.clip(_ac_square(48000.0, 1.3), -1.0, 32767 / 32768)
    x = np.round(x * 32768) / 32768
    ch = measure_channel(x, 48000.0, unit="FS")
    assert ch.clipped and any(w.startswith("clipped —") for w in ch.warnings)


def test_quantised_sag_in_volts_with_known_full_scale_is_not_clipped():
    # an 8-bit scope at 1 MS/s repeats each code for many samples along the sag, but no code
    # piles samples up against its neighbour
    x = 2.5 * _ac_square(1e6, 0.995, seconds=0.1, bits=8)
    assert not find_clipping(x, "V", full_scale=2.5).clipped
    assert not find_clipping(x, "V", rails=True).clipped


def test_timebase_from_an_ac_coupled_square_peaking_near_full_scale():
    # a reference square through the card's coupling, crest at −0.05 dBFS: accepted (it was
    # refused as "clipped"), and the clock reads right within its u (GUM: |error| ≤ 3u)
    fs, ppm = 48000.0, 50.0
    # a clock fast by ppm takes its samples at fs·(1 + ppm·1e-6) true hertz
    x = _ac_square(fs * (1 + ppm * 1e-6), 10 ** (-0.05 / 20), seconds=1.0, bits=16, sigma=2e-3, seed=3)
    est = estimate_timebase(x, fs, 50.0)
    assert abs(est.ppm - ppm) < 3 * est.u_ppm, est


def test_tune_calls_the_sagging_square_hot_not_clipped():
    from benchfit.measurement.tuning import analyse_window

    r = analyse_window(_ac_square(48000.0, 0.998, bits=16), 48000.0, 50.0)
    assert not r.clipped and r.peak_dbfs > -0.1
    assert any("near full scale" in w for w in r.warnings) and not any("input clipped" in w for w in r.warnings)
