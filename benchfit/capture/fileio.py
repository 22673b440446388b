"""Atomic text writes for the small files benchfit keeps beside captures (sidecars, profiles)."""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

__all__ = ["write_text_atomic", "write_bytes_new", "create_new"]


def write_text_atomic(path: Path, text: str) -> None:
    """Write ``text`` to ``path`` through a temporary file in the same folder and a rename.

    A crash or a full disk leaves either the old file or the new one, never a half-written
    file. The file gets mode 0644 (mkstemp's 0600 is for secrets; these are ordinary data).
    OSError propagates; callers turn it into their own one-line error.
    """
    fd, tmp = tempfile.mkstemp(prefix=f".{path.stem}.", suffix=f"{path.suffix}.tmp", dir=path.parent)
    try:
        os.chmod(tmp, 0o644)
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(text)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise


def write_bytes_new(path: Path, data: bytes, *, overwrite: bool = False) -> None:
    """Write ``data`` to ``path`` whole, never replacing a file unless ``overwrite``.

    The bytes go to a temporary file in the same folder first. Without ``overwrite`` the
    temporary file is then hard-linked to ``path`` — the link fails if ``path`` exists at that
    very moment (a file made after any earlier check is kept) — and the temporary name is removed.
    A file system without hard links falls back to an exclusive create (``O_EXCL``) and a
    direct write. With ``overwrite`` the temporary file is renamed over ``path``.

    Raises
    ------
    FileExistsError
        ``path`` exists and ``overwrite`` is False; nothing was changed.
    OSError
        The folder is not writable, the disk is full, …; no partial ``path`` is left.
    """
    path = Path(path)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.stem}.", suffix=f"{path.suffix}.tmp", dir=path.parent)
    try:
        os.chmod(tmp, 0o644)
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        if overwrite:
            os.replace(tmp, path)
            return
        try:
            os.link(tmp, path)
        except FileExistsError:
            raise
        except OSError:  # no hard links here (some network and FAT file systems)
            with open(path, "xb") as fh:
                try:
                    fh.write(data)
                except BaseException:
                    fh.close()
                    os.unlink(path)
                    raise
    finally:
        try:
            os.unlink(tmp)
        except OSError:
            pass


def create_new(path: Path) -> None:
    """Create ``path`` as an empty file, failing with FileExistsError if it exists (``O_EXCL``).

    Claims a name before a long write (a recording) so that no other file can appear under it.
    """
    os.close(os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o644))
