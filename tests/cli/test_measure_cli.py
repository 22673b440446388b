"""`benchfit measure` end to end: exit codes, one-line errors, the --json contract, options."""

from __future__ import annotations

import json
import math
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import soundfile as sf
from clirun import CliResult

FS = 48000


def _run_subprocess(*args: str) -> CliResult:
    """The installed entry point in a fresh interpreter (what a person types)."""
    env = dict(os.environ, COLUMNS="120")
    res = subprocess.run([sys.executable, "-m", "benchfit", *args], capture_output=True, text=True,
                         env=env, timeout=120)
    return CliResult(res.returncode, res.stdout, res.stderr)



@pytest.fixture(scope="module")
def wavs(tmp_path_factory) -> dict[str, Path]:
    """HC-02 recorded on a sound card: a stereo WAV (drive square, output sine) with a
    sidecar naming the channels, and a mono file of the output alone."""
    d = tmp_path_factory.mktemp("captures")
    t = np.arange(int(0.5 * FS)) / FS
    rng = np.random.default_rng(8)
    drive = np.where(np.mod(t * 50.06 + 0.1, 1.0) < 0.53, 0.45, -0.45) + rng.normal(0, 1e-3, t.size)
    out = 0.6 * np.cos(2 * math.pi * 50.06 * t + 0.4) + 0.018 * np.cos(2 * math.pi * 150.18 * t)
    stereo = d / "HC-02_as-left.wav"
    sf.write(stereo, np.column_stack([drive, out]), FS, subtype="FLOAT")
    (d / "HC-02_as-left.json").write_text(json.dumps({
        "benchfit_sidecar": 1, "channels": [{"name": "drive"}, {"name": "output"}],
        "sample_rate_hz": FS, "device": "test", "start_utc": "2026-12-01T17:00:00Z",
        "overflow_count": 0, "clip_count": 0,
        "calibration": {"profile": None, "gain_v_per_fs": None, "timebase_ppm": 0.0,
                        "timebase_u_ppm": 0.0, "coupling_tau_s": None},
        "benchfit_version": "0.1.0"}))
    mono = d / "HC-02_output.wav"
    sf.write(mono, out, FS, subtype="PCM_24")
    return {"stereo": stereo, "mono": mono, "dir": d}


def test_missing_file_is_one_line_and_exit_2(tmp_path):
    res = _run_subprocess("measure", str(tmp_path / "HC-09_nothere.wav"))
    assert res.returncode == 2
    lines = res.stderr.strip().splitlines()
    assert len(lines) == 1, res.stderr
    assert lines[0].startswith("error: ") and "HC-09_nothere.wav" in lines[0]
    assert "Traceback" not in res.stderr and res.stdout == ""


def test_json_is_the_contract(wavs, run):
    res = run("measure", str(wavs["stereo"]), "--json")
    assert res.returncode == 0, res.stderr
    lines = res.stdout.strip().splitlines()
    assert len(lines) == 1  # one object for one file
    d = json.loads(lines[0])
    assert set(d) == {"file", "sample_rate_hz", "duration_s", "channels"}
    assert [c["name"] for c in d["channels"]] == ["drive", "output"]
    drive, out = d["channels"]
    assert "extra" not in out  # --json prints exactly the contract
    assert out["frequency_hz"] == pytest.approx(50.06, abs=1e-6)  # noise-free 25 periods
    assert out["thd_pct"] == pytest.approx(3.0, abs=1e-3)  # 0.018/0.6; leakage < 1e-5
    assert drive["duty_cycle_pct"] == pytest.approx(53.0, abs=0.2)  # edges on the sample grid: ±1 sample of 960
    assert len(out["harmonics"]) == 10  # default H = 10


def test_channel_and_harmonics_options(wavs, run):
    res = run("measure", str(wavs["stereo"]), "--json", "--channel", "output", "--harmonics", "3")
    assert res.returncode == 0, res.stderr
    d = json.loads(res.stdout)
    assert [c["name"] for c in d["channels"]] == ["output"]
    assert [h["order"] for h in d["channels"][0]["harmonics"]] == [1, 2, 3]
    res2 = run("measure", str(wavs["stereo"]), "--json", "-c", "1")  # 1-based number
    assert [c["name"] for c in json.loads(res2.stdout)["channels"]] == ["drive"]


def test_unknown_channel_and_bad_harmonics_exit_2(wavs, run):
    res = run("measure", str(wavs["stereo"]), "--channel", "nonesuch")
    assert res.returncode == 2 and res.stderr.startswith("error: ")
    assert len(res.stderr.strip().splitlines()) == 1
    res = run("measure", str(wavs["stereo"]), "--harmonics", "0")
    assert res.returncode == 2  # usage error (typer range check)


def test_several_files_one_object_per_line_and_partial_failure(wavs, run):
    res = run("measure", str(wavs["stereo"]), str(wavs["mono"]), "--json")
    assert res.returncode == 0, res.stderr
    objs = [json.loads(line) for line in res.stdout.strip().splitlines()]
    assert sorted(Path(o["file"]).name for o in objs) == ["HC-02_as-left.wav", "HC-02_output.wav"]
    bad = run("measure", str(wavs["mono"]), str(wavs["dir"] / "missing.wav"), "--json")
    assert bad.returncode == 2
    assert len(bad.stdout.strip().splitlines()) == 1  # the good file is still measured
    assert "missing.wav" in bad.stderr


def test_human_output_has_units_and_uncertainties(wavs, run):
    res = run("measure", str(wavs["stereo"]))
    assert res.returncode == 0, res.stderr
    text = res.stdout
    for phrase in ("frequency", "duty cycle", "rise time 10–90 %", "THD", "SINAD", "harmonics 2…10",
                   "standard uncertainties (k = 1)"):
        assert phrase in text, phrase
    assert " ± " in text and " Hz" in text and " FS" in text and " dB" in text


def test_a_file_name_with_colons_is_shown_as_written(wavs, tmp_path, run):
    """":thumbs_up:" in a file name is text: rich's consoles would show an emoji for it unless
    emoji codes are off (rich documentation, "Console API: Emoji")."""
    named = tmp_path / "HC-02:thumbs_up:.wav"
    named.write_bytes(wavs["mono"].read_bytes())
    res = run("measure", str(named))
    assert res.returncode == 0, res.stderr
    assert "HC-02:thumbs_up:.wav" in res.stdout and "\N{THUMBS UP SIGN}" not in res.stdout


def test_sample_rate_option_reaches_the_csv_reader(tmp_path, run):
    # a headerless CSV of the output (volts) with no time column: the rate comes from the option
    t = np.arange(2000) / 10000.0
    x = 1.5 * np.sin(2 * math.pi * 50.0 * t)
    csv = tmp_path / "HC-04_logger.csv"
    csv.write_text("output\n" + "\n".join(f"{v:.6f}" for v in x) + "\n")
    res = run("measure", str(csv), "--json", "--sample-rate", "10k")
    assert res.returncode == 0, res.stderr
    ch = json.loads(res.stdout)["channels"][0]
    assert json.loads(res.stdout)["sample_rate_hz"] == 10000.0
    assert ch["frequency_hz"] == pytest.approx(50.0, rel=1e-6)  # 6-decimal printing noise
    assert ch["vrms"] == pytest.approx(1.5 / math.sqrt(2), rel=1e-5)  # 6-decimal printing, 40 periods


def test_help_states_h():
    # (its start-up time is a speed figure: scripts/bench_measure.py measures it)
    res = _run_subprocess("measure", "--help")
    assert res.returncode == 0
    assert "2…H" in res.stdout and "default 10" in res.stdout


def test_measure_file_is_a_picklable_top_level_job(wavs):
    # the per-file job must travel to a process pool: a module-level function, plain-dict result
    import pickle

    from benchfit.cli.measure_cmd import measure_file

    job = pickle.loads(pickle.dumps(measure_file))
    d = job(wavs["mono"], channels=None, harmonics=5, sample_rate=None)
    pickle.dumps(d)
    json.dumps(d, allow_nan=False)
    ch = d["channels"][0]
    assert ch["extra"]["harmonics_h"] == 5 and len(ch["harmonics"]) == 5
