"""Drift runs in the measurement log: the summary as results, the interval series in its own table.

A drift run is appended with :func:`benchfit.log.store.append_run` (command ``"drift"``): its
summary quantities (``drift_ppm_per_h``, ``warmup_s``, ``adev_1s``, ``level_drift_pct_per_h``,
``final_frequency_hz``, ``thd_max_pct``) go in as ordinary results, so ``benchfit log stats``
and spec limits work on them like on any measured value. The per-interval series goes in a
table of its own, created on first use::

    drift_series(run_id → runs, channel, k, t_start_s, t_mid_s, frequency_hz, frequency_u_hz,
                 chain_frequency_hz, chain_frequency_u_hz, phase_rad, phase_u_rad, segment,
                 amplitude, amplitude_u, vrms, thd_pct, thd_u_pct, duty_cycle_pct,
                 duty_cycle_u_pct, unit)        primary key (run_id, channel, k)

Plain SQL that SQLite and PostgreSQL both accept (no AUTOINCREMENT, REAL/INTEGER/TEXT only),
with an index on the run id. The series is written in one transaction after the run; if that
fails the run stays logged and the error says so.
"""

from __future__ import annotations

import sqlite3
from pathlib import Path
from typing import Any, Mapping

from benchfit.errors import LogError

__all__ = ["SERIES_COLUMNS", "ensure_series_table", "log_drift_run", "write_series", "read_series"]

#: columns of ``drift_series`` after (run_id, channel, k), in order
SERIES_COLUMNS = ("t_start_s", "t_mid_s", "frequency_hz", "frequency_u_hz", "chain_frequency_hz",
                  "chain_frequency_u_hz", "phase_rad", "phase_u_rad", "segment", "amplitude", "amplitude_u",
                  "vrms", "thd_pct", "thd_u_pct", "duty_cycle_pct", "duty_cycle_u_pct", "unit")

_TYPES = {"segment": "INTEGER", "unit": "TEXT"}

_DDL = (
    "CREATE TABLE IF NOT EXISTS drift_series (\n"
    "    run_id INTEGER NOT NULL REFERENCES runs(id),\n"
    "    channel TEXT NOT NULL,\n"
    "    k INTEGER NOT NULL,\n"
    + "".join(f"    {c} {_TYPES.get(c, 'REAL')},\n" for c in SERIES_COLUMNS)
    + "    PRIMARY KEY (run_id, channel, k)\n)",
    "CREATE INDEX IF NOT EXISTS drift_series_run ON drift_series(run_id)",
)


def ensure_series_table(con: Any) -> None:
    """Create ``drift_series`` and its index when missing (idempotent)."""
    for stmt in _DDL:
        con.execute(stmt)


def _finite(v: Any) -> Any:
    if isinstance(v, float) and v != v:
        return None
    return v


def write_series(db_path: str | Path, run_id: int, channel: str, series: list[Mapping[str, Any]]) -> int:
    """Insert the series rows of one run in one transaction; returns the number of rows."""
    from benchfit.log.store import open_log

    con = open_log(db_path)
    try:
        con.execute("BEGIN IMMEDIATE")
        try:
            ensure_series_table(con)
            cols = ", ".join(("run_id", "channel", "k") + SERIES_COLUMNS)
            marks = ", ".join("?" * (3 + len(SERIES_COLUMNS)))
            con.executemany(f"INSERT INTO drift_series ({cols}) VALUES ({marks})",
                            [(run_id, channel, int(r["index"]), *(_finite(r.get(c)) for c in SERIES_COLUMNS))
                             for r in series])
            con.execute("COMMIT")
        except BaseException:
            if con.in_transaction:
                con.execute("ROLLBACK")
            raise
    except sqlite3.Error as e:
        raise LogError(f"{db_path}: run {run_id} was logged but its interval series could not be written ({e}) — "
                       "check free space; the summary results are in the log") from e
    finally:
        con.close()
    return len(series)


def read_series(db_path: str | Path, run_id: int) -> list[dict[str, Any]]:
    """The series rows of one run, in interval order (empty when the run has none)."""
    from benchfit.log.store import open_log

    con = open_log(db_path, create=False)
    try:
        ensure_series_table(con)
        cur = con.execute(f"SELECT channel, k, {', '.join(SERIES_COLUMNS)} FROM drift_series "
                          "WHERE run_id = ? ORDER BY channel, k", (run_id,))
        names = ["channel", "index", *SERIES_COLUMNS]
        return [dict(zip(names, row)) for row in cur.fetchall()]
    except sqlite3.Error as e:
        raise LogError(f"{db_path}: cannot read the drift series of run {run_id} ({e}) — check the file") from e
    finally:
        con.close()


def log_drift_run(db_path: str | Path, run: Mapping[str, Any], *, operator: str | None = None) -> int:
    """Append a drift run (the JSON contract of :class:`~benchfit.measurement.drift_run.DriftRun`).

    The summary values are stored through ``append_run`` as results of role ``""`` (so
    ``log stats`` takes them) with their standard uncertainties; returns the run id.
    """
    from benchfit.log.store import append_run
    from benchfit.measurement.stability import SUMMARY_QUANTITIES

    st = run.get("stability") or {}
    params: dict[str, dict[str, Any]] = {}
    if st:
        for q, (vkey, ukey, unit) in SUMMARY_QUANTITIES.items():
            params[q] = {"value": st.get(vkey), "stderr": st.get(ukey) if ukey else None, "unit": unit}
    capture = {"path": run.get("kept") or run.get("file"), "sha256": run.get("sha256"),
               "metadata": {"channel": run.get("channel"), "sample_rate_hz": run.get("sample_rate_hz"),
                            "interval_s": run.get("interval_s"), "device": run.get("device"),
                            "calibration": run.get("calibration")}}
    details = {k: v for k, v in run.items() if k != "series"}
    run_id = append_run(db_path, command="drift", operator=operator, unit=run.get("unit"),
                        captures=[capture] if capture["path"] else [],
                        fits=[{"file": capture["path"], "parameters": params}] if params else [],
                        details=details)
    write_series(db_path, run_id, str(run.get("channel")), list(run.get("series") or []))
    return run_id

