"""The SQLite backend: one log file on the bench's own disk.

The file carries ``PRAGMA application_id`` = :data:`APPLICATION_ID` so a foreign SQLite
file is recognised. Before anything is written the file is inspected through a read-only
connection: a file that is not a benchfit log gives one :class:`~benchfit.errors.LogError`
line and is never modified (an empty file, or an SQLite database with no tables at all, is
taken as a new log: that is also what a log just created by another process looks like).
The journal is WAL; each run is one ``BEGIN IMMEDIATE`` transaction, so a process killed
mid-write leaves every committed run intact. Writers wait on a busy database
(``busy_timeout``) and retry the transaction a few times. WAL needs a local disk (SQLite's
documentation: it does not work over a network filesystem) — several benches share a
PostgreSQL log instead (:mod:`benchfit.log.postgres`).
"""

from __future__ import annotations

import contextlib
import datetime as _dt
import sqlite3
import time
import uuid as _uuid
from pathlib import Path
from typing import Iterator

from benchfit.errors import LogError
from benchfit.log.base import LogStore
from benchfit.log import schema
from benchfit.log.schema import VERSION_TABLE, statements

__all__ = ["APPLICATION_ID", "SQLiteStore", "connect"]

#: PRAGMA application_id of a benchfit log ("bfit" in ASCII)
APPLICATION_ID = 0x62666974

_BUSY_TIMEOUT_S = 15.0
_RETRIES = 5


def _utc_now() -> str:
    return _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%S.%fZ")


class _EmptyNewLog(Exception):
    """The file is an SQLite database with nothing in it yet: a log being created."""


def _open_readonly(uri: str) -> sqlite3.Connection:
    """A read-only connection that starts no transaction by itself (they are begun explicitly)."""
    return sqlite3.connect(uri, uri=True, timeout=_BUSY_TIMEOUT_S, isolation_level=None)


def _read_schema(path: Path, uri: str) -> int | None:
    """Schema version of the log at ``uri`` (read-only); LogError when it is not benchfit's.

    The header and the table list are read in one read transaction, so both come from the same
    snapshot: read one statement at a time, a log that another process sets up in between would
    show its tables but not yet its application_id, and be refused as foreign.
    """
    try:
        con = _open_readonly(uri)
    except sqlite3.OperationalError:
        raise
    except sqlite3.Error as e:
        raise LogError(f"{path}: cannot open the log ({e}) — check the path and permissions") from e
    try:
        con.execute("BEGIN")
        app_id = con.execute("PRAGMA application_id").fetchone()[0]
        tables = {r[0] for r in con.execute("SELECT name FROM sqlite_master WHERE type='table'")}
        if app_id == 0 and not tables:
            # an empty database: a log another process has just created and not yet set up
            raise _EmptyNewLog
        if app_id != APPLICATION_ID or "benchfit_schema" not in tables:
            raise LogError(f"{path}: not a benchfit measurement log — give another path with log_path= "
                           "or BENCHFIT_LOG (this file was left untouched)")
        return con.execute("SELECT MAX(version) FROM benchfit_schema").fetchone()[0]
    except sqlite3.OperationalError:
        raise
    except sqlite3.DatabaseError as e:
        raise LogError(f"{path}: not a benchfit measurement log ({e}) — give another path with log_path= "
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
    if version is None or version > schema.SCHEMA_VERSION:
        raise LogError(f"{path}: log schema version {version} is newer than this benchfit understands "
                       f"({schema.SCHEMA_VERSION}) — upgrade benchfit")
    return int(version)


def _migrate(con: sqlite3.Connection, current: int | None) -> None:
    start = 0 if current is None else current
    if start >= schema.SCHEMA_VERSION:
        return
    _begin(con)
    try:
        if current is None:
            con.execute(f"PRAGMA application_id = {APPLICATION_ID}")
            con.execute(VERSION_TABLE)
        # re-read inside the write lock: another process may have migrated meanwhile
        row = con.execute("SELECT MAX(version) FROM benchfit_schema").fetchone()
        have = row[0] or 0
        for version in range(have + 1, schema.SCHEMA_VERSION + 1):
            for stmt in statements(version, "sqlite"):
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


def _open_writer(path: Path) -> sqlite3.Connection:
    """A connection for writing: explicit transactions, busy timeout, the schema's SQL functions."""
    con = sqlite3.connect(str(path), timeout=_BUSY_TIMEOUT_S, isolation_level=None)
    con.create_function("bf_now", 0, _utc_now)
    con.create_function("bf_uuid", 0, lambda: str(_uuid.uuid4()))
    con.execute(f"PRAGMA busy_timeout = {int(_BUSY_TIMEOUT_S * 1000)}")
    return con


def connect(path: str | Path, *, create: bool = True) -> sqlite3.Connection:
    """Open (and if needed create or migrate) a benchfit log file; a raw sqlite3 connection.

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
        raise LogError(f"{p}: no log file there — run a report (or measure/fit with log_path=) first, "
                       "or give the right path with log_path=")
    current = _inspect(p) if exists else None
    try:
        if not exists:
            p.parent.mkdir(parents=True, exist_ok=True)
        con = _open_writer(p)
        _set_wal(con)
        con.execute("PRAGMA foreign_keys = ON")
        _migrate(con, current)
    except sqlite3.Error as e:
        raise LogError(f"{p}: cannot use the log ({e}) — check the path, permissions and free space") from e
    except OSError as e:
        raise LogError(f"{p}: cannot create the log ({e.strerror}) — check the directory") from e
    return con


class SQLiteStore(LogStore):
    """A benchfit log in one SQLite file (see the module docstring)."""

    dialect = "sqlite"

    def __init__(self, path: str | Path, *, create: bool = True) -> None:
        self.path = Path(path)
        self.where = str(path)
        self.con = connect(self.path, create=create)

    def _errors(self) -> tuple[type[BaseException], ...]:
        return (sqlite3.Error,)

    @contextlib.contextmanager
    def transaction(self) -> Iterator[None]:
        """``BEGIN IMMEDIATE`` … ``COMMIT`` with retries while another writer holds the lock."""
        # BEGIN IMMEDIATE takes the write lock (waiting, then retrying, while another writer
        # holds it); once held, a WAL log gives no "busy" to the statements that follow
        try:
            _begin(self.con)
            try:
                yield
                self.con.execute("COMMIT")
            except BaseException:
                if self.con.in_transaction:
                    self.con.execute("ROLLBACK")
                raise
        except sqlite3.OperationalError as e:
            raise LogError(f"{self.where}: cannot write the run ({e}) — another program holds the log; "
                           "try again") from e
        except sqlite3.Error as e:
            raise LogError(f"{self.where}: cannot write the run ({e}) — check free space and "
                           "permissions") from e
