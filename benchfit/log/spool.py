"""The local spool: runs meant for a log server that could not be reached.

A spool is an ordinary SQLite benchfit log (so ``benchfit log list --log SPOOL`` shows it),
one file per server URL: ``$BENCHFIT_SPOOL`` when set (a directory), else ``spool/`` in the
user data directory, named after the URL's hash. A spooled run keeps its UUID and the
bench's clock time of the measurement. :func:`push` copies every spooled run to the server
and removes it from the spool only after the server's COMMIT, so a push interrupted at any
point is simply repeated: a run already on the server is recognised by its UUID and not
written twice.
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import os
from pathlib import Path
from typing import Any, Mapping

from benchfit.log.base import LogStore
from benchfit.log.postgres import LogURL
from benchfit.log.sqlite import SQLiteStore

__all__ = ["spool_path", "spool_run", "pending", "push"]


def spool_path(target: LogURL) -> Path:
    """The spool file for runs meant for ``target``."""
    base = os.environ.get("BENCHFIT_SPOOL")
    if base:
        folder = Path(base)
    else:
        import platformdirs

        folder = Path(platformdirs.user_data_dir("benchfit")) / "spool"
    digest = hashlib.sha256(target.url.encode("utf-8")).hexdigest()[:16]
    return folder / f"spool-{digest}.sqlite"


def spool_run(target: LogURL, rec: Mapping[str, Any]) -> tuple[Path, int]:
    """Write ``rec`` to the spool of ``target`` (time = this bench's clock); ``(spool file, local id)``."""
    rec = {**rec, "run": dict(rec["run"])}
    if not rec["run"].get("time_utc"):
        rec["run"]["time_utc"] = _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%S.%fZ")
    path = spool_path(target)
    with SQLiteStore(path) as spool:
        rid, _ = spool.write(rec)
    return path, rid


def pending(target: LogURL) -> int:
    """How many runs wait in the spool of ``target`` (0 when there is no spool)."""
    path = spool_path(target)
    if not path.exists():
        return 0
    with SQLiteStore(path, create=False) as spool:
        return len(spool.run_ids())


def push(target: LogURL, server: LogStore) -> tuple[int, int]:
    """Copy the spooled runs of ``target`` to ``server``: ``(newly stored, already there)``."""
    path = spool_path(target)
    if not path.exists():
        return 0, 0
    with SQLiteStore(path, create=False) as spool:
        ids = spool.run_ids()
        if not ids:
            return 0, 0

        def records():
            for rid in ids:
                if spool._one("SELECT COUNT(*) FROM runs WHERE id = ?", (rid,)) == 0:
                    continue  # pushed meanwhile by another process
                rec = spool.read_record(rid)
                rec["_spool_id"] = rid
                yield rec

        def done(rec: Mapping[str, Any], _server_id: int, _new: bool) -> None:
            spool.delete_run(rec["_spool_id"])

        return server.write_many(records(), batch=100, done=done)
