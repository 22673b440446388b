"""Builders for report tests: captures, measurements and fits made in the test (seeded).

A plain module (not conftest.py) with a unique name, imported by the test files.
"""

from __future__ import annotations

import numpy as np

from benchfit.capture.capture import Capture, InputCalibration
from benchfit.fit.result import DerivedValue, FitCurves, FitParameter, FitQuality, FitResult
from benchfit.measurement.result import ChannelMeasurement, Harmonic, Measurement

FS = 48000.0


def make_capture(source="hc07_left.wav", f=50.02, vpk=1.8, seconds=0.5, seed=7, unit="V",
                 device="USB audio interface, line in"):
    """A one-channel 50 Hz capture with a little 3rd harmonic and seeded noise."""
    rng = np.random.default_rng(seed)
    t = np.arange(int(FS * seconds)) / FS
    x = vpk * np.sin(2 * np.pi * f * t) + 0.04 * vpk * np.sin(2 * np.pi * 3 * f * t)
    x = x + rng.normal(0.0, 1e-3, t.size)
    return Capture(x, FS, ("output",), (unit,), source=source, sha256="5e" * 32,
                   metadata={"device": device, "start_utc": "2026-12-01T17:00:00Z"},
                   calibration=InputCalibration(profile="bench-card-1", gain_v_per_fs=(2.0,),
                                                timebase_ppm=12.5, timebase_u_ppm=1.0))


def make_measurement(file="hc07_left.wav", f=50.02, f_u=0.004, vrms=1.2738, vrms_u=0.002,
                     thd=4.0, thd_u=0.02, unit="V"):
    """A Measurement as benchfit.measure would return it (values chosen by the test)."""
    amp = vrms * np.sqrt(2)
    ch = ChannelMeasurement(
        name="output", unit=unit, frequency_hz=f, frequency_u_hz=f_u, amplitude=amp, vdc=0.001,
        vrms=vrms, vpp=2 * amp, duty_cycle_pct=None, rise_time_s=None, fall_time_s=None,
        thd_pct=thd, thd_n_pct=thd + 0.1, sinad_db=27.9,
        harmonics=(Harmonic(1, f, amp, -90.0), Harmonic(2, 2 * f, 0.002, 12.0),
                   Harmonic(3, 3 * f, amp * thd / 100, 90.0)),
        warnings=("record holds 25 periods",),
        extra={"thd_u_pct": thd_u, "vrms_u": vrms_u, "n_harmonics": 10})
    return Measurement(file=file, sample_rate_hz=FS, duration_s=0.5, channels=(ch,), sha256="5e" * 32)


def make_fit(file="hc07_drive_output.csv", f0=49.6, f0_u=0.05):
    """A lc-lowpass FitResult with curves for the fit figure."""
    t = np.arange(800) / 8000.0
    data = np.sin(2 * np.pi * 50 * t)
    model = 0.99 * data
    return FitResult(
        file=file, model="lc-lowpass", method="two-channel",
        parameters={"L": FitParameter(0.3, 0.002, False, "H"), "C": FitParameter(34.3e-6, 0.2e-6, False, "F"),
                    "Rs": FitParameter(41.0, 1.5, False, "ohm"), "Resr": FitParameter(0.4, None, False, "ohm"),
                    "Rload": FitParameter(10e3, None, True, "ohm")},
        derived={"resonant_frequency_hz": DerivedValue(f0, f0_u), "q_factor": DerivedValue(2.2, 0.05),
                 "damped_frequency_hz": DerivedValue(48.9, 0.05), "decay_rate_per_s": DerivedValue(70.0, 2.0)},
        correlations={"C,Rs": 0.3}, quality=FitQuality(0.01, 0.9999, 800),
        warnings=("Resr is not determined by the data — fix it with --fix Resr=...",),
        curves=FitCurves(time_s=t, data=data, model=model, residual=data - model))
