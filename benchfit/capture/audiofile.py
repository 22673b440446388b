"""Audio-file reader: WAV, FLAC, OGG (anything libsndfile reads) → :class:`Capture`.

Samples come out as float64 full-scale units ("FS", PCM scaled to [-1, 1)); when the
sidecar JSON next to the file gives a gain per channel, they are multiplied by it and
the unit becomes "V"; the gain's relative standard uncertainty (``gain_u_rel``), when the
sidecar gives it, goes on in :attr:`Capture.calibration` for measure's uncertainty budget. A sidecar timebase correction scales the sample rate:
``fs_true = fs_nominal * (1 + ppm·1e-6)``. The raw file is never rewritten.

A file whose data is shorter than its header declares (a recording cut short, a copy
interrupted) is read as far as it goes, with a warning in :attr:`Capture.warnings`.
"""

from __future__ import annotations

import io
import os
import struct
from pathlib import Path
from typing import Any

import numpy as np

from benchfit.capture.capture import Capture, InputCalibration
from benchfit.capture.sidecar import read_sidecar, sidecar_path
from benchfit.errors import CaptureError

__all__ = ["AUDIO_SUFFIXES", "sniff_audio", "read_audio", "wav_declared_frames"]

#: file name extensions read as audio without sniffing
AUDIO_SUFFIXES = (".wav", ".wave", ".flac", ".ogg", ".oga", ".opus", ".mp3", ".aif", ".aiff", ".w64", ".rf64",
                  ".caf")

# frames per read; on a read error the reader falls back to smaller blocks to recover the
# last good frames of a truncated compressed file
_BLOCKS = (1 << 16, 4096, 256, 16, 1)


def sniff_audio(head: bytes) -> str | None:
    """Container name if ``head`` (the first bytes of a file) starts like an audio file.

    Returns ``"WAV"``, ``"RF64"``, ``"W64"``, ``"FLAC"``, ``"OGG"``, ``"AIFF"``, ``"CAF"``,
    ``"MP3"`` or ``None``.
    """
    if len(head) >= 12 and head[:4] in (b"RIFF", b"RIFX") and head[8:12] == b"WAVE":
        return "WAV"
    if len(head) >= 12 and head[:4] in (b"RF64", b"BW64") and head[8:12] == b"WAVE":
        return "RF64"
    if head[:4] == b"riff" and len(head) >= 16:
        return "W64"
    if head[:4] == b"fLaC":
        return "FLAC"
    if head[:4] == b"OggS":
        return "OGG"
    if len(head) >= 12 and head[:4] == b"FORM" and head[8:12] in (b"AIFF", b"AIFC"):
        return "AIFF"
    if head[:4] == b"caff":
        return "CAF"
    if head[:3] == b"ID3":
        return "MP3"
    if (len(head) >= 3 and head[0] == 0xFF and head[1] & 0xE0 == 0xE0 and head[1] & 0x18 != 0x08
            and head[1] & 0x06 and head[2] >> 4 != 0xF and (head[2] >> 2) & 3 != 3
            and not head.startswith((b"\xff\xfe", b"\xfe\xff"))):
        return "MP3"  # an MPEG audio frame header (sync, valid version/layer/rate), not a UTF-16 mark
    return None


def wav_declared_frames(path: str | os.PathLike[str] | bytes) -> int | None:
    """Number of frames the RIFF/RF64 header of a WAV file (a path, or the file's bytes)
    declares, or ``None``.

    Walks the chunk list up to the ``data`` chunk and divides its declared size by the
    ``fmt`` chunk's block align. ``None`` when the file is not a little-endian RIFF/RF64
    WAV or the header cannot be followed (then no truncation check is made).
    """
    try:
        with (io.BytesIO(path) if isinstance(path, bytes) else open(path, "rb")) as fh:
            head = fh.read(12)
            if len(head) < 12 or head[8:12] != b"WAVE" or head[:4] not in (b"RIFF", b"RF64", b"BW64"):
                return None
            size64: int | None = None
            block_align: int | None = None
            while True:
                hdr = fh.read(8)
                if len(hdr) < 8:
                    return None
                cid, size = hdr[:4], struct.unpack("<I", hdr[4:])[0]
                if cid == b"ds64":
                    body = fh.read(size)
                    if len(body) >= 16:
                        size64 = struct.unpack("<Q", body[8:16])[0]
                elif cid == b"fmt ":
                    body = fh.read(size)
                    if len(body) < 14:
                        return None
                    block_align = struct.unpack("<H", body[12:14])[0]
                elif cid == b"data":
                    if block_align is None or block_align == 0:
                        return None
                    if size == 0xFFFFFFFF and size64 is not None:
                        size = size64
                    return int(size // block_align)
                else:
                    fh.seek(size, os.SEEK_CUR)
                if size % 2:
                    fh.seek(1, os.SEEK_CUR)  # RIFF chunks are padded to even length
    except (OSError, struct.error):
        return None


def _read_frames(sf_file: Any) -> tuple[np.ndarray, bool]:
    """Read every frame that can be decoded; returns ((channels, frames) array, stopped_by_error).

    Blocks are transposed one at a time (cache-friendly), then joined once.
    """
    import soundfile as sf

    parts: list[np.ndarray] = []
    got = 0
    level = 0
    failed = False
    while True:
        try:
            block = sf_file.read(_BLOCKS[level], dtype="float64", always_2d=True)
        except (sf.LibsndfileError, RuntimeError):
            failed = True
            if level + 1 >= len(_BLOCKS):
                break
            level += 1
            try:
                sf_file.seek(got)
            except (sf.LibsndfileError, RuntimeError, ValueError):
                break
            continue
        if block.shape[0] == 0:
            break
        parts.append(np.ascontiguousarray(block.T))
        got += block.shape[0]
    if not parts:
        return np.empty((int(sf_file.channels), 0)), failed
    return np.concatenate(parts, axis=1), failed


def read_audio(path: str | os.PathLike[str], *, sha256: str | None = None,
               sample_rate: float | None = None, data: bytes | None = None) -> Capture:
    """Read an audio file (and its sidecar, if any) into a :class:`Capture`.

    Parameters
    ----------
    path : str or Path
        The audio file.
    sha256 : str, optional
        SHA-256 of the file's bytes, stored in the capture (computed by the caller).
    sample_rate : float, optional
        Ignored for audio (the header gives the rate); a warning is added when it
        differs from the header's.
    data : bytes, optional
        The file's bytes when the caller has read them already: decoded from memory, and
        the file itself is not opened (its sidecar still is).

    Returns
    -------
    Capture
        Samples in FS, or in V when the sidecar gives gains; channel names from the
        sidecar, else ``ch1``, ``ch2``, ...

    Raises
    ------
    CaptureError
        Empty, unreadable or not-an-audio file; a sidecar that is malformed or does not
        match the file (channel count).
    """
    import soundfile as sf

    p = Path(path)
    where = str(p)
    try:
        size = p.stat().st_size if data is None else len(data)
    except OSError as e:
        raise CaptureError(f"{where}: cannot read the file ({e.strerror or e}) — check the path") from e
    if size == 0:
        raise CaptureError(f"{where}: the file is empty — record or export it again")
    sidecar = read_sidecar(p)
    warnings: list[str] = []
    try:
        with sf.SoundFile(str(p) if data is None else io.BytesIO(data)) as fh:
            header_frames = int(fh.frames)
            header_fs = float(fh.samplerate)
            fmt, subtype = fh.format, fh.subtype
            n_ch = int(fh.channels)
            frames, failed = _read_frames(fh)
    except (sf.LibsndfileError, RuntimeError) as e:
        detail = str(e).split(":")[-1].strip() or "libsndfile cannot decode it"
        if sniff_audio(_head(p) if data is None else data[:16]) is None:
            raise CaptureError(
                f"{where}: not an audio file ({detail}) — give a WAV, FLAC or OGG recording, or a CSV export"
            ) from e
        raise CaptureError(
            f"{where}: unreadable audio ({detail}) — the file is damaged; record or export it again"
        ) from e
    n = frames.shape[1]
    declared = wav_declared_frames(p if data is None else data) if fmt in ("WAV", "WAVEX", "RF64") else None
    if declared is not None and declared > n:
        warnings.append(f"{where}: audio data truncated: header declares {declared} frames, file holds {n} — "
                        "only those are used; record or copy the file again for the full length")
    elif header_frames > n:
        warnings.append(f"{where}: audio data truncated: header declares {header_frames} frames, file holds {n}"
                        + (" (decoding stopped at damaged data)" if failed else "")
                        + " — only those are used; record or copy the file again for the full length")
    elif declared is not None and declared < n:
        warnings.append(f"{where}: header declares {declared} frames but the file holds {n} — "
                        "the recording was not finalised; all frames were read")
    if n < 2:
        raise CaptureError(f"{where}: the file holds {n} audio frame(s), at least 2 are needed — record again")

    fs = header_fs
    names: tuple[str, ...] = tuple(f"ch{i + 1}" for i in range(n_ch))
    units = ("FS",) * n_ch
    samples = frames
    calibration = InputCalibration()
    metadata: dict[str, Any] = {"format": fmt, "subtype": subtype, "header_sample_rate_hz": header_fs,
                                "header_frames": header_frames}
    if sidecar is not None:
        jpath = sidecar_path(p)
        sc_names = [c["name"] for c in sidecar["channels"]]
        if len(sc_names) != n_ch:
            raise CaptureError(
                f"{jpath}: sidecar lists {len(sc_names)} channels but {p.name} has {n_ch} — "
                "fix the sidecar's channel list or delete it"
            )
        names = tuple(sc_names)
        sc_fs = float(sidecar["sample_rate_hz"])
        if abs(sc_fs - header_fs) < 1.0:
            fs = sc_fs  # the header stores whole hertz; the sidecar may be more precise
        else:
            warnings.append(f"{jpath}: sidecar says {sc_fs:g} Hz but the file header says {header_fs:g} Hz — "
                            "the header's rate is used")
        cal = sidecar["calibration"]
        gains = cal["gain_v_per_fs"]
        if gains is not None:  # a null gain leaves its channel in FS
            scale = np.asarray([1.0 if g is None else g for g in gains], dtype=np.float64)
            samples = samples * scale[:, np.newaxis]
            units = tuple("FS" if g is None else "V" for g in gains)
        fs = fs * (1.0 + cal["timebase_ppm"] * 1e-6)
        calibration = InputCalibration(
            profile=cal["profile"],
            gain_v_per_fs=tuple(gains) if gains is not None else None,
            timebase_ppm=cal["timebase_ppm"],
            timebase_u_ppm=cal["timebase_u_ppm"],
            coupling_tau_s=cal["coupling_tau_s"],
            gain_u_rel=tuple(cal["gain_u_rel"]) if cal.get("gain_u_rel") is not None else None,
            distortion_floor_pct=cal.get("distortion_floor_pct"),
        )
        for key, value in sidecar.items():  # device, start_utc, counts, recorder's extras
            if key not in ("benchfit_sidecar", "channels", "calibration", "sample_rate_hz"):
                metadata[key] = value
        metadata["sidecar"] = str(jpath)
        frames_noted = sidecar.get("frames")
        if (isinstance(frames_noted, int) and not isinstance(frames_noted, bool) and frames_noted > n
                and not any("truncated" in w for w in warnings)):
            warnings.append(f"{jpath}: the recorder wrote {frames_noted} frames but {p.name} holds {n} — "
                            "the audio file was cut short after recording")
        if sidecar.get("overflow_count", 0):
            warnings.append(f"{jpath}: the input overflowed {sidecar['overflow_count']} time(s) while recording — "
                            "samples may be missing; record again with a larger buffer")
        if sidecar.get("clip_count", 0):
            warnings.append(f"{jpath}: the recorder counted {sidecar['clip_count']} sample(s) at full scale "
                            "(clipping) — lower the input level and record again")
    if sample_rate is not None and abs(float(sample_rate) - header_fs) > 1e-9 * header_fs:
        warnings.append(f"{where}: sample rate {float(sample_rate):g} Hz given but the audio header says "
                        f"{header_fs:g} Hz — the header's rate is used")
    return Capture(samples=samples, sample_rate=fs, channel_names=names, units=units, source=where,
                   sha256=sha256, metadata=metadata, calibration=calibration, warnings=tuple(warnings))


def _head(path: Path, n: int = 16) -> bytes:
    try:
        with open(path, "rb") as fh:
            return fh.read(n)
    except OSError:
        return b""
