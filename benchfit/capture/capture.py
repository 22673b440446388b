"""The one waveform object: :class:`Capture`.

A capture holds samples as float64 in SI units (volts) or full-scale units ("FS")
when no gain calibration is known, shape ``(channels, samples)``, a uniform sample
rate, channel names, where it came from, and the input calibration that applies to it.
It is immutable: the sample array is made read-only.
"""

from __future__ import annotations

import html
import math
from dataclasses import dataclass, field, replace
from types import MappingProxyType
import operator
from typing import Any, Mapping, Sequence, Union

import numpy as np

from benchfit.errors import CaptureError

__all__ = ["Capture", "InputCalibration", "ChannelSpec", "channel_keys", "resolve_channel"]

#: what every channel-choosing parameter accepts (``load(channels=)``, ``measure(channels=)``,
#: ``Capture.select``; one key for ``fit_lowpass(drive=, response=)``, ``fit_ringdown(channel=)``)
ChannelSpec = Union[str, int, Sequence[Union[str, int]]]


def channel_keys(channels: ChannelSpec, param: str = "channels") -> list[str | int]:
    """The channel keys of a selection, in order — the one rule of every channel parameter.

    * a **string** is one channel, or several separated by commas (``"drive,output"``); it is
      never read character by character;
    * an **int** (or numpy integer) is one channel;
    * a sequence holds strings and ints, one channel each.

    Each key then resolves by :func:`resolve_channel`. An empty selection is an error that
    names ``param``.
    """
    if isinstance(channels, str):
        keys: list[str | int] = [k.strip() for k in channels.split(",") if k.strip()]
    elif isinstance(channels, (int, np.integer)) and not isinstance(channels, bool):
        keys = [operator.index(channels)]
    else:
        sequence: Any = channels  # any iterable of keys; a wrong type is the error below
        try:
            keys = list(sequence)
        except TypeError:
            raise CaptureError(f"{param}: {channels!r} is not a channel — give a name, a 0-based index, "
                               "or a list of them") from None
    if not keys:
        raise CaptureError(f"{param}: {channels!r} selects nothing — name at least one channel")
    return keys


def resolve_channel(key: str | int, names: Sequence[str], where: str = "capture") -> int:
    """The 0-based index of one channel among ``names``.

    The rule (the same for the Python API and the command line, which passes text):

    * an **int** counts from 0, as Python does (``0`` is the first channel);
    * a **string** is a channel name, case-insensitive;
    * a string of digits that is no channel's name is a channel *number* counting from 1, as a
      scope's CH1, CH2 and the command line's ``--drive 2`` do (``"2"`` is the second channel).

    Raises :class:`~benchfit.errors.CaptureError` for an unknown channel, naming the choices.
    """
    n = len(names)
    if isinstance(key, (int, np.integer)) and not isinstance(key, bool):
        index = operator.index(key)
        if 0 <= index < n:
            return index
        raise CaptureError(f"{where}: no channel {index} — it has {n} (0…{n - 1})")
    if not isinstance(key, str):
        raise CaptureError(f"{where}: {key!r} is not a channel — give a name or a 0-based index")
    lowered = [name.lower() for name in names]
    if key.strip().lower() in lowered:
        return lowered.index(key.strip().lower())
    if key.strip().isdigit():
        number = int(key)
        if 1 <= number <= n:
            return number - 1
    raise CaptureError(f"{where}: no channel {key!r} — choose one of {', '.join(names)} or a number 1…{n}")


#: plausibility bounds of a capture (common practice, no source): a data logger taking one sample
#: an hour is 2.8e-4 Hz, the fastest bench digitisers sample near 1e11 Hz; outside these bounds the
#: number is a unit mistake or a damaged file, and the analysis would overflow (1/fs², fs²)
MIN_SAMPLE_RATE_HZ = 1e-4
MAX_SAMPLE_RATE_HZ = 1e12
#: no instrument's reading (in V, A or full scale) comes near this; a larger sample is an error cell, and
#: its square would overflow the power sums of the analysis
MAX_SAMPLE_MAGNITUDE = 1e15


@dataclass(frozen=True)
class InputCalibration:
    """Sound-card calibration that applies to a capture (from its sidecar).

    Attributes
    ----------
    profile : str or None
        Name of the calibration profile the values came from.
    gain_v_per_fs : tuple of float or None
        Volts per full-scale unit, one per channel (None for a channel the profile has no gain
        for: it stays in FS); already applied to the samples.
    timebase_ppm : float
        Sample-clock error in parts per million (positive: the card's clock runs fast,
        so the true sample rate is ``nominal * (1 + ppm·1e-6)``); already applied to
        :attr:`Capture.sample_rate`.
    timebase_u_ppm : float
        Standard uncertainty of ``timebase_ppm`` (ppm); measure adds it to every
        frequency's uncertainty budget.
    coupling_tau_s : float or None
        Time constant of the input's high-pass (AC coupling), in seconds; pulse
        measurements compensate the droop it causes.
    gain_u_rel : tuple of float or None
        Relative standard uncertainty (k = 1) of each channel's gain, e.g. 0.003 for
        0.3 %; it combines the calibration fit with the reference meter's uncertainty.
        Every level in volts (DC, RMS, amplitude, peak-to-peak) scales with the gain, so
        measure adds ``value · gain_u_rel`` to their uncertainties. None: not known (old
        profiles and sidecars); measure then applies the stated default
        (:data:`benchfit.uncertainty.DEFAULT_GAIN_U_REL`) and says so.
    distortion_floor_pct : float or None
        THD (%) the card itself adds (its own distortion floor, from ``calibrate
        distortion``); measure budgets it in every THD. None: not measured.
    instrument_volts : bool
        True when the samples are volts as an instrument wrote them (a scope's or logger's
        CSV export): the instrument applied its own vertical gain, which benchfit did not
        calibrate. measure then budgets a stated default vertical-gain term
        (:data:`benchfit.measurement.budgets.DEFAULT_SCOPE_GAIN_U_REL`) for every level,
        unless ``gain_u_rel`` states the channel's figure.

    A timebase with ``timebase_u_ppm == 0`` counts as *not calibrated* (a calibration always
    has an uncertainty): measure then uses the stated default
    :data:`benchfit.uncertainty.DEFAULT_TIMEBASE_U_PPM` and warns.
    """

    profile: str | None = None
    gain_v_per_fs: tuple[float | None, ...] | None = None
    timebase_ppm: float = 0.0
    timebase_u_ppm: float = 0.0
    coupling_tau_s: float | None = None
    gain_u_rel: tuple[float | None, ...] | None = None
    distortion_floor_pct: float | None = None
    instrument_volts: bool = False

    @property
    def timebase_calibrated(self) -> bool:
        """True when a timebase calibration (with its uncertainty) applies."""
        return self.timebase_u_ppm > 0.0

    @property
    def timebase_u_ppm_effective(self) -> float:
        """The calibration's u (ppm), or the stated default for an uncalibrated clock."""
        from benchfit.uncertainty import DEFAULT_TIMEBASE_U_PPM

        return self.timebase_u_ppm if self.timebase_calibrated else DEFAULT_TIMEBASE_U_PPM

    def to_dict(self) -> dict[str, Any]:
        """The sidecar's ``calibration`` object.

        ``gain_u_rel`` is written only when it is known: a sidecar without the key reads
        back as "not known", and the five-key object that older benchfit versions write
        and expect stays the same.
        """
        out: dict[str, Any] = {
            "profile": self.profile,
            "gain_v_per_fs": list(self.gain_v_per_fs) if self.gain_v_per_fs else None,
            "timebase_ppm": self.timebase_ppm,
            "timebase_u_ppm": self.timebase_u_ppm,
            "coupling_tau_s": self.coupling_tau_s,
        }
        if self.gain_u_rel is not None:
            out["gain_u_rel"] = list(self.gain_u_rel)
        if self.distortion_floor_pct is not None:
            out["distortion_floor_pct"] = self.distortion_floor_pct
        return out


@dataclass(frozen=True, eq=False)
class Capture:
    """A recorded waveform: samples in SI units on a uniform time grid.

    Parameters
    ----------
    samples : array_like, shape (channels, n) or (n,)
        Sample values in volts (``units`` "V") or full-scale units ("FS").
    sample_rate : float
        Samples per second (Hz), after any timebase correction.
    channel_names : sequence of str, optional
        One name per channel; default ``"ch1"``, ``"ch2"``, ...
    units : sequence of str, optional
        ``"V"`` or ``"FS"`` per channel; default ``"FS"``.
    source : str, optional
        Path of the file the capture was read from (or a description of the device).
    sha256 : str, optional
        SHA-256 of the source file's bytes, as a hex string.
    metadata : mapping, optional
        Free-form key/value pairs (CSV preamble, sidecar fields).
    calibration : InputCalibration, optional
        Input calibration that applies to the capture.
    warnings : sequence of str, optional
        Problems found while reading (e.g. a truncated file).
    t0 : float
        Time of the first sample in seconds (from a CSV time column), default 0.
    """

    samples: np.ndarray
    sample_rate: float
    channel_names: tuple[str, ...] = ()
    units: tuple[str, ...] = ()
    source: str | None = None
    sha256: str | None = None
    metadata: Mapping[str, Any] = field(default_factory=dict)
    calibration: InputCalibration = field(default_factory=InputCalibration)
    warnings: tuple[str, ...] = ()
    t0: float = 0.0

    def __post_init__(self) -> None:
        where = self.source or "capture"
        data = np.array(self.samples, dtype=np.float64, copy=True)
        if data.ndim == 1:
            data = data[np.newaxis, :]
        if data.ndim != 2:
            raise CaptureError(f"{where}: samples must be 1-D or 2-D (channels, samples), got shape {data.shape}")
        if data.shape[1] < 2:
            raise CaptureError(f"{where}: a capture needs at least 2 samples per channel, got {data.shape[1]}")
        if not np.all(np.isfinite(data)):
            ch, idx = np.argwhere(~np.isfinite(data))[0]
            raise CaptureError(f"{where}: sample {idx} of channel {ch + 1} is NaN or infinite — the recorder or "
                               "export wrote a bad value there; export again, or cut the record before it")
        big = np.abs(data) > MAX_SAMPLE_MAGNITUDE
        if np.any(big):
            ch, idx = np.argwhere(big)[0]
            raise CaptureError(
                f"{where}: sample {idx} of channel {ch + 1} is {data[ch, idx]:.3g}, beyond any reading an "
                f"instrument gives (|value| > {MAX_SAMPLE_MAGNITUDE:.0e}) — an overflow or error cell in the "
                "export; fix or delete that sample")
        try:
            fs = float(self.sample_rate)
        except (TypeError, ValueError, OverflowError):
            fs = math.nan
        if not math.isfinite(fs) or fs <= 0:
            raise CaptureError(f"{where}: sample rate must be a positive number of Hz, got {self.sample_rate!r} — "
                               "check the file's sample rate, or give sample_rate=")
        if not MIN_SAMPLE_RATE_HZ <= fs <= MAX_SAMPLE_RATE_HZ:
            raise CaptureError(
                f"{where}: sample rate {fs:.3g} Hz is outside what any recorder uses "
                f"({MIN_SAMPLE_RATE_HZ:g} Hz … {MAX_SAMPLE_RATE_HZ:.0e} Hz) — check the time column or "
                "the file's sample rate, or give the right sample_rate=")
        data.setflags(write=False)
        n_ch = data.shape[0]
        names = tuple(self.channel_names) or tuple(f"ch{i + 1}" for i in range(n_ch))
        units = tuple(self.units) or ("FS",) * n_ch
        if len(names) != n_ch or len(units) != n_ch:
            raise CaptureError(
                f"{where}: {n_ch} channels but {len(names)} names and {len(units)} units were given"
            )
        object.__setattr__(self, "samples", data)
        object.__setattr__(self, "sample_rate", fs)
        object.__setattr__(self, "channel_names", names)
        object.__setattr__(self, "units", units)
        object.__setattr__(self, "metadata", MappingProxyType(dict(self.metadata)))
        object.__setattr__(self, "warnings", tuple(self.warnings))

    # --- shape and time -------------------------------------------------
    @property
    def n_channels(self) -> int:
        return int(self.samples.shape[0])

    @property
    def n_samples(self) -> int:
        return int(self.samples.shape[1])

    @property
    def duration_s(self) -> float:
        """Record length N/fs in seconds."""
        return self.n_samples / self.sample_rate

    @property
    def time(self) -> np.ndarray:
        """Sample instants in seconds, ``t0 + n/fs``."""
        return self.t0 + np.arange(self.n_samples) / self.sample_rate

    # --- channel selection ----------------------------------------------
    def channel_index(self, key: str | int) -> int:
        """Index of one channel, by the rule of :func:`channel_keys` (names, 0-based ints, "1"-based text).

        A name that is no channel's may also be the column header as written in a CSV
        (``"drive_V"`` for the channel named ``drive``).
        """
        where = self.source or "capture"
        if isinstance(key, str):
            text = key.strip().lower()
            names = [n.lower() for n in self.channel_names]
            headers = [str(h).lower() for h in self.metadata.get("channel_headers") or ()]
            if text not in names and len(headers) == self.n_channels and text in headers:
                return headers.index(text)
        return resolve_channel(key, self.channel_names, where)

    def channel(self, key: str | int) -> np.ndarray:
        """Samples of one channel (read-only view)."""
        return self.samples[self.channel_index(key)]

    def select(self, keys: "ChannelSpec") -> "Capture":
        """A new capture with only the chosen channels, in the given order (see :func:`channel_keys`)."""
        idx = [self.channel_index(k) for k in channel_keys(keys)]
        gains = self.calibration.gain_v_per_fs
        gains_u = self.calibration.gain_u_rel
        cal = self.calibration
        if gains is not None:
            cal = replace(cal, gain_v_per_fs=tuple(gains[i] for i in idx))
        if gains_u is not None:
            cal = replace(cal, gain_u_rel=tuple(gains_u[i] for i in idx))
        meta = dict(self.metadata)
        headers = meta.get("channel_headers")
        if headers is not None and len(headers) == self.n_channels:
            meta["channel_headers"] = [headers[i] for i in idx]
        return replace(
            self,
            metadata=meta,
            samples=self.samples[idx],
            channel_names=tuple(self.channel_names[i] for i in idx),
            units=tuple(self.units[i] for i in idx),
            calibration=cal,
        )

    def slice_time(self, start_s: float, stop_s: float) -> "Capture":
        """A new capture holding the samples with ``start_s <= t < stop_s`` (seconds from t0)."""
        a = max(0, int(math.ceil(start_s * self.sample_rate)))
        b = min(self.n_samples, int(math.ceil(stop_s * self.sample_rate)))
        return replace(self, samples=self.samples[:, a:b], t0=self.t0 + a / self.sample_rate)

    # --- display ----------------------------------------------------------
    def __repr__(self) -> str:
        chans = ", ".join(f"{n} [{u}]" for n, u in zip(self.channel_names, self.units))
        return (f"Capture({self.source or 'in memory'}: {self.n_channels} ch ({chans}), "
                f"{self.n_samples} samples at {self.sample_rate:g} Hz, {self.duration_s:.4g} s)")

    def _repr_html_(self) -> str:
        rows = "".join(
            f"<tr><td>{html.escape(n)}</td><td>{html.escape(u)}</td>"
            f"<td>{np.min(x):.4g}</td><td>{np.max(x):.4g}</td><td>{np.sqrt(np.mean(x * x)):.4g}</td></tr>"
            for n, u, x in zip(self.channel_names, self.units, self.samples)
        )
        warn = "".join(f"<li>{html.escape(w)}</li>" for w in self.warnings)
        return (
            f"<div><b>Capture</b> {html.escape(self.source or 'in memory')}<br>"
            f"{self.n_samples} samples at {self.sample_rate:g} Hz ({self.duration_s:.4g} s)"
            f"<table><tr><th>channel</th><th>unit</th><th>min</th><th>max</th><th>rms</th></tr>{rows}</table>"
            + (f"<ul>{warn}</ul>" if warn else "") + "</div>"
        )

    def to_dataframe(self):
        """The samples as a pandas DataFrame with a ``time_s`` column and one column per channel."""
        import pandas as pd

        cols = {"time_s": self.time}
        for name, unit, x in zip(self.channel_names, self.units, self.samples):
            cols[f"{name}_{unit}"] = x
        return pd.DataFrame(cols)
