"""Levels in volts carry the sound-card gain's uncertainty; ratios do not.

Signals are synthesised with seeded noise in the hum-check scenario (a 50 Hz sine of about
1.3 V rms from a card calibrated at 4 V/FS, and a 555-style drive square). One test reads the
bundled sample capture HC-01 (whose sidecar gives an invented 0.3 % gain uncertainty).
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

import benchfit
from benchfit.capture.capture import Capture, InputCalibration
from benchfit.measurement.summary import measure_channel
from benchfit.uncertainty import DEFAULT_GAIN_U_REL
from benchfit.measurement.levels import percentile_noise_u, quantisation_step, signal_levels, vpp_noise_u

FS = 48000.0
ROOT = Path(__file__).resolve().parents[2]
LEVELS = ("amplitude", "vdc", "vrms", "vpp")


def _hum_sine(seed: int = 50, seconds: float = 1.0, sigma_v: float = 8e-4) -> np.ndarray:
    """The output of a hum-check box at the card: 1.85 V peak at 50.02 Hz with a little 3rd
    harmonic and DC, plus white noise of sigma_v, quantised to the 16-bit codes of 4 V/FS."""
    rng = np.random.default_rng(seed)
    t = np.arange(int(seconds * FS)) / FS
    x = (1.85 * np.sin(2 * np.pi * 50.02 * t + 0.3) + 0.03 * np.sin(2 * np.pi * 150.06 * t)
         + 0.004 + sigma_v * rng.standard_normal(t.size))
    q = 4.0 / 32767
    return np.round(x / q) * q


def _capture(x, gain_u_rel, gains=(4.0,), units=("V",)) -> Capture:
    x = np.atleast_2d(x)
    return Capture(x, FS, tuple(f"ch{i + 1}" for i in range(x.shape[0])) if x.shape[0] > 1 else ("output",),
                   units, source="hc-synthetic",
                   calibration=InputCalibration(profile="makerspace-laptop", gain_v_per_fs=gains,
                                                gain_u_rel=gain_u_rel))


def _value(ch, name):
    return getattr(ch, name)


def test_level_uncertainties_are_the_quadrature_sum():
    x = _hum_sine()
    # the noise-only figures: the channel measured with no gain term at all
    without = measure_channel(x, FS, name="output", unit="V", full_scale=4.0)
    with_gain = benchfit.measure(_capture(x, (0.003,))).channels[0]
    assert with_gain.extra["gain_u_rel"] == 0.003 and without.extra["gain_u_rel"] is None
    # the budget shows the two rows: noise (Type A) and gain (Type B), combined as below
    rows = {r.name: r for r in with_gain.budget["vrms"].contributions}
    assert set(rows) == {"noise", "gain"} and rows["gain"].type == "B"
    assert with_gain.budget["vrms"].u == pytest.approx(with_gain.extra["vrms_u"], rel=1e-12)
    for name in LEVELS:
        # the values themselves do not move: the same samples, the same arithmetic
        assert _value(with_gain, name) == _value(without, name)
        u_noise = without.extra[f"{name}_u"]
        expected = math.sqrt(u_noise ** 2 + (abs(_value(without, name)) * 0.003) ** 2)
        # GUM (JCGM 100:2008) 5.1.2, uncorrelated inputs: u² = u_noise² + (value·u_rel)²;
        # rel=1e-12: rounding only (both sides compute the same sum)
        assert with_gain.extra[f"{name}_u"] == pytest.approx(expected, rel=1e-12), name
    # at 1.3 V rms the gain term dominates: 0.3 % of 1.31 V ≈ 3.9 mV against ≈ 3 µV of noise
    assert with_gain.extra["vrms_u"] == pytest.approx(0.003 * with_gain.vrms, rel=1e-3)
    assert with_gain.extra["vrms_u"] > 100 * without.extra["vrms_u"]


def test_ratios_are_unaffected_by_the_gain_uncertainty():
    t = np.arange(int(FS)) / FS
    rng = np.random.default_rng(555)
    # a 555-style drive square at the divider (0.02 V low, 2.14 V high, 52 % duty) and its filtered sine
    square = np.where(np.mod(50.03 * t, 1.0) < 0.52, 2.14, 0.02) + 1e-3 * rng.standard_normal(t.size)
    x = np.stack([square, _hum_sine(seed=7)])
    a = benchfit.measure(_capture(x, None, gains=(4.0, 4.0), units=("V", "V")))
    b = benchfit.measure(_capture(x, (0.003, 0.005), gains=(4.0, 4.0), units=("V", "V")))
    for ca, cb in zip(a.channels, b.channels):
        for key in ("frequency_hz", "frequency_u_hz", "duty_cycle_pct", "rise_time_s", "fall_time_s",
                    "thd_pct", "thd_n_pct", "sinad_db"):
            assert getattr(ca, key) == getattr(cb, key), key  # exactly: the gain never enters them
        assert ca.extra.get("thd_u_pct") == cb.extra.get("thd_u_pct")
        assert ca.extra.get("duty_cycle_u_pct") == cb.extra.get("duty_cycle_u_pct")
    assert b.channels[0].duty_cycle_pct is not None  # the square was measured as a pulse wave
    # each channel got its own gain uncertainty
    assert [c.extra["gain_u_rel"] for c in b.channels] == [0.003, 0.005]
    assert b.channels[0].extra["vpp_u"] == pytest.approx(
        math.hypot(a.channels[0].extra["vpp_u_noise"], 0.003 * a.channels[0].vpp), rel=1e-12)  # GUM 5.1.2


def test_measure_channels_picks_the_right_gain_uncertainty():
    x = np.stack([_hum_sine(seed=1), _hum_sine(seed=2)])
    m = benchfit.measure(_capture(x, (0.003, 0.02), gains=(4.0, 4.0), units=("V", "V")), channels=["ch2"])
    assert m.channels[0].name == "ch2" and m.channels[0].extra["gain_u_rel"] == 0.02


def test_unknown_gain_uncertainty_gets_the_stated_default_and_says_so():
    # issue 11: a gain without a stated uncertainty is not exact; the stated default
    # (rectangular ±1 %, benchfit.uncertainty, "from memory") enters the budget, and a note says so
    x = _hum_sine()
    ch = benchfit.measure(_capture(x, None)).channels[0]
    notes = [w for w in ch.warnings if "gain uncertainty not stated" in w]
    assert len(notes) == 1 and "--rms-u" in notes[0] and "\n" not in notes[0]
    assert ch.extra["gain_u_rel"] == DEFAULT_GAIN_U_REL
    gain_row = [r for r in ch.budget["vrms"].contributions if r.name == "gain"][0]
    assert gain_row.distribution == "rectangular" and "default" in gain_row.source
    # at 1.3 V rms the default gain term dominates the µV of noise: u ≈ 0.577 % of the reading
    assert ch.extra["vrms_u"] == pytest.approx(DEFAULT_GAIN_U_REL * ch.vrms, rel=1e-3)
    # volts without a sound-card gain (a scope's CSV) and FS have nothing to warn about
    for cap in (Capture(x, FS, ("output",), ("V",)), Capture(x / 4.0, FS, ("output",), ("FS",))):
        c = benchfit.measure(cap).channels[0]
        assert not any("gain uncertainty" in w for w in c.warnings) and c.extra["gain_u_rel"] is None


def test_a_channel_without_a_tone_still_records_the_gain_uncertainty():
    rng = np.random.default_rng(3)
    ch = benchfit.measure(_capture(1e-3 * rng.standard_normal(4800), (0.003,))).channels[0]
    assert ch.frequency_hz is None and ch.extra["gain_u_rel"] == 0.003


@pytest.mark.parametrize("kind, sigma", [("sine", 1e-3), ("sine", 1e-2), ("square", 1e-2)])
def test_vpp_noise_uncertainty_matches_monte_carlo(kind, sigma):
    """Independent check by Monte Carlo propagation (JCGM 101:2008, GUM Supplement 1):
    the spread of vpp over 400 seeded noise draws against the predicted standard uncertainty."""
    rng = np.random.default_rng(1241)
    t = np.arange(9600) / FS
    s = (np.sin(2 * np.pi * 50.3 * t + 0.2) if kind == "sine"
         else np.where(np.mod(50.3 * t, 1.0) < 0.52, 1.0, 0.0))
    vpps, preds = [], []
    for k in range(400):
        lv = signal_levels(s + sigma * rng.standard_normal(t.size), FS, 50.3)
        vpps.append(lv.vpp)
        if k < 10:
            preds.append(vpp_noise_u(s, sigma, lv.vpp_low, lv.vpp_high))
    spread = float(np.std(vpps, ddof=1))
    # 15 %: the std of 400 draws has a relative standard error of 1/√(2·399) ≈ 3.5 % (4σ ≈ 14 %),
    # and the linearisation of a quantile is itself approximate
    assert float(np.mean(preds)) == pytest.approx(spread, rel=0.15)


def test_percentile_noise_limits():
    s = np.sin(2 * np.pi * np.arange(4800) / 960)
    assert percentile_noise_u(s, 0.0, 0.99) == 0.0          # no noise, no scatter
    assert percentile_noise_u(s, 1e-3, 50.0) == 1e-3        # no sample near the level: capped at σ
    codes = np.round(s * 32767) / 32767
    assert quantisation_step(codes) == pytest.approx(1 / 32767, rel=1e-9)  # one 16-bit code step
    assert quantisation_step(np.ones(5)) == 0.0


def _smallest_gap(x: np.ndarray) -> float:
    """The definition itself: the smallest positive difference of the sorted distinct values (numpy.unique)."""
    return float(np.min(np.diff(np.unique(x[: 1 << 16]))))


def test_quantisation_step_is_exact_on_a_grid_and_a_negligible_bound_off_it():
    rng = np.random.default_rng(21)
    s = 0.7 * np.sin(2 * np.pi * np.arange(60000) / 960.37) + 1e-3 * rng.standard_normal(60000)
    # 16-bit codes with a gain and an offset: the probe's grid holds every sample, q exact
    codes = (np.round(s * 32768) / 32768) * 4.0 + 0.25
    assert quantisation_step(codes) == pytest.approx(_smallest_gap(codes), rel=1e-9)
    # a probe that shows only every other code (its first 4096 samples on even codes): the grid check
    # fails and the whole stretch is sorted, so the one-code step is still found exactly
    lsb = 1 / 128
    coarse = np.round(s / lsb) * lsb
    coarse[:4096] = np.round(s[:4096] / (2 * lsb)) * 2 * lsb
    assert quantisation_step(coarse) == pytest.approx(lsb, rel=1e-9) == _smallest_gap(coarse)
    # unquantised data: an upper bound of the smallest gap, itself below 1e-6 of the span (a resolution
    # that fine is far below any capture's noise: 24-bit codes are 1.2e-7 of full scale, from memory)
    bound = quantisation_step(s)
    assert _smallest_gap(s) <= bound <= 1e-6 * float(np.ptp(s[: 1 << 16]))


def test_quantised_square_keeps_its_resolution():
    """An 8-bit-scope trace of the 555 output (noise 0.3 LSB, so the flat tops hold two or
    three codes): its vpp_u is at least the code step's q/√6 (rectangular ±q/2 at each end,
    GUM JCGM 100:2008 4.3.7, added in quadrature)."""
    rng = np.random.default_rng(8)
    t = np.arange(24000) / 24000.0
    lsb = 0.04
    clean = np.where(np.mod(50.01 * t, 1.0) < 0.527, 10.6, 0.08)
    x = np.round((clean + 0.3 * lsb * rng.standard_normal(t.size)) / lsb) * lsb
    ch = benchfit.measure(Capture(x, 24000.0, ("timer",), ("V",))).channels[0]
    assert quantisation_step(x) == pytest.approx(lsb, rel=1e-9)  # rel: float rounding of the codes
    # upper bound 1.1×: with ~12000 samples on each flat top the noise moves a percentile far
    # less than one code
    assert lsb / math.sqrt(6) * (1 - 1e-9) <= ch.extra["vpp_u"] <= 1.1 * lsb / math.sqrt(6)
    # a noise-free two-level trace shows no code grid: its two levels are not a resolution
    assert quantisation_step(np.round(clean / lsb) * lsb) == 0.0


def test_sample_capture_hc01_carries_its_calibration():
    ch = benchfit.measure(ROOT / "sample_captures" / "hc01_output.flac").channels[0]
    assert ch.unit == "V" and ch.extra["gain_u_rel"] == 0.003
    assert not any("gain uncertainty" in w for w in ch.warnings)
    for name in LEVELS:
        value = abs(_value(ch, name))
        # the gain term is a floor; the noise adds at most a little (σ ≈ 0.8 mV at the card)
        assert value * 0.003 <= ch.extra[f"{name}_u"] <= value * 0.003 + 2e-3, name
