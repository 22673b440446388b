"""The measurement log: an SQLite database of runs, captures, results and decisions.

Layout (schema version 1)::

    benchfit_schema(version, applied_utc)          one row per applied migration
    units(id, serial UNIQUE, first_seen_utc)
    runs(id, unit_id → units, command, time_utc, operator, benchfit_version, verdict, details_json)
    captures(id, run_id → runs, role, path, sha256, metadata_json)
    results(id, run_id → runs, capture_id → captures, role, source, channel, quantity,
            value, uncertainty, unit)               uncertainty = standard uncertainty (k = 1)
    decisions(id, run_id → runs, quantity, channel, label, value, expanded_u, lower, upper,
              unit, rule, decision, note)           expanded_u = U (k = 2)

The file carries ``PRAGMA application_id`` = :data:`APPLICATION_ID` so a foreign SQLite
file is recognised. Before anything is written the file is inspected through a read-only
connection: a file that is not a benchfit log gives one :class:`~benchfit.errors.LogError`
line and is never modified (an empty file, or an SQLite database with no tables at all, is
taken as a new log: that is also what a log just created by another process looks like).
The journal is WAL; each run is one ``BEGIN IMMEDIATE``
transaction, so a process killed mid-write leaves every committed run intact. Writers wait
on a busy database (``busy_timeout``) and retry the transaction a few times.
Structured blobs are JSON (never pickle).

Where the log lives: ``--log PATH``, else the ``BENCHFIT_LOG`` environment variable, else
``platformdirs.user_data_dir("benchfit")/log.sqlite`` (:func:`default_log_path`).
"""

from __future__ import annotations

import datetime as _dt
import json
import math
import os
import sqlite3
import time
from pathlib import Path
from typing import Any, Iterable, Mapping, Sequence

from benchfit.errors import LogError
from benchfit.report.spec import uncertainty_keys

__all__ = ["APPLICATION_ID", "SCHEMA_VERSION", "default_log_path", "resolve_log_path",
           "append_run", "list_runs", "get_run", "results_rows", "open_log"]

#: PRAGMA application_id of a benchfit log ("bfit" in ASCII)
APPLICATION_ID = 0x62666974
#: schema version this code writes
SCHEMA_VERSION = 1

_BUSY_TIMEOUT_S = 15.0
_RETRIES = 5

_MIGRATIONS: dict[int, str] = {
    1: """
    CREATE TABLE units (
        id INTEGER PRIMARY KEY,
        serial TEXT NOT NULL UNIQUE,
        first_seen_utc TEXT NOT NULL
    );
    CREATE TABLE runs (
        id INTEGER PRIMARY KEY,
        unit_id INTEGER REFERENCES units(id),
        command TEXT NOT NULL,
        time_utc TEXT NOT NULL,
        operator TEXT,
        benchfit_version TEXT NOT NULL,
        verdict TEXT,
        details_json TEXT NOT NULL DEFAULT '{}'
    );
    CREATE INDEX runs_time ON runs(time_utc);
    CREATE INDEX runs_unit ON runs(unit_id);
    CREATE TABLE captures (
        id INTEGER PRIMARY KEY,
        run_id INTEGER NOT NULL REFERENCES runs(id),
        role TEXT NOT NULL DEFAULT '',
        path TEXT,
        sha256 TEXT,
        metadata_json TEXT NOT NULL DEFAULT '{}'
    );
    CREATE TABLE results (
        id INTEGER PRIMARY KEY,
        run_id INTEGER NOT NULL REFERENCES runs(id),
        capture_id INTEGER REFERENCES captures(id),
        role TEXT NOT NULL DEFAULT '',
        source TEXT NOT NULL,
        channel TEXT,
        quantity TEXT NOT NULL,
        value REAL,
        uncertainty REAL,
        unit TEXT NOT NULL DEFAULT ''
    );
    CREATE INDEX results_quantity ON results(quantity);
    CREATE TABLE decisions (
        id INTEGER PRIMARY KEY,
        run_id INTEGER NOT NULL REFERENCES runs(id),
        quantity TEXT NOT NULL,
        channel TEXT,
        label TEXT,
        value REAL,
        expanded_u REAL,
        lower REAL,
        upper REAL,
        unit TEXT NOT NULL DEFAULT '',
        rule TEXT NOT NULL,
        decision TEXT NOT NULL,
        note TEXT NOT NULL DEFAULT ''
    );
    """,
}

# scalar quantities of the measure contract (DESIGN.md) and their unit ("<ch>": the channel's)
_MEASURED: tuple[tuple[str, str], ...] = (
    ("frequency_hz", "Hz"), ("amplitude", "<ch>"), ("vdc", "<ch>"), ("vrms", "<ch>"), ("vpp", "<ch>"),
    ("duty_cycle_pct", "%"), ("rise_time_s", "s"), ("fall_time_s", "s"), ("thd_pct", "%"),
    ("thd_n_pct", "%"), ("sinad_db", "dB"),
)
_DERIVED_UNITS = {"resonant_frequency_hz": "Hz", "damped_frequency_hz": "Hz",
                  "decay_rate_per_s": "1/s", "q_factor": ""}


def default_log_path() -> Path:
    """``platformdirs.user_data_dir("benchfit")/log.sqlite``."""
    import platformdirs

    return Path(platformdirs.user_data_dir("benchfit")) / "log.sqlite"


def resolve_log_path(option: str | Path | None) -> Path:
    """The log to use: the ``--log`` value, else ``$BENCHFIT_LOG``, else :func:`default_log_path`."""
    if option:
        return Path(option)
    env = os.environ.get("BENCHFIT_LOG")
    if env:
        return Path(env)
    return default_log_path()


def _utc_now() -> str:
    return _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%S.%fZ")


def _finite(v: Any) -> float | None:
    if v is None or isinstance(v, bool):
        return None
    try:
        f = float(v)
    except (TypeError, ValueError):
        return None
    return f if math.isfinite(f) else None


# --- opening -----------------------------------------------------------------------------

class _EmptyNewLog(Exception):
    """The file is an SQLite database with nothing in it yet: a log being created."""


def _read_schema(path: Path, uri: str) -> int | None:
    """Schema version of the log at ``uri`` (read-only); LogError when it is not benchfit's."""
    try:
        con = sqlite3.connect(uri, uri=True, timeout=_BUSY_TIMEOUT_S)
    except sqlite3.OperationalError:
        raise
    except sqlite3.Error as e:
        raise LogError(f"{path}: cannot open the log ({e}) — check the path and permissions") from e
    try:
        app_id = con.execute("PRAGMA application_id").fetchone()[0]
        tables = {r[0] for r in con.execute("SELECT name FROM sqlite_master WHERE type='table'")}
        if app_id == 0 and not tables:
            # an empty database: a log another process has just created and not yet set up
            raise _EmptyNewLog
        if app_id != APPLICATION_ID or "benchfit_schema" not in tables:
            raise LogError(f"{path}: not a benchfit measurement log — give another path with --log "
                           "or BENCHFIT_LOG (this file was left untouched)")
        return con.execute("SELECT MAX(version) FROM benchfit_schema").fetchone()[0]
    except sqlite3.OperationalError:
        raise
    except sqlite3.DatabaseError as e:
        raise LogError(f"{path}: not a benchfit measurement log ({e}) — give another path with --log "
                       "or BENCHFIT_LOG (this file was left untouched)") from e
    finally:
        con.close()


def _inspect(path: Path) -> int | None:
    """Schema version of an existing benchfit log, None for an empty new file; never writes.

    Raises LogError for anything that is not a benchfit log.
    """
    if path.stat().st_size == 0:
        return None
    uri = f"{path.resolve().as_uri()}?mode=ro"
    for attempt in range(_RETRIES * 4):
        try:
            version = _read_schema(path, uri)
            break
        except sqlite3.OperationalError as e:
            # locked, busy, or caught while another process creates the log and switches it
            # to WAL: not a verdict on the file — wait and look again
            if attempt == _RETRIES * 4 - 1:
                raise LogError(f"{path}: cannot read the log ({e}) — another program may hold it; "
                               "try again") from e
            time.sleep(0.05 * (attempt + 1))
        except _EmptyNewLog:
            return None
    if version is None or version > SCHEMA_VERSION:
        raise LogError(f"{path}: log schema version {version} is newer than this benchfit understands "
                       f"({SCHEMA_VERSION}) — upgrade benchfit")
    return int(version)


def _migrate(con: sqlite3.Connection, current: int | None) -> None:
    start = 0 if current is None else current
    if start >= SCHEMA_VERSION:
        return
    _begin(con)
    try:
        if current is None:
            con.execute(f"PRAGMA application_id = {APPLICATION_ID}")
            con.execute("CREATE TABLE IF NOT EXISTS benchfit_schema "
                        "(version INTEGER PRIMARY KEY, applied_utc TEXT NOT NULL)")
        # re-read inside the write lock: another process may have migrated meanwhile
        row = con.execute("SELECT MAX(version) FROM benchfit_schema").fetchone()
        have = row[0] or 0
        for version in range(have + 1, SCHEMA_VERSION + 1):
            for stmt in _MIGRATIONS[version].split(";"):
                if stmt.strip():
                    con.execute(stmt)
            con.execute("INSERT INTO benchfit_schema(version, applied_utc) VALUES (?, ?)",
                        (version, _utc_now()))
        con.execute("COMMIT")
    except BaseException:
        con.execute("ROLLBACK")
        raise


def _set_wal(con: sqlite3.Connection) -> None:
    """Switch the log to WAL mode (once per file), retrying while another process holds it.

    Changing the journal mode needs an exclusive lock, and SQLite may answer "locked" at once
    instead of waiting for the busy timeout while a second process creates the same log.
    """
    for attempt in range(_RETRIES * 4):
        try:
            if str(con.execute("PRAGMA journal_mode").fetchone()[0]).lower() == "wal":
                return
            con.execute("PRAGMA journal_mode = WAL")
            return
        except sqlite3.OperationalError as e:
            if ("locked" not in str(e) and "busy" not in str(e)) or attempt == _RETRIES * 4 - 1:
                raise
            time.sleep(0.05 * (attempt + 1))


def _begin(con: sqlite3.Connection) -> None:
    """BEGIN IMMEDIATE with retries while another writer holds the lock."""
    for attempt in range(_RETRIES):
        try:
            con.execute("BEGIN IMMEDIATE")
            return
        except sqlite3.OperationalError as e:
            if "locked" not in str(e) and "busy" not in str(e):
                raise
            if attempt == _RETRIES - 1:
                raise
            time.sleep(0.05 * (attempt + 1))


def open_log(path: str | Path, *, create: bool = True) -> sqlite3.Connection:
    """Open (and if needed create or migrate) a benchfit log.

    Parameters
    ----------
    path : str or Path
        The SQLite file.
    create : bool
        Create the file when it does not exist; with False a missing file is an error.

    Raises
    ------
    LogError
        The file is not a benchfit log, is newer than this code, or cannot be opened.
    """
    p = Path(path)
    if p.is_dir():
        raise LogError(f"{p}: is a directory — give a file path for the log, e.g. {p / 'log.sqlite'}")
    exists = p.exists()
    if not exists and not create:
        raise LogError(f"{p}: no log file there — run a report (or measure/fit with --log) first, "
                       "or give the right path with --log")
    current = _inspect(p) if exists else None
    try:
        if not exists:
            p.parent.mkdir(parents=True, exist_ok=True)
        con = sqlite3.connect(str(p), timeout=_BUSY_TIMEOUT_S, isolation_level=None)
        con.execute(f"PRAGMA busy_timeout = {int(_BUSY_TIMEOUT_S * 1000)}")
        _set_wal(con)
        con.execute("PRAGMA foreign_keys = ON")
        _migrate(con, current)
    except sqlite3.Error as e:
        raise LogError(f"{p}: cannot use the log ({e}) — check the path, permissions and free space") from e
    except OSError as e:
        raise LogError(f"{p}: cannot create the log ({e.strerror}) — check the directory") from e
    return con


# --- normalising the inputs ----------------------------------------------------------------

def _as_dict(obj: Any, **kwargs: Any) -> dict[str, Any]:
    if isinstance(obj, Mapping):
        return dict(obj)
    to_dict = getattr(obj, "to_dict", None)
    if to_dict is None:
        raise LogError(f"append_run: cannot store a {type(obj).__name__} — pass a result object or a dict")
    try:
        return to_dict(**kwargs)
    except TypeError:
        return to_dict()


def _capture_row(obj: Any) -> dict[str, Any]:
    if isinstance(obj, Mapping):
        d = dict(obj)
        return {"role": str(d.get("role", "")), "path": d.get("path") or d.get("source") or d.get("file"),
                "sha256": d.get("sha256"), "metadata": d.get("metadata", {})}
    meta = dict(getattr(obj, "metadata", {}) or {})
    cal = getattr(obj, "calibration", None)
    if cal is not None and hasattr(cal, "to_dict"):
        meta = {**meta, "calibration": cal.to_dict()}
    return {"role": "", "path": getattr(obj, "source", None), "sha256": getattr(obj, "sha256", None),
            "metadata": meta}


def _measurement_rows(m: Mapping[str, Any], role: str) -> list[dict[str, Any]]:
    rows = []
    for ch in m.get("channels", []):
        extra = ch.get("extra", {}) or {}
        for q, unit in _MEASURED:
            if q not in ch:
                continue
            u = None
            for k in uncertainty_keys(q):
                if ch.get(k) is not None:
                    u = ch.get(k)
                elif extra.get(k) is not None:
                    u = extra.get(k)
                if u is not None:
                    break
            rows.append({"file": m.get("file"), "role": role, "source": "measure",
                         "channel": ch.get("name"), "quantity": q, "value": _finite(ch.get(q)),
                         "uncertainty": _finite(u),
                         "unit": ch.get("unit", "") if unit == "<ch>" else unit})
    return rows


def _fit_rows(f: Mapping[str, Any], role: str) -> list[dict[str, Any]]:
    rows = []
    for name, p in (f.get("parameters") or {}).items():
        rows.append({"file": f.get("file"), "role": role, "source": "fit", "channel": None,
                     "quantity": name, "value": _finite(p.get("value")),
                     "uncertainty": _finite(p.get("stderr")), "unit": p.get("unit", "")})
    for name, d in (f.get("derived") or {}).items():
        rows.append({"file": f.get("file"), "role": role, "source": "fit", "channel": None,
                     "quantity": name, "value": _finite(d.get("value")),
                     "uncertainty": _finite(d.get("stderr")), "unit": _DERIVED_UNITS.get(name, "")})
    return rows


def _role_of(item: Any) -> tuple[Any, str]:
    """``(obj, role)`` from either an object or a ``(role, obj)`` pair."""
    if isinstance(item, tuple) and len(item) == 2 and isinstance(item[0], str):
        return item[1], item[0]
    return item, ""


# --- writing ---------------------------------------------------------------------------

def append_run(db_path: str | Path, *, command: str, operator: str | None = None,
               unit: str | None = None, captures: Sequence[Any] = (),
               measurements: Sequence[Any] = (), fits: Sequence[Any] = (),
               decisions: Sequence[Any] = (), verdict: str | None = None,
               details: Mapping[str, Any] | None = None) -> int:
    """Append one run to the log in a single transaction and return its run id.

    Parameters
    ----------
    db_path : str or Path
        The log file (created when missing). Use :func:`resolve_log_path` for the default.
    command : str
        The command that produced the run: ``"measure"``, ``"fit"``, ``"report"``, ...
    operator : str, optional
        Who made the measurement.
    unit : str, optional
        Serial number of the unit under test.
    captures : sequence
        :class:`~benchfit.capture.capture.Capture` objects or dicts with ``path``,
        ``sha256``, ``metadata`` and optionally ``role`` (``"as-found"``/``"as-left"``).
    measurements, fits : sequence
        :class:`~benchfit.measurement.result.Measurement` / :class:`~benchfit.fit.result.FitResult`
        objects or their ``to_dict()`` objects; an item may be a ``(role, result)`` pair.
        Each scalar quantity becomes a row of ``results`` (value, standard uncertainty, unit);
        results are linked to the capture with the same file path.
    decisions : sequence of dict
        ``{"quantity", "channel", "label", "value", "expanded_u", "lower", "upper", "unit",
        "rule", "decision", "note"}`` — see :mod:`benchfit.report.assemble`.
    verdict : str, optional
        Overall decision of a report run.
    details : mapping, optional
        Extra JSON-serialisable information about the run (spec name, report paths, ...).

    Returns
    -------
    int
        The new run's id.

    Raises
    ------
    LogError
        When the log cannot be written (not a benchfit log, disk full, still locked after retries).
    """
    from benchfit import __version__

    cap_rows = []
    for item in captures:
        obj, role = _role_of(item)
        row = _capture_row(obj)
        row["role"] = role or row["role"]
        cap_rows.append(row)
    res_rows: list[dict[str, Any]] = []
    for item in measurements:
        obj, role = _role_of(item)
        res_rows += _measurement_rows(_as_dict(obj, full=True), role)
    for item in fits:
        obj, role = _role_of(item)
        res_rows += _fit_rows(_as_dict(obj), role)
    dec_rows = [_as_dict(d) for d in decisions]
    try:
        details_json = json.dumps(dict(details or {}), allow_nan=False, default=str)
        cap_json = [json.dumps(r["metadata"], allow_nan=False, default=str) for r in cap_rows]
    except ValueError as e:
        raise LogError(f"{db_path}: run details contain a non-finite number ({e}) — report this as a bug") from e

    con = open_log(db_path)
    now = _utc_now()
    try:
        for attempt in range(_RETRIES):
            try:
                _begin(con)
                try:
                    unit_id = None
                    if unit:
                        con.execute("INSERT OR IGNORE INTO units(serial, first_seen_utc) VALUES (?, ?)",
                                    (unit, now))
                        unit_id = con.execute("SELECT id FROM units WHERE serial = ?", (unit,)).fetchone()[0]
                    run_id = con.execute(
                        "INSERT INTO runs(unit_id, command, time_utc, operator, benchfit_version, verdict,"
                        " details_json) VALUES (?, ?, ?, ?, ?, ?, ?)",
                        (unit_id, command, now, operator, __version__, verdict, details_json)).lastrowid
                    cap_ids: dict[tuple[str | None, str], int] = {}
                    for r, mj in zip(cap_rows, cap_json):
                        cid = con.execute(
                            "INSERT INTO captures(run_id, role, path, sha256, metadata_json) VALUES (?,?,?,?,?)",
                            (run_id, r["role"], r["path"], r["sha256"], mj)).lastrowid
                        cap_ids.setdefault((r["path"], r["role"]), cid)
                        cap_ids.setdefault((r["path"], ""), cid)
                    con.executemany(
                        "INSERT INTO results(run_id, capture_id, role, source, channel, quantity, value,"
                        " uncertainty, unit) VALUES (?,?,?,?,?,?,?,?,?)",
                        [(run_id, cap_ids.get((r["file"], r["role"])), r["role"], r["source"], r["channel"],
                          r["quantity"], r["value"], r["uncertainty"], r["unit"]) for r in res_rows])
                    con.executemany(
                        "INSERT INTO decisions(run_id, quantity, channel, label, value, expanded_u, lower,"
                        " upper, unit, rule, decision, note) VALUES (?,?,?,?,?,?,?,?,?,?,?,?)",
                        [(run_id, d.get("quantity"), None if d.get("channel") is None else str(d["channel"]),
                          d.get("label"), _finite(d.get("value")), _finite(d.get("expanded_u")),
                          _finite(d.get("lower")), _finite(d.get("upper")), d.get("unit", ""),
                          d.get("rule", ""), d.get("decision", ""), d.get("note", "")) for d in dec_rows])
                    con.execute("COMMIT")
                    return int(run_id)
                except BaseException:
                    if con.in_transaction:
                        con.execute("ROLLBACK")
                    raise
            except sqlite3.OperationalError as e:
                if ("locked" in str(e) or "busy" in str(e)) and attempt < _RETRIES - 1:
                    time.sleep(0.1 * (attempt + 1))
                    continue
                raise LogError(f"{db_path}: cannot write the run ({e}) — another program holds the log; "
                               "try again") from e
            except sqlite3.Error as e:
                raise LogError(f"{db_path}: cannot write the run ({e}) — check free space and permissions") from e
        raise LogError(f"{db_path}: the log stayed locked — try again")
    finally:
        con.close()


# --- reading ---------------------------------------------------------------------------

def _read(db_path: str | Path) -> sqlite3.Connection:
    con = open_log(db_path, create=False)
    con.row_factory = sqlite3.Row
    return con


def list_runs(db_path: str | Path, *, unit: str | None = None, since: str | None = None) -> list[dict[str, Any]]:
    """Runs in time order: id, time_utc, command, unit, operator, verdict, n_captures.

    ``since`` is an ISO date or date-time (UTC); runs at or after it are listed.
    """
    sql = ("SELECT r.id, r.time_utc, r.command, u.serial AS unit, r.operator, r.verdict, "
           "r.benchfit_version, (SELECT COUNT(*) FROM captures c WHERE c.run_id = r.id) AS n_captures "
           "FROM runs r LEFT JOIN units u ON u.id = r.unit_id WHERE 1=1")
    return _select(db_path, sql, [("u.serial = ?", unit), ("r.time_utc >= ?", since)],
                   " ORDER BY r.time_utc, r.id")


def _select(db_path: str | Path, sql: str, filters: list[tuple[str, Any]], order: str) -> list[dict[str, Any]]:
    """Run ``sql`` (ending in a WHERE clause) with the filters whose value is given, as dicts."""
    args: list[Any] = []
    for clause, value in filters:
        if value:
            sql += f" AND {clause}"
            args.append(value)
    con = _read(db_path)
    try:
        return [dict(r) for r in con.execute(sql + order, args)]
    except sqlite3.Error as e:
        raise LogError(f"{db_path}: cannot read the log ({e}) — check the file") from e
    finally:
        con.close()


def get_run(db_path: str | Path, run_id: int) -> dict[str, Any]:
    """Everything stored about one run: the run row, its captures, results and decisions."""
    con = _read(db_path)
    try:
        row = con.execute("SELECT r.*, u.serial AS unit FROM runs r LEFT JOIN units u ON u.id = r.unit_id "
                          "WHERE r.id = ?", (run_id,)).fetchone()
        if row is None:
            last = con.execute("SELECT MAX(id) FROM runs").fetchone()[0]
            raise LogError(f"run {run_id}: no such run in {db_path} — "
                           + ("the log is empty" if last is None else f"run ids go from 1 to {last}; see `benchfit log list`"))
        run = dict(row)
        run["details"] = json.loads(run.pop("details_json") or "{}")
        caps = []
        for c in con.execute("SELECT id, role, path, sha256, metadata_json FROM captures WHERE run_id = ? "
                             "ORDER BY id", (run_id,)):
            d = dict(c)
            d["metadata"] = json.loads(d.pop("metadata_json") or "{}")
            caps.append(d)
        run["captures"] = caps
        run["results"] = [dict(r) for r in con.execute(
            "SELECT r.role, r.source, r.channel, r.quantity, r.value, r.uncertainty, r.unit, c.path AS file "
            "FROM results r LEFT JOIN captures c ON c.id = r.capture_id WHERE r.run_id = ? ORDER BY r.id",
            (run_id,))]
        run["decisions"] = [dict(r) for r in con.execute(
            "SELECT quantity, channel, label, value, expanded_u, lower, upper, unit, rule, decision, note "
            "FROM decisions WHERE run_id = ? ORDER BY id", (run_id,))]
        return run
    except sqlite3.Error as e:
        raise LogError(f"{db_path}: cannot read run {run_id} ({e}) — check the file") from e
    finally:
        con.close()


def results_rows(db_path: str | Path, *, quantity: str | None = None, unit: str | None = None,
                 since: str | None = None) -> list[dict[str, Any]]:
    """Flat rows, one per stored result, joined with their run, unit and capture (for export/stats)."""
    sql = ("SELECT r.id AS run_id, r.time_utc, r.command, u.serial AS unit, r.operator, r.verdict, "
           "res.role, res.source, res.channel, res.quantity, res.value, res.uncertainty, "
           "res.unit AS value_unit, c.path AS file, c.sha256 "
           "FROM results res JOIN runs r ON r.id = res.run_id LEFT JOIN units u ON u.id = r.unit_id "
           "LEFT JOIN captures c ON c.id = res.capture_id WHERE 1=1")
    return _select(db_path, sql, [("res.quantity = ?", quantity), ("u.serial = ?", unit),
                                  ("r.time_utc >= ?", since)], " ORDER BY r.time_utc, r.id, res.id")


def iter_quantities(rows: Iterable[Mapping[str, Any]]) -> list[str]:
    """Distinct quantity names in result rows, in first-seen order."""
    seen: dict[str, None] = {}
    for r in rows:
        seen.setdefault(r["quantity"], None)
    return list(seen)
