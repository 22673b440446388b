"""Atomic text writes for the small files benchfit keeps beside captures (sidecars, profiles)."""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

__all__ = ["write_text_atomic"]


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
