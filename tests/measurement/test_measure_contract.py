"""The JSON contract of benchfit.measure (DESIGN.md, "JSON contracts"): keys and types exactly."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from benchfit.capture.capture import Capture, InputCalibration
from benchfit.errors import CaptureError
from benchfit.measurement.summary import measure

from _measurement_signals import FS, times, tone, trapezoid

TOP_KEYS = {"file", "sample_rate_hz", "duration_s", "channels"}
CHANNEL_TYPES = {
    "name": (str,), "unit": (str,),
    "frequency_hz": (float, type(None)), "frequency_u_hz": (float, type(None)),
    "amplitude": (float, type(None)),
    "vdc": (float,), "vrms": (float,), "vpp": (float,),
    "duty_cycle_pct": (float, type(None)), "rise_time_s": (float, type(None)),
    "fall_time_s": (float, type(None)),
    "thd_pct": (float, type(None)), "thd_n_pct": (float, type(None)), "sinad_db": (float, type(None)),
    "harmonics": (list,), "clipped": (bool,), "warnings": (list,),
    # added to the contract (backward compatible): the standard uncertainties (k = 1)
    "amplitude_u": (float, type(None)), "vdc_u": (float, type(None)), "vrms_u": (float, type(None)),
    "vpp_u": (float, type(None)), "thd_u_pct": (float, type(None)), "duty_cycle_u_pct": (float, type(None)),
    "rise_time_u_s": (float, type(None)), "fall_time_u_s": (float, type(None)),
    "budget": (dict,),  # added by issue 11: GUM budget per quantity (benchfit.uncertainty.Budget.to_dict)
}
HARMONIC_TYPES = {"order": (int,), "frequency_hz": (float,), "amplitude": (float,), "phase_deg": (float,),
                  "amplitude_u": (float, type(None))}


def _hum_check_capture():
    # HC-05 as recorded: drive (555-style square, 12 V) and output (50 Hz sine, 4 % third
    # harmonic), plus a silent third channel
    t = times(0.5)
    rng = np.random.default_rng(17)
    drive = trapezoid(t, 50.04, 0.52, 3e-5, 0.1, 11.6) + rng.normal(0, 5e-3, t.size)
    out = tone(t, 50.04, 1.8, 0.2, 2e-3, rng) + 0.072 * np.cos(2 * math.pi * 150.12 * t + 1.0)
    return Capture(np.vstack([drive, out, np.zeros(t.size)]), FS, ("drive", "output", "spare"),
                   ("V", "V", "V"), source="HC-05_as-found.wav", sha256="ab" * 32,
                   calibration=InputCalibration(timebase_ppm=3.0, timebase_u_ppm=2.0))


def test_contract_keys_and_types_exactly():
    d = measure(_hum_check_capture()).to_dict()
    assert set(d) == TOP_KEYS
    assert d["file"] == "HC-05_as-found.wav"
    assert isinstance(d["sample_rate_hz"], float) and isinstance(d["duration_s"], float)
    assert d["duration_s"] == pytest.approx(0.5)  # 24 000 samples / 48 kHz, float rounding only
    assert [c["name"] for c in d["channels"]] == ["drive", "output", "spare"]
    for c in d["channels"]:
        assert set(c) == set(CHANNEL_TYPES), set(c) ^ set(CHANNEL_TYPES)
        for key, types in CHANNEL_TYPES.items():
            assert type(c[key]) in types, (c["name"], key, type(c[key]))
        assert c["unit"] in ("V", "FS")
        for h in c["harmonics"]:
            assert set(h) == set(HARMONIC_TYPES)
            for key, typ in HARMONIC_TYPES.items():
                assert type(h[key]) in typ, (key, type(h[key]))
        assert all(isinstance(w, str) for w in c["warnings"])
    # strict JSON: no NaN or infinity anywhere (the CLI prints with allow_nan=False)
    json.dumps(d, allow_nan=False)


def test_contract_values_of_the_hum_check_capture():
    m = measure(_hum_check_capture())
    drive, out, spare = m.channels
    assert drive.duty_cycle_pct == pytest.approx(52.0, abs=0.05)  # 5 mV noise on 11.5 V edges
    assert drive.rise_time_s is not None and out.duty_cycle_pct is None
    assert out.frequency_hz == pytest.approx(50.04, abs=5 * out.frequency_u_hz)  # 5 u: noise, never by chance
    assert out.thd_pct == pytest.approx(4.0, abs=0.01)  # 0.072/1.8; noise floor ~1e-3 %
    assert out.extra["timebase_u_ppm"] == 2.0
    assert spare.frequency_hz is None and spare.to_dict()["harmonics"] == []
    # extra carries the uncertainties the report uses (U = 2u) and the analysis settings
    for key in ("amplitude_u", "vrms_u", "thd_u_pct", "harmonics_h", "n_periods", "timebase_ppm"):
        assert key in out.extra
    for key in ("duty_cycle_u_pct", "overshoot_pct", "undershoot_pct", "state_low", "state_high",
                "coupling_tau_s"):
        assert key in drive.extra
    full = m.to_dict(full=True)
    json.dumps(full, allow_nan=False)


def test_channel_selection():
    m = measure(_hum_check_capture(), channels=["output"])
    assert [c.name for c in m.channels] == ["output"]
    m2 = measure(_hum_check_capture(), channels=[0])
    assert [c.name for c in m2.channels] == ["drive"]
    with pytest.raises(CaptureError, match="no channel"):
        measure(_hum_check_capture(), channels=["nonesuch"])
