"""Block reader for long captures: WAV/FLAC/OGG and CSV in blocks, constant memory.

:class:`BlockReader` opens a file once, works out what every block shares (sample rate,
channel names, units, calibration — exactly as :func:`benchfit.load` would) and then hands
out consecutive blocks as ordinary :class:`~benchfit.capture.capture.Capture` objects whose
``t0`` is the time of their first sample, so any measurement that takes a Capture works on a
block. Memory is one block plus the reader's buffers, whatever the file's length.

* **Audio** is streamed by :mod:`soundfile` (libsndfile decodes WAV and FLAC block by block).
  The sidecar JSON (channel names, gain in V/FS, timebase in ppm, coupling) is read by
  :func:`benchfit.capture.sidecar.read_sidecar` and applied to every block with the same
  rules as :func:`benchfit.capture.audiofile.read_audio` (a test pins the two readers to the
  same samples, rate and calibration).
* **CSV** is read line by line. The preamble, header and the first block go through
  :func:`benchfit.capture.csvfile.read_csv`, which fixes the layout, the time axis and the
  column scaling; every later block is parsed by the same function with the same preamble
  and header in front of it, so units and channel names can never drift between blocks.
  The sample rate of the first block is used for the whole file; a block whose time column
  strays more than half a step from that grid is an error naming the line (a gap or a
  different rate), since measuring it on the wrong time base would be silently wrong.
"""

from __future__ import annotations

import io
import os
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Sequence

import numpy as np

from benchfit.capture.audiofile import AUDIO_SUFFIXES, sniff_audio
from benchfit.capture.capture import Capture, InputCalibration
from benchfit.capture.load import file_head
from benchfit.errors import CaptureError

__all__ = ["BlockReader", "BLOCK_THRESHOLD_SAMPLES", "block_threshold", "block_frames", "estimated_samples"]

#: a file with more samples than this (frames × channels) is measured in blocks. 2^24 samples
#: held whole cost about 0.4 GiB at the whole-file path's ~24 bytes a sample (measured: a 1-hour
#: 48 kHz stereo WAV, 3.5·10^8 samples, took 7.8 GiB), so no file measured whole passes ~0.5 GiB
BLOCK_THRESHOLD_SAMPLES = 1 << 24
#: environment variable that lowers (or raises) the threshold, e.g. for tests
THRESHOLD_ENV = "BENCHFIT_BLOCK_SAMPLES"
#: a text export's bytes per sample, at least (a digit and a separator): bounds its sample count
_CSV_MIN_BYTES_PER_SAMPLE = 2

#: CSV rows read for the template (layout, units, time step) before the first block is cut
_CSV_HEAD_ROWS = 4096


@dataclass(frozen=True)
class _Template:
    sample_rate: float
    channel_names: tuple[str, ...]
    units: tuple[str, ...]
    calibration: InputCalibration
    metadata: dict[str, Any]
    warnings: tuple[str, ...]
    t0: float


class BlockReader:
    """Read a capture file in consecutive blocks.

    Use as a context manager::

        with BlockReader("HC-05_warmup.flac") as reader:
            for block in reader.blocks(reader.frames_for(1.0)):
                ...   # block is a Capture; block.t0 is its start (s)

    Parameters
    ----------
    path : str or Path
        WAV, FLAC, OGG (anything libsndfile reads) or a CSV export.
    channels : str, int or sequence of them, optional
        Keep only these channels (as :func:`benchfit.load`).
    sample_rate : float, optional
        Sample rate (Hz) for a CSV with neither a time column nor an interval in its preamble.

    Attributes
    ----------
    sample_rate : float
        Samples per second (Hz), after the sidecar's timebase correction.
    n_frames : int or None
        Frames in the file when the header says so (audio); None for CSV.
    channel_names, units : tuple of str
    calibration : InputCalibration
    warnings : list of str
        Problems found while reading (grows while blocks are read, e.g. a truncated file).
    """

    def __init__(self, path: str | os.PathLike[str], *, channels: str | int | Sequence[str | int] | None = None,
                 sample_rate: float | None = None) -> None:
        p = Path(path)
        self.path = p
        self.where = str(p)
        head = file_head(p)
        self._keys = _channel_keys(channels)
        self._given_rate = sample_rate
        self._sf: Any = None
        self._text: Any = None
        self._n_frames: int | None = None
        self.warnings: list[str] = []
        self.kind = "audio" if (p.suffix.lower() in AUDIO_SUFFIXES or sniff_audio(head) is not None) else "csv"
        if self.kind == "audio":
            self._template = self._open_audio()
        else:
            self._template = self._open_csv()
        t = self._template
        self.sample_rate = t.sample_rate
        self.channel_names = t.channel_names
        self.units = t.units
        self.calibration = t.calibration
        self.metadata = dict(t.metadata)
        self.warnings.extend(t.warnings)
        if self._keys is not None:
            probe = Capture(samples=np.zeros((len(t.channel_names), 2)), sample_rate=t.sample_rate,
                            channel_names=t.channel_names, units=t.units, calibration=t.calibration,
                            source=self.where).select(self._keys)
            self.channel_names, self.units, self.calibration = probe.channel_names, probe.units, probe.calibration

    # --- context management ------------------------------------------------------------
    def __enter__(self) -> "BlockReader":
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def close(self) -> None:
        if self._sf is not None:
            self._sf.close()
            self._sf = None
        if self._text is not None:
            self._text.close()
            self._text = None

    # --- public ------------------------------------------------------------------------
    @property
    def n_frames(self) -> int | None:
        return self._n_frames

    @property
    def max_frames(self) -> int:
        """An upper bound of the frames: the header's count (audio), or for a text export its size
        over 2 bytes (each sample needs at least a digit and a separator)."""
        if self._n_frames:
            return int(self._n_frames)
        return max(2, self.path.stat().st_size // _CSV_MIN_BYTES_PER_SAMPLE)

    def frames_for(self, seconds: float) -> int:
        """Whole frames in ``seconds`` at this file's rate (at least 2)."""
        return max(2, int(round(seconds * self.sample_rate)))

    def blocks(self, frames: int) -> Iterator[Capture]:
        """Consecutive blocks of ``frames`` frames (the last one may be shorter; one shorter than
        2 frames is dropped). Each is a Capture with ``t0`` = its first sample's time (s)."""
        if frames < 2:
            raise CaptureError(f"{self.where}: a block needs at least 2 frames, got {frames}")
        source = self._audio_blocks(frames) if self.kind == "audio" else self._csv_blocks(frames)
        for start, data, t0 in source:
            if data.shape[1] < 2:
                break
            cap = Capture(samples=data, sample_rate=self.sample_rate, channel_names=self._template.channel_names,
                          units=self._template.units, source=self.where, metadata={"start_frame": start},
                          calibration=self._template.calibration, t0=t0)
            yield cap.select(self._keys) if self._keys is not None else cap

    # --- audio ---------------------------------------------------------------------------
    def _open_audio(self) -> _Template:
        import soundfile as sf

        from benchfit.capture.sidecar import read_sidecar, sidecar_path

        sidecar = read_sidecar(self.path)
        try:
            self._sf = sf.SoundFile(str(self.path))
        except (sf.LibsndfileError, RuntimeError) as e:
            detail = str(e).split(":")[-1].strip() or "libsndfile cannot decode it"
            raise CaptureError(f"{self.where}: unreadable audio ({detail}) — give a WAV, FLAC or OGG recording, "
                               "or record it again") from e
        fh = self._sf
        n_ch = int(fh.channels)
        header_fs = float(fh.samplerate)
        self._n_frames = int(fh.frames)
        names = tuple(f"ch{i + 1}" for i in range(n_ch))
        units = ("FS",) * n_ch
        fs = header_fs
        cal = InputCalibration()
        self._gains: np.ndarray | None = None
        meta: dict[str, Any] = {"format": fh.format, "subtype": fh.subtype, "header_sample_rate_hz": header_fs,
                                "header_frames": self._n_frames}
        warnings: list[str] = []
        if sidecar is not None:
            jpath = sidecar_path(self.path)
            sc_names = [c["name"] for c in sidecar["channels"]]
            if len(sc_names) != n_ch:
                raise CaptureError(f"{jpath}: sidecar lists {len(sc_names)} channels but {self.path.name} has {n_ch} — "
                                   "fix the sidecar's channel list or delete it")
            names = tuple(sc_names)
            sc_fs = float(sidecar["sample_rate_hz"])
            if abs(sc_fs - header_fs) < 1.0:
                fs = sc_fs
            else:
                warnings.append(f"{jpath}: sidecar says {sc_fs:g} Hz but the file header says {header_fs:g} Hz — "
                                "the header's rate is used")
            c = sidecar["calibration"]
            gains = c["gain_v_per_fs"]
            if gains is not None:
                self._gains = np.asarray(gains, dtype=np.float64)[:, np.newaxis]
                units = ("V",) * n_ch
            fs = fs * (1.0 + c["timebase_ppm"] * 1e-6)
            cal = InputCalibration(profile=c["profile"], gain_v_per_fs=tuple(gains) if gains is not None else None,
                                   timebase_ppm=c["timebase_ppm"], timebase_u_ppm=c["timebase_u_ppm"],
                                   coupling_tau_s=c["coupling_tau_s"],
                                   gain_u_rel=tuple(c["gain_u_rel"]) if c.get("gain_u_rel") is not None else None)
            for key, value in sidecar.items():
                if key not in ("benchfit_sidecar", "channels", "calibration", "sample_rate_hz"):
                    meta[key] = value
            meta["sidecar"] = str(jpath)
            if sidecar.get("overflow_count", 0):
                warnings.append(f"{jpath}: the input overflowed {sidecar['overflow_count']} time(s) while "
                                "recording — samples may be missing; record again with a larger buffer")
        return _Template(sample_rate=fs, channel_names=names, units=units, calibration=cal, metadata=meta,
                         warnings=tuple(warnings), t0=0.0)

    def _audio_blocks(self, frames: int) -> Iterator[tuple[int, np.ndarray, float]]:
        import soundfile as sf

        fh = self._sf
        if fh is None:
            raise CaptureError(f"{self.where}: the reader is closed")
        fh.seek(0)
        start = 0
        while True:
            try:
                block = fh.read(frames, dtype="float64", always_2d=True)
            except (sf.LibsndfileError, RuntimeError) as e:
                self.warnings.append(f"{self.where}: decoding stopped at frame {start} ({e}) — only the frames "
                                     "before it were measured; copy or record the file again")
                return
            if block.shape[0] == 0:
                break
            data = np.ascontiguousarray(block.T)
            if self._gains is not None:
                data = data * self._gains
            yield start, data, start / self.sample_rate
            start += block.shape[0]
            if block.shape[0] < frames:
                break
        if self._n_frames and start < self._n_frames:
            self.warnings.append(f"{self.where}: audio data truncated: header declares {self._n_frames} frames, "
                                 f"file holds {start} — only those were measured")

    # --- CSV -----------------------------------------------------------------------------
    def _open_text(self):
        with open(self.path, "rb") as fh:
            bom = fh.read(4)
        if bom.startswith((b"\xff\xfe", b"\xfe\xff")):
            enc = "utf-16"
        else:
            enc = "utf-8-sig"
            try:
                with open(self.path, "r", encoding=enc) as fh:
                    fh.read(1 << 20)
            except UnicodeDecodeError:
                enc = "latin-1"
        return open(self.path, "r", encoding=enc, newline=None)

    def _open_csv(self) -> _Template:
        from benchfit.capture.csvfile import _data_start, _sniff_layout, read_csv

        self._n_frames = None
        self._text = self._open_text()
        lines: list[str] = []
        for line in self._text:
            lines.append(line.rstrip("\n"))
            if len(lines) >= _CSV_HEAD_ROWS + 200:
                break
        raw = "\n".join(lines).encode("utf-8")
        lay = _sniff_layout(lines, self.where)
        start = _data_start(lines, lay, self.where)
        self._csv_prefix = "\n".join(lines[:start]) + ("\n" if start else "")
        self._csv_head_start = start
        head = read_csv(self.path, raw=raw, sample_rate=self._given_rate)
        self._csv_time_column = str(head.metadata.get("time_source", "")).startswith("time column")
        meta = dict(head.metadata)
        rate = head.sample_rate
        if self._csv_time_column:
            rate = self._csv_end_rate(rate, head.t0, start)
            meta["time_step_s"] = 1.0 / rate
        return _Template(sample_rate=rate, channel_names=head.channel_names, units=head.units,
                         calibration=head.calibration, metadata=meta, warnings=head.warnings, t0=head.t0)

    def _csv_end_rate(self, head_rate: float, t0: float, data_start: int) -> float:
        """The time column's rate over the whole file: (rows before the last few) / (their time − t0).

        The first rows' rate is good to the time stamps' rounding over a few thousand steps (a
        column printed to 0.1 µs at 48 kHz gives ~10⁻⁶), which would put a sample of a long file
        whole steps off the grid; the span of the whole file is as long as it gets. Counting the
        rows costs one pass over the bytes (newlines only). Falls back to ``head_rate`` when the
        tail cannot be read or does not agree within 0.1 %.
        """
        from benchfit.capture.csvfile import read_csv

        if getattr(self._text, "encoding", "").lower().startswith("utf-16"):
            return head_rate
        try:
            newlines = 0
            with open(self.path, "rb") as fh:
                for chunk in iter(lambda: fh.read(1 << 22), b""):
                    newlines += chunk.count(b"\n")
                size = fh.tell()
                fh.seek(max(0, size - (1 << 16)))
                tail = fh.read().decode(self._text.encoding, errors="replace")
            ends_with_newline = tail.endswith("\n")
            lines = tail.splitlines()
            total_lines = newlines + (0 if ends_with_newline else 1)
            blank_end = 0
            while lines and not lines[-1].strip():
                lines.pop()
                blank_end += 1
            rows = [ln for ln in lines[-16:] if ln.strip()]
            if len(rows) < 2 or len(lines) < 17:
                return head_rate
            data_rows = total_lines - blank_end - data_start
            first_tail = data_rows - len(rows)
            cap = read_csv(self.path, raw=(self._csv_prefix + "\n".join(rows)).encode("utf-8"))
        except (OSError, CaptureError, UnicodeError, LookupError):
            return head_rate
        span = cap.t0 - t0
        if first_tail <= 0 or not span > 0:
            return head_rate
        rate = first_tail / span
        return rate if abs(rate / head_rate - 1.0) < 1e-3 else head_rate

    def _csv_blocks(self, frames: int) -> Iterator[tuple[int, np.ndarray, float]]:
        from benchfit.capture.csvfile import read_csv

        if self._text is None:
            raise CaptureError(f"{self.where}: the reader is closed")
        self._text.seek(0)
        fs, t0 = self.sample_rate, self._template.t0
        line_no = 0
        for _ in range(self._csv_head_start):  # preamble and header
            next(self._text, None)
            line_no += 1
        start = 0
        rows: list[str] = []
        first_line = line_no + 1

        def parse(rows: list[str], first_line: int) -> tuple[np.ndarray, float]:
            text = self._csv_prefix + "\n".join(rows)
            try:
                cap = read_csv(self.path, raw=text.encode("utf-8"), sample_rate=fs if not self._csv_time_column else None)
            except CaptureError as e:
                raise CaptureError(_shift_line(str(e), first_line - 1 - self._csv_head_start)) from e
            return cap.samples, cap.t0

        for line in self._text:
            line_no += 1
            s = line.rstrip("\n")
            if not s.strip():
                continue
            rows.append(s)
            if len(rows) == frames:
                data, tb = parse(rows, first_line)
                self._check_grid(tb, t0 + start / fs, first_line)
                yield start, data, t0 + start / fs
                start += data.shape[1]
                rows = []
                first_line = line_no + 1
        if len(rows) >= 2:
            data, tb = parse(rows, first_line)
            self._check_grid(tb, t0 + start / fs, first_line)
            yield start, data, t0 + start / fs

    def _check_grid(self, t_block: float, t_expected: float, line: int) -> None:
        if self._csv_time_column and abs(t_block - t_expected) > 0.5 / self.sample_rate:
            raise CaptureError(
                f"{self.where}: line {line}: time {t_block:.9g} s but the rate of the first rows puts this sample at "
                f"{t_expected:.9g} s — the file has a gap or changes its rate; export it without gaps")


def _channel_keys(channels: str | int | Sequence[str | int] | None) -> list[str | int] | None:
    if channels is None:
        return None
    if isinstance(channels, str):
        keys: list[str | int] = [k.strip() for k in channels.split(",") if k.strip()]
    elif isinstance(channels, int):
        keys = [channels]
    else:
        keys = list(channels)
    if not keys:
        raise CaptureError(f"channels: {channels!r} selects nothing — name at least one channel")
    return keys


def _shift_line(message: str, offset: int) -> str:
    """Turn 'line N' of a block's parse into the file's own line number."""
    import re

    return re.sub(r"line (\d+)", lambda m: f"line {int(m.group(1)) + offset}", message, count=1)


def block_threshold() -> int:
    """Samples (frames × channels) above which a file is measured in blocks: $BENCHFIT_BLOCK_SAMPLES
    when it is set to a whole number ≥ 1024, else :data:`BLOCK_THRESHOLD_SAMPLES`."""
    raw = os.environ.get(THRESHOLD_ENV, "").strip()
    if raw:
        try:
            value = int(raw)
        except ValueError:
            raise CaptureError(f"{THRESHOLD_ENV}: {raw!r} is not a whole number of samples — unset it or give "
                               "e.g. 16777216") from None
        if value < 1024:
            raise CaptureError(f"{THRESHOLD_ENV}: {value} is below 1024 samples — unset it or give e.g. 16777216")
        return value
    return BLOCK_THRESHOLD_SAMPLES


def block_frames(channels: int, threshold: int | None = None) -> int:
    """Frames in one block: an eighth of the threshold's samples shared by the channels (2^20 frames
    of stereo at the default: 21.8 s at 48 kHz, 16 MiB of float64), at least 1024."""
    thr = block_threshold() if threshold is None else threshold
    return max(1024, thr // (8 * max(1, channels)))


def estimated_samples(path: str | os.PathLike[str], data: bytes | None = None) -> int | None:
    """Samples (frames × channels) in a capture file without decoding it: the audio header's count,
    or for a text export its upper bound (size over 2 bytes a sample). None when it cannot be told
    (missing file, unreadable header: the reader then gives its own error). ``data``: the file's
    bytes when the caller has read them already (the header is then read from them)."""
    p = Path(path)
    try:
        size = p.stat().st_size if data is None else len(data)
        if data is None:
            with open(p, "rb") as fh:
                head = fh.read(64)
        else:
            head = data[:64]
    except OSError:
        return None
    if p.suffix.lower() in AUDIO_SUFFIXES or sniff_audio(head) is not None:
        try:
            import soundfile as sf

            info = sf.info(str(p) if data is None else io.BytesIO(data))
        except Exception:  # noqa: BLE001 - any decoder failure: the reader reports it properly
            return None
        return int(info.frames) * int(info.channels)
    # a text export costs its reader about 12 bytes of memory a byte of text (measured: 68 MiB of CSV,
    # 0.86 GiB peak), so it is counted at its upper bound of samples (2 bytes each): held whole only
    # below 2^25 bytes (32 MiB, about 0.4 GiB to read)
    return size // _CSV_MIN_BYTES_PER_SAMPLE
