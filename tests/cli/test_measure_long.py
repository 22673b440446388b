"""`benchfit measure` on a file with more samples than are held at once: read in blocks, same
numbers as the whole-file measurement (threshold lowered by $BENCHFIT_BLOCK_SAMPLES for the test)."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
import soundfile as sf

FS = 8000


@pytest.fixture(scope="module")
def wav(tmp_path_factory):
    rng = np.random.default_rng(77)
    n = 12 * FS
    t = np.arange(n) / FS
    out = 0.6 * np.cos(2 * math.pi * 50.02 * t + 0.4) + 0.02 * np.cos(6 * math.pi * 50.02 * t) + rng.normal(0, 1e-3, n)
    path = tmp_path_factory.mktemp("cli_long") / "HC-07_long.wav"
    sf.write(str(path), out, FS, subtype="FLOAT")
    return path


def test_measure_reads_a_long_file_in_blocks_with_the_same_result(wav, run, monkeypatch):
    whole = run("measure", str(wav), "--json")
    assert whole.returncode == 0, whole.stderr
    monkeypatch.setenv("BENCHFIT_BLOCK_SAMPLES", "16384")
    blocks = run("measure", str(wav), "--json")
    assert blocks.returncode == 0, blocks.stderr
    w, b = json.loads(whole.stdout)["channels"][0], json.loads(blocks.stdout)["channels"][0]
    assert not any(s.startswith("measured in") for s in w["warnings"])
    assert any(s.startswith("measured in 47 blocks of 0.256 s") for s in b["warnings"])  # ⌈96,000 / 2048⌉
    # same samples: the levels are the same numbers; the frequency agrees well within its u
    assert b["vpp"] == w["vpp"] and b["vrms"] == pytest.approx(w["vrms"], rel=1e-12)
    assert abs(b["frequency_hz"] - w["frequency_hz"]) < w["frequency_u_hz"]
    assert abs(b["thd_pct"] - w["thd_pct"]) < max(w["thd_u_pct"], b["thd_u_pct"])


def test_a_bad_threshold_is_one_line(wav, run, monkeypatch):
    monkeypatch.setenv("BENCHFIT_BLOCK_SAMPLES", "12")
    res = run("measure", str(wav))
    assert res.returncode == 2
    line = res.stderr.strip()
    assert line.startswith("error: BENCHFIT_BLOCK_SAMPLES: 12 is below 1024 samples — ") and "\n" not in line


def test_plot_of_a_long_file_draws_from_its_first_block(wav, run, monkeypatch, tmp_path):
    monkeypatch.setenv("BENCHFIT_BLOCK_SAMPLES", "16384")
    fig = tmp_path / "long.svg"
    res = run("measure", str(wav), "--plot", str(fig))
    assert res.returncode == 0, res.stderr
    assert fig.stat().st_size > 1000 and "<svg" in fig.read_text()[:400]
