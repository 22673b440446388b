"""``benchfit.load``: read any supported capture file into a :class:`Capture`.

The reader is chosen by extension (``.wav``/``.flac``/``.ogg``… → audio, ``.csv``/``.txt``/
``.tsv`` → CSV) and, for any other name, by content: an audio header means audio, text
means CSV, other binary data is refused. The file's SHA-256 is stored in the capture so a
report or log entry can be traced to the exact bytes measured.
"""

from __future__ import annotations

import hashlib
import os
from pathlib import Path

from benchfit.capture.audiofile import AUDIO_SUFFIXES, read_audio, sniff_audio
from benchfit.capture.capture import Capture, ChannelSpec, channel_keys
from benchfit.capture.csvfile import read_csv
from benchfit.errors import CaptureError
from benchfit.units import parse_quantity

__all__ = ["load", "file_sha256", "file_bytes"]

CSV_SUFFIXES = (".csv", ".txt", ".tsv")
_CHUNK = 1 << 20


def file_sha256(path: str | os.PathLike[str]) -> str:
    """SHA-256 of a file's bytes as a lower-case hex string (read in 1 MiB chunks)."""
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(_CHUNK), b""):
            digest.update(block)
    return digest.hexdigest()



def _check_path(p: Path) -> None:
    """The one-line errors for a missing path and a folder."""
    if not p.exists():
        raise CaptureError(f"{p}: no such file — check the path and the spelling")
    if p.is_dir():
        raise CaptureError(f"{p}: is a folder, not a capture file — give a WAV, FLAC, OGG or CSV file")


def _unreadable(p: Path, e: OSError) -> CaptureError:
    return CaptureError(f"{p}: cannot read the file ({e.strerror or e}) — check its permissions")


def _empty(p: Path) -> CaptureError:
    return CaptureError(f"{p}: the file is empty — record or export it again")


def file_head(p: Path) -> bytes:
    """The first 64 bytes of a capture file (to tell its format), after the one-line errors for a
    missing path, a folder, an unreadable file and an empty one. Used by
    :class:`benchfit.capture.blocks.BlockReader`, which must not read a long file whole."""
    _check_path(p)
    try:
        size = p.stat().st_size
        with open(p, "rb") as fh:
            head = fh.read(64)
    except OSError as e:
        raise _unreadable(p, e) from e
    if size == 0:
        raise _empty(p)
    return head


def file_bytes(p: Path) -> bytes:
    """Every byte of a capture file, read once, after the same one-line errors as
    :func:`file_head`: :func:`load` hashes these bytes and decodes them from memory, where it
    once read the file three times (header, SHA-256, samples)."""
    _check_path(p)
    try:
        data = p.read_bytes()
    except OSError as e:
        raise _unreadable(p, e) from e
    if not data:
        raise _empty(p)
    return data


def load(path: str | os.PathLike[str], *, sample_rate: float | str | None = None,
         channels: ChannelSpec | None = None, data: bytes | None = None) -> Capture:
    """Read a capture file (WAV, FLAC, OGG or CSV export) into a :class:`Capture`.

    Parameters
    ----------
    path : str or Path
        The file. Audio files may have a sidecar JSON with the same stem giving channel
        names and the input calibration (gain in V/FS, timebase in ppm, coupling).
    sample_rate : float or str, optional
        Samples per second (Hz) for a CSV that has neither a time column nor a sample
        interval in its preamble (``48000``, ``"100k"``, ``"50 kHz"``). Not used when the
        file gives its own rate.
    channels : str, int or sequence of them, optional
        Keep only these channels, in this order (the rule of
        :func:`~benchfit.capture.capture.channel_keys`): names (case-insensitive), 0-based
        ints, 1-based numbers as text (``"2"``), or one string ``"drive,output"``.
    data : bytes, optional
        The file's bytes when the caller has read them already (:func:`file_bytes`); they are
        hashed and decoded, and the file is not read again.

    Returns
    -------
    Capture
        Samples in volts (or FS for an uncalibrated sound-card recording), with
        ``source`` = the path and ``sha256`` of the file's bytes.

    Raises
    ------
    CaptureError
        Missing, empty, unreadable or unrecognised file; bad data (the message names the
        file and, for CSV, the line and column); an unknown channel.

    Examples
    --------
    >>> cap = load("HC-03_as-found.csv")                        # doctest: +SKIP
    >>> cap = load("HC-03.wav", channels="output")              # doctest: +SKIP
    """
    p = Path(path)
    where = str(p)
    if sample_rate is not None:
        try:
            if isinstance(sample_rate, str):
                rate = parse_quantity(sample_rate, "sample rate", unit="Hz")
            else:
                rate = float(sample_rate)
        except (TypeError, ValueError) as e:
            raise CaptureError(
                f"sample_rate: {sample_rate!r} is not a number — give it in Hz, e.g. 48000 or 100k") from e
        if not (rate > 0 and rate < float("inf")):
            raise CaptureError(f"sample_rate: {sample_rate!r} must be a positive number of Hz — e.g. 48000")
        sample_rate = rate
    if data is None:
        data = file_bytes(p)
    elif not data:
        raise _empty(p)
    head = data[:64]
    digest = hashlib.sha256(data).hexdigest()

    suffix = p.suffix.lower()
    kind = sniff_audio(head)
    if suffix in AUDIO_SUFFIXES or (kind is not None and suffix not in CSV_SUFFIXES):
        capture = read_audio(p, sha256=digest, sample_rate=sample_rate, data=data)
    elif kind is not None:
        raise CaptureError(f"{where}: holds {kind} audio but is named like a CSV — rename it to .{kind.lower()}")
    elif suffix in CSV_SUFFIXES:
        capture = read_csv(p, sha256=digest, sample_rate=sample_rate, raw=data)
    else:  # an unknown extension: a text export may still read as CSV
        try:
            capture = read_csv(p, sha256=digest, sample_rate=sample_rate, raw=data)
        except CaptureError as e:
            if "no numeric data rows" not in str(e):  # a text export with a bad row: that message is precise
                raise
            raise CaptureError(
                f"{where}: not a capture file ({suffix or 'no extension'}: neither audio nor a readable CSV "
                "export) — give a WAV, FLAC, OGG or AIFF recording, or a CSV export") from e

    if channels is not None:
        capture = capture.select(channel_keys(channels))
    return capture
