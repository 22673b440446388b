"""The PostgreSQL backend: one log shared by the benches of a line (psycopg 3).

A log URL is a libpq connection URI, ``postgresql://user@host:port/dbname`` (or
``postgres://``; ``postgresql:///dbname?host=/run/postgresql`` for a Unix socket,
``postgresql:///?service=benchfit`` for a service file entry). The password is never part
of it: libpq finds it in its usual places — ``~/.pgpass`` (or the file named by
``PGPASSFILE``), ``PGPASSWORD``, or a connection service file (``PGSERVICEFILE``). A URL that
carries a password is refused, because the command line shows it to every user of the
machine and to the shell history, and the URL is printed in messages.

The tables live in the database's default schema; a database whose ``runs`` table is not
benchfit's (no ``benchfit_schema``) is refused and left untouched. Migrations are those of
:mod:`benchfit.log.schema`, applied under a transaction-scoped advisory lock so that several
benches starting at once migrate once. Run times come from the server's clock
(``clock_timestamp()`` in UTC) unless the run brings its own (a spooled or merged run).
"""

from __future__ import annotations

import contextlib
import os
import re
from dataclasses import dataclass
from typing import Any, Iterator

from benchfit.errors import LogError
from benchfit.log.base import LogStore
from benchfit.log import schema
from benchfit.log.schema import VERSION_TABLE, render, statements

__all__ = ["LogURL", "PostgresStore", "ServerUnavailable", "is_log_url", "parse_log_url"]

#: key of the advisory lock taken while migrating ("bfit" in ASCII)
_LOCK_KEY = 0x62666974
_CONNECT_TIMEOUT_S = 5
_URL_RE = re.compile(r"^\s*postgres(ql)?:", re.IGNORECASE)


class ServerUnavailable(LogError):
    """The server could not be reached or dropped the connection (the run may be spooled)."""


@dataclass(frozen=True)
class LogURL:
    """A PostgreSQL log named by URL (never a file). ``str()`` is the URL as given (no password)."""

    url: str

    def __str__(self) -> str:
        return self.url

    @property
    def display(self) -> str:
        return self.url


def is_log_url(text: str) -> bool:
    """True for anything that names a log by URL rather than by file path."""
    return bool(_URL_RE.match(text)) or "://" in text


def parse_log_url(text: str) -> LogURL:
    """Check a log URL: a PostgreSQL URI that libpq can parse and that carries no password.

    Raises
    ------
    LogError
        Another scheme, a malformed URI, or a password in it.
    """
    text = text.strip()
    if not _URL_RE.match(text):
        scheme = text.split(":", 1)[0]
        raise LogError(f"{text}: {scheme!r} is not a log URL benchfit knows — give a file path for an "
                       "SQLite log or postgresql://user@host:port/dbname for a shared one")
    try:
        from psycopg.conninfo import conninfo_to_dict
    except ImportError as e:  # pragma: no cover - psycopg is a dependency
        raise LogError(f"{_redact(text)}: the PostgreSQL driver is missing — pip install 'psycopg[binary]'") from e
    try:
        params = conninfo_to_dict(text)
    except Exception as e:
        raise LogError(f"{_redact(text)}: not a valid PostgreSQL URL ({str(e).strip()}) — write it like "
                       "postgresql://user@host:5432/benchfit") from e
    if params.get("password"):
        raise LogError(f"{_redact(text)}: the URL carries a password — remove it and keep the password in "
                       "~/.pgpass (or the file PGPASSFILE names), PGPASSWORD or a service file; a command line "
                       "is visible to other users and to the shell history")
    return LogURL(text)


def _redact(text: str) -> str:
    """``text`` with any password in it replaced by ``***`` (for messages only)."""
    text = re.sub(r"(://[^/@:?#]*):[^/@?#]*@", r"\1:***@", text)
    return re.sub(r"(?i)(password=)[^&\s]*", r"\1***", text)


def _driver():
    try:
        import psycopg
    except ImportError as e:  # pragma: no cover - psycopg is a dependency
        raise LogError("the PostgreSQL driver is missing — pip install 'psycopg[binary]'") from e
    return psycopg


class PostgresStore(LogStore):
    """A benchfit log in a PostgreSQL database (see the module docstring).

    Raises :class:`ServerUnavailable` when the server cannot be reached, :class:`LogError`
    when the database is not a benchfit log (or ``create`` is False and it has none yet).
    """

    dialect = "postgresql"

    def __init__(self, target: LogURL | str, *, create: bool = True) -> None:
        self.target = target if isinstance(target, LogURL) else parse_log_url(str(target))
        self.where = self.target.display
        psycopg = _driver()
        self._psycopg = psycopg
        kwargs: dict[str, Any] = {"autocommit": True, "application_name": "benchfit"}
        if "connect_timeout" not in self.target.url and not os.environ.get("PGCONNECT_TIMEOUT"):
            kwargs["connect_timeout"] = _CONNECT_TIMEOUT_S
        try:
            self.con = psycopg.connect(self.target.url, **kwargs)
        except psycopg.OperationalError as e:
            if _refused(e):
                raise LogError(f"{self.where}: the log server refused the connection ({_first_line(e)}) — "
                               "check the user, the database name and the password (~/.pgpass, PGPASSWORD "
                               "or a service file)") from e
            raise ServerUnavailable(f"{self.where}: cannot reach the log server ({_first_line(e)}) — check "
                                    "that it runs and the URL") from e
        except psycopg.Error as e:
            raise LogError(f"{self.where}: cannot open the log ({_first_line(e)}) — check the URL") from e
        try:
            self._migrate(create)
        except BaseException:
            self.close()
            raise

    def _errors(self) -> tuple[type[BaseException], ...]:
        return (self._psycopg.Error,)

    def _version(self, locked: bool = False) -> int | None:
        # a catalog query, not to_regclass(): its answer comes from the statement's snapshot,
        # whereas to_regclass() may answer from this session's cache of an earlier lookup
        tables = {r[0] for r in self.con.execute(
            "SELECT tablename FROM pg_catalog.pg_tables WHERE schemaname = current_schema() "
            "AND tablename IN ('benchfit_schema', 'runs')")}
        if "benchfit_schema" not in tables:
            # only under the migration lock: without it another bench may be half-way through
            # creating the log
            if locked and "runs" in tables:
                raise LogError(f"{self.where}: this database holds a 'runs' table that is not a benchfit "
                               "log — give another database in the URL (the database was left untouched)")
            return None
        return self.con.execute("SELECT MAX(version) FROM benchfit_schema").fetchone()[0]

    def _migrate(self, create: bool) -> None:
        psycopg = self._psycopg
        try:
            try:  # the common case, one cheap query: a log that is set up
                have = self.con.execute("SELECT MAX(version) FROM benchfit_schema").fetchone()[0]
            except psycopg.errors.UndefinedTable:
                have = self._version()
            if have is not None and have > schema.SCHEMA_VERSION:
                raise LogError(f"{self.where}: log schema version {have} is newer than this benchfit "
                               f"understands ({schema.SCHEMA_VERSION}) — upgrade benchfit")
            if have == schema.SCHEMA_VERSION:
                return
            if have is None and not create:
                raise LogError(f"{self.where}: no benchfit log in this database yet — run a report (or "
                               "measure with log_path=) against it first, or give the right URL")
            with self.con.transaction():
                self.con.execute("SELECT pg_advisory_xact_lock(%s)", (_LOCK_KEY,))
                have = self._version(locked=True)  # again, under the lock: another bench may have migrated
                if have is None:
                    self.con.execute(VERSION_TABLE)
                for version in range((have or 0) + 1, schema.SCHEMA_VERSION + 1):
                    for stmt in statements(version, "postgresql"):
                        self.con.execute(stmt)
                    self.con.execute(render("INSERT INTO benchfit_schema(version, applied_utc) "
                                            "VALUES (%s, {now})", "postgresql"), (version,))
        except psycopg.OperationalError as e:
            raise ServerUnavailable(f"{self.where}: lost the log server ({_first_line(e)}) — check that "
                                    "it runs") from e
        except psycopg.Error as e:
            raise LogError(f"{self.where}: cannot set up the log ({_first_line(e)}) — check that the "
                           "user may create tables in this database") from e

    @contextlib.contextmanager
    def transaction(self) -> Iterator[None]:
        psycopg = self._psycopg
        try:
            with self.con.transaction():
                yield
        except psycopg.OperationalError as e:
            raise ServerUnavailable(f"{self.where}: lost the log server while writing "
                                    f"({_first_line(e)}) — check that it runs") from e
        except psycopg.Error as e:
            raise LogError(f"{self.where}: cannot write the run ({_first_line(e)}) — check the "
                           "database") from e


#: server answers that mean "not now" (spool the run) rather than "not like this" (an error)
_BUSY = ("starting up", "shutting down", "in recovery", "too many", "not yet accepting", "terminating")


def _refused(e: BaseException) -> bool:
    """True when the server answered and refused (unknown user or database, bad password)."""
    text = str(e)
    if "fe_sendauth" in text:  # libpq found no password to give: a setup mistake too
        return True
    return "FATAL:" in text and not any(b in text for b in _BUSY)


def _first_line(e: BaseException) -> str:
    text = str(e).strip()
    return text.splitlines()[0] if text else type(e).__name__
