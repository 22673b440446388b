"""The SQLite measurement log: round trip, schema, foreign files, concurrency, crash safety."""

from __future__ import annotations

import json
import os
import signal
import sqlite3
import subprocess
import sys
import time

import pytest

from benchfit.errors import LogError
from benchfit.log.store import (APPLICATION_ID, SCHEMA_VERSION, append_run, get_run, list_runs,
                                resolve_log_path, results_rows)

MEAS = {"file": "hc07.wav", "sample_rate_hz": 48000.0, "duration_s": 1.0,
        "channels": [{"name": "output", "unit": "V", "frequency_hz": 50.012, "frequency_u_hz": 0.003,
                      "amplitude": 1.8, "vdc": 0.0, "vrms": 1.27, "vpp": 3.6, "duty_cycle_pct": None,
                      "rise_time_s": None, "fall_time_s": None, "thd_pct": 3.1, "thd_n_pct": 3.2,
                      "sinad_db": 30.0, "harmonics": [], "clipped": False, "warnings": [],
                      "extra": {"thd_u_pct": 0.02, "vrms_u": 0.004}}]}
FIT = {"file": "hc07.csv", "model": "lc-lowpass", "method": "two-channel",
       "parameters": {"C": {"value": 34e-6, "stderr": 2e-7, "fixed": False, "unit": "F"}},
       "derived": {"resonant_frequency_hz": {"value": 49.7, "stderr": 0.05}},
       "correlations": {}, "quality": {"nrmse": 0.01, "r_squared": 0.999, "n_points": 10}, "warnings": []}


def test_round_trip(tmp_path):
    db = tmp_path / "log.sqlite"
    rid = append_run(db, command="report", operator="R. Okafor", unit="HC-07",
                     captures=[{"path": "hc07.wav", "sha256": "ab" * 32, "role": "as-left",
                                "metadata": {"device": "card"}}],
                     measurements=[("as-left", MEAS)], fits=[("as-left", FIT)],
                     decisions=[{"quantity": "frequency_hz", "value": 50.012, "expanded_u": 0.006,
                                 "lower": 49.75, "upper": 50.25, "unit": "Hz", "rule": "guard-banded",
                                 "decision": "pass"}],
                     verdict="pass", details={"spec": "hc_spec.toml"})
    rid2 = append_run(db, command="measure", measurements=[MEAS])
    assert (rid, rid2) == (1, 2)
    run = get_run(db, rid)
    assert run["unit"] == "HC-07" and run["operator"] == "R. Okafor" and run["verdict"] == "pass"
    assert run["details"] == {"spec": "hc_spec.toml"}
    assert run["captures"][0]["sha256"] == "ab" * 32 and run["captures"][0]["metadata"] == {"device": "card"}
    res = {(r["source"], r["quantity"]): r for r in run["results"]}
    assert res[("measure", "frequency_hz")]["value"] == 50.012
    assert res[("measure", "frequency_hz")]["uncertainty"] == 0.003       # contract key
    assert res[("measure", "thd_pct")]["uncertainty"] == 0.02             # from extra
    assert res[("measure", "vrms")]["unit"] == "V"
    assert res[("measure", "frequency_hz")]["file"] == "hc07.wav"          # linked to its capture
    assert res[("fit", "C")]["uncertainty"] == 2e-7 and res[("fit", "C")]["unit"] == "F"
    assert res[("fit", "resonant_frequency_hz")]["unit"] == "Hz"
    assert run["decisions"][0]["decision"] == "pass"
    assert [r["id"] for r in list_runs(db, unit="HC-07")] == [1]
    assert len(list_runs(db, since="2000-01-01")) == 2 and list_runs(db, since="2999-01-01") == []
    assert len(results_rows(db, quantity="frequency_hz")) == 2
    with pytest.raises(LogError, match="run 9: no such run"):
        get_run(db, 9)


def test_schema_version_wal_and_application_id(tmp_path):
    db = tmp_path / "log.sqlite"
    append_run(db, command="measure")
    con = sqlite3.connect(db)
    try:
        assert con.execute("PRAGMA application_id").fetchone()[0] == APPLICATION_ID
        assert con.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
        assert con.execute("SELECT MAX(version) FROM benchfit_schema").fetchone()[0] == SCHEMA_VERSION
        con.execute("INSERT INTO benchfit_schema VALUES (?, 'later')", (SCHEMA_VERSION + 1,))
        con.commit()
    finally:
        con.close()
    with pytest.raises(LogError, match="newer"):
        append_run(db, command="measure")


def test_no_pickle_blobs(tmp_path):
    db = tmp_path / "log.sqlite"
    append_run(db, command="report", captures=[{"path": "a.wav", "metadata": {"k": [1, 2]}}],
               details={"x": 1})
    con = sqlite3.connect(db)
    try:
        blobs = con.execute("SELECT metadata_json FROM captures").fetchall() + \
            con.execute("SELECT details_json FROM runs").fetchall()
    finally:
        con.close()
    for (text,) in blobs:
        assert isinstance(text, str)
        json.loads(text)


@pytest.mark.parametrize("kind", ["text", "foreign-sqlite"])
def test_foreign_file_is_refused_and_never_modified(tmp_path, kind):
    path = tmp_path / "notes.db"
    if kind == "text":
        path.write_text("unit, freq\nHC-01, 50.0\n", encoding="utf-8")
    else:
        con = sqlite3.connect(path)
        con.execute("CREATE TABLE parts (name TEXT)")
        con.execute("INSERT INTO parts VALUES ('33 uF')")
        con.commit()
        con.close()
    before = (path.read_bytes(), path.stat().st_mtime_ns)
    listing = sorted(p.name for p in tmp_path.iterdir())
    time.sleep(0.01)
    for call in (lambda: append_run(path, command="measure"), lambda: list_runs(path)):
        with pytest.raises(LogError) as info:
            call()
        msg = str(info.value)
        assert "\n" not in msg and "not a benchfit measurement log" in msg and str(path) in msg
    assert (path.read_bytes(), path.stat().st_mtime_ns) == before
    assert sorted(p.name for p in tmp_path.iterdir()) == listing     # no -wal/-journal left behind


def test_missing_log_for_reading(tmp_path):
    with pytest.raises(LogError, match="no log file"):
        list_runs(tmp_path / "none.sqlite")
    assert not (tmp_path / "none.sqlite").exists()


def test_resolve_log_path(monkeypatch, tmp_path):
    monkeypatch.setenv("BENCHFIT_LOG", str(tmp_path / "env.sqlite"))
    assert resolve_log_path(None) == tmp_path / "env.sqlite"
    assert resolve_log_path(tmp_path / "opt.sqlite") == tmp_path / "opt.sqlite"
    monkeypatch.delenv("BENCHFIT_LOG")
    assert resolve_log_path(None).name == "log.sqlite"


_WRITER = r"""
import sys, time, pathlib
from benchfit.log.store import append_run
db, go, n, tag = sys.argv[1], pathlib.Path(sys.argv[2]), int(sys.argv[3]), sys.argv[4]
meas = {"file": tag + ".wav", "channels": [{"name": "ch%d" % i, "unit": "V", "frequency_hz": 50.0 + i,
        "frequency_u_hz": 0.01, "vrms": 1.0, "vdc": 0.0, "vpp": 2.0} for i in range(int(sys.argv[5]))]}
while not go.exists():
    time.sleep(0.005)
for i in range(n):
    rid = append_run(db, command="measure", unit=tag, captures=[{"path": tag + ".wav"}], measurements=[meas])
    print(rid, flush=True)
"""


def _writer(tmp_path, db, go, n, tag, channels=1):
    return subprocess.Popen([sys.executable, "-c", _WRITER, str(db), str(go), str(n), tag, str(channels)],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)


def test_two_processes_append_at_the_same_time(tmp_path):
    db, go = tmp_path / "log.sqlite", tmp_path / "go"
    n = 25
    procs = [_writer(tmp_path, db, go, n, tag) for tag in ("HC-01", "HC-02")]
    time.sleep(0.3)
    go.touch()
    outs = [p.communicate(timeout=60) for p in procs]
    assert [p.returncode for p in procs] == [0, 0], [o[1] for o in outs]
    ids = sorted(int(x) for out, _ in outs for x in out.split())
    assert ids == list(range(1, 2 * n + 1))           # every run got its own id, none lost
    assert len(list_runs(db, unit="HC-01")) == n and len(list_runs(db, unit="HC-02")) == n


def test_a_log_set_up_between_two_reads_is_not_called_foreign(tmp_path, monkeypatch):
    """The race behind an intermittent "not a benchfit measurement log" from two first writers.

    Process B inspects the log while process A, which has just created the file, sets it up: B
    reads the header (application_id 0), then A commits its tables, then B lists the tables. Read
    one statement at a time, B saw A's tables without A's application_id and refused the log.
    The interleaving is forced here: A's set-up runs from B's trace callback, just as B's table
    query starts.
    """
    from benchfit.log import sqlite as backend

    db = tmp_path / "log.sqlite"
    creator = backend._open_writer(db)
    backend._set_wal(creator)                             # A: created, WAL, nothing set up yet
    real_open = backend._open_readonly
    done: list[bool] = []

    def open_with_interleaving(uri):
        con = real_open(uri)

        def trace(statement):
            if "sqlite_master" in statement and not done:
                done.append(True)
                backend._migrate(creator, None)           # A sets the log up in between

        con.set_trace_callback(trace)
        return con

    monkeypatch.setattr(backend, "_open_readonly", open_with_interleaving)
    version = backend._inspect(db)
    assert done, "the interleaving was not forced"
    assert version in (None, SCHEMA_VERSION)              # a new log, or the one A just set up
    creator.close()
    monkeypatch.undo()
    append_run(db, command="measure", unit="HC-01", captures=[{"path": "a.wav"}], measurements=[])
    assert len(list_runs(db, unit="HC-01")) == 1


def test_sigkill_mid_write_keeps_every_committed_run(tmp_path):
    db, go = tmp_path / "log.sqlite", tmp_path / "go"
    go.touch()
    # large runs (400 result rows each) so that the kill very likely lands inside a transaction
    proc = _writer(tmp_path, db, go, 100000, "HC-09", channels=40)
    committed = []
    deadline = time.monotonic() + 30
    while len(committed) < 8 and time.monotonic() < deadline:
        line = proc.stdout.readline()
        if not line:
            break
        committed.append(int(line))
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait(timeout=10)
    proc.stdout.close()
    proc.stderr.close()
    assert len(committed) >= 8
    con = sqlite3.connect(db)
    try:
        assert con.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
        stored = {r[0] for r in con.execute("SELECT id FROM runs")}
        # each stored run is complete: one transaction per run
        counts = {r[0]: r[1] for r in con.execute("SELECT run_id, COUNT(*) FROM results GROUP BY run_id")}
    finally:
        con.close()
    assert set(committed) <= stored
    assert all(counts[r] == counts[min(stored)] for r in stored)
    # the log is still usable afterwards
    assert append_run(db, command="measure") == max(stored) + 1


def test_a_log_held_open_is_opened_once_and_commits_each_run(tmp_path, monkeypatch):
    """held_open (a batch): one connection for all runs, each run committed at once (a second
    connection sees it before the block ends), and append_run opens the file again after it."""
    import benchfit.log.sqlite as backend
    from benchfit.log.store import held_open

    db = tmp_path / "log.sqlite"
    opened = []
    real = backend.connect
    monkeypatch.setattr(backend, "connect", lambda *a, **k: opened.append(a) or real(*a, **k))
    with held_open(db):
        ids = [append_run(db, command="measure", unit=f"HC-{i}") for i in range(3)]
        with sqlite3.connect(db) as other:  # committed, not waiting for the block's end
            assert other.execute("SELECT COUNT(*) FROM runs").fetchone()[0] == 3
    assert len(opened) == 1, opened
    append_run(db, command="measure", unit="HC-3")
    assert len(opened) == 2
    assert sorted(r["unit"] for r in list_runs(db)) == ["HC-0", "HC-1", "HC-2", "HC-3"]
    assert len(set(ids)) == 3
