"""Notebook use: readable HTML summaries and DataFrames of the result objects."""

import numpy as np

import benchfit
from benchfit.capture.capture import Capture


def _capture():
    fs = 48_000.0
    t = np.arange(24_000) / fs
    y = 1.2 * np.cos(2 * np.pi * 50.3 * t) + 0.05 * np.cos(2 * np.pi * 150.9 * t)
    return Capture(y, fs, channel_names=("output",), units=("V",), source="<in memory>")


def test_measurement_repr_html_and_dataframe():
    m = benchfit.measure(_capture())
    html = m._repr_html_()
    assert "<table>" in html and "output" in html and "Hz" in html
    df = m.to_dataframe()
    assert list(df.index) == ["output"]
    assert abs(df.loc["output", "frequency_hz"] - 50.3) < 1e-6  # noise-free tone, exact fit


def test_fit_result_repr_html_and_dataframe():
    from benchfit.fit.result import DerivedValue, FitParameter, FitQuality, FitResult

    r = FitResult(file="x.wav", model="lc-lowpass", method="two-channel",
                  parameters={"L": FitParameter(0.3, None, True, "H"), "C": FitParameter(33e-6, 1e-8, False, "F"),
                              "Rs": FitParameter(24.0, None, False, "ohm")},
                  derived={"resonant_frequency_hz": DerivedValue(50.5, 0.01)}, correlations={},
                  quality=FitQuality(0.01, 0.999, 60), warnings=("Rs: not determined",))
    html = r._repr_html_()
    assert "not determined" in html and "fixed" in html and "<li>" in html
    df = r.to_dataframe()
    assert df.loc["C", "stderr"] == 1e-8 and bool(df.loc["L", "fixed"])
    assert df.loc["resonant_frequency_hz", "unit"] == "Hz" and "50.5 Hz" in html


def test_every_derived_value_carries_its_unit_into_the_log():
    from benchfit.fit.result import DERIVED_UNITS, DerivedValue, FitQuality, FitResult
    from benchfit.log.records import _fit_rows

    names = ("resonant_frequency_hz", "natural_frequency_hz", "damped_frequency_hz", "decay_rate_per_s",
             "q_factor", "series_loss_ohm", "total_loss_ohm", "drive_asymmetry_ohm")
    assert set(names) == set(DERIVED_UNITS)
    r = FitResult(file="x.wav", model="lc-lowpass", method="one-channel", parameters={},
                  derived={n: DerivedValue(1.0, 0.1) for n in names}, correlations={},
                  quality=FitQuality(0.01, 0.999, 60), warnings=())
    units = {row["quantity"]: row["unit"] for row in _fit_rows(r.to_dict(), "fit")}
    assert units == {"resonant_frequency_hz": "Hz", "natural_frequency_hz": "Hz", "damped_frequency_hz": "Hz",
                     "decay_rate_per_s": "1/s", "q_factor": "", "series_loss_ohm": "ohm", "total_loss_ohm": "ohm",
                     "drive_asymmetry_ohm": "ohm"}


def test_capture_repr_html_escapes_names():
    c = Capture(np.zeros(10), 10.0, channel_names=("<x>",))
    assert "&lt;x&gt;" in c._repr_html_()
