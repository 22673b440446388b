"""The command line's guard around the measurement log: check before writing, explain failures.

The log backend (benchfit/log/) says what went wrong in its own terms; this module makes
sure that a command which writes report files and then logs them finds out first whether the
log can be written at all (so nothing is written for a run that cannot be logged), that a
failed append names the real cause (a full disk, a read-only file), and that a log which cannot
be written can still be read (through a snapshot copy).
"""

from __future__ import annotations

import contextlib
import errno
import os
import shutil
import tempfile
from pathlib import Path
from typing import TYPE_CHECKING, Any, Iterator

from benchfit.errors import LogError

if TYPE_CHECKING:
    from benchfit.log.postgres import LogURL

__all__ = ["log_write_problem", "check_log_writable", "append_run_explained", "readable_log_path", "sigint_held"]

_FIX = "make the log and its folder writable, give another --log, or use --no-log"
_snapshots: list[tempfile.TemporaryDirectory] = []  # removed when the process ends


def _existing_folder(path: Path) -> Path:
    folder = path.parent
    while not folder.exists() and folder != folder.parent:
        folder = folder.parent
    return folder


def log_write_problem(path: Any) -> str | None:
    """Why the log at ``path`` cannot be written (file or folder), or None when it can.

    Both are probed for real (an open for writing, a scratch file in the folder): the permission
    bits do not tell for the superuser, for an immutable file (chattr +i) or a read-only mount.
    SQLite keeps its journal beside the log, so the folder must be writable too. A server log
    (``postgresql://``) has no file here: the server decides, and a run it cannot take is spooled.
    """
    from benchfit.log.postgres import LogURL

    if isinstance(path, LogURL):
        return None
    p = Path(path)
    if p.is_file():
        try:
            os.close(os.open(p, os.O_RDWR))
        except OSError as e:
            return f"the log file cannot be opened for writing ({e.strerror or e})"
    folder = _existing_folder(p)
    try:
        with tempfile.TemporaryFile(dir=folder):
            pass
    except OSError as e:
        if e.errno == errno.ENOSPC:
            return f"the disk holding {folder} is full ({e.strerror})"
        return f"its folder {folder} cannot be written ({e.strerror or e}; SQLite keeps its journal there)"
    return None


def check_log_writable(path: str | Path | LogURL) -> None:
    """LogError (one line with the fix) when the log cannot be written; call it before any file is made."""
    problem = log_write_problem(path)
    if problem:
        raise LogError(f"{path}: {problem} — {_FIX}; nothing was written")


def append_run_explained(log_path: str | Path | LogURL, **entry: Any) -> int:
    """:func:`benchfit.log.store.append_run`, with a full disk or a read-only log named as such."""
    from benchfit.log.store import append_run

    try:
        return append_run(log_path, **entry)
    except LogError as e:
        cause = e.__cause__
        text = str(cause or "").lower()
        if "disk is full" in text or getattr(cause, "errno", None) == errno.ENOSPC:
            raise LogError(f"{log_path}: the disk is full (No space left on device) — free some space or give "
                           "--log on another disk; the run was not logged") from e
        if "readonly" in text or "read-only" in text:
            raise LogError(f"{log_path}: the log is read-only ({cause}) — {_FIX}; the run was not logged") from e
        raise


def readable_log_path(path: Any) -> Any:
    """``path``, or a snapshot copy of it when the log cannot be written.

    Opening a log in WAL mode needs its folder to be writable (SQLite makes the -shm index
    beside it); a log on a read-only share or with the immutable attribute can still be read
    from a copy (with its -wal file, so the latest runs are there). The copy lives in a
    temporary folder removed when the process ends. A server log (``postgresql://``) is read as it is.
    """
    from benchfit.log.postgres import LogURL

    if isinstance(path, LogURL):
        return path
    p = Path(path)
    if not p.is_file() or log_write_problem(p) is None:
        return p
    tmp = tempfile.TemporaryDirectory(prefix="benchfit-log-")
    _snapshots.append(tmp)
    copy = Path(tmp.name) / p.name
    try:
        shutil.copyfile(p, copy)
        wal = p.with_name(p.name + "-wal")
        if wal.is_file():
            shutil.copyfile(wal, copy.with_name(copy.name + "-wal"))
    except OSError as e:
        raise LogError(f"{p}: cannot read the log ({e.strerror or e}) — check its permissions") from e
    return copy


@contextlib.contextmanager
def sigint_held() -> Iterator[None]:
    """Hold a Ctrl-C until the block is done, then raise it (main thread only)."""
    import signal
    import threading

    if threading.current_thread() is not threading.main_thread():
        yield
        return
    caught: list[int] = []
    previous = signal.signal(signal.SIGINT, lambda signum, frame: caught.append(signum))
    try:
        yield
    finally:
        signal.signal(signal.SIGINT, previous)
    if caught:
        raise KeyboardInterrupt
