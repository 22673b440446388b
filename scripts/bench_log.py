#!/usr/bin/env python3
"""Log figures: `log list` on 20,000 runs, SQLite and PostgreSQL (goal: latest 50 under 0.2 s).

``run()`` returns ``{"name", "value", "unit", "goal"}`` rows (see scripts/bench.py). The
PostgreSQL figures use the server named by ``$BENCHFIT_TEST_PG`` (scripts/test.sh exports
one), else a throw-away cluster started with scripts/pg_throwaway.sh and removed after.
Each run stored has 1 capture, 5 results and 1 decision (a small report run). Times are the
median of 7 calls of :func:`benchfit.log.store.list_runs`, which opens the log (connects,
checks the schema), reads and closes it — what `benchfit log list` does after start-up.
"""

from __future__ import annotations

import contextlib
import datetime as _dt
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

N_RUNS = 20_000


def _records(n: int):
    from benchfit.log.records import make_record

    t0 = _dt.datetime(2026, 11, 1, tzinfo=_dt.timezone.utc)
    for i in range(n):
        m = {"file": f"hc{i}.wav", "channels": [{"name": "output", "unit": "V", "frequency_hz": 50.0 + (i % 7) * 0.01,
                                                   "frequency_u_hz": 0.003, "vrms": 1.27, "vdc": 0.0, "vpp": 3.6,
                                                   "thd_pct": 3.1}]}
        rec = make_record(command="report", operator="R. Okafor", unit=f"HC-{i % 500 + 1:03d}",
                          bench=f"bench-{i % 4 + 1}", captures=[("as-left", {"path": f"hc{i}.wav"})],
                          measurements=[("as-left", m)],
                          decisions=[{"quantity": "frequency_hz", "value": 50.0, "rule": "guard-banded",
                                      "decision": "pass"}], fits=(), verdict="pass", details={}, where="bench")
        rec["run"]["time_utc"] = (t0 + _dt.timedelta(seconds=60 * i)).strftime("%Y-%m-%dT%H:%M:%S.%fZ")
        yield rec


def _median_time(fn, repeat: int = 7) -> float:
    times = []
    for _ in range(repeat):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return statistics.median(times)


@contextlib.contextmanager
def _server():
    url = os.environ.get("BENCHFIT_TEST_PG")
    if url:
        yield url
        return
    folder = tempfile.mkdtemp(prefix="bfpg.")
    script = HERE / "pg_throwaway.sh"
    res = subprocess.run(["bash", str(script), "start", folder], capture_output=True, text=True)
    try:
        if res.returncode != 0:
            raise RuntimeError(res.stderr.strip())
        yield res.stdout.strip()
    finally:
        subprocess.run(["bash", str(script), "stop", folder])


def _fill(target) -> float:
    from benchfit.log.store import open_store

    t = time.perf_counter()
    with open_store(target) as s:
        s.write_many(_records(N_RUNS), batch=1000)
    return time.perf_counter() - t


def _figures(label: str, target) -> list[dict]:
    from benchfit.log.store import list_runs

    fill = _fill(target)
    assert len(list_runs(target, last=50)) == 50
    rows = [{"name": f"{label}: store {N_RUNS} runs (batches of 1000)", "value": fill, "unit": "s", "goal": ""},
            {"name": f"{label}: log list, latest 50 of {N_RUNS}", "value": _median_time(lambda: list_runs(target, last=50)),
             "unit": "s", "goal": "< 0.2 s"},
            {"name": f"{label}: log list, all {N_RUNS}", "value": _median_time(lambda: list_runs(target), 3),
             "unit": "s", "goal": ""}]
    cli = [sys.executable, "-m", "benchfit", "log", "list", "--last", "50", "--json", "--log", str(target)]
    env = dict(os.environ, PYTHONPATH=str(HERE.parent))
    rows.append({"name": f"{label}: `benchfit log list --last 50` wall time (with start-up)",
                 "value": _median_time(lambda: subprocess.run(cli, check=True, capture_output=True, env=env), 3),
                 "unit": "s", "goal": ""})
    return rows


def run() -> list[dict]:
    import psycopg

    from benchfit.log.store import list_runs, open_store

    out = []
    with tempfile.TemporaryDirectory() as tmp:
        db = Path(tmp) / "log.sqlite"
        out += _figures("SQLite", db)
        # the schema-1 layout for contrast: the same file without the foreign-key indexes
        with open_store(db) as s:
            for idx in ("captures_run", "results_run", "results_capture", "decisions_run"):
                s.con.execute(f"DROP INDEX {idx}")
        out.append({"name": f"SQLite without FK indexes (schema 1): latest 50 of {N_RUNS}",
                    "value": _median_time(lambda: list_runs(db, last=50), 3), "unit": "s", "goal": ""})
    with _server() as admin:
        name = f"bf_bench_{os.getpid()}"
        with psycopg.connect(admin, autocommit=True) as con:
            con.execute(f"CREATE DATABASE {name}")
        try:
            out += _figures("PostgreSQL", admin.replace("/postgres?", f"/{name}?", 1))
        finally:
            with psycopg.connect(admin, autocommit=True) as con:
                con.execute(f"DROP DATABASE {name}")
    return out


if __name__ == "__main__":
    for row in run():
        print(f"  {row['name']:<62} {row['value']:>10.4g} {row['unit']:<3} {row['goal']}", flush=True)
