"""An uncalibrated sample clock is not perfect: measure states a default and budgets it (issue 11).

The default (benchfit.uncertainty.DEFAULT_TIMEBASE_HALF_WIDTH_PPM: ±100 ppm rectangular, a
crystal clock's usual tolerance — common practice, no source) is checked for *consistency*:
clocks drawn from that stated population give z-scores that the reported u covers. This
cannot show that real cards fall inside ±100 ppm; it shows that the number is carried
through honestly.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import benchfit
from benchfit.capture.capture import Capture, InputCalibration
from benchfit.uncertainty import DEFAULT_TIMEBASE_HALF_WIDTH_PPM, DEFAULT_TIMEBASE_U_PPM

FS = 48000.0


def _tone(f, seconds=0.5, sigma=1e-3, seed=0):
    rng = np.random.default_rng(seed)
    t = np.arange(int(seconds * FS)) / FS
    return 0.5 * np.sin(2 * math.pi * f * t + 0.4) + sigma * rng.standard_normal(t.size)


def test_uncalibrated_clock_gets_the_default_term_a_budget_and_a_warning():
    ch = benchfit.measure(Capture(_tone(400.0), FS, ("output",), ("FS",), source="hc.wav")).channels[0]
    b = ch.budget["frequency_hz"]
    rows = {r.name: r for r in b.contributions}
    tb = rows["timebase (not calibrated: stated default)"]
    assert tb.distribution == "rectangular" and tb.type == "B"
    assert tb.u_input == pytest.approx(DEFAULT_TIMEBASE_HALF_WIDTH_PPM / math.sqrt(3), rel=1e-12)  # GUM 4.3.7
    assert tb.sensitivity == pytest.approx(ch.frequency_hz * 1e-6, rel=1e-12)  # ∂f/∂ppm
    # the clock term (23 mHz at 400 Hz) dominates the noise (µHz): u is the quadrature sum (GUM 5.1.2)
    assert ch.frequency_u_hz == pytest.approx(b.u, rel=1e-12)
    assert ch.frequency_u_hz == pytest.approx(400.0 * DEFAULT_TIMEBASE_U_PPM * 1e-6, rel=1e-3)
    assert sum("timebase not calibrated" in w for w in ch.warnings) == 1
    assert b.to_dict()["U"] == pytest.approx(2 * b.u)  # k = 2, ν_eff = ∞ (GUM 6.2.1)


def test_calibrated_clock_uses_the_profile_and_no_warning():
    cap = Capture(_tone(400.0), FS, ("output",), ("FS",),
                  calibration=InputCalibration(profile="desk", timebase_ppm=12.0, timebase_u_ppm=0.8))
    ch = benchfit.measure(cap).channels[0]
    assert not any("timebase not calibrated" in w for w in ch.warnings)
    row = [r for r in ch.budget["frequency_hz"].contributions if r.name.startswith("timebase")][0]
    assert row.u_input == 0.8 and row.distribution == "normal" and "desk" in row.source


def test_z_scores_over_clocks_drawn_from_the_stated_default():
    # 120 cards, each clock error drawn uniformly in ±100 ppm: a tone of true frequency f is
    # recorded at the true rate fs·(1 + e) but analysed at the nominal fs, so it reads f/(1 + e).
    # z = (f_read − f)/u. For a rectangular population the spread of z is 1 (by construction of
    # u = a/√3) and |z| ≤ √3 up to noise: sd within ±15 % (120 trials: the sd's own scatter is
    # below 1/√240 ≈ 6.5 % for a uniform population), max |z| < 2.
    rng = np.random.default_rng(11)
    z = []
    for i in range(120):
        e = rng.uniform(-1, 1) * DEFAULT_TIMEBASE_HALF_WIDTH_PPM * 1e-6
        f_true = rng.uniform(49.5, 50.5)
        x = _tone(f_true / (1 + e), seconds=0.25, seed=i)
        ch = benchfit.measure(Capture(x, FS, ("output",), ("FS",))).channels[0]
        z.append((ch.frequency_hz - f_true) / ch.frequency_u_hz)
    z = np.asarray(z)
    assert 0.85 < float(np.std(z)) < 1.15
    assert float(np.max(np.abs(z))) < 2.0
    assert abs(float(np.mean(z))) < 0.3  # 3 × 1/√120 ≈ 0.27


def test_distortion_floor_enters_the_thd_budget():
    t = np.arange(int(0.5 * FS)) / FS
    x = 0.5 * np.sin(2 * math.pi * 50 * t) + 0.01 * np.sin(2 * math.pi * 150 * t)
    cap = Capture(x, FS, ("output",), ("FS",),
                  calibration=InputCalibration(timebase_u_ppm=1.0, distortion_floor_pct=0.05))
    ch = benchfit.measure(cap).channels[0]
    rows = {r.name: r for r in ch.budget["thd_pct"].contributions}
    # rectangular ± the floor (the card's harmonics add with unknown phase): u = 0.05 %/√3
    assert rows["card distortion floor"].contribution == pytest.approx(0.05 / math.sqrt(3), rel=1e-12)
    assert ch.budget["thd_pct"].u >= rows["card distortion floor"].contribution
