"""The block reader gives the same samples, rate, names, units and calibration as ``load``,
block by block, with each block's t0 at its first sample (project contract: DESIGN.md,
"long captures are read and analysed in blocks")."""

from __future__ import annotations

import json

import numpy as np
import pytest
import soundfile as sf

from benchfit import load
from benchfit.capture.blocks import BlockReader
from benchfit.errors import CaptureError


def _wav_with_sidecar(path, n=10007, fs=8000):
    rng = np.random.default_rng(1)
    x = 0.5 * rng.uniform(-1, 1, size=(n, 2))
    sf.write(str(path), x, fs, subtype="PCM_24")
    side = {"benchfit_sidecar": 1, "channels": [{"name": "drive"}, {"name": "output"}], "sample_rate_hz": fs,
            "calibration": {"profile": "desk", "gain_v_per_fs": [2.0, 3.0], "timebase_ppm": 25.0,
                            "timebase_u_ppm": 1.5, "coupling_tau_s": 0.2, "gain_u_rel": [0.003, 0.004]},
            "unit": "HC-05"}
    path.with_suffix(".json").write_text(json.dumps(side))
    return path


@pytest.mark.parametrize("suffix", [".wav", ".flac"])
def test_audio_blocks_equal_the_whole_file(tmp_path, suffix):
    src = _wav_with_sidecar(tmp_path / "a.wav")
    if suffix == ".flac":
        data, fs = sf.read(str(src))
        sf.write(str(tmp_path / "a.flac"), data, fs, subtype="PCM_24")
        (tmp_path / "a.json").rename(tmp_path / "a.json")  # same stem: same sidecar
        src = tmp_path / "a.flac"
    whole = load(src)
    with BlockReader(src) as r:
        assert r.sample_rate == whole.sample_rate
        assert (r.channel_names, r.units, r.calibration) == (whole.channel_names, whole.units, whole.calibration)
        frames = r.frames_for(0.25)
        blocks = list(r.blocks(frames))
    joined = np.concatenate([b.samples for b in blocks], axis=1)
    assert np.array_equal(joined, whole.samples)
    for k, b in enumerate(blocks):
        assert b.t0 == pytest.approx(k * frames / whole.sample_rate, abs=1e-12)
        assert b.calibration == whole.calibration


def test_channel_selection_follows_load(tmp_path):
    src = _wav_with_sidecar(tmp_path / "a.wav")
    whole = load(src, channels="output")
    with BlockReader(src, channels="output") as r:
        assert r.channel_names == ("output",) and r.calibration == whole.calibration
        joined = np.concatenate([b.samples for b in r.blocks(4000)], axis=1)
    assert np.array_equal(joined, whole.samples)


def test_csv_blocks_equal_read_csv(tmp_path):
    fs = 2000.0
    n = 9001
    t = 0.125 + np.arange(n) / fs
    v = np.sin(2 * np.pi * 50 * t)
    lines = ["# logger export", "Sample interval: 0.0005 s", "Time (ms);CH A (mV)"]
    lines += [f"{1000 * a:.6f};{1000 * b:.6f}".replace(".", ",") for a, b in zip(t, v)]
    p = tmp_path / "log.csv"
    p.write_text("\n".join(lines) + "\n", encoding="utf-8")
    whole = load(p)
    with BlockReader(p) as r:
        assert r.sample_rate == pytest.approx(whole.sample_rate, rel=1e-9)
        assert r.channel_names == whole.channel_names and r.units == ("V",)
        blocks = list(r.blocks(2048))
    joined = np.concatenate([b.samples for b in blocks], axis=1)
    assert np.allclose(joined, whole.samples, atol=1e-12)
    assert blocks[1].t0 == pytest.approx(0.125 + 2048 / fs, abs=1e-9)


def test_csv_gap_is_an_error_naming_the_line(tmp_path):
    fs = 1000.0
    t = np.arange(6000) / fs
    t[5000:] += 0.5  # half a second missing
    lines = ["time_s,v_V"] + [f"{a:.6f},{np.sin(a):.6f}" for a in t]
    p = tmp_path / "gap.csv"
    p.write_text("\n".join(lines) + "\n")
    with BlockReader(p) as r:
        with pytest.raises(CaptureError, match=r"line \d+.*gap"):
            list(r.blocks(1000))


def test_missing_file_is_one_line(tmp_path):
    with pytest.raises(CaptureError, match="no such file"):
        BlockReader(tmp_path / "nope.flac")
