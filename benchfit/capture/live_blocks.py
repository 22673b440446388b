"""Live input cut into one-interval Capture blocks, for long runs (``benchfit drift``).

Two sources, both yielding :class:`~benchfit.capture.capture.Capture` blocks of exactly one
interval with the calibration profile applied as :func:`benchfit.load` would apply the
sidecar (gain V/FS per channel, timebase ppm on the sample rate):

* :func:`stream_blocks` — the input stream of :class:`~benchfit.capture.live.LiveWindows`
  with window = hop = one interval (back-to-back, nothing kept). If analysis ever falls
  behind, skipped intervals show up as a gap in ``t0`` and the phase chain restarts there.
* :func:`record_blocks` — :func:`benchfit.capture.live.record` writes every sample to the
  ``--keep`` WAV (its Ctrl-C-safe writer and sidecar); its writer thread hands each written
  block to a queue, and the consumer runs in a worker thread on the blocks cut from it, so
  the analysed samples are exactly the kept ones.

Ctrl-C ends either source cleanly: the blocks so far are analysed, the kept file is finished.
"""

from __future__ import annotations

import math
import queue
import threading
from collections.abc import Callable, Iterator
from typing import Any, TypeVar

import numpy as np

from benchfit.capture.capture import Capture, InputCalibration
from benchfit.errors import CaptureError

__all__ = ["profile_calibration", "stream_blocks", "record_blocks"]

T = TypeVar("T")


def profile_calibration(profile: str | None, channels: int) -> InputCalibration:
    """The InputCalibration a profile gives ``channels`` input channels (none without a profile)."""
    if not profile:
        return InputCalibration()
    from benchfit.capture.calibration import load_profile

    return load_profile(profile).input_calibration(channels)


def _block(samples: np.ndarray, start: int, rate: float, cal: InputCalibration, names: tuple[str, ...],
           source: str) -> Capture:
    fs = rate * (1.0 + cal.timebase_ppm * 1e-6)
    units = ("FS",) * samples.shape[0]
    if cal.gain_v_per_fs is not None:
        samples = samples * np.asarray(cal.gain_v_per_fs, dtype=np.float64)[:, np.newaxis]
        units = ("V",) * samples.shape[0]
    return Capture(samples=samples, sample_rate=fs, channel_names=names, units=units, source=source,
                   calibration=cal, t0=start / fs, metadata={"start_frame": start})


def _names(names: tuple[str, ...] | None, channels: int) -> tuple[str, ...]:
    if names is None:
        return tuple(f"ch{i + 1}" for i in range(channels))
    return tuple(names)


def _check_times(interval_s: float, seconds: float | None) -> None:
    """Refuse an interval or run length that is not a positive number of seconds, naming the parameter."""
    for name, value in (("interval_s", interval_s), ("seconds", seconds)):
        if value is not None and not (isinstance(value, (int, float)) and math.isfinite(value) and value > 0):
            raise CaptureError(f"{name}: {value!r} must be a positive number of seconds")


def stream_blocks(*, rate: int, channels: int, interval_s: float, device: str | int | None = None,
                  profile: str | None = None, names: tuple[str, ...] | None = None,
                  seconds: float | None = None, state: dict[str, Any] | None = None) -> Iterator[Capture]:
    """One-interval blocks from the input until ``seconds`` (None: until Ctrl-C).

    ``state`` (optional dict) receives ``device``, ``overflow_count``, ``dropped`` and
    ``interrupted``.
    """
    from benchfit.capture.live import LiveWindows

    _check_times(interval_s, seconds)
    cal = profile_calibration(profile, channels)
    chan = _names(names, channels)
    st = state if state is not None else {}
    st.setdefault("interrupted", False)
    total = None if seconds is None else int(round(seconds / interval_s))
    count = 0
    try:
        with LiveWindows(rate=rate, channels=channels, window_s=interval_s, hop_s=interval_s, device=device) as live:
            st["device"] = live.device_info.name
            for win in live:
                st["overflow_count"], st["dropped"] = win.overflow_count, win.dropped
                yield _block(win.samples, win.start_frame, float(rate), cal, chan, f"live: {live.device_info.name}")
                count += 1
                if total is not None and count >= total:
                    return
    except KeyboardInterrupt:
        st["interrupted"] = True


def record_blocks(consume: Callable[[Iterator[Capture]], T], *, path: str, rate: int, channels: int,
                  interval_s: float, device: str | int | None = None, profile: str | None = None,
                  names: tuple[str, ...] | None = None, seconds: float | None = None, overwrite: bool = False,
                  on_status: Callable[[Any], None] | None = None) -> tuple[Any, T | None, bool]:
    """Record to ``path`` (WAV + sidecar) and run ``consume`` on the one-interval blocks meanwhile.

    Returns (RecordingResult, what ``consume`` returned, interrupted). ``consume`` runs in a
    worker thread; an exception it raises is re-raised here after the file is finished.
    """
    from benchfit.capture.live import RecordingInterrupted, record

    _check_times(interval_s, seconds)
    cal = profile_calibration(profile, channels)
    chan = _names(names, channels)
    frames = max(2, int(round(interval_s * rate)))
    q: "queue.Queue[np.ndarray | None]" = queue.Queue()
    outcome: dict[str, Any] = {}

    def blocks() -> Iterator[Capture]:
        buf = np.zeros((channels, 0))
        start = 0
        while True:
            item = q.get()
            if item is None:
                return
            buf = np.concatenate([buf, np.asarray(item, dtype=np.float64).T], axis=1)
            while buf.shape[1] >= frames:
                yield _block(buf[:, :frames], start, float(rate), cal, chan, path)
                buf = buf[:, frames:]
                start += frames

    def worker() -> None:
        try:
            outcome["value"] = consume(blocks())
        except BaseException as e:  # handed to the caller's thread
            outcome["error"] = e
            while q.get() is not None:  # keep draining so the writer never waits on us
                pass

    thread = threading.Thread(target=worker, name="benchfit-drift", daemon=True)
    thread.start()
    # a run "until Ctrl-C" records for at most 30 days (the WAV header would overflow long before)
    length = seconds if seconds is not None else 30 * 86400.0
    interrupted = False
    try:
        result = record(path, length, rate=rate, channels=channels, device=device, names=chan, profile=profile,
                        overwrite=overwrite, on_block=on_status, tap=lambda b: q.put(b.copy()))
    except RecordingInterrupted as stop:
        result, interrupted = stop.result, True
    finally:
        q.put(None)
        thread.join()
    if "error" in outcome:
        raise outcome["error"]
    return result, outcome.get("value"), interrupted
