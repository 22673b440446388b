"""The measurement log: runs, captures, results and decisions, in SQLite or PostgreSQL.

This module is the log's public face; the commands and the report use only it.

- Schema and migrations (one definition for both backends): :mod:`benchfit.log.schema`.
- The SQL every backend shares: :mod:`benchfit.log.base`.
- Backends: :mod:`benchfit.log.sqlite` (a file), :mod:`benchfit.log.postgres` (a server).
- The spool for runs written while the server is away: :mod:`benchfit.log.spool`.

Where the log lives: ``--log PATH|URL``, else the ``BENCHFIT_LOG`` environment variable,
else ``platformdirs.user_data_dir("benchfit")/log.sqlite`` (:func:`default_log_path`). A value
that starts with ``postgresql:`` or ``postgres:`` names a server (:class:`LogURL`) and never
becomes a file; any other ``scheme://`` value is refused; everything else is a file path.

Each run carries the name of the bench (station) that took it: :func:`use_bench` (the
``--bench`` option), else ``BENCHFIT_BENCH``, else the host name.
"""

from __future__ import annotations

import os
import socket
import sys
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterable, Iterator, Mapping, Sequence

from benchfit.errors import LogError
from benchfit.log.base import LogStore
from benchfit.log.postgres import LogURL, ServerUnavailable, is_log_url, parse_log_url
from benchfit.log.records import make_record
from benchfit.log.schema import SCHEMA_VERSION
from benchfit.log.sqlite import APPLICATION_ID, SQLiteStore

__all__ = ["APPLICATION_ID", "SCHEMA_VERSION", "LogURL", "RunId", "MergeSummary", "default_log_path",
           "resolve_log_path", "as_target", "open_store", "open_log", "append_run", "list_runs", "get_run",
           "results_rows", "merge_log", "sync_log", "use_bench", "current_bench", "iter_quantities",
           "held_open"]

LogTarget = Path | LogURL

_bench_override: str | None = None


def default_log_path() -> Path:
    """``platformdirs.user_data_dir("benchfit")/log.sqlite``."""
    import platformdirs

    return Path(platformdirs.user_data_dir("benchfit")) / "log.sqlite"


def as_target(value: str | Path | LogURL) -> LogTarget:
    """A log named by a path or URL, checked: a :class:`LogURL` or a file :class:`Path`.

    Raises
    ------
    LogError
        An unknown URL scheme, a malformed URL, a password in the URL, or a URL that an
        earlier step has already turned into a path (``postgresql:/…``).
    """
    if isinstance(value, LogURL):
        return value
    if isinstance(value, Path):
        text = str(value)
        if is_log_url(text.replace("\\", "/")):
            raise LogError(f"{text}: a log URL was given as a file path — pass the URL text "
                           "(postgresql://…), not a path")
        return value
    text = str(value)
    if is_log_url(text):
        return parse_log_url(text)
    return Path(text)


def resolve_log_path(option: str | Path | LogURL | None) -> LogTarget:
    """The log to use: the ``--log`` value, else ``$BENCHFIT_LOG``, else :func:`default_log_path`.

    A URL gives a :class:`LogURL` (a server), anything else a :class:`Path` (an SQLite file).
    """
    if option:
        return as_target(option)
    env = os.environ.get("BENCHFIT_LOG")
    if env:
        return as_target(env)
    return default_log_path()


def use_bench(name: str | None) -> None:
    """Name the bench for the runs this process writes (the ``--bench`` option); None: the default."""
    global _bench_override
    if name is not None:
        _check_bench(name, "bench")
    _bench_override = name


def current_bench() -> str:
    """The bench name: :func:`use_bench`, else ``$BENCHFIT_BENCH``, else the host name."""
    if _bench_override:
        return _bench_override
    env = os.environ.get("BENCHFIT_BENCH")
    if env is not None:
        return _check_bench(env, "BENCHFIT_BENCH")
    return socket.gethostname() or "unknown"


def _check_bench(name: str, where: str) -> str:
    if not name.strip() or len(name) > 64 or not name.isprintable():
        raise LogError(f"{where} {name!r}: not a bench name — give 1 to 64 printable characters, e.g. bench-2")
    return name.strip()


def open_store(target: str | Path | LogURL, *, create: bool = True) -> LogStore:
    """The open log at ``target``: an :class:`SQLiteStore` or a :class:`PostgresStore`."""
    t = as_target(target)
    if isinstance(t, LogURL):
        from benchfit.log.postgres import PostgresStore

        return PostgresStore(t, create=create)
    return SQLiteStore(t, create=create)


def open_log(target: str | Path | LogURL, *, create: bool = True) -> Any:
    """Open (and if needed create or migrate) a benchfit log; something with ``close()``.

    For a file this is the sqlite3 connection. For a server that cannot be reached now the
    spool is opened instead (a run written later will be spooled), so a bench keeps working.

    Raises
    ------
    LogError
        Not a benchfit log, newer than this code, or it cannot be opened.
    """
    t = as_target(target)
    if isinstance(t, LogURL):
        try:
            return open_store(t, create=create)
        except ServerUnavailable:
            if not create:
                raise
            from benchfit.log.spool import spool_path

            return SQLiteStore(spool_path(t))
    from benchfit.log.sqlite import connect

    return connect(t, create=create)


class RunId(int):
    """A run's local id (an int) with its ``uuid``, and ``spooled`` + ``spool`` when it went to the spool."""

    uuid: str
    spooled: bool
    spool: Path | None

    def __new__(cls, value: int, uuid: str, spool: Path | None = None) -> "RunId":
        obj = super().__new__(cls, value)
        obj.uuid, obj.spooled, obj.spool = uuid, spool is not None, spool
        return obj

    def __str__(self) -> str:
        # what a message like "logged as run {id} in {log}" shows: a spooled run says where it is
        n = int(self)
        return f"{n} (in the spool {self.spool} until `benchfit log sync`)" if self.spooled else str(n)

    def __format__(self, spec: str) -> str:
        return str(self) if not spec else format(int(self), spec)


def _note(text: str) -> None:
    sys.stderr.write(f"note: {text}\n")
    sys.stderr.flush()


# --- writing ---------------------------------------------------------------------------

#: SQLite logs held open by :func:`held_open`, by absolute path
_held: dict[str, LogStore] = {}


@contextmanager
def held_open(target: str | Path | LogURL | None) -> Iterator[None]:
    """Keep the SQLite log ``target`` open for the :func:`append_run` calls inside the block.

    A batch appends one run per file; each run is still its own committed transaction (a
    process killed mid-batch keeps every run logged before), but the file is opened, inspected
    and closed once, not once per run: closing the last connection of a WAL log checkpoints it.
    Measured on the 2-core machine: 2.7–3.0 ms per run through :func:`append_run` alone,
    0.9–1.05 ms with the log held open (40 runs of a measure batch each; the disk's own
    sync time comes on top, up to ~26 ms per run when other processes were writing).
    A server log (:class:`LogURL`) or None: nothing is held.
    """
    t = None if target is None else as_target(target)
    if t is None or isinstance(t, LogURL):
        yield
        return
    key = os.path.abspath(t)
    if key in _held:
        yield
        return
    store = SQLiteStore(t)
    _held[key] = store
    try:
        yield
    finally:
        del _held[key]
        store.close()


def append_run(db_path: str | Path | LogURL, *, command: str, operator: str | None = None,
               unit: str | None = None, captures: Sequence[Any] = (),
               measurements: Sequence[Any] = (), fits: Sequence[Any] = (),
               decisions: Sequence[Any] = (), verdict: str | None = None,
               details: Mapping[str, Any] | None = None, bench: str | None = None,
               tables: Mapping[str, Sequence[Mapping[str, Any]]] | None = None) -> RunId:
    """Append one run to the log in a single transaction and return its run id.

    Parameters
    ----------
    db_path : str, Path or LogURL
        The log: a file (created when missing) or a ``postgresql://`` URL. Use
        :func:`resolve_log_path` for the default.
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
    bench : str, optional
        The station's name (default :func:`current_bench`).
    tables : mapping, optional
        Rows of the run's own tables (:data:`benchfit.log.schema.RUN_TABLES`, e.g.
        ``{"drift_series": [{"channel": ..., "k": ..., ...}]}``), written in the same transaction.

    Returns
    -------
    RunId
        The new run's local id (an int) with its UUID. When the log server cannot be reached
        the run goes to the local spool (a note on stderr says so, ``spooled`` is True and
        the id is the spool's); ``benchfit log sync`` or the next successful write pushes it.

    Raises
    ------
    LogError
        When the log cannot be written (not a benchfit log, disk full, still locked after retries).
    """
    target = as_target(db_path)
    rec = make_record(command=command, operator=operator, unit=unit,
                      bench=_check_bench(bench, "bench") if bench else current_bench(),
                      captures=captures, measurements=measurements, fits=fits, decisions=decisions,
                      verdict=verdict, details=details, where=str(target), tables=tables)
    uuid = rec["run"]["uuid"]
    if not isinstance(target, LogURL):
        held = _held.get(os.path.abspath(target))
        if held is not None:
            rid, _ = held.write(rec)
            return RunId(rid, uuid)
        with SQLiteStore(target) as store:
            rid, _ = store.write(rec)
        return RunId(rid, uuid)
    from benchfit.log import spool

    try:
        with open_store(target) as store:
            rid, _ = store.write(rec)
            if spool.spool_path(target).exists():
                _push_quietly(target, store)
        return RunId(rid, uuid)
    except ServerUnavailable as e:
        # the transaction may or may not have reached the server's COMMIT: spooling is safe
        # either way, since pushing a run the server already has is a no-op (same UUID)
        path, sid = spool.spool_run(target, rec)
        _note(f"{str(e).split(' — ')[0]} — run spooled to {path} (uuid {uuid}); "
              "`benchfit log sync` pushes it when the server is back")
        return RunId(sid, uuid, spool=path)


def _push_quietly(target: LogURL, store: LogStore) -> None:
    from benchfit.log import spool

    try:
        new, old = spool.push(target, store)
    except LogError as e:
        _note(f"spooled runs not pushed yet ({e})")
        return
    if new or old:
        _note(f"pushed {new} spooled run(s) to {target}")


def sync_log(target: str | Path | LogURL) -> tuple[int, int]:
    """Push the spooled runs of a log server: ``(newly stored, already there)``.

    Raises
    ------
    LogError
        ``target`` is not a server URL, or the server cannot be reached (the spool is kept).
    """
    t = as_target(target)
    if not isinstance(t, LogURL):
        raise LogError(f"{t}: a log file has no spool — sync_log() is for a server log "
                       "(log_path='postgresql://…' or BENCHFIT_LOG)")
    from benchfit.log import spool

    with open_store(t) as store:
        return spool.push(t, store)


@dataclass(frozen=True)
class MergeSummary:
    """What :func:`merge_log` did: runs copied, runs the target already had (same UUID)."""

    new: int
    present: int

    def to_dict(self) -> dict[str, int]:
        return {"new": self.new, "present": self.present}


def merge_log(source: str | Path, target: str | Path | LogURL, *, bench: str | None = None) -> MergeSummary:
    """Copy every run of the SQLite log ``source`` into ``target``; a repeat copies nothing.

    ``source`` is migrated to the current schema first (in place, like any command that opens
    it): that gives each of its runs its UUID once, so merging it again is recognised.
    ``bench`` names the station for the runs that have no bench name (logged before schema 2).
    """
    src = Path(source)
    t = as_target(target)
    if not src.exists():
        raise LogError(f"{src}: no log file there — give the bench's log file to merge")
    if isinstance(t, Path) and t.exists() and t.resolve() == src.resolve():
        raise LogError(f"{src}: is the target log itself — give another bench's log file")
    if bench is not None:
        _check_bench(bench, "bench")
    with SQLiteStore(src, create=False) as s, open_store(t) as d:
        def records() -> Iterable[dict[str, Any]]:
            for _, rec in s.iter_records():
                if bench and not rec["run"].get("bench"):
                    rec["run"]["bench"] = bench
                yield rec

        new, old = d.write_many(records())
    return MergeSummary(new=new, present=old)


# --- reading ---------------------------------------------------------------------------

def _reader(db_path: str | Path | LogURL) -> LogStore:
    return open_store(db_path, create=False)


def list_runs(db_path: str | Path | LogURL, *, unit: str | None = None, since: str | None = None,
              bench: str | None = None, last: int | None = None) -> list[dict[str, Any]]:
    """Runs in time order: id, uuid, bench, time_utc, command, unit, operator, verdict, n_captures.

    ``since`` is an ISO date or date-time (UTC); runs at or after it are listed. ``last``
    keeps only the latest so many runs.
    """
    with _reader(db_path) as store:
        return store.list_runs(unit=unit, since=since, bench=bench, last=last)


def get_run(db_path: str | Path | LogURL, run_id: int) -> dict[str, Any]:
    """Everything stored about one run: the run row, its captures, results and decisions."""
    with _reader(db_path) as store:
        return store.get_run(run_id)


def results_rows(db_path: str | Path | LogURL, *, quantity: str | None = None, unit: str | None = None,
                 since: str | None = None, bench: str | None = None) -> list[dict[str, Any]]:
    """Flat rows, one per stored result, joined with their run, unit and capture (for export/stats)."""
    with _reader(db_path) as store:
        return store.results_rows(quantity=quantity, unit=unit, since=since, bench=bench)


def iter_quantities(rows: Iterable[Mapping[str, Any]]) -> list[str]:
    """Distinct quantity names in result rows, in first-seen order."""
    seen: dict[str, None] = {}
    for r in rows:
        seen.setdefault(r["quantity"], None)
    return list(seen)
