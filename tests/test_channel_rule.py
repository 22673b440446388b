"""One channel-selection rule for load, measure, fit_lowpass, fit_ringdown and Capture.select.

The rule is benchfit's own (benchfit.capture.capture.channel_keys / resolve_channel): ints
count from 0 as Python does, text is a name or a 1-based channel number as a scope's CH1/CH2
and the command line use. Common practice, no source.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import benchfit
from benchfit.capture.capture import Capture, channel_keys, resolve_channel
from benchfit.errors import CaptureError

FS = 48_000.0


def _capture(source: str | None = None) -> Capture:
    rng = np.random.default_rng(15)
    t = np.arange(int(0.25 * FS)) / FS
    drive = np.where(np.mod(50.0 * t, 1.0) < 0.5, 0.5, -0.5) + rng.normal(0, 1e-3, t.size)
    out = 0.3 * np.cos(2 * math.pi * 50.0 * t) + rng.normal(0, 1e-3, t.size)
    return Capture(np.vstack([drive, out]), FS, ("drive", "output"), units=("V", "V"), source=source)


@pytest.mark.parametrize("spec,names", [
    ("output", ["output"]),            # a name is never split into characters
    ("OUTPUT", ["output"]),            # names are case-insensitive
    ("drive,output", ["drive", "output"]),
    (" output , drive ", ["output", "drive"]),
    (1, ["output"]),                   # ints count from 0
    (np.int64(0), ["drive"]),
    ("2", ["output"]),                 # a number as text counts from 1
    (["output", 0], ["output", "drive"]),
    (("2", "1"), ["output", "drive"]),
])
def test_load_measure_and_select_read_a_selection_alike(tmp_path, spec, names):
    cap = _capture()
    assert list(cap.select(spec).channel_names) == names
    assert [c.name for c in benchfit.measure(cap, channels=spec).channels] == names
    path = tmp_path / "two.csv"
    path.write_text("t,drive,output\n" + "\n".join(
        f"{i / FS:.9f},{a:.6f},{b:.6f}" for i, (a, b) in enumerate(cap.samples.T[:4800])) + "\n")
    assert list(benchfit.load(path, channels=spec).channel_names) == names


def test_a_name_matching_a_number_wins_over_the_number():
    assert resolve_channel("2", ["2", "x"]) == 0
    assert resolve_channel("2", ["a", "b"]) == 1


@pytest.mark.parametrize("spec,needle", [
    ("nosuch", "no channel 'nosuch' — choose one of drive, output or a number 1…2"),
    (2, "no channel 2 — it has 2 (0…1)"),
    ("3", "no channel '3'"),
    ("", "channels: '' selects nothing"),
    ([], "channels: [] selects nothing"),
    (True, "not a channel"),
    (2.0, "not a channel"),
])
def test_a_bad_selection_is_one_clear_error(spec, needle):
    with pytest.raises(CaptureError, match=None) as info:
        _capture().select(spec)
    assert needle in str(info.value)


def test_measure_with_an_empty_list_still_measures_every_channel():
    assert len(benchfit.measure(_capture(), channels=[]).channels) == 2


def test_the_fits_pick_channels_by_the_same_rule():
    """fit_lowpass(drive=, response=) and fit_ringdown(channel=) take one key each, same rule."""
    from benchfit.fit.lowpass import pick_channels

    cap = _capture()
    assert pick_channels(cap, "DRIVE", "output") == (0, 1)
    assert pick_channels(cap, 0, "2") == (0, 1)
    assert pick_channels(cap, "1", 1) == (0, 1)
    with pytest.raises(benchfit.BenchfitError, match="no channel 'nosuch'"):
        pick_channels(cap, "nosuch", None)


def test_measurement_channel_uses_the_rule_and_raises_key_error():
    m = benchfit.measure(_capture())
    assert m.channel("Output") is m.channel(1) is m.channel("2")
    with pytest.raises(KeyError, match="no channel 'x'"):
        m.channel("x")


def test_channel_keys_names_the_parameter():
    with pytest.raises(CaptureError, match="^drive: "):
        channel_keys("", param="drive")
