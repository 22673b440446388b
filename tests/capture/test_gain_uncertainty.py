"""The gain's relative standard uncertainty (``gain_u_rel``) on its way from the sidecar to a Capture.

Sidecars here are written by the tests themselves (invented hum-check values); nothing is read
from outside the repository.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
import soundfile as sf

import benchfit
from benchfit.capture.capture import Capture, InputCalibration
from benchfit.capture.sidecar import read_sidecar, validate_sidecar, write_sidecar
from benchfit.errors import CaptureError

FS = 48000


def _sidecar(n_channels: int = 2, **cal) -> dict:
    names = ["drive", "output"][:n_channels]
    calibration = {"profile": "makerspace-laptop", "gain_v_per_fs": [4.0, 2.0][:n_channels],
                   "timebase_ppm": 38.0, "timebase_u_ppm": 0.5, "coupling_tau_s": None}
    calibration.update(cal)
    return {"benchfit_sidecar": 1, "channels": [{"name": n} for n in names], "sample_rate_hz": FS,
            "device": "line-in (USB audio adapter)", "start_utc": "2026-11-27T19:20:00Z",
            "calibration": calibration, "benchfit_version": "0.1.0", "unit": "HC-03"}


def _wav(path, n_channels: int = 2):
    t = np.arange(FS // 10) / FS
    data = np.stack([0.25 * np.sin(2 * np.pi * 50.0 * t + k) for k in range(n_channels)], axis=1)
    sf.write(str(path), data, FS, subtype="PCM_24")
    return path


def test_input_calibration_to_dict_writes_the_key_only_when_known():
    known = InputCalibration(profile="p", gain_v_per_fs=(4.0, 2.0), gain_u_rel=(0.003, 0.004))
    assert known.to_dict()["gain_u_rel"] == [0.003, 0.004]
    # not known: the five-key object older readers expect, unchanged
    assert "gain_u_rel" not in InputCalibration(profile="p", gain_v_per_fs=(4.0,)).to_dict()


def test_sidecar_round_trip_to_capture(tmp_path):
    wav = _wav(tmp_path / "hc03_asleft.wav")
    write_sidecar(wav, _sidecar(gain_u_rel=[0.003, 0.0045]))
    on_disk = json.loads(wav.with_suffix(".json").read_text(encoding="utf-8"))
    assert on_disk["calibration"]["gain_u_rel"] == [0.003, 0.0045]
    assert read_sidecar(wav)["calibration"]["gain_u_rel"] == [0.003, 0.0045]
    cap = benchfit.load(wav)
    assert cap.units == ("V", "V")
    assert cap.calibration.gain_u_rel == (0.003, 0.0045)
    assert cap.calibration.to_dict()["gain_u_rel"] == [0.003, 0.0045]
    assert cap.metadata["unit"] == "HC-03"
    # selecting channels keeps each channel's own uncertainty, in the new order
    out = cap.select(["output"])
    assert out.calibration.gain_v_per_fs == (2.0,) and out.calibration.gain_u_rel == (0.0045,)
    both = cap.select([1, 0])
    assert both.calibration.gain_u_rel == (0.0045, 0.003)


def test_old_sidecar_without_the_key_reads_as_not_known(tmp_path):
    wav = _wav(tmp_path / "hc03_asfound.wav")
    write_sidecar(wav, _sidecar())
    assert "gain_u_rel" not in read_sidecar(wav)["calibration"]
    cap = benchfit.load(wav)
    assert cap.units == ("V", "V") and cap.calibration.gain_u_rel is None
    # an explicit null is the same as a missing key
    assert "gain_u_rel" not in validate_sidecar(_sidecar(gain_u_rel=None), "x.json")["calibration"]


def test_select_without_gain_uncertainty_keeps_none():
    cap = Capture(np.zeros((2, 10)), FS, ("a", "b"), ("V", "V"),
                  calibration=InputCalibration(gain_v_per_fs=(1.0, 2.0)))
    assert cap.select(["b"]).calibration.gain_u_rel is None


@pytest.mark.parametrize("value, match", [
    (0.003, r"gain_u_rel must list one relative uncertainty per channel \(2\)"),
    ([0.003], r"gain_u_rel must list one relative uncertainty per channel \(2\)"),
    ([0.003, 0.003, 0.003], r"per channel \(2\)"),
    ([0.003, -0.001], r"gain_u_rel\[1\] must be a finite number ≥ 0"),
    ([math.nan, 0.003], r"gain_u_rel\[0\] must be a finite number ≥ 0"),
    ([math.inf, 0.003], r"gain_u_rel\[0\] must be a finite number ≥ 0"),
    (["0.3%", 0.003], r"gain_u_rel\[0\] must be a finite number ≥ 0"),
    ([True, 0.003], r"gain_u_rel\[0\] must be a finite number ≥ 0"),
    ([0.003, 3.0], r"gain_u_rel\[1\] = 3.0 is a relative uncertainty of 100 % or more"),
])
def test_bad_gain_u_rel_is_one_line_naming_the_key(value, match):
    with pytest.raises(CaptureError, match=match) as info:
        validate_sidecar(_sidecar(gain_u_rel=value), "hc03.json")
    msg = str(info.value)
    assert msg.startswith("hc03.json: ") and "\n" not in msg and " — " in msg


def test_gain_u_rel_without_a_gain_is_refused():
    with pytest.raises(CaptureError, match="gain_u_rel is given but gain_v_per_fs is null"):
        validate_sidecar(_sidecar(gain_v_per_fs=None, gain_u_rel=[0.003, 0.003]), "x.json")


def test_bad_sidecar_on_disk_stops_load_with_the_json_name(tmp_path):
    wav = _wav(tmp_path / "hc05.wav", n_channels=1)
    (tmp_path / "hc05.json").write_text(json.dumps(_sidecar(1, gain_u_rel=[-0.5])), encoding="utf-8")
    with pytest.raises(CaptureError, match=r"hc05\.json: calibration\.gain_u_rel\[0\]"):
        benchfit.load(wav)


def test_unit_key_must_be_text():
    assert validate_sidecar(_sidecar(), "x.json")["unit"] == "HC-03"
    bad = dict(_sidecar(), unit=3)
    with pytest.raises(CaptureError, match=r"x\.json: 'unit' must be a string, got 3"):
        validate_sidecar(bad, "x.json")
