"""``benchfit log show`` by unit serial: the latest run of that unit, with a note; bad RUN text is one line."""

from __future__ import annotations

import json

import pytest

from benchfit.log.store import append_run

MEAS = {"file": "hc03.wav", "sample_rate_hz": 48000.0, "duration_s": 1.0,
        "channels": [{"name": "output", "unit": "V", "frequency_hz": 50.012, "frequency_u_hz": 0.003,
                      "amplitude": 1.8, "vdc": 0.0, "vrms": 1.27, "vpp": 3.6, "duty_cycle_pct": None,
                      "rise_time_s": None, "fall_time_s": None, "thd_pct": 3.1, "thd_n_pct": 3.2,
                      "sinad_db": 30.0, "harmonics": [], "clipped": False, "warnings": [], "extra": {}}]}


@pytest.fixture
def log(tmp_path):
    db = tmp_path / "bench.sqlite"
    append_run(db, command="measure", unit="HC-03", measurements=[MEAS])      # run 1
    append_run(db, command="measure", unit="HC-07", measurements=[MEAS])      # run 2
    append_run(db, command="report", unit="HC-03", measurements=[MEAS])       # run 3: HC-03's latest
    return db


def test_serial_shows_its_latest_run_with_a_note(log, run):
    res = run("log", "show", "HC-03", "--log", str(log), "--json")
    assert res.returncode == 0, res.stderr
    shown = json.loads(res.stdout)  # the note goes to stderr: stdout stays one JSON object
    assert shown["id"] == 3 and shown["unit"] == "HC-03" and shown["command"] == "report"
    assert "HC-03 has 2 logged run(s); showing the latest, run 3" in res.stderr
    assert "log list --unit HC-03" in res.stderr
    human = run("log", "show", "HC-07", "--log", str(log))
    assert human.returncode == 0 and human.stdout.startswith("run 2 ")


def test_integer_still_means_run_id(log, run):
    res = run("log", "show", "1", "--log", str(log), "--json")
    assert res.returncode == 0 and json.loads(res.stdout)["id"] == 1 and "note" not in res.stderr


@pytest.mark.parametrize("arg,match", [
    ("HC-99", "no run id and no logged unit with this serial — logged serials: HC-03, HC-07"),
    ("hc-03", "did you mean 'HC-03'?"),
    ("  ", "an empty argument"),  # caught by the entry point before the command
])
def test_unknown_serial_is_one_line(log, run, arg, match):
    res = run("log", "show", arg, "--log", str(log))
    assert res.returncode == 2 and "Traceback" not in res.stderr
    lines = [ln for ln in res.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("error: ") and match in lines[0], res.stderr
