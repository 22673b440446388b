"""Live capture from a sound card: device list, streaming recorder, live windows for tuning.

Two layers, from convenience to control:

* :func:`record` — one call that streams an input device into a WAV file and writes its
  sidecar. The PortAudio callback only copies each block into a queue; a writer thread
  streams the blocks into the file with :mod:`soundfile`. Ctrl-C or an exception stops the
  stream, drains the queue, closes the file (soundfile finishes the header on close) and
  writes the sidecar, so every sample captured so far stays in a valid file.
* :class:`LiveWindows` — an input stream that yields overlapping analysis windows
  (the block source of ``benchfit tune``).

The pure parts of tuning — :class:`Windower` (the core of :class:`LiveWindows`),
:func:`iter_windows`, :func:`analyse_window`, :class:`TuneReading`, :func:`direction_hint`
and :func:`to_dbfs` — live in :mod:`benchfit.measurement.tuning` and are re-exported here.

:mod:`sounddevice` is imported on first use; a missing PortAudio library or a device that
refuses the request becomes a :class:`~benchfit.errors.DeviceError` (exit code 3).

Safety: a line input takes about 1–2 V peak. Feed it through a resistive divider and a
DC-blocking capacitor, never connect mains or anything referenced to mains, mind ground
loops, and remember that an inductor kicks when its current is interrupted. Local codes
and qualified practice take precedence.
"""

from __future__ import annotations

import contextlib
import math
import os
import queue
import signal
import threading
import time
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from datetime import datetime, timedelta, timezone
from pathlib import Path
from typing import Any, Literal, get_args

import numpy as np

from benchfit.capture.calibration import CalibrationProfile, clipped_samples, load_profile
from benchfit.capture.capture import InputCalibration
from benchfit.capture.fileio import create_new
from benchfit.capture.devices import InputDevice, check_input, list_input_devices, resolve_input_device
from benchfit.capture.devices import quiet_native_stderr as _quiet_native_stderr
from benchfit.capture.devices import sounddevice_module as _sounddevice
from benchfit.errors import CaptureError, DeviceError
# the pure tuning parts live in benchfit.measurement.tuning; imported here for the live stream
# and re-exported so that ``from benchfit.capture.live import analyse_window`` keeps working
from benchfit.measurement.tuning import (TuneReading, Window, Windower, analyse_window, direction_hint,
                                         iter_windows, to_dbfs)

__all__ = [
    "SampleFormat",
    "InputDevice",
    "RecordStatus",
    "RecordingResult",
    "RecordingInterrupted",
    "Window",
    "Windower",
    "LiveWindows",
    "TuneReading",
    "list_input_devices",
    "resolve_input_device",
    "check_input",
    "record",
    "iter_windows",
    "analyse_window",
    "direction_hint",
    "to_dbfs",
]

SampleFormat = Literal["pcm24", "float"]
_SUBTYPES: dict[str, str] = {"pcm24": "PCM_24", "float": "FLOAT"}
_BYTES_PER_SAMPLE: dict[str, int] = {"pcm24": 3, "float": 4}
#: a plain WAV's chunk sizes are 32-bit: past this many data bytes (4 GiB less a margin for the
#: header) libsndfile reads such a file back as only part of its length, so longer recordings
#: are written as RF64 (EBU Tech 3306), the 64-bit WAV that the readers here open the same way
_WAV_DATA_LIMIT = 2 ** 32 - 2 ** 20


def wav_container(frames: int, channels: int, sample_format: str) -> str:
    """"WAV", or "RF64" when ``frames`` of ``channels`` would pass a plain WAV's 4 GiB limit."""
    size = int(frames) * int(channels) * _BYTES_PER_SAMPLE[sample_format]
    return "RF64" if size > _WAV_DATA_LIMIT else "WAV"

#: no block for this long (s) after the stream started means the device is stuck
_STALL_S = 5.0


# --------------------------------------------------------------------------------------
# recording
# --------------------------------------------------------------------------------------
@dataclass(frozen=True)
class RecordStatus:
    """Progress of a recording, passed to ``on_block`` about ten times a second.

    Attributes
    ----------
    frames_done, frames_total : int
        Sample frames written so far and asked for.
    elapsed_s : float
        Recorded time (frames_done / rate, s).
    peak_dbfs : tuple of float
        Per-channel peak level (dBFS) since the previous status.
    new_clips : int
        Clipped samples since the previous status: stuck flat at −0.1 dBFS or above (≥ 3 identical
        samples), or beyond full scale.
    new_overflows : int
        Input overflows PortAudio reported since the previous status.
    clip_count, overflow_count : int
        Totals since the start.
    """

    frames_done: int
    frames_total: int
    elapsed_s: float
    peak_dbfs: tuple[float, ...]
    new_clips: int
    new_overflows: int
    clip_count: int
    overflow_count: int


@dataclass(frozen=True)
class RecordingResult:
    """What :func:`record` wrote.

    Attributes
    ----------
    path, sidecar_path : Path
        The WAV file and its sidecar JSON.
    frames : int
        Sample frames in the file.
    sample_rate : float
        Nominal sample rate (Hz).
    channel_names : tuple of str
    device : str
        Name of the input device.
    start_utc : str
        Start of the recording (ISO 8601, UTC).
    overflow_count, clip_count : int
        Input overflows reported by PortAudio, and clipped samples (stuck flat at −0.1 dBFS or
        above, or beyond full scale).
    peak_dbfs : tuple of float
        Per-channel peak over the whole recording (dBFS).
    interrupted : bool
        True when Ctrl-C stopped the recording early.
    calibration : InputCalibration
        What the sidecar tells ``load`` to apply.
    warnings : tuple of str
    """

    path: Path
    sidecar_path: Path
    frames: int
    sample_rate: float
    channel_names: tuple[str, ...]
    device: str
    start_utc: str
    overflow_count: int
    clip_count: int
    peak_dbfs: tuple[float, ...]
    interrupted: bool
    calibration: InputCalibration
    warnings: tuple[str, ...] = ()

    @property
    def duration_s(self) -> float:
        """Recorded length (s)."""
        return self.frames / self.sample_rate


class RecordingInterrupted(KeyboardInterrupt):
    """Ctrl-C stopped :func:`record`; the file and sidecar were finished. ``result`` says what was saved."""

    def __init__(self, result: RecordingResult) -> None:
        super().__init__(f"recording interrupted after {result.duration_s:.2f} s")
        self.result = result


def _channel_names(names: list[str] | tuple[str, ...] | str | None, channels: int) -> tuple[str, ...]:
    if names is None:
        return tuple(f"ch{i + 1}" for i in range(channels))
    if isinstance(names, str):
        names = [n.strip() for n in names.split(",")]
    names = tuple(str(n).strip() for n in names)
    if len(names) != channels or any(not n for n in names):
        raise CaptureError(f"names={','.join(names)!r}: give {channels} non-empty name(s), comma-separated, "
                           f"one per channel")
    if len({n.lower() for n in names}) != len(names):
        raise CaptureError(f"names={','.join(names)!r}: channel names must be different")
    return names


def _utc_now() -> str:
    return datetime.now(timezone.utc).isoformat(timespec="milliseconds").replace("+00:00", "Z")


class _Stats:
    """Counters shared by the writer thread and the caller (guarded by a lock)."""

    def __init__(self, channels: int) -> None:
        self.lock = threading.Lock()
        self.frames = 0
        self.peak_recent = np.zeros(channels)
        self.peak_all = np.zeros(channels)
        self.clips = 0
        self.clips_reported = 0
        self.overflows = 0
        self.overflows_reported = 0
        self.error: BaseException | None = None
        self.last_block = time.monotonic()

    def snapshot(self, total: int, rate: float) -> RecordStatus:
        with self.lock:
            peaks = tuple(to_dbfs(float(p)) for p in self.peak_recent)
            self.peak_recent[:] = 0.0
            st = RecordStatus(frames_done=self.frames, frames_total=total, elapsed_s=self.frames / rate,
                              peak_dbfs=peaks, new_clips=self.clips - self.clips_reported,
                              new_overflows=self.overflows - self.overflows_reported,
                              clip_count=self.clips, overflow_count=self.overflows)
            self.clips_reported = self.clips
            self.overflows_reported = self.overflows
        return st


def _writer(sf_file, blocks: "queue.Queue[Any]", stats: _Stats, integer: bool,
            tap: "Callable[[np.ndarray], None] | None" = None) -> None:
    """Writer thread: stream blocks from the queue into the open sound file until ``None``.

    For an integer file (PCM_24) samples beyond ±1 FS (possible from a float sound server)
    are limited to full scale before writing, as an ADC would; they are counted as clips.
    """
    failed = False
    while True:
        item = blocks.get()
        if item is None:
            return
        block, overflow = item
        if failed:
            continue  # keep draining so the producer never blocks
        try:
            sf_file.write(np.clip(block, -1.0, 1.0) if integer else block)
            if tap is not None:
                tap(block)  # after the write: a tapped block is always in the file
        except Exception as e:  # disk full, file removed: report it, keep the queue moving
            with stats.lock:
                stats.error = e
            failed = True
            continue
        mag = np.abs(block)
        peaks = mag.max(axis=0) if block.shape[0] else np.zeros(block.shape[1])
        clips = clipped_samples(block)  # stuck at full scale or beyond it: not a sagging top near it
        with stats.lock:
            stats.frames += block.shape[0]
            np.maximum(stats.peak_recent, peaks, out=stats.peak_recent)
            np.maximum(stats.peak_all, peaks, out=stats.peak_all)
            stats.clips += clips
            stats.overflows += int(overflow)
            stats.last_block = time.monotonic()


@contextlib.contextmanager
def _sigint_deferred():
    """Ignore a second Ctrl-C while the file is being finished (main thread only)."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    previous = signal.signal(signal.SIGINT, signal.SIG_IGN)
    try:
        yield
    finally:
        signal.signal(signal.SIGINT, previous)


#: a recording whose loudest sample stays below this is silence (a line-level source reaches −20 dBFS
#: or more; −60 dBFS is near the noise floor of a 16-bit card's input — common practice, no source)
_SILENT_DBFS = -60.0


def _write_recording_sidecar(out: Path, sidecar: dict[str, Any], overwrite: bool, warnings: list[str]) -> Path:
    """Write a finished recording's sidecar; one that appeared during the recording is kept.

    Without ``overwrite`` the sidecar is created exclusively. If a file took its name while
    recording, this recording's sidecar goes beside it as ``<stem>.recorded.json`` (then
    ``.recorded-2.json`` …) and a warning says so: neither the other file nor this
    recording's metadata is lost.
    """
    from benchfit.capture.sidecar import sidecar_path, write_sidecar

    try:
        return write_sidecar(out, sidecar, overwrite=overwrite)
    except CaptureError:
        if overwrite or not sidecar_path(out).exists():
            raise
    for n in range(1, 100):
        alt = out.with_name(f"{out.stem}.recorded{'' if n == 1 else f'-{n}'}.wav")
        try:
            side = write_sidecar(alt, sidecar, overwrite=False)
        except CaptureError:
            if sidecar_path(alt).exists():
                continue
            raise
        warnings.append(f"{sidecar_path(out)}: a file appeared there during the recording and was kept — this "
                        f"recording's sidecar is {side}; check both, then rename it to {sidecar_path(out).name}")
        return side
    raise CaptureError(f"{sidecar_path(out)}: exists, and so do 99 alternative sidecar names — "
                       "move them away and record again")


def record(path: str | os.PathLike[str], seconds: float, rate: int = 48000, channels: int = 1,
           device: str | int | None = None, names: list[str] | tuple[str, ...] | str | None = None,
           profile: str | None = None, overwrite: bool = False,
           on_block: Callable[[RecordStatus], None] | None = None,
           sample_format: SampleFormat = "pcm24",
           tap: Callable[[np.ndarray], None] | None = None) -> RecordingResult:
    """Record an input device into a WAV file and write its sidecar JSON.

    Parameters
    ----------
    path : str or Path
        Output WAV file; the sidecar goes next to it (same stem, ``.json``).
    seconds : float
        Length to record (s).
    rate : int, default 48000
        Sample rate (Hz).
    channels : int, default 1
        Number of input channels.
    device : str or int, optional
        Input device index or (part of) its name; default: the default input.
    names : sequence of str or comma-separated str, optional
        One name per channel (default ``ch1``, ``ch2``, …).
    profile : str, optional
        Calibration profile whose gain (with its relative uncertainty, when the profile has
        it), timebase and coupling go into the sidecar.
    overwrite : bool, default False
        Replace an existing WAV or sidecar; otherwise either existing is an error.
    on_block : callable, optional
        Called from the calling thread about ten times a second with a :class:`RecordStatus`
        (progress, peak level per channel, clip and overflow counts).
    sample_format : {"pcm24", "float"}, default "pcm24"
        WAV sample format: 24-bit integer or 32-bit float.
    tap : callable, optional
        Called from the writer thread with each block (frames × channels, float32 FS) right
        after it was written, so a caller can analyse the stream while it is kept
        (``benchfit drift --keep``). It must be quick and must not raise.

    Returns
    -------
    RecordingResult

    Raises
    ------
    RecordingInterrupted
        Ctrl-C: the samples captured so far were saved; ``.result`` describes them.
    DeviceError
        PortAudio missing, device missing or refusing the settings, or a stalled stream.
    CaptureError
        Bad arguments, an existing file without ``overwrite``, or a failed write.
    """
    import soundfile as sf

    from benchfit import __version__
    from benchfit.capture.sidecar import sidecar_path

    if sample_format not in get_args(SampleFormat):
        raise CaptureError(f"sample_format={sample_format!r}: unknown sample format — choose one of "
                           f"{', '.join(get_args(SampleFormat))}")
    if not (isinstance(seconds, (int, float)) and math.isfinite(seconds) and seconds > 0):
        raise CaptureError(f"seconds: must be a positive number of seconds, got {seconds!r} — e.g. seconds=10")
    out = Path(path)
    if out.is_dir():
        raise CaptureError(f"{out}: is a folder — give a WAV file name, e.g. {out / 'take1.wav'}")
    if out.suffix.lower() != ".wav":
        raise CaptureError(f"{out}: recordings are WAV files — give a name ending in .wav")
    side = sidecar_path(out)
    if not overwrite:
        for p in (out, side):
            if p.exists():
                raise CaptureError(f"{p}: already exists — choose another name or pass overwrite=True")
    if not out.parent.is_dir():
        raise CaptureError(f"{out.parent}: no such folder — create it first")
    chan_names = _channel_names(names, channels)
    prof: CalibrationProfile | None = load_profile(profile) if profile else None
    dev = check_input(device, float(rate), channels)
    sd = _sounddevice()

    warnings: list[str] = []
    calibration = prof.input_calibration(channels) if prof else InputCalibration()
    missing = prof.missing_gains(channels) if prof is not None and prof.gains else []
    if missing and prof is not None:
        shown = ", ".join(str(c) for c in missing)
        warnings.append(f"profile={prof.name!r}: no gain for channel(s) {shown} — those stay in FS (the "
                        "others are in V); calibrate them with 'benchfit calibrate gain' to read volts")
    if prof is not None and calibration.gain_v_per_fs is not None and calibration.gain_u_rel is None:
        # a profile from before the gain uncertainty was stored: the sidecar leaves gain_u_rel out
        warnings.append(f"profile={prof.name!r}: gain uncertainty not known — levels in V will carry only their "
                        "noise uncertainty; run 'benchfit calibrate gain --rms-u …' again")

    total = int(round(seconds * rate))
    blocks: queue.Queue[Any] = queue.Queue()
    stats = _Stats(channels)
    seen = [0]

    first_block_utc: list[datetime] = []

    def callback(indata, frames, time_info, status):  # PortAudio thread: copy and queue only
        if not first_block_utc:  # the stream's first sample was taken one block ago
            first_block_utc.append(datetime.now(timezone.utc) - timedelta(seconds=frames / rate))
        left = total - seen[0]
        take = min(frames, left)
        if take > 0:
            blocks.put((indata[:take].copy(), bool(status.input_overflow)))
            seen[0] += take
        if seen[0] >= total:
            raise sd.CallbackStop

    interrupted = False
    start_utc = _utc_now()
    if not overwrite:  # claim the name now: a file made after the check above is never replaced
        try:
            create_new(out)
        except FileExistsError as e:
            raise CaptureError(f"{out}: already exists — choose another name or pass overwrite=True") from e
        except OSError as e:
            raise CaptureError(f"{out}: cannot be created ({e.strerror or e}) — check the folder is writable") from e
    try:
        sf_file = sf.SoundFile(str(out), mode="w", samplerate=int(rate), channels=channels,
                               subtype=_SUBTYPES[sample_format],
                               format=wav_container(total, channels, sample_format))
    except (sf.LibsndfileError, RuntimeError, OSError) as e:
        if not overwrite:
            with contextlib.suppress(OSError):
                out.unlink()  # the empty file claimed above
        raise CaptureError(f"{out}: cannot be created ({e}) — check the folder is writable") from e
    writer = threading.Thread(target=_writer, args=(sf_file, blocks, stats, sample_format == "pcm24", tap),
                              name="benchfit-writer", daemon=True)
    writer.start()
    try:
        with _quiet_native_stderr():
            stream = sd.InputStream(device=dev.index, channels=channels, samplerate=rate,
                                    dtype="float32", blocksize=max(256, int(rate) // 50),
                                    latency="high", callback=callback)
            stream.start()
    except sd.PortAudioError as e:
        blocks.put(None)
        writer.join()
        sf_file.close()
        with contextlib.suppress(OSError):
            out.unlink()  # nothing was recorded: leave no empty file behind
        raise DeviceError(f"device={dev.name!r}: cannot open the input stream ({e}) — "
                          "check the device is free and supports the settings") from e
    try:
        start_utc = _utc_now()
        with stats.lock:
            stats.last_block = time.monotonic()
        next_report = time.monotonic()
        while True:
            time.sleep(0.02)
            with stats.lock:
                done, err, last = stats.frames, stats.error, stats.last_block
            if err is not None:
                raise CaptureError(f"{out}: writing failed ({err}) — check free disk space") from err
            now = time.monotonic()
            if on_block is not None and (now >= next_report or done >= total):
                on_block(stats.snapshot(total, rate))
                next_report = now + 0.1
            if done >= total:
                break
            if now - last > _STALL_S:
                raise DeviceError(f"device={dev.name!r}: no samples arrived for {_STALL_S:g} s — "
                                  "check the device is connected and not used by another program")
    except KeyboardInterrupt:
        interrupted = True
    finally:
        # runs on success, Ctrl-C and errors alike: every captured sample ends up in a valid file
        with _sigint_deferred():
            with contextlib.suppress(Exception), _quiet_native_stderr():
                stream.abort()
                stream.close()
            blocks.put(None)
            writer.join()
            sf_file.close()
            if first_block_utc:
                start_utc = first_block_utc[0].isoformat(timespec="milliseconds").replace("+00:00", "Z")
            with stats.lock:
                frames, overflows, clips = stats.frames, stats.overflows, stats.clips
                peak_all = tuple(to_dbfs(float(p)) for p in stats.peak_all)
            if overflows:
                warnings.append(f"PortAudio reported {overflows} input overflow(s): samples were lost")
            if clips:
                warnings.append(f"{clips} sample(s) stuck flat at full scale (−0.1 dBFS or above): the input clipped")
            if frames and peak_all and max(peak_all) < _SILENT_DBFS:
                warnings.append(f"every channel stayed below {_SILENT_DBFS:g} dBFS (loudest {max(peak_all):.1f} dBFS): "
                                "the recording is silent — check the input selection, the cable and the "
                                "source, then record again")
            sidecar = {
                "benchfit_sidecar": 1,
                "channels": [{"name": n} for n in chan_names],
                "sample_rate_hz": int(rate),
                "device": dev.name,
                "start_utc": start_utc,
                "overflow_count": overflows,
                "clip_count": clips,
                "calibration": calibration.to_dict(),
                "benchfit_version": __version__,
                "frames": frames,
                "interrupted": interrupted,
                "sample_format": sample_format,
                "peak_dbfs": [round(p, 3) for p in peak_all],
            }
            side = _write_recording_sidecar(out, sidecar, overwrite, warnings)
    result = RecordingResult(path=out, sidecar_path=side, frames=frames, sample_rate=float(rate),
                             channel_names=chan_names, device=dev.name, start_utc=start_utc,
                             overflow_count=overflows, clip_count=clips, peak_dbfs=peak_all,
                             interrupted=interrupted, calibration=calibration, warnings=tuple(warnings))
    if interrupted:
        raise RecordingInterrupted(result)
    return result


# --------------------------------------------------------------------------------------
# sliding windows
# --------------------------------------------------------------------------------------

class LiveWindows:
    """An input stream that yields overlapping windows (the block source of ``benchfit tune``).

    Use as a context manager and iterate::

        with LiveWindows(rate=48000, channels=1, window_s=1.0, hop_s=0.25) as live:
            for win in live:
                ...

    The PortAudio callback only queues copies of its blocks. Iteration hands out the most
    recent complete window; when analysis falls behind, older windows are skipped (counted
    in :attr:`Window.dropped`) so the readout stays current.

    Parameters
    ----------
    rate : int
        Sample rate (Hz).
    channels : int
        Input channels to open.
    window_s, hop_s : float
        Window length and step (s).
    device : str or int, optional
        Input device index or name.
    """

    def __init__(self, rate: int = 48000, channels: int = 1, window_s: float = 1.0, hop_s: float = 0.25,
                 device: str | int | None = None) -> None:
        if not (math.isfinite(window_s) and window_s > 0):
            raise CaptureError(f"window_s: must be a positive number of seconds, got {window_s!r}")
        if not (math.isfinite(hop_s) and 0 < hop_s):
            raise CaptureError(f"hop_s: must be a positive number of seconds, got {hop_s!r}")
        self.rate = rate
        self.channels = channels
        self.device_info = check_input(device, float(rate), channels)
        self._windower = Windower(channels, max(2, int(round(window_s * rate))), max(1, int(round(hop_s * rate))))
        self._blocks: queue.Queue[Any] = queue.Queue()
        self._stream = None
        self.overflow_count = 0
        self.dropped = 0

    def __enter__(self) -> "LiveWindows":
        sd = _sounddevice()
        blocks = self._blocks

        def callback(indata, frames, time_info, status):
            blocks.put((indata.copy(), bool(status.input_overflow)))

        try:
            with _quiet_native_stderr():
                self._stream = stream = sd.InputStream(device=self.device_info.index, channels=self.channels,
                                                       samplerate=self.rate, dtype="float32",
                                                       blocksize=max(256, int(self.rate) // 50), latency="high",
                                                       callback=callback)
                stream.start()
        except sd.PortAudioError as e:
            raise DeviceError(f"device={self.device_info.name!r}: cannot open the input stream ({e}) — "
                              "check the device is free and supports the settings") from e
        return self

    def __exit__(self, *exc: object) -> None:
        if self._stream is not None:
            with contextlib.suppress(Exception), _quiet_native_stderr():
                self._stream.abort()
                self._stream.close()
            self._stream = None

    def __iter__(self) -> Iterator[Window]:
        last_block = time.monotonic()
        while True:
            try:
                item = self._blocks.get(timeout=0.5)
            except queue.Empty:
                if time.monotonic() - last_block > _STALL_S:
                    raise DeviceError(f"device={self.device_info.name!r}: no samples arrived for "
                                      f"{_STALL_S:g} s — check the device is connected and not in use") from None
                continue
            last_block = time.monotonic()
            ready: list[tuple[int, np.ndarray]] = []
            while True:
                block, overflow = item
                self.overflow_count += int(overflow)
                ready.extend(self._windower.push(block))
                try:
                    item = self._blocks.get_nowait()
                except queue.Empty:
                    break
            if not ready:
                continue
            self.dropped += len(ready) - 1
            start, samples = ready[-1]
            yield Window(start_frame=start, samples=samples, sample_rate=float(self.rate),
                         overflow_count=self.overflow_count, dropped=self.dropped)
