"""Per-interval readings of a long run, with phases chained across intervals (pure).

A long capture (or a live input) is cut into back-to-back intervals of ``interval_s``
seconds. Every interval of one channel gets one :class:`IntervalReading`:

* an IEEE 1057 four-parameter fit (generalised to harmonics 1…H, :mod:`.tone`) gives the
  interval's own frequency ± u, the fundamental's amplitude and THD_F (IEEE 1241), and its
  final linear stage is the known-frequency three-parameter fit at that frequency. From it
  comes the fundamental's phase at the interval's **midpoint**: with time centred on the
  record the midpoint phase is, to first order, uncorrelated with the fitted frequency and
  unbiased by a small frequency error, so it is the quantity a phase-continuous counter
  samples;
* the midpoint phases are **chained**: the whole number of cycles between two midpoints is
  predicted from the two intervals' fitted frequencies and the phase is unwrapped to the
  nearest consistent value. The mean frequency between consecutive midpoints,
  ``ΔΦ / (2π Δt)``, then has no dead time and its error is the *difference* of two phase
  errors (white phase noise), not an independent frequency-estimation error per interval.
  This is what keeps the Allan deviation at short τ from being dominated by the estimator:
  its own floor is ``σ_y(τ) = √3·σ_x/τ`` (white PM, from the IEEE Std 1139 definition) with
  σ_x the phase (time) uncertainty of one midpoint;
* when the prediction is ambiguous (more than a quarter cycle off — a gap, a glitch, a
  frequency step) the chain restarts: the reading is marked ``chain_start`` and starts a new
  segment, and no phase-continuous frequency is given across the break;
* level (RMS over whole periods, as :func:`benchfit.measurement.levels.signal_levels`), and
  the duty cycle (IEEE 181, :func:`benchfit.measurement.pulse.pulse_parameters`) when the
  wave is two-level.

:class:`IntervalTracker` holds the chaining state (the previous midpoint); it does no I/O.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from benchfit.errors import MeasureError
from benchfit.measurement.result import _clean

__all__ = ["IntervalReading", "IntervalTracker", "midpoint_phase"]

#: a prediction more than this far (rad) from the measured phase is ambiguous: restart the chain
_CHAIN_LIMIT_RAD = 0.5 * math.pi


@dataclass(frozen=True)
class IntervalReading:
    """One interval of one channel.

    Attributes
    ----------
    index : int
        0-based interval number.
    start_frame, n_frames : int
        First sample of the interval (counted from the start of the run) and its length.
    t_start_s, t_mid_s : float
        Start and midpoint of the interval (s from the start of the run).
    frequency_hz, frequency_u_hz : float or None
        The interval's own four-parameter-fit frequency and its standard uncertainty (Hz;
        fit noise combined with the timebase calibration's uncertainty).
    phase_rad, phase_u_rad : float or None
        Unwrapped phase of the fundamental at ``t_mid_s`` (rad, chained from the segment's
        first interval) and its standard uncertainty (fit noise only).
    chain_frequency_hz, chain_frequency_u_hz : float or None
        Phase-continuous mean frequency from the previous midpoint to this one (Hz) and its
        standard uncertainty from the two phase uncertainties; None at a chain start.
    segment : int
        Chain segment (0 for the first; +1 at every restart).
    chain_start : bool
        This reading starts a segment (first interval, or the chain broke here).
    amplitude, amplitude_u : float or None
        Peak amplitude of the fundamental and its standard uncertainty (sample unit).
    vrms : float
        RMS over the whole periods of the interval (sample unit).
    thd_pct, thd_u_pct : float or None
        THD_F over harmonics 2…H (%, IEEE 1241) and its standard uncertainty.
    duty_cycle_pct, duty_cycle_u_pct : float or None
        Duty cycle (%, IEEE 181) when the wave is two-level.
    unit : str
        Sample unit ("V" or "FS").
    warnings : tuple of str
    """

    index: int
    start_frame: int
    n_frames: int
    t_start_s: float
    t_mid_s: float
    frequency_hz: float | None
    frequency_u_hz: float | None
    phase_rad: float | None
    phase_u_rad: float | None
    chain_frequency_hz: float | None
    chain_frequency_u_hz: float | None
    segment: int
    chain_start: bool
    amplitude: float | None
    amplitude_u: float | None
    vrms: float
    thd_pct: float | None
    thd_u_pct: float | None
    duty_cycle_pct: float | None
    duty_cycle_u_pct: float | None
    unit: str = "FS"
    warnings: tuple[str, ...] = field(default=())

    def to_dict(self) -> dict[str, Any]:
        return {k: _clean(getattr(self, k)) for k in (
            "index", "start_frame", "n_frames", "t_start_s", "t_mid_s", "frequency_hz", "frequency_u_hz",
            "phase_rad", "phase_u_rad", "chain_frequency_hz", "chain_frequency_u_hz", "segment",
            "chain_start", "amplitude", "amplitude_u", "vrms", "thd_pct", "thd_u_pct", "duty_cycle_pct",
            "duty_cycle_u_pct", "unit")} | {"warnings": list(self.warnings)}


def midpoint_phase(phasor: complex, cov: np.ndarray, frequency_hz: float, n_samples: int,
                   sample_rate: float) -> tuple[float, float]:
    """Phase of a fitted tone at the record's midpoint (rad, wrapped) and its standard uncertainty.

    ``phasor`` is referred to the first sample (``x ≈ Re(P·exp(j2πft))``), so the phase at
    t_mid = (N − 1)/(2 fs) is ``arg P + 2π f t_mid``. The uncertainty is the phasor's
    covariance projected on the direction perpendicular to P, divided by |P| (it does not
    change under the rotation to the midpoint).
    """
    mag = abs(phasor)
    if not mag > 0:
        raise MeasureError("interval: the fitted tone has zero amplitude — no phase can be taken")
    t_mid = (n_samples - 1) / (2.0 * sample_rate)
    psi = math.atan2(phasor.imag, phasor.real) + 2.0 * math.pi * frequency_hz * t_mid
    psi = math.remainder(psi, 2.0 * math.pi)
    perp = np.array([-phasor.imag, phasor.real]) / mag
    var = float(perp @ cov @ perp)
    return psi, math.sqrt(max(var, 0.0)) / mag


class IntervalTracker:
    """Measure back-to-back intervals of one channel and chain their phases.

    Parameters
    ----------
    sample_rate : float
        Samples per second (Hz), after any timebase correction.
    n_harmonics : int
        Highest harmonic order H fitted (THD over 2…H below Nyquist).
    timebase_u_ppm : float
        Standard uncertainty of the sample clock (ppm), added to each interval's own
        frequency uncertainty. It is common to every interval, so it is left out of the
        chained (stability) frequencies and stated once by the stability summary.
    coupling_tau_s : float, optional
        Input coupling time constant (s) for the duty cycle of a pulse wave.
    unit : str
        Sample unit ("V" or "FS").
    duty : bool
        Look for a two-level wave and give its duty cycle.
    """

    def __init__(self, sample_rate: float, *, n_harmonics: int = 10, timebase_u_ppm: float = 0.0,
                 coupling_tau_s: float | None = None, unit: str = "FS", duty: bool = True) -> None:
        if not (math.isfinite(sample_rate) and sample_rate > 0):
            raise MeasureError(f"sample rate: {sample_rate!r} must be a positive number of Hz")
        self.sample_rate = float(sample_rate)
        self.n_harmonics = max(1, int(n_harmonics))
        self.timebase_u_ppm = float(timebase_u_ppm)
        self.coupling_tau_s = coupling_tau_s
        self.unit = unit
        self._duty = duty
        self._index = 0
        self._segment = -1
        self._prev: tuple[float, float, float, float] | None = None  # (t_mid, phase, phase_u, f)
        self._last_f: float | None = None

    def push(self, x: np.ndarray, start_frame: int) -> IntervalReading:
        """Measure one interval ``x`` (1-D samples) that starts at ``start_frame`` of the run."""
        from benchfit.measurement.distortion import analyse_distortion, max_harmonic_order
        from benchfit.measurement.levels import whole_period_span
        from benchfit.measurement.tone import dft_frequency_seed, fit_harmonics

        x = np.asarray(x, dtype=np.float64)
        fs = self.sample_rate
        n = x.size
        index = self._index
        self._index += 1
        t_start = start_frame / fs
        t_mid = (start_frame + (n - 1) / 2.0) / fs
        warnings: list[str] = []
        fit = None
        acquired = False
        if n >= 16 and float(np.ptp(x)) > 0:
            seed = dft_frequency_seed(x, fs)
            if seed is not None and self._last_f is not None and abs(self._last_f - seed) < 0.5 * fs / n:
                # on track: the known-frequency fit at the running frequency (linear, one pass);
                # its midpoint phase is what the chain needs, and a running frequency within
                # a few ppm costs no measurable amplitude (sinc of the phase slip over the interval)
                h = max_harmonic_order(self._last_f, fs, self.n_harmonics)
                fit = fit_harmonics(x, fs, self._last_f, h)
            elif seed is not None and seed > 0:
                # (re)acquire: the IEEE 1057 four-parameter iteration from the interpolated DFT
                h = max_harmonic_order(seed, fs, self.n_harmonics)
                fit = fit_harmonics(x, fs, seed, h, fit_frequency=True, rtol=1e-11)
                acquired = True
                if not fit.converged:
                    warnings.append("frequency fit did not settle in this interval")
        span, _ = whole_period_span(n, fs, fit.frequency_hz if fit is not None else None)
        vrms = math.sqrt(float(x[:span] @ x[:span]) / span)
        ok = (fit is not None and (fit.frequency_u_hz is not None or not acquired) and fit.amplitudes[0] > 0
              and fit.amplitudes[0] > 5.0 * float(fit.amplitudes_u[0]))
        if not ok:
            self._prev = None  # nothing to chain to: the next good interval starts a segment
            self._last_f = None
            warnings.append("no tone found in this interval — check the connection and the level")
            return IntervalReading(index=index, start_frame=int(start_frame), n_frames=n, t_start_s=t_start,
                                   t_mid_s=t_mid, frequency_hz=None, frequency_u_hz=None, phase_rad=None,
                                   phase_u_rad=None, chain_frequency_hz=None, chain_frequency_u_hz=None,
                                   segment=max(self._segment, 0), chain_start=False, amplitude=None,
                                   amplitude_u=None, vrms=vrms, thd_pct=None, thd_u_pct=None,
                                   duty_cycle_pct=None, duty_cycle_u_pct=None, unit=self.unit,
                                   warnings=tuple(warnings))
        assert fit is not None  # "ok" requires a fit
        f = float(fit.frequency_hz)
        if acquired:
            self._prev = None  # a fresh acquisition starts a new segment
        psi, psi_u = midpoint_phase(complex(fit.phasors[0]), fit.phasor_cov[0], f, n, fs)
        chain_f = chain_u = None
        chain_start = True
        phase = psi
        reported_phase: float | None = None
        f_own: float | None
        f_own_u: float | None
        if self._prev is not None:
            t0, ph0, u0, f0 = self._prev
            dt = t_mid - t0
            predicted = ph0 + 2.0 * math.pi * f0 * dt
            turns = round((predicted - psi) / (2.0 * math.pi))
            phase = psi + 2.0 * math.pi * turns
            if abs(phase - predicted) < _CHAIN_LIMIT_RAD:
                chain_start = False
                chain_f = (phase - ph0) / (2.0 * math.pi * dt)
                chain_u = math.hypot(psi_u, u0) / (2.0 * math.pi * dt)
            else:
                phase = psi
                warnings.append(f"phase chain restarted: the phase is {abs(psi - math.remainder(predicted, 2 * math.pi)):.2f} "
                                "rad from the prediction (gap, glitch or frequency step)")
        if chain_start and not acquired:
            # the chain broke on a known-frequency fit: this interval gives no frequency, and
            # the next one is re-acquired with the four-parameter fit
            f_own = f_own_u = None
            chain_start = False
            self._prev = None
            self._last_f = None
        else:
            if chain_start:
                self._segment += 1
            if chain_f is not None and chain_u is not None:  # set together by a continued chain
                f_own, f_own_u = chain_f, chain_u
            else:
                # no chain here means a fresh acquisition, and "ok" requires its frequency uncertainty
                assert fit.frequency_u_hz is not None
                f_own, f_own_u = f, float(fit.frequency_u_hz)
            f_own_u = math.hypot(f_own_u, f_own * self.timebase_u_ppm * 1e-6)
            self._last_f = chain_f if chain_f is not None else f
            self._prev = (t_mid, phase, psi_u, f)
            reported_phase = phase
        dist = analyse_distortion(x, fs, fit)
        thd = 100.0 * dist.thd if dist.thd is not None else None
        thd_u = 100.0 * dist.thd_u if dist.thd_u is not None else None
        duty = duty_u = None
        if self._duty:
            duty, duty_u = self._duty_cycle(x)
        return IntervalReading(
            index=index, start_frame=int(start_frame), n_frames=n, t_start_s=t_start, t_mid_s=t_mid,
            frequency_hz=f_own, frequency_u_hz=f_own_u, phase_rad=reported_phase,
            phase_u_rad=psi_u if reported_phase is not None else None, chain_frequency_hz=chain_f,
            chain_frequency_u_hz=chain_u, segment=self._segment, chain_start=chain_start,
            amplitude=float(fit.amplitudes[0]), amplitude_u=float(fit.amplitudes_u[0]), vrms=vrms,
            thd_pct=thd, thd_u_pct=thd_u, duty_cycle_pct=duty, duty_cycle_u_pct=duty_u, unit=self.unit,
            warnings=tuple(warnings))

    def _duty_cycle(self, x: np.ndarray) -> tuple[float | None, float | None]:
        """Duty cycle (IEEE 181) when the wave is two-level; the first non-two-level interval
        switches the search off for the rest of the run (a filtered sine stays a sine)."""
        from benchfit.measurement.pulse import pulse_parameters

        try:
            res = pulse_parameters(x, self.sample_rate, coupling_tau_s=self.coupling_tau_s)
        except MeasureError:
            return None, None
        if not res.two_level or res.duty_cycle_pct is None:
            if self._index == 1:
                self._duty = False
            return None, None
        return float(res.duty_cycle_pct), res.duty_cycle_u_pct
