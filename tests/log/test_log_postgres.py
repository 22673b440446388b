"""The shared PostgreSQL log against a real server: concurrent benches, killed writers,
the server going away mid-batch (spool, sync), and a schema-1 bench log merged in."""

from __future__ import annotations

import json
import shutil
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import pytest

from benchfit.log.spool import spool_path, spool_run
from benchfit.log.store import LogURL, append_run, list_runs, open_store

DATA = Path(__file__).resolve().parents[1] / "data"


def _meas(tag: str, channels: int = 1) -> dict:
    return {"file": tag + ".wav", "channels": [{"name": f"ch{i}", "unit": "V", "frequency_hz": 50.0 + i,
                                                 "frequency_u_hz": 0.01, "vrms": 1.0, "vdc": 0.0, "vpp": 2.0,
                                                 "thd_pct": 3.0, "extra": {"thd_u_pct": 0.02}}
                                                for i in range(channels)]}


def _db_counts(url: str) -> tuple[dict[str, int], dict[str, int], dict[str, int], dict[str, int]]:
    """Per run uuid: number of results, captures and decisions; and runs per unit serial."""
    with open_store(url, create=False) as s:
        q = lambda t: dict(s.con.execute(  # noqa: E731
            f"SELECT r.uuid, COUNT(x.id) FROM runs r LEFT JOIN {t} x ON x.run_id = r.id GROUP BY r.uuid").fetchall())
        units = dict(s.con.execute("SELECT u.serial, COUNT(*) FROM runs r JOIN units u ON u.id = r.unit_id "
                                   "GROUP BY u.serial").fetchall())
        return q("results"), q("captures"), q("decisions"), units


_WRITER = r"""
import sys, time, pathlib
from benchfit.log.store import append_run
url, go, n, tag = sys.argv[1], pathlib.Path(sys.argv[2]), int(sys.argv[3]), sys.argv[4]
meas = {"file": tag + ".wav", "channels": [{"name": "out", "unit": "V", "frequency_hz": 50.0,
        "frequency_u_hz": 0.01, "vrms": 1.0}]}
dec = [{"quantity": "frequency_hz", "value": 50.0, "rule": "simple", "decision": "pass"}]
while not go.exists():
    time.sleep(0.005)
for i in range(n):
    r = append_run(url, command="measure", unit=tag, captures=[{"path": tag + ".wav"}], measurements=[meas],
                   decisions=dec, bench="bench-" + tag[-1])
    assert not r.spooled
    print(r.uuid, flush=True)
"""


def test_eight_benches_append_at_once(pg_url, tmp_path):
    go, n = tmp_path / "go", 50
    tags = [f"HC-{i:02d}" for i in range(1, 9)]
    procs = [subprocess.Popen([sys.executable, "-c", _WRITER, pg_url, str(go), str(n), tag],
                              stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True) for tag in tags]
    time.sleep(0.5)
    go.touch()
    outs = [p.communicate(timeout=120) for p in procs]
    assert [p.returncode for p in procs] == [0] * 8, [o[1][-500:] for o in outs]
    written = [u for out, _ in outs for u in out.split()]
    assert len(written) == 8 * n                               # 0 failures
    results, captures, decisions, units = _db_counts(pg_url)
    assert set(results) == set(written)                        # 0 lost, nothing extra
    assert units == {tag: n for tag in tags}
    assert set(results.values()) == {2} and set(captures.values()) == {1} and set(decisions.values()) == {1}
    ids = [r["id"] for r in list_runs(pg_url)]
    assert len(set(ids)) == 8 * n
    assert not (tmp_path / "spool").exists()


_KILLER = r"""
import json, os, random, signal, sys, time
import psycopg                                  # imported once here, not in each child
from benchfit.log import base, spool, postgres  # noqa: F401
from benchfit.log.store import append_run
url = sys.argv[1]
meas = {"file": "k.wav", "channels": [{"name": "ch%d" % i, "unit": "V", "frequency_hz": 50.0 + i,
        "frequency_u_hz": 0.01, "vrms": 1.0, "vdc": 0.0, "vpp": 2.0, "thd_pct": 3.0} for i in range(20)]}
rng = random.Random(13)
reported, inside = [], 0
for k in range(50):
    at_commit = k % 2 == 0
    stop_at = rng.randrange(0, 3)
    r, w = os.pipe()
    pid = os.fork()
    if pid == 0:  # the writer
        try:
            os.close(r)
            out = os.fdopen(w, "w", buffering=1)
            count = [0]

            def hook():
                if count[0] == stop_at:
                    out.write("B\n")
                    time.sleep(30)      # killed here, inside the transaction
                count[0] += 1

            if at_commit:
                base.BEFORE_COMMIT = hook
            for _ in range(1000):
                rid = append_run(url, command="measure", unit="HC-K%02d" % k, measurements=[meas],
                                 captures=[{"path": "k.wav"}],
                                 decisions=[{"quantity": "frequency_hz", "rule": "simple", "decision": "pass"}])
                out.write("C %s\n" % rid.uuid)
        finally:
            os._exit(0)
    os.close(w)
    reader = os.fdopen(r)
    lines = []
    if at_commit:
        while (line := reader.readline()) and line != "B\n":
            lines.append(line)
        inside += line == "B\n"
    else:
        for _ in range(stop_at + 1):
            lines.append(reader.readline())
        time.sleep(rng.uniform(0.0, 0.02))
    os.kill(pid, signal.SIGKILL)
    os.waitpid(pid, 0)
    lines += reader.readlines()
    reader.close()
    reported.append((k, at_commit, stop_at, [x.split()[1] for x in lines if x.startswith("C ")]))
print(json.dumps({"inside": inside, "reported": reported}))
"""


def test_sigkill_of_a_writer_mid_transaction_50_times(pg_url):
    # 50 writers, one after the other, each forked from one fresh process (no pytest threads)
    # and killed with SIGKILL. Each writes runs of 20 channels × 5 quantities (100 results);
    # half are killed from inside the transaction (just before COMMIT, through the store's test
    # seam), the others at a random moment. Every run reported committed must be there, and
    # every stored run whole.
    res = subprocess.run([sys.executable, "-c", _KILLER, pg_url], capture_output=True, text=True, timeout=300)
    assert res.returncode == 0, res.stderr[-2000:]
    out = json.loads(res.stdout)
    inside = out["inside"]
    reported = out["reported"]
    for k, at_commit, stop_at, mine in reported:
        if at_commit:
            assert len(mine) == stop_at
    assert inside == 25
    results, captures, decisions, units = _db_counts(pg_url)
    for k, at_commit, _, mine in reported:
        assert set(mine) <= set(results)                       # every committed run present
        if at_commit:                                          # the killed transaction left nothing
            assert units.get(f"HC-K{k:02d}", 0) == len(mine)
    assert set(results.values()) == {100}                      # none half-written
    assert set(captures.values()) == {1} and set(decisions.values()) == {1}
    # the server rolled back the killed sessions' transactions: the log is usable at once
    assert not append_run(pg_url, command="measure").spooled


def test_server_stopped_mid_batch_spool_then_sync(pg_server, pg_url, capsys):
    from benchfit.cli import main

    target = LogURL(pg_url)
    rids = []
    try:
        for i in range(30):
            if i == 12:
                pg_server.pause()
            rids.append(append_run(pg_url, command="measure", unit=f"HC-{i % 12 + 1:02d}",
                                   captures=[{"path": f"u{i}.wav"}], measurements=[_meas(f"u{i}")]))
    finally:
        pg_server.resume()
    err = capsys.readouterr().err
    assert [r.spooled for r in rids] == [False] * 12 + [True] * 18
    assert err.count("run spooled to") == 18 and "benchfit log sync" in err
    assert len(list_runs(spool_path(target))) == 18
    assert len(list_runs(pg_url)) == 12

    with pytest.raises(SystemExit) as info:
        main(["log", "sync", "--log", pg_url, "--json"])
    assert (info.value.code or 0) == 0
    assert json.loads(capsys.readouterr().out)["new"] == 18
    stored = [r["uuid"] for r in list_runs(pg_url)]
    assert sorted(stored) == sorted(r.uuid for r in rids)      # exactly the union, no duplicates
    assert list_runs(spool_path(target)) == []
    results, *_ = _db_counts(pg_url)
    assert set(results.values()) == {5}                        # 5 quantities of _meas, each run whole

    # a run the server has though its writer never heard the COMMIT: spooled, pushed, not doubled
    with open_store(pg_url) as s:
        spool_run(target, s.read_record(5))
    with pytest.raises(SystemExit):
        main(["log", "sync", "--log", pg_url, "--json"])
    out = json.loads(capsys.readouterr().out)
    assert (out["new"], out["present"]) == (0, 1) and len(list_runs(pg_url)) == 30

    # the next successful write pushes what was spooled meanwhile
    try:
        pg_server.pause()
        late = [append_run(pg_url, command="measure", unit="HC-01") for _ in range(2)]
    finally:
        pg_server.resume()
    assert all(r.spooled for r in late)
    assert not append_run(pg_url, command="measure").spooled
    assert "pushed 2 spooled run(s)" in capsys.readouterr().err
    assert len(list_runs(pg_url)) == 33 and list_runs(spool_path(target)) == []


def test_schema1_bench_log_merged_into_the_shared_log(pg_url, tmp_path, capsys):
    from benchfit.cli import main

    src = tmp_path / "bench1.sqlite"
    shutil.copy(DATA / "log_schema1.sqlite", src)
    con = sqlite3.connect(src)
    raw = {t: con.execute(f"SELECT COUNT(*) FROM {t}").fetchone()[0] for t in ("runs", "results", "decisions")}
    old_results = sorted(con.execute("SELECT quantity, value, uncertainty, unit FROM results").fetchall(),
                         key=repr)
    old_decisions = sorted(con.execute("SELECT quantity, value, expanded_u, lower, upper, rule, decision "
                                       "FROM decisions").fetchall(), key=repr)
    con.close()
    append_run(pg_url, command="measure", unit="HC-01", bench="bench-2")       # the shared log has a run
    for attempt in range(2):
        with pytest.raises(SystemExit) as info:
            main(["log", "merge", str(src), "--bench", "bench-1", "--log", pg_url, "--json"])
        assert (info.value.code or 0) == 0
        out = json.loads(capsys.readouterr().out)
        assert (out["new"], out["present"]) == ((5, 0) if attempt == 0 else (0, 5))
    with open_store(src) as s, open_store(pg_url) as d:
        assert d.counts()["runs"] == raw["runs"] + 1
        by_uuid = {r["uuid"]: r["id"] for r in d.list_runs()}
        for rid, rec in s.iter_records():
            theirs = d.read_record(by_uuid[rec["run"]["uuid"]])
            assert theirs["run"].pop("bench") == "bench-1" and rec["run"].pop("bench") is None
            assert theirs["run"] == rec["run"]
            assert theirs["captures"] == rec["captures"]
            assert theirs["results"] == rec["results"] and theirs["decisions"] == rec["decisions"]
        new_results = sorted(d.con.execute("SELECT quantity, value, uncertainty, unit FROM results r JOIN runs "
                                           "ON runs.id = r.run_id WHERE runs.bench = 'bench-1'").fetchall(), key=repr)
        new_decisions = sorted(d.con.execute("SELECT quantity, value, expanded_u, lower, upper, rule, decision "
                                             "FROM decisions").fetchall(), key=repr)
    assert len(new_results) == raw["results"] == 49 and new_results == old_results
    assert len(new_decisions) == raw["decisions"] == 6 and new_decisions == old_decisions


def test_a_refusing_server_is_an_error_not_a_spool(pg_server, tmp_path, monkeypatch):
    # the server answered (no such database): a setup mistake to fix now, not a run to spool
    from benchfit.errors import LogError
    from benchfit.log.postgres import ServerUnavailable

    monkeypatch.setenv("BENCHFIT_SPOOL", str(tmp_path / "spool"))
    url = pg_server.url("no_such_database")
    with pytest.raises(LogError, match="refused the connection .*does not exist") as info:
        append_run(url, command="measure")
    assert not isinstance(info.value, ServerUnavailable)
    assert not (tmp_path / "spool").exists()


def test_password_comes_from_libpq_places_and_is_stored_nowhere(pg_server, tmp_path, monkeypatch):
    # a role that must give a password (scram-sha-256 for it alone in pg_hba.conf, PostgreSQL 15
    # documentation 21.1); the URL names no password: libpq reads PGPASSFILE or PGPASSWORD
    import psycopg

    secret = "hc-line-7f3a9c"
    hba = pg_server.folder / "data" / "pg_hba.conf"
    original = hba.read_text()
    monkeypatch.setenv("BENCHFIT_SPOOL", str(tmp_path / "spool"))
    monkeypatch.delenv("PGPASSWORD", raising=False)
    with psycopg.connect(pg_server.admin_url, autocommit=True) as con:
        con.execute("DROP DATABASE IF EXISTS bf_pw_db")
        con.execute("DROP ROLE IF EXISTS bf_pw")
        con.execute(f"CREATE ROLE bf_pw LOGIN PASSWORD '{secret}'")
        con.execute("CREATE DATABASE bf_pw_db OWNER bf_pw")
        hba.write_text("local all bf_pw scram-sha-256\n" + original)
        con.execute("SELECT pg_reload_conf()")
    url = pg_server.url("bf_pw_db").replace("user=postgres", "user=bf_pw")
    try:
        from benchfit.errors import LogError

        monkeypatch.setenv("PGPASSFILE", str(tmp_path / "none"))
        deadline = time.monotonic() + 20
        while time.monotonic() < deadline:   # the postmaster re-reads pg_hba.conf on SIGHUP, soon
            try:
                psycopg.connect(url).close()
            except psycopg.OperationalError as e:
                assert "password" in str(e)
                break
            time.sleep(0.05)
        with pytest.raises(LogError, match="refused the connection"):
            append_run(url, command="measure")
        passfile = tmp_path / "pgpass"
        passfile.write_text(f"*:*:bf_pw_db:bf_pw:{secret}\n")
        passfile.chmod(0o600)
        monkeypatch.setenv("PGPASSFILE", str(passfile))
        a = append_run(url, command="report", unit="HC-11", details={"spec": "hc_spec.toml"})
        monkeypatch.setenv("PGPASSFILE", str(tmp_path / "none"))
        monkeypatch.setenv("PGPASSWORD", secret)
        b = append_run(url, command="measure", unit="HC-11")
        assert not a.spooled and not b.spooled
        with psycopg.connect(pg_server.admin_url.replace("/postgres?", "/bf_pw_db?"), autocommit=True) as con:
            dump = repr(con.execute("SELECT r.*, u.* FROM runs r LEFT JOIN units u ON u.id = r.unit_id").fetchall())
        assert "HC-11" in dump and secret not in dump
        assert not (tmp_path / "spool").exists()
    finally:
        hba.write_text(original)
        with psycopg.connect(pg_server.admin_url, autocommit=True) as con:
            con.execute("SELECT pg_reload_conf()")
            con.execute("DROP DATABASE IF EXISTS bf_pw_db WITH (FORCE)")
            con.execute("DROP ROLE IF EXISTS bf_pw")
