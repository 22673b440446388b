"""A drift run: interval readings of one channel over a long capture, and their stability.

:func:`run_drift` consumes an iterable of one-interval :class:`~benchfit.capture.capture.Capture`
blocks (from :class:`~benchfit.capture.blocks.BlockReader` or a live input) and returns a
frozen :class:`DriftRun`; it holds one reading per interval (a few hundred bytes each), never
the samples, so memory stays flat for any duration. :func:`drift_file` is the one-call
convenience for a file, as :func:`benchfit.measure` is for one capture.

JSON contract (``benchfit drift --json`` and the ``--drift`` input of ``benchfit report``)::

    {"benchfit_drift": 1, "file": str|null, "device": str|null, "kept": str|null,
     "unit": str|null, "channel": str, "channel_unit": "V"|"FS", "sample_rate_hz": float,
     "interval_s": float, "n_intervals": int, "duration_s": float, "start_utc": str|null,
     "calibration": {...}, "stability": {... Stability.to_dict() ...} | null,
     "series": [{... IntervalReading.to_dict() ...}], "warnings": [str]}
"""

from __future__ import annotations

import math
import os
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field
from typing import Any

from benchfit.errors import MeasureError
from benchfit.measurement.drift import IntervalReading, IntervalTracker
from benchfit.measurement.stability import DEFAULT_BAND_PPM, Stability, stability

__all__ = ["DriftRun", "run_drift", "drift_file", "pick_channel", "DRIFT_FORMAT"]

#: value of the ``benchfit_drift`` key of the JSON contract
DRIFT_FORMAT = 1


@dataclass(frozen=True)
class DriftRun:
    """Readings and stability summary of one channel's run (see the module's JSON contract)."""

    channel: str
    channel_unit: str
    sample_rate_hz: float
    interval_s: float
    readings: tuple[IntervalReading, ...]
    stability: Stability | None
    file: str | None = None
    device: str | None = None
    kept: str | None = None
    unit: str | None = None
    start_utc: str | None = None
    calibration: dict[str, Any] = field(default_factory=dict)
    warnings: tuple[str, ...] = ()
    interrupted: bool = False

    @property
    def duration_s(self) -> float:
        return len(self.readings) * self.interval_s

    def to_dict(self, series: bool = True) -> dict[str, Any]:
        return {"benchfit_drift": DRIFT_FORMAT, "file": self.file, "device": self.device, "kept": self.kept,
                "unit": self.unit, "channel": self.channel, "channel_unit": self.channel_unit,
                "sample_rate_hz": self.sample_rate_hz, "interval_s": self.interval_s,
                "n_intervals": len(self.readings), "duration_s": self.duration_s, "start_utc": self.start_utc,
                "calibration": dict(self.calibration),
                "stability": self.stability.to_dict() if self.stability is not None else None,
                "series": [r.to_dict() for r in self.readings] if series else [],
                "interrupted": self.interrupted, "warnings": list(self.warnings)}


def pick_channel(names: tuple[str, ...], channel: str | int | None) -> str | int:
    """The channel to follow: as given, else the only one, else the one named ``output``, else the last."""
    if channel is not None:
        return channel
    lowered = [n.lower() for n in names]
    if len(names) == 1:
        return names[0]
    return names[lowered.index("output")] if "output" in lowered else names[-1]


#: the fewest samples an interval is measured from (a few periods of the tone are needed as well)
MIN_INTERVAL_SAMPLES = 64


def run_drift(blocks: Iterable[Any], *, interval_s: float, channel: str | int | None = None,
              n_harmonics: int = 10, band_ppm: float = DEFAULT_BAND_PPM,
              on_reading: Callable[[IntervalReading], None] | None = None, **info: Any) -> DriftRun:
    """Measure every interval of a stream of one-interval Capture blocks and summarise the run.

    Parameters
    ----------
    blocks : iterable of Capture
        Consecutive blocks of ``interval_s`` each (the last one may be shorter; a short last
        block is left out, since the Allan deviation needs equal intervals).
    interval_s : float
        Interval length τ0 (s).
    channel : str or int, optional
        Channel to follow (name or 0-based index); default as :func:`pick_channel`.
    n_harmonics : int
        Highest harmonic order H for THD.
    band_ppm : float
        Warm-up band (ppm of the mean frequency).
    on_reading : callable, optional
        Called with each :class:`IntervalReading` as soon as it is measured (live readout).
    **info
        ``file``, ``device``, ``kept``, ``unit``, ``start_utc``, ``warnings`` for the result.

    Raises
    ------
    MeasureError
        No complete interval in the stream.
    """
    if not (math.isfinite(interval_s) and interval_s > 0):
        raise MeasureError(f"interval_s: {interval_s!r} must be a positive number of seconds — e.g. interval_s=1.0")
    tracker: IntervalTracker | None = None
    readings: list[IntervalReading] = []
    frames = None
    first = None
    notes: list[str] = list(info.pop("warnings", ()))
    idx = 0
    interrupted = False
    try:
        for block in blocks:
            if first is None:
                first = block
                key = pick_channel(block.channel_names, channel)
                idx = block.channel_index(key)
                frames = int(round(interval_s * block.sample_rate))
                if frames < MIN_INTERVAL_SAMPLES:
                    raise MeasureError(
                        f"interval_s: {interval_s:g} s holds {frames} sample(s) at {block.sample_rate:g} Hz — an "
                        f"interval needs at least {MIN_INTERVAL_SAMPLES} samples and a few periods of the tone; "
                        f"give {MIN_INTERVAL_SAMPLES / block.sample_rate:.3g} s or more, e.g. interval_s=1.0")
                cal = block.calibration
                tracker = IntervalTracker(block.sample_rate, n_harmonics=n_harmonics,
                                          timebase_u_ppm=cal.timebase_u_ppm, coupling_tau_s=cal.coupling_tau_s,
                                          unit=block.units[idx])
            if block.n_samples < frames:
                notes.append(f"the last {block.n_samples / block.sample_rate:.3g} s (less than one interval) "
                             "were not measured")
                break
            assert tracker is not None and first is not None  # both set by the first block
            start = int(round(block.t0 * block.sample_rate)) - int(round(first.t0 * first.sample_rate))
            assert tracker is not None  # made at the first block
            r = tracker.push(block.samples[idx], start)
            readings.append(r)
            if on_reading is not None:
                on_reading(r)
    except KeyboardInterrupt:
        # Ctrl-C is how an open-ended live run stops: keep what was measured
        interrupted = True
    if first is None or not readings:
        raise MeasureError(f"{info.get('file') or 'input'}: no complete interval of {interval_s:g} s — "
                           "record longer or give a shorter interval_s")
    cal = first.calibration
    st = None
    try:
        st = stability(readings, interval_s=frames / first.sample_rate, band_ppm=band_ppm,
                       timebase_u_ppm=cal.timebase_u_ppm)
    except MeasureError as e:
        notes.append(f"no stability statistics: {e}")
    if abs(frames / first.sample_rate - interval_s) > 1e-3 * interval_s:  # not a timebase correction
        notes.append(f"interval rounded to {frames} samples = {frames / first.sample_rate:.9g} s")
    cal_d = cal.to_dict()
    if first.calibration.gain_v_per_fs is not None:
        cal_d["gain_v_per_fs"] = [first.calibration.gain_v_per_fs[idx]]
    return DriftRun(channel=first.channel_names[idx], channel_unit=first.units[idx],
                    sample_rate_hz=float(first.sample_rate), interval_s=frames / first.sample_rate,
                    readings=tuple(readings), stability=st, calibration=cal_d, warnings=tuple(notes),
                    file=info.get("file"), device=info.get("device"), kept=info.get("kept"), unit=info.get("unit"),
                    start_utc=info.get("start_utc"), interrupted=interrupted)


def drift_file(path: str | os.PathLike[str], *, interval_s: float = 1.0, channel: str | int | None = None,
               n_harmonics: int = 10, band_ppm: float = DEFAULT_BAND_PPM, sample_rate: float | None = None,
               on_reading: Callable[[IntervalReading], None] | None = None) -> DriftRun:
    """Drift run of a capture file (WAV, FLAC, CSV), read in one-interval blocks.

    The unit's serial comes from the sidecar's ``"unit"`` key when present.
    """
    from benchfit.capture.blocks import BlockReader

    with BlockReader(path, sample_rate=sample_rate) as reader:
        frames = reader.frames_for(interval_s)
        run = run_drift(reader.blocks(frames), interval_s=interval_s, channel=channel, n_harmonics=n_harmonics,
                        band_ppm=band_ppm, on_reading=on_reading, file=str(path),
                        unit=reader.metadata.get("unit"), start_utc=reader.metadata.get("start_utc"),
                        warnings=())
        extra = tuple(reader.warnings)
    if extra:
        from dataclasses import replace

        run = replace(run, warnings=extra + run.warnings)
    return run
