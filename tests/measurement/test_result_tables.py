"""Level uncertainties are first-class results, and the harmonic tables come as a DataFrame.

Checks of benchfit's own interface (the values themselves are checked against their physics in
test_measure_levels.py and test_measure_gain_uncertainty.py); common practice, no source.
"""

from __future__ import annotations

import json
import math

import numpy as np

import benchfit
from benchfit.capture.capture import Capture
from benchfit.measurement.result import UNCERTAINTY_FIELDS

FS = 48_000.0


def _measurement():
    rng = np.random.default_rng(1501)
    t = np.arange(int(0.5 * FS)) / FS
    square = np.where(np.mod(50.0 * t + 0.1, 1.0) < 0.5, 0.5, -0.5) + rng.normal(0, 1e-3, t.size)
    sine = 0.3 * np.cos(2 * math.pi * 50.0 * t) + 0.01 * np.cos(6 * math.pi * 50.0 * t) + rng.normal(0, 1e-3, t.size)
    return benchfit.measure(Capture(np.vstack([square, sine]), FS, ("drive", "output"), units=("V", "V")), harmonics=5)


def test_uncertainties_are_fields_and_json_keys():
    m = _measurement()
    sq, sine = m.channels
    for ch in m.channels:
        d = ch.to_dict()
        for name in ("amplitude_u", "vdc_u", "vrms_u", "vpp_u", "thd_u_pct"):
            assert getattr(ch, name) is not None and getattr(ch, name) > 0, (ch.name, name)
            assert getattr(ch, name) == ch.extra[name]  # the old place still holds them
            assert d[name] == getattr(ch, name)
    # pulse parameters exist for the two-level wave only
    assert sq.duty_cycle_u_pct is not None and sq.rise_time_u_s is not None and sq.fall_time_u_s is not None
    assert sine.duty_cycle_u_pct is None and sine.to_dict()["duty_cycle_u_pct"] is None
    # the JSON contract keeps every key it had (DESIGN.md) and adds the uncertainties and the
    # GUM budget of each quantity
    old_keys = {"name", "unit", "frequency_hz", "frequency_u_hz", "amplitude", "vdc", "vrms", "vpp",
                "duty_cycle_pct", "rise_time_s", "fall_time_s", "thd_pct", "thd_n_pct", "sinad_db",
                "harmonics", "clipped", "warnings"}
    d = json.loads(json.dumps(m.to_dict()))
    assert set(d["channels"][0]) == old_keys | set(UNCERTAINTY_FIELDS) | {"budget"}
    assert {"order", "frequency_hz", "amplitude", "phase_deg"} <= set(d["channels"][0]["harmonics"][0])


def test_dataframe_has_uncertainty_columns_with_nan_for_missing():
    df = _measurement().to_dataframe()
    for name in UNCERTAINTY_FIELDS:
        assert df[name].dtype == np.float64, name
    assert df.loc["drive", "vrms_u"] > 0
    assert math.isnan(df.loc["output", "duty_cycle_pct"]) and math.isnan(df.loc["output", "duty_cycle_u_pct"])
    assert df.loc["drive", "duty_cycle_u_pct"] > 0


def test_harmonics_dataframe_one_row_per_channel_and_order():
    m = _measurement()
    hd = m.harmonics_dataframe()
    assert list(hd.index.names) == ["channel", "order"]
    assert len(hd) == sum(len(c.harmonics) for c in m.channels)
    sine = m.channel("output")
    for h in sine.harmonics:
        row = hd.loc[("output", h.order)]
        assert row["amplitude"] == h.amplitude and row["frequency_hz"] == h.frequency_hz
        assert row["unit"] == "V"
    # the third harmonic of the sine is the 10 mV that was put in (1 mV noise, 0.5 s: u ≈ 9 µV)
    assert abs(hd.loc[("output", 3), "amplitude"] - 0.01) < 5 * max(hd.loc[("output", 3), "amplitude_u"], 1e-5)


def test_harmonics_dataframe_of_no_tables_is_empty_with_the_columns():
    m = benchfit.measure(Capture(np.zeros(4800), FS, ("silent",)))
    hd = m.harmonics_dataframe()
    assert hd.empty and {"frequency_hz", "amplitude", "amplitude_u", "phase_deg"} <= set(hd.columns)
