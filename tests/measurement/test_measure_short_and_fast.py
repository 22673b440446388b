"""Records too short for one period, and waves too fast for a pulse analysis, are flagged, not guessed.

Both signals are exact sines generated here (seeded noise where noise is added); the expected
behaviour follows from the definitions: a frequency needs at least one whole period in the record
(common practice, no source), and telling a two-level wave from a sine needs harmonic 3 below
Nyquist, i.e. at least 6 samples a period (Nyquist–Shannon: order k needs k·f < fs/2).
"""

from __future__ import annotations

import numpy as np
import pytest

from benchfit.measurement.summary import measure_channel

FS = 48000.0


@pytest.mark.parametrize("f, seconds", [(0.1, 1.0), (0.5, 1.0), (20.0, 0.03)])
def test_less_than_one_period_gives_no_frequency(f, seconds):
    """A 0.1 Hz sine in 1 s used to be reported as 1.99 Hz with "only 2 periods recorded"."""
    t = np.arange(int(FS * seconds)) / FS
    x = 0.5 * np.sin(2 * np.pi * f * t + 0.3) + 1e-4 * np.random.default_rng(5).standard_normal(t.size)
    m = measure_channel(x, FS)
    assert m.frequency_hz is None and m.thd_pct is None and m.duty_cycle_pct is None
    (w,) = m.warnings
    assert "holds less than one period" in w and "record at least 3 periods" in w
    assert "check the connection" not in w  # the wiring is fine, the record is short
    assert m.vrms is not None  # the levels are still given


@pytest.mark.parametrize("periods", [1.5, 2.5, 4.0])
def test_a_period_or_more_is_still_measured(periods):
    f = 50.0
    t = np.arange(int(FS * periods / f)) / FS
    x = 0.5 * np.sin(2 * np.pi * f * t + 0.3) + 1e-4 * np.random.default_rng(6).standard_normal(t.size)
    m = measure_channel(x, FS)
    # the fit's own uncertainty bounds the error; 5 u allows for the short record's non-white residual
    assert m.frequency_hz == pytest.approx(f, abs=5 * m.frequency_u_hz + 1e-9)


@pytest.mark.parametrize("phase", [0.0, np.pi / 4, 1.0])
def test_a_sine_at_a_quarter_of_the_sample_rate_is_not_a_pulse(phase):
    """At fs/4 a sine samples as [0, a, 0, -a] or [a, a, -a, -a]: it used to get a 75 % or 50 % duty."""
    t = np.arange(24000) / FS
    m = measure_channel(0.5 * np.sin(2 * np.pi * FS / 4 * t + phase), FS)
    assert m.frequency_hz == pytest.approx(FS / 4, rel=1e-9)
    assert m.duty_cycle_pct is None and m.rise_time_s is None and m.fall_time_s is None
    assert any("4 samples a period are too few to tell a pulse from a sine" in w for w in m.warnings)


def test_a_square_with_enough_samples_a_period_keeps_its_duty():
    t = np.arange(24000) / FS
    f = FS / 64  # 64 samples a period
    x = np.where((t * f) % 1 < 0.3, 0.8, -0.8)
    m = measure_channel(x, FS)
    assert m.duty_cycle_pct == pytest.approx(30.0, abs=100 / 64)  # one sample of 64 in the period


def test_missing_duty_and_edges_say_why():
    """A square smoothed over 1/6 of its period (slow edges) has no two-level histogram (IEEE 181-2011
    5.2: state levels from the histogram modes); the result says so instead of dropping the values."""
    t = np.arange(24000) / FS
    square = np.where((t * 50) % 1 < 0.5, 0.8, -0.8)
    slow = np.convolve(square, np.ones(160) / 160, mode="same")  # 3.3 ms ramps in a 20 ms period
    m = measure_channel(slow, FS)
    assert m.duty_cycle_pct is None and m.rise_time_s is None
    assert m.extra["pulse_not_given"].startswith("not a two-level wave: ")
    assert "75 % are needed" in m.extra["pulse_not_given"]
    fast = measure_channel(square, FS)
    assert fast.duty_cycle_pct is not None and "pulse_not_given" not in fast.extra


def test_one_quantisation_step_is_not_an_overshoot():
    """An 8-bit scope trace (step = span/255) whose first sample after each rising edge sits one code
    above the high state: that is the grid, not a ring — overshoot 0; two codes still count."""
    t = np.arange(24000) / FS
    square = np.where((t * 50) % 1 < 0.5, 1.0, -1.0)
    step = 2.0 / 255
    rising = np.flatnonzero(np.diff(square) > 0) + 1
    low = square < 0
    dither = np.random.default_rng(8).integers(-1, 2, int(low.sum())) * step  # ±1 code on the low state
    for codes, expect_zero in ((1, True), (3, False)):
        x = square.copy()
        x[low] += dither  # the code grid shows in the record (quantisation_step finds it)
        x[rising] += codes * step
        m = measure_channel(x, FS)
        assert (m.extra["overshoot_pct"] == 0.0) == expect_zero, m.extra["overshoot_pct"]
        if not expect_zero:  # 3 codes of the 2 V amplitude: 3 · (2/255) / 2 = 1.18 %
            assert m.extra["overshoot_pct"] == pytest.approx(100 * 3 * step / 2.0, rel=0.05)


def test_harmonics_above_h_are_not_called_low_snr():
    """A drooped square (AC coupling τ = 10 ms, scipy.signal.bilinear of s·τ/(1 + s·τ)) analysed with
    H = 3: the residual is the square's harmonics 4…, not noise (the seeded noise is 80 dB down) —
    the warning says so; a sine buried in noise still gets the low-SNR warning."""
    import scipy.signal as ss

    t = np.arange(48000) / FS
    rng = np.random.default_rng(3)
    square = np.where((t * 50) % 1 < 0.5, 0.8, -0.8)
    b, a = ss.bilinear([0.01, 0.0], [0.01, 1.0], FS)
    m = measure_channel(ss.lfilter(b, a, square) + 1e-4 * rng.standard_normal(t.size), FS, harmonics=3)
    assert not any(w.startswith("low signal-to-noise") for w in m.warnings)
    assert any(w.startswith("harmonics above H = 3 carry most of what the fit leaves") for w in m.warnings)
    noisy = measure_channel(0.002 * np.sin(2 * np.pi * 50 * t) + 0.01 * rng.standard_normal(t.size), FS)
    assert any(w.startswith("low signal-to-noise ratio") for w in noisy.warnings)


def test_pulse_analysis_can_be_forced_on_slow_edges():
    """A square through a 400-sample moving average (8.33 ms linear ramps): forced, the 10–90 % rise
    is 0.8 × 8.33 ms = 6.67 ms (IEEE 181 reference levels on a linear ramp) and the duty 50 %."""
    t = np.arange(24000) / FS
    square = np.where((t * 50) % 1 < 0.5, 0.8, -0.8)
    slow = np.convolve(square, np.ones(400) / 400, mode="same")
    plain = measure_channel(slow, FS)
    assert plain.duty_cycle_pct is None and "force_pulse=True gives them anyway" in plain.extra["pulse_not_given"]
    forced = measure_channel(slow, FS, force_pulse=True)
    assert forced.rise_time_s == pytest.approx(0.8 * 400 / FS, rel=0.01)
    assert forced.duty_cycle_pct == pytest.approx(50.0, abs=0.1)
    assert any(w.startswith("pulse analysis forced") for w in forced.warnings)
    fs4 = measure_channel(0.5 * np.sin(2 * np.pi * FS / 4 * t), FS, force_pulse=True)
    assert fs4.duty_cycle_pct is None  # still never below 6 samples a period
