"""Ring-down fit: resonant frequency, damped frequency, decay rate and Q from free ringing.

A slow square wave (a few hertz) drives the filter; after each edge the L-C tank rings at
its damped frequency and the ring decays. This module

1. estimates the ring frequency from the spectrum of the sample differences (which
   favours the ringing over the slow square) by an interpolated DFT;
2. finds the edges as upward crossings of the ring envelope (:func:`ring_envelope`)
   halfway between its noise floor and its maximum, at least four ring periods apart,
   each moved back to where the envelope left its floor (10 % of the way from the noise
   floor to the maximum, half a window before the edge);
3. fits each ring, from one ring period after that point (half a period after the edge)
   to the point where the next edge's average leaves the floor (or until the ring has
   decayed by about 40 dB or into the noise), with an exponentially damped sinusoid
   plus baseline, y = c + e^{−αt}(a·cos ω_d t + b·sin ω_d t): variable projection over
   (α, ω_d) started from the DFT frequency and the slope of the log envelope (the
   log-decrement idea, REFERENCES §6), then the covariance of all five parameters from the
   Jacobian (σ² (JᵀJ)⁻¹);
4. combines the segments by inverse-variance weighted means, the uncertainty scaled up by
   the Birge ratio √(χ²/(n−1)) when the segments scatter more than their own errors say;
5. reports ω0 = √(ω_d² + α²) (the characteristic polynomial's roots are −α ± jω_d),
   f0 = ω0/2π, f_d = ω_d/2π, α, and Q = ω0/(2α), with first-order (GUM 5.2.2) uncertainties
   that carry the ω_d–α covariance (:func:`ring_figures`, by the ``uncertainties`` package).

With a fixed L (or C) the other follows from ω0 (light load and small ESR assumed).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Mapping

import numpy as np

from benchfit.errors import FitError
from benchfit.measurement.threads import one_blas_thread
from benchfit.fit.result import PARAMETER_UNITS, DerivedValue, FitCurves, FitParameter, FitQuality, FitResult

__all__ = ["fit_ringdown", "RingSegment", "find_ring_starts", "fit_ring", "combine_rings", "ring_figures"]

_MIN_PERIODS = 3


@dataclass(frozen=True, eq=False)
class RingSegment:
    """Fit of one ring.

    Attributes
    ----------
    start : int
        Index of the first fitted sample.
    omega, alpha : float
        Damped angular frequency ω_d (rad/s) and decay rate α (1/s).
    var_omega, var_alpha, cov_wa : float
        Their variances and covariance ((rad/s)², (1/s)², rad/s²).
    t, data, model : ndarray
        Time from ``start`` (s), samples and fitted model (capture units).
    baseline : float
        Fitted baseline c (capture units).
    """

    start: int
    omega: float
    alpha: float
    var_omega: float
    var_alpha: float
    cov_wa: float
    t: np.ndarray
    data: np.ndarray
    model: np.ndarray
    baseline: float


def _moving_average(x: np.ndarray, width: int) -> np.ndarray:
    width = max(1, int(width))
    c = np.concatenate([[0.0], np.cumsum(x)])
    out = (c[width:] - c[:-width]) / width
    pad = width - 1
    return np.concatenate([np.full(pad // 2, out[0]), out, np.full(pad - pad // 2, out[-1])])


def ring_envelope(y: np.ndarray, period: float) -> np.ndarray:
    """One-period moving average of |y − (one-period moving average of y)|.

    Subtracting the one-period average removes the slow square's levels but keeps the ring
    (the average of whole periods of a sinusoid is zero) and does not amplify noise as a
    difference would; steps show as a transient one period wide.
    """
    width = max(1, int(round(period)))
    return _moving_average(np.abs(y - _moving_average(y, width)), width)


def find_ring_starts(y: np.ndarray, sample_rate: float) -> tuple[list[int], float | None]:
    """Edge positions (sample indices) and the ring frequency seed in Hz (None if no ring)."""
    from benchfit.measurement.tone import dft_frequency_seed

    dy = np.diff(y)
    f_ring = dft_frequency_seed(dy, sample_rate)
    if f_ring is None or f_ring <= 0:
        return [], None
    period = sample_rate / f_ring
    env = ring_envelope(y, period)
    peak = float(np.max(env))
    if peak <= 0:
        return [], None
    floor = float(np.percentile(env, 10))  # noise floor of |Δy| between rings
    above = env > floor + 0.5 * (peak - floor)
    rising = np.nonzero(above[1:] & ~above[:-1])[0] + 1
    if above[0]:
        rising = np.concatenate([[0], rising])
    crossings: list[int] = []
    for r in rising:
        if not crossings or r - crossings[-1] > 4 * period:
            crossings.append(int(r))
    # the centred average starts to rise half a window before the edge: walk back from the
    # crossing to where it left the floor (10 % of the peak)
    low = np.nonzero(env < floor + 0.1 * (peak - floor))[0]
    starts = []
    for c in crossings:
        before = low[low < c]
        starts.append(int(before[-1]) if before.size else 0)
    return starts, f_ring


def _damped(t: np.ndarray, alpha: float, omega: float) -> np.ndarray:
    e = np.exp(-alpha * t)
    return np.stack([np.ones_like(t), e * np.cos(omega * t), e * np.sin(omega * t)], axis=1)


def fit_ring(t: np.ndarray, y: np.ndarray, omega0: float) -> tuple[np.ndarray, np.ndarray, float]:
    """Fit c + e^{−αt}(a cos ωt + b sin ωt) to one ring.

    Returns (theta, cov, sigma): theta = [c, a, b, α, ω] (V, V, V, 1/s, rad/s), the 5×5
    covariance, and the residual standard deviation.
    """
    from scipy.optimize import least_squares
    from scipy.signal import hilbert

    base = float(np.median(y[-max(4, y.size // 4):]))
    env = np.abs(hilbert(y - base))
    good = env > 0.1 * env.max()
    idx = np.nonzero(good)[0]
    alpha0 = 1.0 / max(t[-1] - t[0], 1e-12)
    if idx.size > 8:
        slope = np.polyfit(t[idx], np.log(env[idx]), 1)[0]
        if slope < 0:
            alpha0 = -slope

    def resid(z):
        d = _damped(t, math.exp(z[0]), z[1])
        coef, *_ = np.linalg.lstsq(d, y, rcond=None)
        return y - d @ coef

    sol = least_squares(resid, [math.log(alpha0), omega0], x_scale=[1.0, max(0.01 * omega0, 1e-9)],
                        method="lm", xtol=1e-12, ftol=1e-12)
    alpha, omega = math.exp(sol.x[0]), float(sol.x[1])
    d = _damped(t, alpha, omega)
    coef, *_ = np.linalg.lstsq(d, y, rcond=None)
    c, a, b = (float(v) for v in coef)
    e = np.exp(-alpha * t)
    cs, sn = np.cos(omega * t), np.sin(omega * t)
    jac = np.stack([np.ones_like(t), e * cs, e * sn, -t * e * (a * cs + b * sn),
                    t * e * (-a * sn + b * cs)], axis=1)
    r = y - d @ coef
    dof = max(t.size - 5, 1)
    s2 = float(r @ r) / dof
    scale = np.sqrt(np.sum(jac * jac, axis=0))
    scale[scale == 0] = 1.0
    js = jac / scale
    cov = np.linalg.pinv(js.T @ js) / np.outer(scale, scale) * s2
    return np.array([c, a, b, alpha, omega]), cov, math.sqrt(s2)


def _weighted(values: np.ndarray, variances: np.ndarray) -> tuple[float, float]:
    """Inverse-variance weighted mean and its uncertainty, scaled by the Birge ratio (≥ 1)."""
    w = 1.0 / np.maximum(variances, 1e-300)
    mean = float(np.sum(w * values) / np.sum(w))
    u = math.sqrt(1.0 / float(np.sum(w)))
    n = values.size
    if n >= 2:
        chi2 = float(np.sum(w * (values - mean) ** 2))
        u *= max(1.0, math.sqrt(chi2 / (n - 1)))
    return mean, u


def combine_rings(omegas: np.ndarray, alphas: np.ndarray, var_omega: np.ndarray, var_alpha: np.ndarray,
                  cov_wa: np.ndarray) -> tuple[float, float, np.ndarray]:
    """Weighted means of ω_d and α over independent rings, and their 2×2 covariance.

    Each mean is the inverse-variance weighted mean of :func:`_weighted` (u widened by its own
    Birge ratio). With weights w_i = 1/u²(ω_i) and v_i = 1/u²(α_i) and independent rings,
    cov(ω̄, ᾱ) = Σ w_i v_i cov_i / (Σ w_i · Σ v_i) (GUM 5.2.2 applied to the two sums); its
    correlation coefficient is kept when the Birge ratios widen the two uncertainties.
    """
    wd, u_wd = _weighted(omegas, var_omega)
    al, u_al = _weighted(alphas, var_alpha)
    w = 1.0 / np.maximum(var_omega, 1e-300)
    v = 1.0 / np.maximum(var_alpha, 1e-300)
    cov = float(np.sum(w * v * cov_wa)) / (float(np.sum(w)) * float(np.sum(v)))
    rho = cov * math.sqrt(float(np.sum(w)) * float(np.sum(v)))  # cov / (u_ω u_α) before widening
    rho = min(1.0, max(-1.0, rho))
    return wd, al, np.array([[u_wd * u_wd, rho * u_wd * u_al], [rho * u_wd * u_al, u_al * u_al]])


def ring_figures(omega_d: float, alpha: float, cov: np.ndarray) -> dict[str, DerivedValue]:
    """f0, f_d, α and Q from ω_d and α with their covariance (2×2, (rad/s)², rad/s², (1/s)²).

    ω0 = √(ω_d² + α²), Q = ω0/(2α); the uncertainties are first order (GUM, JCGM 100:2008
    5.2.2, with the covariance term), propagated by the ``uncertainties`` package.
    """
    from uncertainties import correlated_values, umath

    wd, al = correlated_values([float(omega_d), float(alpha)], np.asarray(cov, dtype=float))
    w0 = umath.sqrt(wd * wd + al * al)
    q = w0 / (2 * al)
    two_pi = 2 * math.pi
    f0 = DerivedValue(w0.nominal_value / two_pi, w0.std_dev / two_pi)
    return {
        # the ring shows the loaded circuit's natural frequency; without the parts it stands in
        # for the L-C resonance 1/(2π√(LC)), which it equals when Rs ≪ Rload and Resr ≪ Rload
        "resonant_frequency_hz": f0,
        "natural_frequency_hz": f0,
        "q_factor": DerivedValue(q.nominal_value, q.std_dev),
        "damped_frequency_hz": DerivedValue(wd.nominal_value / two_pi, wd.std_dev / two_pi),
        "decay_rate_per_s": DerivedValue(al.nominal_value, al.std_dev),
    }


@one_blas_thread  # as measure(): the result does not depend on the caller's BLAS threads
def fit_ringdown(capture, *, channel: str | int | None = None,
                 fix: Mapping[str, float] | None = None) -> FitResult:
    """Fit the free ringing after the edges of a slow square drive.

    Parameters
    ----------
    capture : Capture or path
        The filter's output (a path is loaded with :func:`benchfit.load`).
    channel : str or int, optional
        Channel with the ringing; default: one named out/output/response, else the only
        or the second channel.
    fix : mapping, optional
        ``{"L": henry}`` or ``{"C": farad}``: the other part is then computed from ω0.

    Returns
    -------
    FitResult
        Method "ringdown"; the derived values carry the result.
    """
    from benchfit.errors import CaptureError
    from benchfit.fit.lowpass import _RESPONSE_NAMES, as_capture, check_not_silent, check_parts, source_name

    cap = as_capture(capture)
    where = source_name(cap)
    from benchfit.fit.tolerance import fixed_specs

    fix_specs = fixed_specs(fix)
    fix_d, _ = check_parts({n: fv.value for n, fv in fix_specs.items()}, None, where)
    unknown = [k for k in fix_d if k not in ("L", "C")]
    if unknown or len(fix_d) > 1:
        raise FitError(f"fix: a ring-down fit can use one known part, L or C, not {', '.join(fix_d)} — "
                       "pass only fix={'L': …} or fix={'C': …}")
    try:
        if channel is not None:
            ci = cap.channel_index(channel)
        else:
            hits = [i for i, n in enumerate(cap.channel_names) if _RESPONSE_NAMES.match(n)]
            ci = hits[0] if hits else (0 if cap.n_channels == 1 else 1)
    except CaptureError as e:
        raise FitError(str(e)) from e
    name = cap.channel_names[ci]
    y = np.asarray(cap.samples[ci], dtype=float)
    check_not_silent(y, cap, ci, "response")
    fs = cap.sample_rate
    starts, f_ring = find_ring_starts(y, fs)
    if not starts or f_ring is None:
        raise FitError(f"{where}: no ring-down found in {name!r} — capture the filter's output while "
                       "a slow square wave (a few hertz) drives it")
    period = fs / f_ring
    skip = int(math.ceil(period))
    env = ring_envelope(y, period)
    floor = float(np.percentile(env, 10))
    segments: list[RingSegment] = []
    for i, s in enumerate(starts):
        a = s + skip
        b = starts[i + 1] if i + 1 < len(starts) else y.size
        if b - a < _MIN_PERIODS * period:
            continue
        # stop once the ring has decayed by about 40 dB (the rest is baseline and noise)
        seg_env = env[a:b]
        quiet = np.nonzero(seg_env < max(0.01 * seg_env[:skip].max(), 1.5 * floor))[0]
        if quiet.size and quiet[0] > _MIN_PERIODS * period:
            b = a + int(max(quiet[0], 10 * period))
            b = min(b, starts[i + 1] if i + 1 < len(starts) else y.size)
        t = np.arange(b - a) / fs
        theta, cov, _ = fit_ring(t, y[a:b], 2 * math.pi * f_ring)
        if not (theta[3] > 0 and theta[4] > 0 and np.all(np.isfinite(cov))):
            continue
        if theta[3] * t[-1] < 1.0:  # not a decaying ring: less than one time constant seen
            continue
        model = _damped(t, theta[3], theta[4]) @ theta[:3]
        segments.append(RingSegment(a, theta[4], theta[3], cov[4, 4], cov[3, 3], cov[3, 4], t,
                                    y[a:b].copy(), model, theta[0]))
    if not segments:
        raise FitError(f"{where}: no decaying ring found in {name!r} (each ring needs at least "
                       f"{_MIN_PERIODS} periods and one decay time before the next edge) — drive the "
                       "filter with a slower square wave and capture its output")
    wd, al, cov_wa = combine_rings(*(np.array([getattr(s, k) for s in segments])
                                     for k in ("omega", "alpha", "var_omega", "var_alpha", "cov_wa")))
    derived = ring_figures(wd, al, cov_wa)
    two_pi = 2 * math.pi
    w0 = two_pi * float(derived["natural_frequency_hz"].value or 0.0)
    u_w0 = two_pi * float(derived["natural_frequency_hz"].stderr or 0.0)
    warnings: list[str] = []
    if len(segments) < 2:
        warnings.append(f"{name}: only one ring could be fitted, so the spread between rings is not "
                        "in the uncertainty — capture several edges")
    params: dict[str, FitParameter] = {}
    if fix_d:
        (known, value), = fix_d.items()
        other = "C" if known == "L" else "L"
        from benchfit.uncertainty import Budget, Contribution

        val = 1.0 / (w0 * w0 * value)
        spec = fix_specs[known]
        unit = PARAMETER_UNITS[known]
        u_fit = 2 * val * u_w0 / w0
        rows = [Contribution("noise (ring fit)", "A", "normal", u_w0 / two_pi, "Hz", -2 * val / (w0 / two_pi))]
        if spec.u is not None:  # other = 1/(ω0²·known): ∂other/∂known = −other/known
            rows.append(Contribution(f"fixed {known} ({spec.text}, {spec.distribution})", "B", spec.distribution,
                                     spec.u, unit, -val / value, math.inf, spec.source))
        budget = Budget(other, val, PARAMETER_UNITS[other], tuple(rows),
                   conditional_on=() if spec.u is not None else (known,))
        fixed_b = None if spec.u is None else Budget(known, value, unit, (rows[-1].__class__(
            rows[-1].name, "B", spec.distribution, spec.u, unit, 1.0, math.inf, spec.source),))
        params[known] = FitParameter(value, spec.u, True, unit, None, fixed_b, () if spec.u else (known,))
        params[other] = FitParameter(val, budget.u, False, PARAMETER_UNITS[other], u_fit, budget, budget.conditional_on)
        warnings.append(f"{other}: computed from the resonant frequency and the fixed {known}, "
                        "assuming a light load and a small ESR")
        if spec.u is None:
            warnings.append(f"{known}: fixed without a tolerance, so {other} is conditional on it — give the "
                            f"tolerance, e.g. fix={{'{known}': '…±10%'}}, to include it")
    data = np.concatenate([s.data - s.baseline for s in segments])
    model = np.concatenate([s.model - s.baseline for s in segments])
    res = data - model
    ss_res = float(res @ res)
    ss_tot = float(np.sum((data - data.mean()) ** 2))
    rms = float(np.sqrt(np.mean(data ** 2)))
    quality = FitQuality(math.sqrt(ss_res / data.size) / rms if rms > 0 else math.nan,
                         1.0 - ss_res / ss_tot if ss_tot > 0 else math.nan, int(data.size))
    first = segments[0]
    curves = FitCurves(time_s=first.t + first.start / fs, data=first.data, model=first.model,
                       residual=res)
    return FitResult(file=where, model="ringdown", method="ringdown", parameters=params,
                     derived=derived, correlations={}, quality=quality, warnings=tuple(warnings),
                     curves=curves, success=True, message=f"{len(segments)} rings fitted")
