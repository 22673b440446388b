"""`benchfit measure --log PATH` / `--log-default`: each measured file becomes a "measure" run
in the measurement log, written by the parent process as results arrive.

Captures are small synthetic hum-check outputs written here with soundfile (0.5 s at 48 kHz).
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
import soundfile as sf

FS = 48000




def _write(path: Path, freq: float, seed: int, unit: str | None = None) -> Path:
    """1.2 V peak output sine (0.3 FS × 4 V/FS) with seeded noise and a sidecar."""
    rng = np.random.default_rng(seed)
    t = np.arange(FS // 2) / FS
    sf.write(path, 0.3 * np.sin(2 * math.pi * freq * t) + rng.normal(0, 1e-3, t.size), FS, subtype="FLOAT")
    side = {"benchfit_sidecar": 1, "channels": [{"name": "output"}], "sample_rate_hz": FS,
            "calibration": {"profile": "test", "gain_v_per_fs": [4.0], "timebase_ppm": 0.0,
                            "timebase_u_ppm": 0.0, "coupling_tau_s": None}}
    if unit:
        side["unit"] = unit
    path.with_suffix(".json").write_text(json.dumps(side))
    return path


@pytest.fixture(scope="module")
def folder(tmp_path_factory) -> Path:
    d = tmp_path_factory.mktemp("logbatch")
    _write(d / "HC-08.wav", 50.02, 1, unit="HC-08")
    _write(d / "HC-09.wav", 49.97, 2)
    _write(d / "HC-10.wav", 50.10, 3, unit="HC-10")
    (d / "HC-11_bad.csv").write_text("time;output\nn/a;n/a\n")
    return d


def test_measure_log_appends_one_run_per_good_file(folder, run, tmp_path):
    log = tmp_path / "bench.sqlite"
    res = run("measure", str(folder), "--json", "--jobs", "2", "--log", str(log))
    assert res.returncode == 2  # the bad CSV is still an error
    measured = {o["file"]: o for o in (json.loads(x) for x in res.stdout.strip().splitlines())}
    assert len(measured) == 3
    assert "logged 3 run(s)" in res.stderr

    listed = run("log", "list", "--log", str(log), "--json")
    assert listed.returncode == 0, listed.stderr
    runs = json.loads(listed.stdout)["runs"]
    assert len(runs) == 3 and {r["command"] for r in runs} == {"measure"}
    # the serial comes from the sidecar's "unit" key when there is one
    assert sorted(r["unit"] or "—" for r in runs) == ["HC-08", "HC-10", "—"]

    for r in runs:
        shown = json.loads(run("log", "show", str(r["id"]), "--log", str(log), "--json").stdout)
        (cap,) = shown["captures"]
        freq = [x for x in shown["results"] if x["quantity"] == "frequency_hz"]
        assert len(freq) == 1 and freq[0]["unit"] == "Hz"
        # the logged value is the one printed: same result object, stored as REAL
        assert freq[0]["value"] == measured[cap["path"]]["channels"][0]["frequency_hz"]
        assert freq[0]["uncertainty"] == measured[cap["path"]]["channels"][0]["frequency_u_hz"]
        assert len(cap["sha256"]) == 64


def test_human_table_says_which_run(folder, run, tmp_path):
    log = tmp_path / "bench.sqlite"
    res = run("measure", str(folder / "HC-08.wav"), "--log", str(log))
    assert res.returncode == 0, res.stderr
    assert f"logged as run 1 in {log}" in res.stdout
    listed = run("log", "list", "--log", str(log))
    assert "measure" in listed.stdout and "HC-08" in listed.stdout


def test_log_default_uses_benchfit_log(folder, run, tmp_path, monkeypatch):
    log = tmp_path / "env.sqlite"
    monkeypatch.setenv("BENCHFIT_LOG", str(log))
    res = run("measure", str(folder / "HC-09.wav"), str(folder / "HC-10.wav"), "--json", "--jobs", "1")
    assert res.returncode == 0 and not log.exists()  # logging is opt-in
    res = run("measure", str(folder / "HC-09.wav"), str(folder / "HC-10.wav"), "--json", "--jobs", "1",
              "--log-default")
    assert res.returncode == 0, res.stderr
    from benchfit.log.store import list_runs

    assert len(list_runs(log)) == 2


def test_log_and_log_default_together_are_bad_input(folder, run, tmp_path):
    res = run("measure", str(folder / "HC-09.wav"), "--log", str(tmp_path / "a.sqlite"), "--log-default")
    assert res.returncode == 2 and res.stderr.startswith("error: --log and --log-default")
    assert not (tmp_path / "a.sqlite").exists()


def test_not_a_log_stops_with_one_line(folder, run, tmp_path):
    foreign = tmp_path / "notes.sqlite"
    foreign.write_text("these are bench notes, not a database\n")
    res = run("measure", str(folder / "HC-09.wav"), "--log", str(foreign))
    assert res.returncode == 2 and res.stderr.startswith("error: ")
    assert len(res.stderr.strip().splitlines()) == 1
    assert foreign.read_text() == "these are bench notes, not a database\n"  # left untouched


def test_empty_log_path_is_bad_input(folder, run):
    res = run("measure", str(folder / "HC-09.wav"), "--log", "")
    assert res.returncode == 2 and res.stderr.startswith("error: --log: the path is empty")
    assert res.stdout == ""
