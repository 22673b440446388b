"""The THD gate before the IEEE 181 pulse analysis keeps every two-level wave and drops sines."""

import numpy as np

from benchfit.measurement.summary import measure_channel


def _trapezoid(f, fs, n, duty, edge):
    """Levels 0/1, linear edges of ``edge`` periods (10–90 % = 0.8·edge), 50 % duty = ``duty``."""
    ph = np.mod(np.arange(n) / fs * f, 1.0)
    up = np.clip((ph + edge / 2) / edge, 0, 1)           # rising edge centred at phase 0
    down = np.clip((duty + edge / 2 - ph) / edge, 0, 1)  # falling edge centred at phase duty
    return np.minimum(up, down) + np.clip((ph - 1 + edge / 2) / edge, 0, 1)


def test_slow_trapezoid_is_still_analysed_as_two_level():
    # edges of 0.08 period each (the states still hold most samples, as IEEE 181 state levels
    # need): THD_F (H = 10) is well below a square's 43 % but above the 5 %
    # gate, since even a triangle (edges of half a period) has 12 % (REFERENCES §5)
    fs, f = 48_000.0, 50.3
    x = _trapezoid(f, fs, 48_000, 0.4, 0.08)
    ch = measure_channel(x, fs, unit="V")
    assert ch.thd_pct > 5.0
    assert ch.duty_cycle_pct is not None
    assert abs(ch.duty_cycle_pct - 40.0) < 0.05  # exact synthetic duty; edge interpolation error ≪ 0.05 %
    # rise time 10–90 % = 0.8 × 0.08 period (linear edge; IEEE 181 reference levels)
    assert abs(ch.rise_time_s - 0.8 * 0.08 / f) < 2 / fs


def test_clean_sine_skips_the_pulse_analysis():
    fs = 48_000.0
    t = np.arange(48_000) / fs
    ch = measure_channel(np.cos(2 * np.pi * 50.3 * t) + 0.02 * np.cos(2 * np.pi * 150.9 * t), fs, unit="V")
    assert ch.duty_cycle_pct is None and ch.rise_time_s is None
    assert ch.extra["two_level"] is False
