"""Sidecar JSON: schema validation, atomic write, refusal to overwrite."""

from __future__ import annotations

import copy
import json

import pytest

from benchfit.capture.sidecar import read_sidecar, sidecar_path, validate_sidecar, write_sidecar
from benchfit.errors import CaptureError

GOOD = {
    "benchfit_sidecar": 1,
    "channels": [{"name": "drive"}, {"name": "output"}],
    "sample_rate_hz": 48000,
    "device": "makerspace USB interface",
    "start_utc": "2026-12-01T17:00:00Z",
    "overflow_count": 0,
    "clip_count": 0,
    "calibration": {"profile": "bench-2", "gain_v_per_fs": [2.5, 1.25], "timebase_ppm": 31.0,
                    "timebase_u_ppm": 2.0, "coupling_tau_s": None},
    "benchfit_version": "0.1.0",
}


def test_sidecar_path_has_same_stem(tmp_path):
    assert sidecar_path(tmp_path / "HC-07.wav") == tmp_path / "HC-07.json"
    assert sidecar_path("a/b/unit7.flac").name == "unit7.json"


def test_round_trip_and_no_temporary_files_left(tmp_path):
    audio = tmp_path / "unit7.wav"
    written = write_sidecar(audio, GOOD)
    assert written == tmp_path / "unit7.json"
    assert read_sidecar(audio) == GOOD
    assert json.loads(written.read_text(encoding="utf-8")) == GOOD
    assert sorted(p.name for p in tmp_path.iterdir()) == ["unit7.json"]


def test_missing_sidecar_reads_as_none(tmp_path):
    assert read_sidecar(tmp_path / "no_such.wav") is None


def test_refuses_to_overwrite_unless_asked(tmp_path):
    audio = tmp_path / "unit7.wav"
    write_sidecar(audio, GOOD)
    changed = copy.deepcopy(GOOD)
    changed["device"] = "other card"
    with pytest.raises(CaptureError, match="already exists"):
        write_sidecar(audio, changed)
    assert read_sidecar(audio)["device"] == GOOD["device"]
    write_sidecar(audio, changed, overwrite=True)
    assert read_sidecar(audio)["device"] == "other card"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["unit7.json"]


def test_minimal_sidecar_gets_calibration_defaults(tmp_path):
    minimal = {"benchfit_sidecar": 1, "channels": [{"name": "out"}], "sample_rate_hz": 44100}
    out = validate_sidecar(minimal, "x.json")
    assert out["calibration"] == {"profile": None, "gain_v_per_fs": None, "timebase_ppm": 0.0,
                                  "timebase_u_ppm": 0.0, "coupling_tau_s": None}


def test_unknown_keys_are_kept_for_newer_writers():
    data = dict(GOOD, future_field={"a": 1})
    assert validate_sidecar(data, "x.json")["future_field"] == {"a": 1}


def _broken(path, value):
    data = copy.deepcopy(GOOD)
    node = data
    for key in path[:-1]:
        node = node[key]
    if value is KeyError:
        del node[path[-1]]
    else:
        node[path[-1]] = value
    return data


@pytest.mark.parametrize(
    "path, value, fragment",
    [
        (("benchfit_sidecar",), KeyError, "not a benchfit sidecar"),
        (("benchfit_sidecar",), 2, "version 2 is not supported"),
        (("channels",), [], "'channels'"),
        (("channels",), [{"name": "a"}, {"label": "b"}], "channels[1]"),
        (("channels",), [{"name": "a"}, {"name": "A"}], "not unique"),
        (("sample_rate_hz",), -48000, "sample_rate_hz"),
        (("sample_rate_hz",), "48k", "sample_rate_hz"),
        (("overflow_count",), -1, "overflow_count"),
        (("clip_count",), 1.5, "clip_count"),
        (("device",), 12, "'device'"),
        (("start_utc",), "yesterday evening", "not an ISO 8601 time"),
        (("calibration",), [1, 2], "'calibration'"),
        (("calibration", "gain_v_per_fs"), [2.5], "one gain per channel"),
        (("calibration", "gain_v_per_fs"), [2.5, -1.0], "gain_v_per_fs[1]"),
        (("calibration", "timebase_ppm"), "fast", "timebase_ppm"),
        (("calibration", "timebase_u_ppm"), -1.0, "timebase_u_ppm"),
        (("calibration", "coupling_tau_s"), 0.0, "coupling_tau_s"),
    ],
)
def test_schema_violations_name_the_json_file(tmp_path, path, value, fragment):
    audio = tmp_path / "HC-02.wav"
    (tmp_path / "HC-02.json").write_text(json.dumps(_broken(path, value)), encoding="utf-8")
    with pytest.raises(CaptureError) as info:
        read_sidecar(audio)
    msg = str(info.value)
    assert str(tmp_path / "HC-02.json") in msg
    assert fragment in msg
    assert "\n" not in msg


def test_malformed_json_names_the_file_and_position(tmp_path):
    (tmp_path / "HC-04.json").write_text('{"benchfit_sidecar": 1,,}', encoding="utf-8")
    with pytest.raises(CaptureError) as info:
        read_sidecar(tmp_path / "HC-04.wav")
    msg = str(info.value)
    assert msg.startswith(str(tmp_path / "HC-04.json") + ": sidecar is not valid JSON (line 1")
    assert "\n" not in msg


def test_invalid_data_is_not_written(tmp_path):
    with pytest.raises(CaptureError, match="sample_rate_hz"):
        write_sidecar(tmp_path / "u.wav", _broken(("sample_rate_hz",), 0))
    assert list(tmp_path.iterdir()) == []


def test_write_into_missing_folder_is_a_clean_error(tmp_path):
    with pytest.raises(CaptureError, match="cannot be written"):
        write_sidecar(tmp_path / "nowhere" / "u.wav", GOOD)
