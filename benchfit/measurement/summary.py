"""The public measurement entry point: :func:`measure` (capture or path → :class:`Measurement`).

For each channel:

1. **Frequency.** Interpolated-DFT seed (Hann window), then the IEEE 1057 iterative fit
   generalised to the fundamental and harmonics 2…H at one common frequency
   (:func:`benchfit.measurement.tone.fit_tone`). Its standard uncertainty comes from the fit
   covariance scaled by the residual; the sample clock's calibration uncertainty is added:
   ``u_f² = u_fit² + (f·u_ppm·10⁻⁶)²``. The fundamental must complete at least two periods in
   the record (DFT bins 0 and 1 are ignored); fewer than 3 periods gives a warning.
   A channel counts as having a periodic signal when the fitted fundamental amplitude is at
   least 8 times its standard uncertainty (pure noise reaches about 4.5 at its strongest bin
   for 10⁵ samples).
2. **Levels** (:mod:`benchfit.measurement.levels`): DC and RMS over whole periods, robust
   peak-to-peak (0.1/99.9 % percentiles), fundamental peak amplitude from the fit.
3. **Distortion** (:mod:`benchfit.measurement.distortion`): harmonic table, THD over 2…H,
   THD+N over the full bandwidth, SINAD.
4. **Pulse parameters** (:mod:`benchfit.measurement.pulse`) when the wave is two-level:
   duty cycle, rise/fall time, overshoot, with AC-coupling droop compensated (time constant
   from the capture's calibration, or estimated from the droop itself).
5. **Warnings**, never exceptions, for clipping, short records, low SNR and silence.

Uncertainties of the levels (standard, k = 1, in ``ChannelMeasurement.extra``):
``amplitude_u`` and ``vdc_u`` from the fit covariance, ``vrms_u`` from the noise variance,
``vpp_u`` from the noise's effect on the two percentiles
(:func:`benchfit.measurement.levels.vpp_noise_u`) and the record's resolution (code step q
as a rectangular ±q/2 at each end). A sound card's levels in volts are its
full-scale samples times the calibrated gain, so they all scale with it: when the capture's
calibration gives the gain's relative standard uncertainty ``gain_u_rel``, it is added in
quadrature (GUM, JCGM 100:2008 5.1.2; the gain and the noise are uncorrelated):
``u² = u_noise² + (value·gain_u_rel)²``, and ``extra["gain_u_rel"]`` records it (None when
not known; a channel in V from a sound-card gain without it gets a "gain uncertainty not
known" warning, and volts a scope wrote itself get the stated vertical-gain default with a
"vertical gain not calibrated" note: :func:`benchfit.measurement.budgets.gain_term`). Frequency, duty cycle, rise/fall times, THD, THD+N and SINAD are ratios
of times or of levels of the same channel, so the gain cancels and they are unaffected.
"""

from __future__ import annotations

import math
from os import PathLike
from typing import Any

import numpy as np

from benchfit.capture.capture import Capture, ChannelSpec
from benchfit.errors import MeasureError
from benchfit.measurement.budgets import channel_budgets, gain_term
from benchfit.measurement.distortion import _thd_with_u, analyse_distortion, max_harmonic_order
from benchfit.measurement.levels import _percentiles, find_clipping, quantisation_step, signal_levels, vpp_noise_u
from benchfit.measurement.pulse import PulseResult, StateLevels, pulse_parameters, state_levels
from benchfit.measurement.result import ChannelMeasurement, Harmonic, Measurement
from benchfit.measurement.threads import one_blas_thread
from benchfit.measurement.tone import HarmonicFit, dft_frequency_seed, fit_harmonics

__all__ = ["measure", "measure_channel", "DEFAULT_HARMONICS"]

#: default highest harmonic order H (THD over harmonics 2…10)
DEFAULT_HARMONICS = 10
#: fundamental amplitude / its standard uncertainty needed to call a channel periodic
_DETECT_RATIO = 8.0
#: below this SNR (dB) a channel gets a low-SNR warning
_LOW_SNR_DB = 10.0
#: an estimated coupling droop above this (%) is reported as a warning
_DROOP_WARN_PCT = 5.0
#: below this THD_F (ratio) a wave is not analysed as two-level (IEEE 181 pulse parameters)
_MIN_PULSE_THD = 0.05
#: fewer whole periods than this gives a short-record warning
_MIN_PERIODS = 3.0
#: fewest samples a period for a pulse analysis: with fewer, harmonic 3 lies above Nyquist and a sine
#: cannot be told from a square (a sine at fs/4 samples as a two- or three-level wave)
_MIN_PULSE_SAMPLES_PER_PERIOD = 6.0


def _crosses_middle_twice(x: np.ndarray) -> bool:
    """Whether the wave crosses its middle level at least twice, with hysteresis.

    The middle lies halfway between the 1st and 99th percentiles (a spike does not move it); a
    crossing counts when the wave goes from below the lower to above the upper hysteresis level
    (±25 % of the half-range) or back. Any wave holding one whole period crosses at least twice:
    it does when, after the first sample beyond one hysteresis level, the wave goes beyond the
    other and then back beyond the first.
    """
    lo, hi = _percentiles(x, 1.0, 99.0)
    mid, band = 0.5 * (lo + hi), 0.25 * 0.5 * (hi - lo)
    above = x > mid + band
    below = x < mid - band
    if not (above.any() and below.any()):
        return False
    first_above, first_below = int(np.argmax(above)), int(np.argmax(below))
    if first_above < first_below:
        return bool(above[first_below:].any())
    return bool(below[first_above:].any())


def _middle_crossings(x: np.ndarray) -> int:
    """How often the wave crosses its middle level, with the hysteresis of
    :func:`_crosses_middle_twice` (the count, for the blocks of a long record, whose crossings add up)."""
    lo, hi = _percentiles(x, 1.0, 99.0)
    mid, band = 0.5 * (lo + hi), 0.25 * 0.5 * (hi - lo)
    state = np.zeros(x.size, dtype=np.int8)
    state[x > mid + band] = 1
    state[x < mid - band] = -1
    seen = state[state != 0]
    return int(np.count_nonzero(np.diff(seen))) if seen.size else 0


def _fmt(v: float, unit: str) -> str:
    from benchfit.units import format_quantity

    return format_quantity(v, unit, 4)


@one_blas_thread  # the result does not depend on the caller's BLAS threads, nor its speed much
def measure_channel(x: np.ndarray, sample_rate: float, *, name: str = "ch1", unit: str = "FS",
                    harmonics: int = DEFAULT_HARMONICS, timebase_ppm: float = 0.0,
                    timebase_u_ppm: float = 0.0, coupling_tau_s: float | None = None,
                    full_scale: float | None = None, gain_u_rel: float | None = None,
                    extra_warnings: tuple[str, ...] = (), timebase_calibrated: bool = True,
                    timebase_source: str = "", gain_source: str = "calibration profile",
                    distortion_floor_pct: float | None = None, force_pulse: bool = False,
                    gain_name: str = "gain") -> ChannelMeasurement:
    """Measure one channel.

    Parameters
    ----------
    x : ndarray
        Samples in ``unit`` (V or FS).
    sample_rate : float
        Sample rate (Hz), already corrected for the timebase calibration.
    name, unit : str
        Channel name and unit (``"V"`` or ``"FS"``).
    harmonics : int
        Highest harmonic order H (≥ 1); THD uses orders 2…H (those below Nyquist).
    timebase_ppm : float
        Timebase correction already applied to ``sample_rate`` (ppm); recorded in ``extra``.
    timebase_u_ppm : float
        Standard uncertainty of the sample clock (ppm), added to the frequency uncertainty.
    coupling_tau_s : float, optional
        Input coupling time constant (s) for droop compensation of pulse waves.
    full_scale : float, optional
        Full scale in sample units for the clipping check (V per FS of a calibrated card).
    gain_u_rel : float, optional
        Relative standard uncertainty of the gain that turned the samples into volts
        (0.003 = 0.3 %); added in quadrature to the uncertainties of amplitude, vdc, vrms
        and vpp. None: not known or not applicable (no gain applied).
    extra_warnings : tuple of str
        Warnings to carry over (e.g. from reading the file).
    timebase_calibrated : bool
        False when ``timebase_u_ppm`` is a stated default rather than a calibration (the
        budget row then says so and is rectangular).
    timebase_source, gain_source : str
        Provenance of the timebase and gain figures, for the budget rows.
    gain_name : str
        Name of the gain row ("gain", or "vertical gain …" for a scope channel).
    distortion_floor_pct : float, optional
        THD (%) the card itself adds (calibrate distortion): budgeted in ``thd_pct``.
    force_pulse : bool
        Give duty cycle and edge times even for a wave that is not two-level (slow edges), with a
        warning; never below 6 samples a period.

    The GUM budget of every quantity with an uncertainty is in ``ChannelMeasurement.budget``
    (:mod:`benchfit.measurement.budgets`).

    Returns
    -------
    ChannelMeasurement
    """
    x = np.asarray(x, dtype=np.float64)
    fs = float(sample_rate)
    warnings: list[str] = list(extra_warnings)
    if gain_u_rel is not None and not (math.isfinite(gain_u_rel) and gain_u_rel >= 0):
        raise MeasureError(f"gain_u_rel: {gain_u_rel!r} must be a finite relative uncertainty ≥ 0 "
                           "(0.003 = 0.3 %) — fix the calibration profile or the sidecar")
    extra: dict[str, Any] = {"harmonics_h_requested": int(harmonics),
                             "timebase_ppm": float(timebase_ppm),
                             "timebase_u_ppm": float(timebase_u_ppm),
                             "gain_u_rel": None if gain_u_rel is None else float(gain_u_rel)}
    n = x.size
    vmax, vmin = float(x.max()), float(x.min())
    flat = vmax - vmin <= 1e-12 * max(1.0, vmax, -vmin)  # (max |x| from the two extremes)
    seed = None if flat else dft_frequency_seed(x, fs)
    h_req = max(int(harmonics), 1)
    # A two-level wave takes its frequency from its edges (below), so the iterative sine fit would
    # be computed only to be replaced. The linear fit at the DFT seed (where the iteration starts)
    # tells a wave rich in harmonics; its raw state levels (a histogram of a subset) then tell a
    # two-level one, for which that linear fit serves the detection and the gate below. When the
    # edges give no period after all, the iteration is made then.
    fit: HarmonicFit | None = None
    raw_states: StateLevels | None = None
    edges_first = False
    if seed is not None and seed > 0:
        fit = fit_harmonics(x, fs, seed, h_req)
        gate = _thd_with_u(fit)[0]
        rich = force_pulse or not (fit.orders.size >= 3 and gate is not None and gate < _MIN_PULSE_THD)
        if rich and fs / seed >= _MIN_PULSE_SAMPLES_PER_PERIOD:
            raw_states = state_levels(x)
            edges_first = raw_states.two_level
        if not edges_first:
            fit = fit_harmonics(x, fs, seed, h_req, fit_frequency=True, start=fit)
    periodic = False
    if fit is not None and fit.phasors.size:
        amp_u = float(fit.amplitudes_u[0])
        amp = float(fit.amplitudes[0])
        periodic = amp > 0 and (amp_u == 0 or amp >= _DETECT_RATIO * amp_u)
    clip = find_clipping(x, unit, full_scale, rails=True)
    short = not flat and not _crosses_middle_twice(x)
    if short:
        # the fit always finds some sine in a slope; without two crossings of the middle level the
        # record holds less than one period, and its frequency would be an artefact of the length
        periodic = False
    if not periodic or fit is None:
        levels = signal_levels(x, fs, None)
        if short:
            warnings.append(f"the record ({_fmt(n / fs, 's')}) holds less than one period of the signal (it "
                            "crosses its middle level fewer than twice) — frequency, distortion and pulse "
                            "values are not given; record at least 3 periods")
        else:
            what = "silence: all samples equal" if flat else "no periodic signal found"
            warnings.append(f"{what} — frequency, distortion and pulse values are not given; "
                            "check the connection and the input level")
        if clip.clipped:
            warnings.append(_clip_warning(clip))
        return ChannelMeasurement(
            name=name, unit=unit, frequency_hz=None, frequency_u_hz=None, amplitude=None,
            vdc=float(levels.vdc), vrms=float(levels.vrms), vpp=float(levels.vpp), duty_cycle_pct=None,
            rise_time_s=None, fall_time_s=None, thd_pct=None, thd_n_pct=None, sinad_db=None,
            harmonics=(), clipped=bool(clip.clipped), warnings=tuple(warnings), extra=extra)

    def states() -> StateLevels:
        return raw_states if raw_states is not None else state_levels(x)

    f = float(fit.frequency_hz)
    thd_gate = _thd_with_u(fit)[0]
    if not force_pulse and fit.orders.size >= 3 and thd_gate is not None and thd_gate < _MIN_PULSE_THD:
        # harmonics 2…H (H ≥ 3) below 5 % of the fundamental: not a two-level wave. Even a trapezoid
        # whose edges take the whole period (a triangle) has THD_F = 12 % (REFERENCES §5 table,
        # H = 10: 12.05 %), so the pulse analysis (and its droop fit) is skipped.
        pulse = PulseResult(two_level=False)
    elif fs / f < _MIN_PULSE_SAMPLES_PER_PERIOD:
        pulse = PulseResult(two_level=False)
        warnings.append(f"duty cycle and edge times are not given: {fs / f:.2g} samples a period are too few "
                        f"to tell a pulse from a sine (at least {_MIN_PULSE_SAMPLES_PER_PERIOD:g} are needed) — "
                        "record at a higher sample rate")
    else:
        pulse = pulse_parameters(x, fs, coupling_tau_s, force=force_pulse, levels=raw_states)
        if force_pulse and pulse.two_level and not states().two_level:
            warnings.append("pulse analysis forced: the wave is not two-level, so duty cycle and edge times "
                            "use its histogram's low and high modes as states — read them as indications")
        if not pulse.two_level:
            # rich in harmonics but not two-level: the result says why duty and edges are missing
            # (in extra, shown by measure beside the missing values; not a warning, since a distorted
            # sine is not a mistake)
            frac = states().fraction_in_states
            extra["pulse_not_given"] = (f"not a two-level wave: {100 * frac:.0f} % of the samples lie near two "
                                        "levels, 75 % are needed (slow edges, or not a pulse; force_pulse=True gives "
                                        "them anyway)")
    method = "multi-harmonic fit"
    if pulse.two_level and pulse.edge_period_s and pulse.edge_period_u_s is not None:
        # Two-level wave: its sharp edges put harmonics far above H (and, sampled without an
        # anti-alias filter, alias them), so the residual of the harmonic fit is not white and
        # its covariance understates the error. The IEEE 181 period from every 50 % instant
        # carries that jitter in its own scatter: report it instead.
        f = 1.0 / pulse.edge_period_s
        u_fit = f * pulse.edge_period_u_s / pulse.edge_period_s
        method = "edge regression (IEEE 181 period)"
        # the harmonic table and THD at k × the reported frequency (linear fit, same orders)
        fit = fit_harmonics(x, fs, f, orders=fit.orders)
    else:
        if edges_first and seed is not None:  # the edges gave no period: the iterative fit gives it
            fit = fit_harmonics(x, fs, seed, h_req, fit_frequency=True, start=fit)
            f = float(fit.frequency_hz)
        u_fit = float(fit.frequency_u_hz) if fit.frequency_u_hz is not None else math.nan
        if not fit.converged:
            warnings.append("the frequency fit did not settle — the frequency may be off; "
                            "record a longer, steadier signal")
    u_f = math.sqrt(u_fit ** 2 + (abs(f) * float(timebase_u_ppm) * 1e-6) ** 2)
    n_periods = n * f / fs
    if n_periods < _MIN_PERIODS:
        warnings.append(f"only {n_periods:.2g} periods recorded — record at least 3 "
                        "(10 or more for good uncertainty)")
    levels = signal_levels(x, fs, f)
    dist = analyse_distortion(x, fs, fit)
    if pulse.two_level:
        warnings.extend(pulse.warnings)
        if pulse.coupling_source == "estimated" and (pulse.droop_pct or 0.0) >= _DROOP_WARN_PCT \
                and pulse.coupling_tau_s is not None:
            warnings.append(
                f"flat tops droop {pulse.droop_pct:.0f} % (input AC coupling, τ ≈ "
                f"{_fmt(pulse.coupling_tau_s, 's')} estimated): pulse values are compensated, levels "
                "and THD are as recorded — calibrate the input's coupling or use a DC-coupled input")
    if pulse.two_level and pulse.state_low is not None and pulse.state_high is not None and clip.kind == "rail":
        # a two-level wave's flat extremes are its states, not a saturated recorder's rails
        clip = find_clipping(x, unit, full_scale, rails=False)
    if clip.clipped:
        warnings.append(_clip_warning(clip))
    if pulse.two_level and pulse.noise_rms is not None and pulse.state_high is not None \
            and pulse.state_low is not None:
        amp_half = 0.5 * (pulse.state_high - pulse.state_low)
        snr = 20.0 * math.log10(amp_half / pulse.noise_rms) if pulse.noise_rms > 0 else math.inf
    else:
        snr = dist.snr_fit_db
    if snr < _LOW_SNR_DB:
        # the fit's residual holds every harmonic above H too: on a square that is not noise
        warnings.append(_snr_warning(snr, _snr_without_harmonics(x, fs, f, fit.orders), int(fit.orders.max())))
    h_eff = max_harmonic_order(f, fs, harmonics)
    if harmonics >= 2 and h_eff < 2:
        warnings.append(f"no harmonic lies below Nyquist ({_fmt(fs / 2, 'Hz')}) — THD not given")
    thd = dist.thd if h_eff >= 2 else None
    table = tuple(
        Harmonic(order=int(k), frequency_hz=float(fk), amplitude=float(a), phase_deg=float(ph),
                 amplitude_u=float(au))
        for k, fk, a, ph, au in zip(dist.orders, dist.frequencies_hz, dist.amplitudes,
                                    dist.phases_deg, dist.amplitudes_u))
    amplitude = abs(fit.phasors[0])
    # the percentile noise needs the noise-free wave's distribution only: a regular stride of
    # at most 2^16 samples through the record represents it (and keeps long records cheap)
    stride = max(1, -(-n // (1 << 16)))
    if pulse.two_level and pulse.state_low is not None and pulse.state_high is not None \
            and pulse.noise_rms is not None:
        # a two-level wave: its states are the noise-free levels (the harmonic fit rings at the edges)
        # (two values, so the model is the pair with their sample counts)
        mid = 0.5 * (pulse.state_low + pulse.state_high)
        xs = x[::stride]
        n_high = int(np.count_nonzero(xs >= mid))
        model, sigma = np.array([pulse.state_high, pulse.state_low]), float(pulse.noise_rms)
        weights: np.ndarray | None = np.array([n_high, xs.size - n_high], dtype=np.float64)
    else:
        model, sigma = fit.evaluate(-(-n // stride), fs / stride), float(fit.sigma)
        weights = None
    # noise on the two percentiles, and the resolution of each (q/√12 per end, both ends: q/√6);
    # a noise-free quantised plateau (a flat scope trace) keeps the resolution term
    q_step = quantisation_step(x)
    vpp_u_noise = math.hypot(vpp_noise_u(model, sigma, levels.vpp_low, levels.vpp_high, n_total=n,
                                         weights=weights),
                             q_step / math.sqrt(6.0))
    extra.update({
        "harmonics_h": int(dist.harmonics_h),
        "amplitude_u": _with_gain(float(fit.amplitudes_u[0]), amplitude, gain_u_rel),
        "vdc_u": _with_gain(float(fit.dc_u), levels.vdc, gain_u_rel),
        "vrms_u": _with_gain(_vrms_u(levels.vrms, fit.rss / n, levels.span_samples), levels.vrms, gain_u_rel),
        "vpp_u": _with_gain(vpp_u_noise, levels.vpp, gain_u_rel),
        "vpp_u_noise": vpp_u_noise,
        "vac_rms": levels.vac_rms,
        "vmax": levels.vmax, "vmin": levels.vmin,
        "n_periods": float(n_periods),
        "whole_periods_used": levels.whole_periods,
        "frequency_u_fit_hz": u_fit,
        "frequency_method": method,
        "frequency_u_timebase_hz": abs(f) * float(timebase_u_ppm) * 1e-6,
        "timebase_calibrated": bool(timebase_calibrated),
        "fit_iterations": int(fit.iterations),
        "thd_u_pct": None if thd is None or dist.thd_u is None else 100.0 * dist.thd_u,
        "snr_db": snr,
        "two_level": bool(pulse.two_level),
    })
    if pulse.two_level:
        extra.update({
            "state_low": pulse.state_low, "state_high": pulse.state_high,
            "duty_cycle_u_pct": pulse.duty_cycle_u_pct,
            "rise_time_u_s": pulse.rise_time_u_s, "fall_time_u_s": pulse.fall_time_u_s,
            "overshoot_pct": _beyond_one_step(pulse.overshoot_pct, q_step, pulse),
            "undershoot_pct": _beyond_one_step(pulse.undershoot_pct, q_step, pulse),
            "pulse_periods": pulse.n_periods,
            "pulse_period_s": pulse.period_s,
            "coupling_tau_s": pulse.coupling_tau_s,
            "coupling_source": pulse.coupling_source,
            "droop_pct": pulse.droop_pct,
        })
    thd_floor = None if distortion_floor_pct is None else float(distortion_floor_pct)
    if thd_floor is not None and thd is not None:
        extra["distortion_floor_pct"] = thd_floor
    budget = channel_budgets(
        unit=unit, frequency_hz=f, frequency_u_noise_hz=u_fit, frequency_method=method,
        timebase_u_ppm=float(timebase_u_ppm), timebase_calibrated=timebase_calibrated,
        timebase_source=timebase_source,
        levels={"amplitude": (amplitude, float(fit.amplitudes_u[0])), "vdc": (levels.vdc, float(fit.dc_u)),
                "vrms": (levels.vrms, _vrms_u(levels.vrms, fit.rss / n, levels.span_samples)),
                "vpp": (levels.vpp, vpp_u_noise)},
        gain_u_rel=gain_u_rel, gain_source=gain_source, gain_name=gain_name,
        thd_pct=None if thd is None else 100.0 * thd, thd_u_noise_pct=extra["thd_u_pct"],
        distortion_floor_pct=thd_floor,
        duty=(pulse.duty_cycle_pct, pulse.duty_cycle_u_pct) if pulse.two_level else (None, None),
        times={"rise_time_s": (pulse.rise_time_s, pulse.rise_time_u_s),
               "fall_time_s": (pulse.fall_time_s, pulse.fall_time_u_s)} if pulse.two_level else None)
    return ChannelMeasurement(
        budget=budget,
        name=name, unit=unit, frequency_hz=f, frequency_u_hz=_f(u_f),
        amplitude=_f(amplitude), vdc=float(levels.vdc), vrms=float(levels.vrms),
        vpp=float(levels.vpp), duty_cycle_pct=_f(pulse.duty_cycle_pct),
        rise_time_s=_f(pulse.rise_time_s), fall_time_s=_f(pulse.fall_time_s),
        thd_pct=None if thd is None else _f(100.0 * thd),
        thd_n_pct=_f(100.0 * dist.thd_n) if math.isfinite(dist.thd_n) else None,
        sinad_db=_f(dist.sinad_db) if math.isfinite(dist.sinad_db) else None,
        harmonics=table, clipped=bool(clip.clipped), warnings=tuple(warnings),
        extra={k: (_f(v) if isinstance(v, (float, np.floating)) else v) for k, v in extra.items()})


def _snr_without_harmonics(x: np.ndarray, fs: float, f: float, orders: np.ndarray) -> float:
    """Fitted-orders power over broadband noise (dB), the noise read from the spectrum away from every
    harmonic of ``f`` up to Nyquist (Hann window; ±3 bins around each harmonic hold its main lobe).

    Cheap (one FFT of at most 2^18 samples) and used only to tell real noise from harmonics above H.
    """
    seg = np.asarray(x[: 1 << 18], dtype=float)
    n = seg.size
    if n < 64 or not f or f <= 0:
        return -math.inf
    spec = np.abs(np.fft.rfft((seg - seg.mean()) * np.hanning(n))) ** 2
    freqs = np.fft.rfftfreq(n, 1.0 / fs)
    k = np.round(freqs / f)
    near = np.abs(freqs - k * f) <= 3.0 * fs / n
    noise_bins = spec[~near & (k >= 1)]
    if noise_bins.size < 8:
        return -math.inf
    noise = float(np.mean(noise_bins)) * spec.size
    sig = float(np.sum(spec[near & np.isin(k, orders)]))
    if noise <= 0:
        return math.inf
    return 10.0 * math.log10(sig / noise) if sig > 0 else -math.inf


def _snr_warning(snr: float, snr_noise: float, h: int) -> str:
    """The warning for a signal-to-residual ratio below 10 dB: harmonics above H, or real noise."""
    if snr_noise >= _LOW_SNR_DB:
        return (f"harmonics above H = {h} carry most of what the fit leaves (signal to residual {snr:.1f} dB; "
                f"to noise alone {snr_noise:.0f} dB), so the uncertainties are wide — raise harmonics= for "
                "tighter ones")
    return (f"low signal-to-noise ratio ({snr:.1f} dB) — values are less certain; "
            "raise the signal level or shorten the leads")


def _beyond_one_step(pct: float | None, q: float, pulse: PulseResult) -> float | None:
    """An overshoot (or undershoot) in %, or 0 when it is no more than one quantisation step.

    One code above the high state is the recorder's resolution, not a ring of the source (IEEE 181
    overshoot is an aberration of the waveform; a step of the grid cannot show one).
    """
    if pct is None or pulse.state_low is None or pulse.state_high is None:
        return pct
    amplitude = pulse.state_high - pulse.state_low
    if amplitude > 0 and q > 0 and pct * amplitude / 100.0 <= q * (1.0 + 1e-9):
        return 0.0
    return pct


def _f(v: Any) -> float | None:
    """A plain Python float (JSON-safe type) or None."""
    return None if v is None else float(v)


def _with_gain(u_noise: float, value: float, gain_u_rel: float | None) -> float:
    """``√(u_noise² + (value·gain_u_rel)²)``: a level's uncertainty with its gain's (GUM 5.1.2)."""
    if gain_u_rel is None:
        return float(u_noise)
    return math.hypot(u_noise, abs(value) * gain_u_rel)


def _vrms_u(vrms: float, noise_var: float, n: int) -> float:
    """Standard uncertainty of an rms value from white noise of variance ``noise_var``.

    For x = s + w, var(mean(x²)) = (4·mean(s²)·σ² + 2σ⁴)/N, and u(rms) = u(ms)/(2·rms).
    The fit residual also holds harmonics above H, so for pulse waves this is an upper bound.
    """
    if vrms <= 0 or n <= 0:
        return 0.0
    ms_signal = max(vrms * vrms - noise_var, 0.0)
    var_ms = (4.0 * ms_signal * noise_var + 2.0 * noise_var * noise_var) / n
    return math.sqrt(var_ms) / (2.0 * vrms)


def _clip_warning(clip) -> str:
    where = "full scale" if clip.kind == "full-scale" else "the recorder's rail"
    return (f"clipped — {clip.n_samples} samples in {clip.n_runs} flat runs at {where} "
            f"({clip.level:.4g}); levels and distortion are wrong — lower the input level "
            "(a resistive divider; keep within the input's rated level)")


def measure(capture_or_path: Capture | str | PathLike, *, harmonics: int | None = None,
            channels: ChannelSpec | None = None, force_pulse: bool = False,
            gain_u_rel: float | None = None) -> Measurement:
    """Measure every (or the chosen) channel of a capture.

    Parameters
    ----------
    capture_or_path : Capture or path
        A :class:`~benchfit.capture.capture.Capture`, or a file that
        :func:`benchfit.capture.load.load` reads (CSV, WAV, FLAC; a sidecar JSON applies).
    harmonics : int, optional
        Highest harmonic order H, ≥ 1 (default 10: THD over harmonics 2…10, or up to Nyquist).
    channels : str, int or sequence of them, optional
        The channels to measure (default: all), in that order, by the rule of
        :func:`~benchfit.capture.capture.channel_keys` — the same as :func:`benchfit.load`:
        names (case-insensitive), 0-based ints, 1-based numbers as text, ``"drive,output"``.
    force_pulse : bool
        Analyse every channel as a pulse even when it is not two-level (see :func:`measure_channel`).
    gain_u_rel : float, optional
        Relative standard uncertainty (k = 1) of the gain of every channel in V whose calibration
        states none: a scope channel's vertical gain (instead of the stated ±3 % default,
        :data:`benchfit.measurement.budgets.DEFAULT_SCOPE_GAIN_U_REL`) or a sound-card profile
        without a gain u (instead of ±1 %). A calibration that states its own u keeps it.

    Returns
    -------
    Measurement
        Its ``to_dict()`` is the ``benchfit measure --json`` contract.

    Raises
    ------
    MeasureError
        ``harmonics`` below 1.
    CaptureError
        The file cannot be read or a channel does not exist.
    """
    h = DEFAULT_HARMONICS if harmonics is None else harmonics
    if isinstance(h, bool) or not isinstance(h, (int, np.integer)) or h < 1:
        raise MeasureError(f"harmonics: {h!r} is not a whole number ≥ 1 — give e.g. 10 "
                           "(THD over harmonics 2…10)")
    if gain_u_rel is not None and not (isinstance(gain_u_rel, (int, float)) and math.isfinite(gain_u_rel)
                                       and 0 <= gain_u_rel < 1):
        raise MeasureError(f"gain_u_rel: {gain_u_rel!r} must be a relative standard uncertainty in [0, 1) "
                           "(0.01 = 1 %) — give the channel's stated or calibrated gain uncertainty")
    if isinstance(capture_or_path, Capture):
        cap = capture_or_path
    else:
        from benchfit.measurement.long_record import is_long_file, measure_long_file

        if is_long_file(capture_or_path):  # more samples than are held at once: in blocks
            return measure_long_file(capture_or_path, harmonics=int(h), channels=channels, force_pulse=force_pulse,
                                     gain_u_rel=gain_u_rel)
        from benchfit.capture.load import load

        cap = load(capture_or_path)
    if channels is not None and not (isinstance(channels, (list, tuple)) and not channels):
        cap = cap.select(channels)  # (an empty list measures every channel, as it always has)
    results = [measure_channel(cap.samples[i], cap.sample_rate, harmonics=int(h), force_pulse=force_pulse, **kw)
               for i, kw in enumerate(channel_options(cap, gain_u_rel=gain_u_rel))]
    return Measurement(file=cap.source or "", sample_rate_hz=float(cap.sample_rate),
                       duration_s=float(cap.duration_s), channels=tuple(results), sha256=cap.sha256)


def channel_options(cap: Capture, gain_u_rel: float | None = None) -> list[dict[str, Any]]:
    """The keyword arguments of :func:`measure_channel` that each channel's calibration gives:
    name, unit, timebase and gain with their sources, coupling, full scale, distortion floor and
    the notes (the capture's warnings, stated defaults). ``gain_u_rel`` is the caller's stated gain
    u (see :func:`measure`). Shared by the block measurement of long files."""
    from benchfit.uncertainty import DEFAULT_TIMEBASE_NOTE

    cal = cap.calibration
    tb_cal = cal.timebase_calibrated
    tb_source = (f"calibration profile {cal.profile or 'unnamed'}" if tb_cal else
                 "stated default for an uncalibrated crystal clock (common practice, no source)")
    out = []
    for i, (name, unit) in enumerate(zip(cap.channel_names, cap.units)):
        g = gain_term(unit, i, gains=cal.gain_v_per_fs, gains_u=cal.gain_u_rel,
                      instrument_volts=cal.instrument_volts, profile=cal.profile, stated_u_rel=gain_u_rel)
        notes = tuple(cap.warnings) + ((DEFAULT_TIMEBASE_NOTE,) if not tb_cal else ()) + \
            ((g.note,) if g.note else ())
        out.append({"name": name, "unit": unit, "timebase_ppm": cal.timebase_ppm,
                    "timebase_u_ppm": cal.timebase_u_ppm_effective, "coupling_tau_s": cal.coupling_tau_s,
                    "full_scale": g.full_scale, "gain_u_rel": g.u_rel, "extra_warnings": notes,
                    "timebase_calibrated": tb_cal, "timebase_source": tb_source, "gain_source": g.source,
                    "gain_name": g.name, "distortion_floor_pct": cal.distortion_floor_pct})
    return out
