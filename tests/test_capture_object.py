"""The Capture object: shape normalisation, immutability, channel selection."""

import numpy as np
import pytest

from benchfit.capture.capture import Capture, InputCalibration
from benchfit.errors import CaptureError


def test_shapes_and_defaults():
    c = Capture(np.zeros(100), 1000.0)
    assert c.samples.shape == (1, 100)
    assert c.channel_names == ("ch1",) and c.units == ("FS",)
    assert c.duration_s == pytest.approx(0.1)
    assert c.time[-1] == pytest.approx(0.099)


def test_immutable_samples():
    c = Capture(np.ones((2, 10)), 10.0)
    with pytest.raises(ValueError):
        c.samples[0, 0] = 3.0


@pytest.mark.parametrize("bad,match", [
    (np.ones((2, 2, 2)), "shape"), (np.array([1.0]), "at least 2"),
    (np.array([1.0, np.nan, 2.0]), "NaN"),
])
def test_bad_samples(bad, match):
    with pytest.raises(CaptureError, match=match):
        Capture(bad, 100.0, source="x.csv")


def test_bad_rate_and_names():
    with pytest.raises(CaptureError, match="sample rate"):
        Capture(np.ones(4), 0.0)
    with pytest.raises(CaptureError, match="2 channels but 1 names"):
        Capture(np.ones((2, 4)), 1.0, channel_names=("a",))


def test_channel_selection_by_name_number_and_index():
    c = Capture(np.vstack([np.zeros(5), np.ones(5)]), 10.0, channel_names=("drive", "output"),
                units=("V", "V"), calibration=InputCalibration(gain_v_per_fs=(2.0, 3.0)))
    assert c.channel_index("OUTPUT") == 1
    assert c.channel_index("2") == 1
    assert c.channel_index(0) == 0
    sub = c.select(["output"])
    assert sub.channel_names == ("output",) and sub.calibration.gain_v_per_fs == (3.0,)
    with pytest.raises(CaptureError, match="no channel 'x'"):
        c.channel_index("x")


def test_slice_and_dataframe_and_html():
    c = Capture(np.arange(10.0), 10.0, channel_names=("<b>x</b>",), units=("V",))
    s = c.slice_time(0.2, 0.5)
    assert s.n_samples == 3 and s.t0 == pytest.approx(0.2)
    df = c.to_dataframe()
    assert list(df.columns) == ["time_s", "<b>x</b>_V"]
    assert "&lt;b&gt;" in c._repr_html_()
