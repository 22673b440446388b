"""benchfit.load: dispatch by extension and content, SHA-256, channel selection, argument errors."""

from __future__ import annotations

import hashlib
import json

import numpy as np
import pytest
import soundfile as sf

import benchfit
from benchfit.capture.load import file_sha256, load
from benchfit.capture.sidecar import write_sidecar
from benchfit.errors import CaptureError

CSV_TEXT = "Time (ms),drive [V],output [mV]\n0,12,100\n0.1,12,250\n0.2,0,300\n0.3,0,150\n"


def _wav(path, n_ch=2, n=400):
    rng = np.random.default_rng(5)
    sf.write(path, rng.uniform(-0.9, 0.9, (n, n_ch)), 48000, subtype="PCM_24")
    return path


def test_public_load_is_this_function():
    assert benchfit.load is load


@pytest.mark.parametrize("kind", ["csv", "wav"])
def test_sha256_matches_hashlib_and_source_is_the_path(tmp_path, kind):
    if kind == "csv":
        path = tmp_path / "HC-03.csv"
        path.write_text(CSV_TEXT, encoding="utf-8")
    else:
        path = _wav(tmp_path / "HC-03.wav")
    cap = load(path)
    # independent implementation: Python's hashlib over the whole file (FIPS 180-4 SHA-256)
    assert cap.sha256 == hashlib.sha256(path.read_bytes()).hexdigest()
    assert file_sha256(path) == cap.sha256
    assert cap.source == str(path)


def test_sidecar_does_not_change_the_hash(tmp_path):
    path = _wav(tmp_path / "u.wav", n_ch=1)
    before = load(path).sha256
    write_sidecar(path, {"benchfit_sidecar": 1, "channels": [{"name": "output"}], "sample_rate_hz": 48000})
    assert load(path).sha256 == before


@pytest.mark.parametrize("name", ["capture.dat", "capture", "capture.bin", "capture.WAV"])
def test_audio_is_recognised_by_content(tmp_path, name):
    src = _wav(tmp_path / "src.wav")
    path = tmp_path / name
    path.write_bytes(src.read_bytes())
    cap = load(path)
    assert cap.n_channels == 2 and cap.units == ("FS", "FS")


@pytest.mark.parametrize("name", ["HC-03.txt", "HC-03.tsv", "HC-03.export", "HC-03"])
def test_text_is_read_as_csv_whatever_the_name(tmp_path, name):
    path = tmp_path / name
    path.write_text(CSV_TEXT, encoding="utf-8")
    cap = load(path)
    assert cap.channel_names == ("drive", "output")
    # tolerance: IEEE 754 double rounding of parsing and unit scaling (~2e-16 per step), common practice, no source
    np.testing.assert_allclose(cap.samples[1], [0.1, 0.25, 0.3, 0.15], rtol=1e-15)


def test_audio_named_csv_is_refused(tmp_path):
    path = tmp_path / "HC-03.csv"
    path.write_bytes(_wav(tmp_path / "x.wav").read_bytes())
    with pytest.raises(CaptureError, match=r"holds WAV audio but is named like a CSV"):
        load(path)


def test_binary_non_audio_is_refused(tmp_path):
    path = tmp_path / "firmware.bin"
    path.write_bytes(b"\x7fELF\x02\x01\x01\x00" + bytes(200))
    with pytest.raises(CaptureError) as info:
        load(path)
    assert str(info.value).startswith(f"{path}: not an audio file")


def test_text_named_wav_is_not_an_audio_file(tmp_path):
    path = tmp_path / "HC-03.wav"
    path.write_text(CSV_TEXT, encoding="utf-8")
    with pytest.raises(CaptureError, match="not an audio file"):
        load(path)


@pytest.mark.parametrize(
    "channels, names",
    [("output", ("output",)), ("OUTPUT,drive", ("output", "drive")), (["2"], ("output",)), (0, ("drive",)),
     (["drive", 1], ("drive", "output"))],
)
def test_channel_selection(tmp_path, channels, names):
    path = tmp_path / "HC-03.csv"
    path.write_text(CSV_TEXT, encoding="utf-8")
    assert load(path, channels=channels).channel_names == names


def test_channel_selection_keeps_gains_in_step(tmp_path):
    path = _wav(tmp_path / "u.wav", n_ch=2)
    write_sidecar(path, {"benchfit_sidecar": 1, "channels": [{"name": "drive"}, {"name": "output"}],
                         "sample_rate_hz": 48000, "calibration": {"gain_v_per_fs": [6.0, 2.0]}})
    cap = load(path, channels="output")
    assert cap.calibration.gain_v_per_fs == (2.0,)
    assert cap.units == ("V",)


@pytest.mark.parametrize(
    "kwargs, fragment",
    [
        ({"channels": "load"}, "no channel 'load'"),
        ({"channels": ""}, "selects nothing"),
        ({"sample_rate": -5}, "sample_rate: -5 must be a positive number of Hz"),
        ({"sample_rate": "fast"}, "sample_rate: 'fast' is not a number"),
        ({"sample_rate": float("nan")}, "must be a positive number"),
    ],
)
def test_bad_arguments_are_one_line_errors(tmp_path, kwargs, fragment):
    path = tmp_path / "HC-03.csv"
    path.write_text(CSV_TEXT, encoding="utf-8")
    with pytest.raises(CaptureError) as info:
        load(path, **kwargs)
    assert fragment in str(info.value) and "\n" not in str(info.value)


@pytest.mark.parametrize("text, rate", [("100k", 100e3), ("50 kHz", 50e3), ("48000", 48e3), ("2.5M", 2.5e6)])
def test_sample_rate_accepts_si_prefixes(tmp_path, text, rate):
    path = tmp_path / "raw.csv"
    path.write_text("0.1\n0.2\n0.3\n", encoding="utf-8")
    # SI prefixes k = 1e3, M = 1e6: BIPM SI Brochure, 9th ed., Table 7
    assert load(path, sample_rate=text).sample_rate == rate


def test_folder_and_missing_and_empty(tmp_path):
    with pytest.raises(CaptureError, match="is a folder"):
        load(tmp_path)
    with pytest.raises(CaptureError, match="no such file"):
        load(tmp_path / "HC-99.wav")
    (tmp_path / "empty.flac").write_bytes(b"")
    with pytest.raises(CaptureError, match="the file is empty"):
        load(tmp_path / "empty.flac")


def test_error_is_a_benchfit_error_with_exit_code_2(tmp_path):
    with pytest.raises(benchfit.BenchfitError) as info:
        load(tmp_path / "missing.csv")
    assert info.value.exit_code == 2


def test_metadata_is_plain_json(tmp_path):
    """Report and log store Capture.metadata as JSON; readers must only put JSON types in it."""
    csv_path = tmp_path / "HC-03.csv"
    csv_path.write_text("# bench logger\nSample rate;1 kS/s\nVertical Max;5 V\nCH A [mV]\n1\n2\n3\n", encoding="utf-8")
    wav = _wav(tmp_path / "u.wav", n_ch=1)
    write_sidecar(wav, {"benchfit_sidecar": 1, "channels": [{"name": "output"}], "sample_rate_hz": 48000,
                        "peak_dbfs": [-3.0]})
    for cap in (load(csv_path), load(wav)):
        text = json.dumps(dict(cap.metadata), allow_nan=False)
        assert json.loads(text) == dict(cap.metadata)
    assert load(csv_path).metadata["rails_v"] == {"*": [None, 5.0]}


def test_sample_rate_argument_is_ignored_for_audio_with_a_warning(tmp_path):
    cap = load(_wav(tmp_path / "u.wav"), sample_rate=44100)
    assert cap.sample_rate == 48000
    assert any("44100 Hz given but the audio header says 48000 Hz" in w for w in cap.warnings)
