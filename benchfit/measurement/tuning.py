"""The tuning readout and sliding analysis windows (pure: arrays in, frozen dataclasses out).

What ``benchfit tune`` computes, kept apart from the sound card so it can be tested and
reused on recorded files:

* :class:`Windower` cuts a stream of blocks into overlapping windows (a small buffer, no
  I/O); :func:`iter_windows` does the same over a recorded array; both give :class:`Window`.
* :func:`analyse_window` turns one window of one channel into a :class:`TuneReading`:
  frequency with its uncertainty (IEEE 1057 sine fit with harmonics, from
  :mod:`benchfit.measurement.tone`), deviation from the target, THD_F, duty cycle (IEEE 181,
  from :mod:`benchfit.measurement.pulse`), level and a plain-words hint from
  :func:`direction_hint`.
* :func:`to_dbfs` converts a peak in full-scale units to dBFS.

The live input stream that feeds these is :class:`benchfit.capture.live.LiveWindows`.
"""

from __future__ import annotations

import math
from collections.abc import Iterator
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from benchfit.measurement.calibration import CLIP_FS
from benchfit.measurement.levels import find_clipping
from benchfit.errors import MeasureError
from benchfit.measurement.pulse import pulse_parameters
from benchfit.measurement.tone import dft_frequency_seed, fit_harmonics

__all__ = ["Window", "Windower", "iter_windows", "TuneReading", "direction_hint", "analyse_window", "to_dbfs"]

#: dBFS shown for a block of digital silence
_FLOOR_DBFS = -150.0


def to_dbfs(peak: float) -> float:
    """Peak level in dBFS (20·log10 |x|), floored at −150 dBFS for silence."""
    return 20.0 * math.log10(peak) if peak > 10.0 ** (_FLOOR_DBFS / 20.0) else _FLOOR_DBFS


# --------------------------------------------------------------------------------------
# sliding windows
# --------------------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class Window:
    """One analysis window.

    Attributes
    ----------
    start_frame : int
        Index of the window's first sample since the stream started.
    samples : ndarray, shape (channels, n)
        Samples in FS (float64).
    sample_rate : float
        Nominal sample rate (Hz).
    overflow_count : int
        Input overflows reported since the stream started.
    dropped : int
        Windows skipped so far because analysis fell behind.
    """

    start_frame: int
    samples: np.ndarray
    sample_rate: float
    overflow_count: int = 0
    dropped: int = 0

    @property
    def end_s(self) -> float:
        """Time of the end of the window since the stream started (s)."""
        return (self.start_frame + self.samples.shape[1]) / self.sample_rate


class Windower:
    """Cut a stream of blocks into overlapping windows (pure; no I/O).

    Windows are ``window`` samples long and start every ``hop`` samples: the k-th window
    covers samples ``k·hop … k·hop + window − 1``.

    Parameters
    ----------
    channels : int
        Number of channels in each block.
    window : int
        Window length (samples).
    hop : int
        Step between window starts (samples), 1 ≤ hop.
    """

    def __init__(self, channels: int, window: int, hop: int) -> None:
        if window < 2 or hop < 1:
            raise ValueError(f"window ({window}) must be ≥ 2 samples and hop ({hop}) ≥ 1")
        self.channels = channels
        self.window = window
        self.hop = hop
        self._buf = np.zeros((channels, 0))
        self._buf_start = 0  # absolute index of _buf[:, 0]
        self._next_start = 0  # absolute start of the next window

    def push(self, block: np.ndarray) -> list[tuple[int, np.ndarray]]:
        """Add a block of shape (frames, channels); return the completed ``(start_frame, window)`` pairs."""
        block = np.asarray(block, dtype=np.float64)
        if block.ndim == 1:
            block = block[:, np.newaxis]
        if block.shape[1] != self.channels:
            raise ValueError(f"block has {block.shape[1]} channels, expected {self.channels}")
        self._buf = np.concatenate([self._buf, block.T], axis=1)
        out = []
        while self._buf_start + self._buf.shape[1] >= self._next_start + self.window:
            a = self._next_start - self._buf_start
            out.append((self._next_start, self._buf[:, a:a + self.window].copy()))
            self._next_start += self.hop
        drop = max(0, min(self._next_start - self._buf_start, self._buf.shape[1]))
        if drop:
            self._buf = self._buf[:, drop:]
            self._buf_start += drop
        return out


def iter_windows(samples: np.ndarray, sample_rate: float, window_s: float,
                 hop_s: float) -> Iterator[Window]:
    """Overlapping windows over a recorded array of shape (channels, n), as ``tune`` sees them live."""
    x = np.atleast_2d(np.asarray(samples, dtype=np.float64))
    w = max(2, int(round(window_s * sample_rate)))
    h = max(1, int(round(hop_s * sample_rate)))
    for start in range(0, x.shape[1] - w + 1, h):
        yield Window(start_frame=start, samples=x[:, start:start + w], sample_rate=sample_rate)



# --------------------------------------------------------------------------------------
# the tuning readout
# --------------------------------------------------------------------------------------
@dataclass(frozen=True)
class TuneReading:
    """One readout of ``benchfit tune``.

    Attributes
    ----------
    frequency_hz, frequency_u_hz : float
        Fundamental frequency and its standard uncertainty (Hz): fit uncertainty combined with
        the timebase calibration's uncertainty.
    target_hz : float
        The frequency being tuned to (Hz).
    deviation_hz : float
        ``frequency_hz − target_hz`` (Hz).
    deviation_ppm : float
        Deviation relative to the target (ppm).
    amplitude : float
        Peak amplitude of the fundamental (``unit``).
    rms : float
        RMS of the whole window, DC removed (``unit``).
    unit : str
        "V" when a gain calibration applies, else "FS".
    thd_pct : float or None
        THD_F over harmonics 2…``n_harmonics`` below Nyquist (%).
    duty_cycle_pct, duty_cycle_u_pct : float or None
        High time / period (%, IEEE 181 by the pulse module) and its standard uncertainty,
        when the waveform is two-level.
    peak_dbfs : float
        Largest raw sample (dBFS).
    clipped : bool
        Samples stuck flat at full scale (:func:`benchfit.measurement.levels.find_clipping`);
        a peak at −0.1 dBFS or above that does not stick there gives a headroom warning only.
    hint : str
        Plain-words direction: how far off and which way to turn.
    status : {"on-target", "within-tolerance", "off-target"}
    """

    frequency_hz: float
    frequency_u_hz: float
    target_hz: float
    deviation_hz: float
    deviation_ppm: float
    amplitude: float
    rms: float
    unit: str
    thd_pct: float | None
    duty_cycle_pct: float | None
    duty_cycle_u_pct: float | None
    peak_dbfs: float
    clipped: bool
    hint: str
    status: str
    warnings: tuple[str, ...] = field(default=())

    def to_dict(self) -> dict[str, Any]:
        return {"frequency_hz": self.frequency_hz, "frequency_u_hz": self.frequency_u_hz,
                "target_hz": self.target_hz, "deviation_hz": self.deviation_hz,
                "deviation_ppm": self.deviation_ppm, "amplitude": self.amplitude, "rms": self.rms,
                "unit": self.unit, "thd_pct": self.thd_pct, "duty_cycle_pct": self.duty_cycle_pct,
                "duty_cycle_u_pct": self.duty_cycle_u_pct,
                "peak_dbfs": self.peak_dbfs, "clipped": self.clipped, "hint": self.hint,
                "status": self.status, "warnings": list(self.warnings)}


def direction_hint(deviation_hz: float, u_hz: float, tolerance_hz: float | None = None) -> tuple[str, str]:
    """Plain-words advice for a 555-style astable, and a status word.

    The astable's frequency is about 1.44/((RA + 2·RB)·C1) (NE555 datasheets), so a unit
    running fast needs more RB (or RA) or C1, and a slow one less.

    Returns
    -------
    (hint, status)
        ``status`` is "on-target" when the deviation is within 2 standard uncertainties,
        "within-tolerance" when inside ``tolerance_hz``, else "off-target".
    """
    size = abs(deviation_hz)
    if size <= 2.0 * u_hz:
        return (f"on target — the {deviation_hz:+.3f} Hz offset is within the measurement uncertainty", "on-target")
    if deviation_hz > 0:
        words = f"running {size:.3f} Hz fast — lower the frequency: increase RB or C1"
    else:
        words = f"running {size:.3f} Hz slow — raise the frequency: decrease RB or C1"
    if tolerance_hz is not None and size <= tolerance_hz:
        return (f"within ±{tolerance_hz:g} Hz; {words}", "within-tolerance")
    return (words, "off-target")


def _duty_cycle(x: np.ndarray, fs: float, coupling_tau_s: float | None) -> tuple[float | None, float | None]:
    """Duty cycle and its standard uncertainty (%) by IEEE 181 (high time / period); (None, None)
    when the wave is not two-level (a filtered sine) or has no complete period."""
    try:
        res = pulse_parameters(x, fs, coupling_tau_s=coupling_tau_s)
    except MeasureError:
        return None, None
    if not res.two_level or res.duty_cycle_pct is None:
        return None, None
    return float(res.duty_cycle_pct), res.duty_cycle_u_pct


def analyse_window(x: np.ndarray, sample_rate: float, target_hz: float, *,
                   gain_v_per_fs: float | None = None, timebase_u_ppm: float = 0.0,
                   coupling_tau_s: float | None = None, n_harmonics: int = 10,
                   tolerance_hz: float | None = None, seed_hz: float | None = None) -> TuneReading:
    """The tuning readout of one window of one channel.

    Parameters
    ----------
    x : ndarray
        Raw samples of the channel (FS).
    sample_rate : float
        Sample rate (Hz), already corrected by the profile's timebase.
    target_hz : float
        The frequency being tuned to (Hz).
    gain_v_per_fs : float, optional
        Channel gain (V/FS); amplitudes are then in volts.
    timebase_u_ppm : float
        Standard uncertainty of the timebase correction (ppm), added in quadrature.
    coupling_tau_s : float, optional
        Input coupling time constant (s) from the profile, for the duty cycle; when None the
        pulse module estimates the droop from the window itself.
    n_harmonics : int
        Harmonics fitted (THD is over orders 2…n_harmonics).
    tolerance_hz : float, optional
        Allowed deviation (Hz) for the "within tolerance" status.
    seed_hz : float, optional
        Start value for the frequency iteration, normally the previous window's reading; used
        only when it lies within half a DFT bin of this window's own interpolated-DFT estimate,
        so a changed signal is never tracked from a stale start.

    Raises
    ------
    MeasureError
        No tone in the window (silence, DC only).
    """
    x = np.asarray(x, dtype=np.float64)
    peak = float(np.max(np.abs(x))) if x.size else 0.0
    start = dft_frequency_seed(x, sample_rate, min_hz=min(0.5 * target_hz, 1.0))
    fit = None
    if start is not None and start > 0:
        if seed_hz is not None and abs(seed_hz - start) < 0.5 * sample_rate / max(x.size, 1):
            start = seed_hz
        # stop the IEEE 1057 iteration at a 1e-10 relative step (5 nHz at 50 Hz): far below any
        # uncertainty a window can give, and one or two iterations fewer than the default
        fit = fit_harmonics(x, sample_rate, start, n_harmonics, fit_frequency=True, rtol=1e-10)
    if fit is None or fit.frequency_u_hz is None or not fit.amplitudes[0] > 0:
        raise MeasureError("input: no tone found in the window — check the connection and the level")
    f = float(fit.frequency_hz)
    u = math.hypot(float(fit.frequency_u_hz), f * timebase_u_ppm * 1e-6)
    amps = fit.amplitudes
    a1 = float(amps[0])
    thd = 100.0 * math.sqrt(float(np.sum(amps[1:] ** 2))) / a1 if amps.size > 1 else None
    g = gain_v_per_fs if gain_v_per_fs is not None else 1.0
    dev = f - target_hz
    hint, status = direction_hint(dev, u, tolerance_hz)
    warnings = []
    if not fit.converged:
        warnings.append("frequency fit did not settle — the tone may be drifting or noisy")
    duty, duty_u = _duty_cycle(x, sample_rate, coupling_tau_s)
    # clipped: samples stuck flat at the top codes (levels.find_clipping, the IEEE 1241 notion of
    # clipping at the converter's range); a crest or a sagging AC-coupled top that only comes near
    # full scale is a headroom warning, not a clip
    clipped = bool(find_clipping(x, "FS").clipped)
    if clipped:
        warnings.append("input clipped (samples stuck flat at full scale) — lower the level")
    elif peak >= CLIP_FS:
        warnings.append(f"input near full scale (peak {to_dbfs(peak):.2f} dBFS, ≥ −0.1 dBFS) but not clipped — "
                        "lower the level a little to keep headroom")
    return TuneReading(frequency_hz=f, frequency_u_hz=u, target_hz=target_hz, deviation_hz=dev,
                       deviation_ppm=dev / target_hz * 1e6, amplitude=a1 * g,
                       rms=float(np.std(x)) * g, unit="V" if gain_v_per_fs is not None else "FS",
                       thd_pct=thd, duty_cycle_pct=duty, duty_cycle_u_pct=duty_u, peak_dbfs=to_dbfs(peak),
                       clipped=clipped, hint=hint, status=status, warnings=tuple(warnings))
