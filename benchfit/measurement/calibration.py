"""Sound-card calibration estimators: input gain, sample-clock error, input coupling.

Pure functions (arrays in, frozen dataclasses out) behind ``benchfit calibrate``; the profile
store that keeps their results lives in :mod:`benchfit.capture.calibration`.

* gain — volts per full-scale unit from a sine whose RMS was read on a meter:
  ``V/FS = rms_known / rms_fitted_FS``, with a relative standard uncertainty that combines the
  fit's own part and the meter reading's (GUM, JCGM 100:2008 5.1.2);
* timebase — the sample-clock error in ppm from a trusted tone (sine or square, measured as
  ``measure`` measures it): ``ppm = (f_ref/f_meas − 1)·1e6`` (positive: the card's clock runs fast);
* coupling — the input high-pass time constant from the droop of a low-frequency square.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from benchfit.errors import MeasureError

__all__ = ["CLIP_FS", "clipped_samples", "DEFAULT_METER_HALF_WIDTH_REL", "GainEstimate", "TimebaseEstimate",
           "estimate_gain", "default_meter_u", "combine_gain_u_rel", "estimate_timebase",
           "estimate_distortion_floor", "DistortionFloorEstimate",
           "estimate_coupling"]

#: a sample at or above this magnitude (−0.1 dBFS) counts as clipped
CLIP_FS = 10.0 ** (-0.1 / 20.0)

def clipped_samples(block: np.ndarray) -> int:
    """Samples of a recorded block (frames × channels, FS) that clipped: stuck at −0.1 dBFS or above
    for ≥ 3 identical samples, or beyond full scale (:func:`benchfit.measurement.levels.clipped_sample_count`)."""
    from benchfit.measurement.levels import clipped_sample_count

    return clipped_sample_count(block, CLIP_FS)


#: Half-width of the rectangular distribution assumed for a meter's AC voltage reading when
#: the user states no uncertainty: ±0.5 % of the reading, about the AC accuracy of a
#: 3½-digit handheld meter on its best range at 50 Hz–400 Hz (common practice, no source).
#: As a rectangular distribution its standard uncertainty is 0.5 %/√3 ≈ 0.29 % of the
#: reading (GUM, JCGM 100:2008 4.3.7). Give the meter's real figure whenever it is known,
#: and mind that many handheld meters are specified only up to a few hundred hertz.
DEFAULT_METER_HALF_WIDTH_REL = 0.005


@dataclass(frozen=True)
class GainEstimate:
    """Result of :func:`estimate_gain`.

    Attributes
    ----------
    v_per_fs, u_v_per_fs : float
        Gain (V/FS) and its standard uncertainty from the fit (V/FS).
    rms_fs : float
        RMS of the fitted fundamental in full-scale units (FS).
    frequency_hz : float
        Frequency of the fitted sine (Hz, on the nominal sample rate).
    residual_pct : float
        RMS of what the sine does not explain, relative to the sine's RMS (%).
    """

    v_per_fs: float
    u_v_per_fs: float
    rms_fs: float
    frequency_hz: float
    residual_pct: float


@dataclass(frozen=True)
class TimebaseEstimate:
    """Result of :func:`estimate_timebase`.

    Attributes
    ----------
    ppm, u_ppm : float
        Clock error (positive = fast) and its standard uncertainty (ppm).
    measured_hz, measured_u_hz : float
        The tone's frequency on the nominal sample rate and its standard uncertainty (Hz).
    method : str
        How the frequency was measured (edge regression for a square, harmonic fit otherwise).
    """

    ppm: float
    u_ppm: float
    measured_hz: float
    measured_u_hz: float
    method: str = ""


def _checked_samples(x: np.ndarray, what: str, headroom: bool = False) -> np.ndarray:
    """One channel of ≥ 64 samples in FS that is not clipped.

    ``headroom``: refuse any peak at or above :data:`CLIP_FS` (−0.1 dBFS) — a gain calibration
    needs the sine's crest clear of full scale. Otherwise only a flat-topped clip is refused:
    samples stuck at full scale (:func:`benchfit.measurement.levels.find_clipping`), so that a
    square whose AC-coupled tops sag from a peak near full scale (a coupling or timebase
    reference) is accepted.
    """
    from benchfit.measurement.levels import find_clipping

    x = np.asarray(x, dtype=np.float64)
    if x.ndim != 1 or x.size < 64:
        raise MeasureError(f"{what}: need at least 64 samples of one channel, got shape {x.shape} — record longer")
    peak = float(np.max(np.abs(x)))
    if headroom and peak >= CLIP_FS:
        raise MeasureError(
            f"{what}: the input reaches {20 * math.log10(peak):.2f} dBFS (clipped) — "
            "lower the level (attenuator or input gain) and record again")
    clip = find_clipping(x, "FS")
    if clip.clipped:
        raise MeasureError(
            f"{what}: the input reaches {20 * math.log10(peak):.2f} dBFS and {clip.n_samples} samples sit flat "
            f"at full scale (clipped) — lower the level (attenuator or input gain) and record again")
    return x


def _fit_sine(x: np.ndarray, fs: float, what: str):
    from benchfit.measurement.tone import fit_tone

    x = _checked_samples(x, what, headroom=True)
    fit = fit_tone(x, fs, n_harmonics=1)
    if fit is None or not fit.converged or fit.frequency_u_hz is None:
        raise MeasureError(f"{what}: no steady tone found — feed a sine and record at least a few cycles")
    amp = float(fit.amplitudes[0])
    if amp < 1e-4:
        raise MeasureError(
            f"{what}: the tone is only {20 * math.log10(max(amp, 1e-12)):.1f} dBFS — raise the level to "
            "between −20 and −1 dBFS")
    return fit, amp


def estimate_gain(x: np.ndarray, sample_rate: float, rms_known_v: float,
                  what: str = "gain") -> GainEstimate:
    """Volts per full-scale unit from a sine of known RMS voltage.

    Parameters
    ----------
    x : ndarray
        Raw samples of one channel in full-scale units (FS), no gain applied.
    sample_rate : float
        Nominal sample rate (Hz).
    rms_known_v : float
        RMS voltage of the sine as read on a meter (V).
    what : str
        Name used in error messages (file and channel).

    Returns
    -------
    GainEstimate
        ``v_per_fs = rms_known_v / (A/√2)`` where A is the fitted fundamental's peak (FS).

    Raises
    ------
    MeasureError
        Clipped input, no tone, a tone too weak, or a waveform that is not a sine
        (more than 10 % of its RMS unexplained).
    """
    if not (math.isfinite(rms_known_v) and rms_known_v > 0):
        raise MeasureError(f"--rms: must be a positive voltage, got {rms_known_v!r} — the meter's RMS "
                           "reading in V, e.g. 0.775")
    fit, amp = _fit_sine(x, sample_rate, what)
    rms_fs = amp / math.sqrt(2.0)
    residual_pct = 100.0 * fit.residual_rms / rms_fs
    if residual_pct > 10.0:
        raise MeasureError(
            f"{what}: the signal is not a clean sine ({residual_pct:.1f} % of its RMS is not the fundamental) — "
            "feed a sine from a generator for the gain calibration")
    u_amp = float(fit.amplitudes_u[0])
    gain = rms_known_v / rms_fs
    return GainEstimate(v_per_fs=gain, u_v_per_fs=gain * u_amp / amp, rms_fs=rms_fs,
                        frequency_hz=fit.frequency_hz, residual_pct=residual_pct)


def default_meter_u(rms_known_v: float) -> float:
    """Standard uncertainty (V) assumed for a meter reading of ``rms_known_v`` volts RMS.

    ``rms_known_v · DEFAULT_METER_HALF_WIDTH_REL / √3``: a rectangular distribution of
    half-width 0.5 % of the reading (GUM, JCGM 100:2008 4.3.7; the 0.5 % is common
    practice, no source).
    """
    return abs(rms_known_v) * DEFAULT_METER_HALF_WIDTH_REL / math.sqrt(3.0)


def combine_gain_u_rel(v_per_fs: float, u_v_per_fs: float, rms_known_v: float, rms_u_v: float) -> float:
    """Relative standard uncertainty of a gain ``V/FS = rms_known / rms_fitted``.

    Parameters
    ----------
    v_per_fs, u_v_per_fs : float
        The gain and the standard uncertainty of its fit part (V/FS).
    rms_known_v : float
        The meter reading (V RMS).
    rms_u_v : float
        Standard uncertainty of the meter reading (V).

    Returns
    -------
    float
        ``√((u_fit/gain)² + (u_meter/rms_known)²)``, dimensionless. For a quotient of
        uncorrelated inputs the relative uncertainties add in quadrature (GUM,
        JCGM 100:2008 5.1.2 with sensitivity coefficients ±1 in relative terms).

    Raises
    ------
    MeasureError
        A gain or reading that is not positive, or an uncertainty that is negative or
        not finite.
    """
    if not (math.isfinite(v_per_fs) and v_per_fs > 0 and math.isfinite(rms_known_v) and rms_known_v > 0):
        raise MeasureError(f"gain: {v_per_fs!r} V/FS from {rms_known_v!r} V — both must be positive numbers")
    for name, u in (("fit uncertainty", u_v_per_fs), ("--rms-u", rms_u_v)):
        if not (math.isfinite(u) and u >= 0):
            raise MeasureError(f"{name}: {u!r} must be a standard uncertainty ≥ 0 — give e.g. 0.3%")
    return math.hypot(u_v_per_fs / v_per_fs, rms_u_v / rms_known_v)


def estimate_timebase(x: np.ndarray, nominal_rate: float, reference_hz: float,
                      reference_u_hz: float = 0.0, what: str = "timebase") -> TimebaseEstimate:
    """Sample-clock error from a tone of trusted frequency (a sine or a square).

    The tone's frequency is measured the way ``measure`` measures it
    (:func:`benchfit.measurement.summary.measure_channel`, with no timebase term, since the
    clock is what is being calibrated): a two-level wave (a square from a counter's or
    generator's reference output) by the IEEE 181 period from every 50 % crossing, anything
    else by the multi-harmonic least-squares fit (IEEE 1057 generalised to harmonics 2…10).
    A one-sine fit to a square would be biased by the harmonics it leaves in its residual.

    Parameters
    ----------
    x : ndarray
        Raw samples of one channel in full-scale units (FS).
    nominal_rate : float
        The sample rate the card was asked for (Hz).
    reference_hz : float
        The tone's true frequency (Hz).
    reference_u_hz : float
        Standard uncertainty of ``reference_hz`` (Hz), added to the budget.
    what : str
        Name used in error messages.

    Returns
    -------
    TimebaseEstimate
        ``ppm = (reference_hz / f_meas − 1)·1e6`` with
        ``u_ppm = 1e6·√((f_ref·u_meas/f_meas²)² + (u_ref/f_meas)²)``; ``method`` names the
        frequency method used.

    Raises
    ------
    MeasureError
        Clipped input, no tone, a tone too weak, or one more than 1 % away from the
        reference (wrong frequency given).
    """
    from benchfit.measurement.summary import measure_channel

    if not (math.isfinite(reference_hz) and 0 < reference_hz < nominal_rate / 2):
        raise MeasureError(
            f"--frequency: {reference_hz!r} Hz must be positive and below half the sample rate "
            f"({nominal_rate / 2:g} Hz) — check --frequency, or record at a higher sample rate (--rate)")
    if not (math.isfinite(reference_u_hz) and reference_u_hz >= 0):
        raise MeasureError(f"--frequency-u: {reference_u_hz!r} Hz must be a standard uncertainty ≥ 0 — "
                           "give the reference's stated standard uncertainty in Hz")
    x = _checked_samples(x, what)
    ch = measure_channel(x, float(nominal_rate), unit="FS", timebase_u_ppm=0.0)
    if ch.frequency_hz is None or ch.frequency_u_hz is None or ch.amplitude is None:
        raise MeasureError(f"{what}: no steady tone found — feed a sine or square and record at least a few cycles")
    method = str(ch.extra.get("frequency_method", ""))
    if method == "multi-harmonic fit" and any("did not settle" in w for w in ch.warnings):
        raise MeasureError(f"{what}: no steady tone found (the frequency fit did not settle) — feed a steady "
                           "sine or square and record at least a few cycles")
    amp = float(ch.amplitude)
    if amp < 1e-4:
        raise MeasureError(
            f"{what}: the tone is only {20 * math.log10(max(amp, 1e-12)):.1f} dBFS — raise the level to "
            "between −20 and −1 dBFS")
    f_meas = float(ch.frequency_hz)
    if abs(f_meas / reference_hz - 1.0) > 0.01:
        raise MeasureError(
            f"{what}: the tone measures {f_meas:.4f} Hz, not near the reference {reference_hz:g} Hz — "
            "check --frequency or the generator")
    u_meas = float(ch.frequency_u_hz)
    ppm = (reference_hz / f_meas - 1.0) * 1e6
    u_ppm = 1e6 * math.hypot(reference_hz * u_meas / f_meas ** 2, reference_u_hz / f_meas)
    return TimebaseEstimate(ppm=ppm, u_ppm=u_ppm, measured_hz=f_meas, measured_u_hz=u_meas, method=method)


def estimate_coupling(x: np.ndarray, sample_rate: float, what: str = "coupling") -> float:
    """Time constant (s) of the input high-pass from the droop of a low-frequency square wave.

    The estimator itself is :func:`benchfit.measurement.pulse.estimate_coupling_tau`; this
    wrapper checks the input and turns "cannot tell" into a one-line MeasureError.
    """
    try:
        from benchfit.measurement import pulse
    except ImportError as e:
        raise MeasureError(f"{what}: the pulse measurements are not available in this installation "
                           "— reinstall benchfit") from e
    if not hasattr(pulse, "estimate_coupling_tau"):
        raise MeasureError(f"{what}: this benchfit cannot estimate the coupling time constant yet "
                           "— update benchfit")
    x = _checked_samples(x, what)  # a sagging top that peaks near full scale is the droop itself, not a clip
    result = pulse.estimate_coupling_tau(x, sample_rate)
    tau = getattr(result, "tau_s", result)
    if tau is None or not (isinstance(tau, (int, float)) and math.isfinite(tau) and tau > 0):
        raise MeasureError(
            f"{what}: no droop could be measured — feed a square wave of 5–20 Hz and record a few seconds")
    return float(tau)


@dataclass(frozen=True)
class DistortionFloorEstimate:
    """Result of :func:`estimate_distortion_floor`: THD_F (%) of a clean loop, its u, tone, level."""

    floor_pct: float
    u_pct: float
    frequency_hz: float
    level_fs: float


def estimate_distortion_floor(x: np.ndarray, sample_rate: float, harmonics: int = 10,
                              what: str = "distortion") -> DistortionFloorEstimate:
    """The card's own THD_F from a loop-back (or clean reference sine) recording.

    THD_F over harmonics 2…H with its noise uncertainty (IEEE 1241 definition, REFERENCES §1,
    as :func:`benchfit.measurement.summary.measure_channel` computes it); the peak level of
    the fundamental in the file's units (FS).
    """
    from benchfit.measurement.summary import measure_channel

    ch = measure_channel(np.asarray(x, dtype=float), float(sample_rate), unit="FS", harmonics=int(harmonics))
    if ch.frequency_hz is None or ch.thd_pct is None:
        raise MeasureError(f"{what}: no sine with harmonics below Nyquist found — record the card's output looped "
                           "to its input (or a clean reference sine) at the level the units produce")
    u = ch.extra.get("thd_u_pct")
    return DistortionFloorEstimate(float(ch.thd_pct), float(u) if u is not None else 0.0,
                                   float(ch.frequency_hz), float(ch.amplitude or 0.0))
