"""Stability statistics of a run of interval readings (pure): Allan deviation, drift, warm-up.

Inputs are :class:`~benchfit.measurement.drift.IntervalReading` objects; the output is one
frozen :class:`Stability` with ``to_dict()``.

* **Allan deviation.** The chained midpoint phases of the longest segment become the time
  error ``x_k = (Φ_k − Φ_0)/(2π f̄) − (t_k − t_0)`` (s) of the fractional frequency
  ``y = (f − f̄)/f̄`` (IEEE Std 1139 definitions). The overlapping Allan deviation is computed
  by ``allantools.oadev`` on the phase data for τ = m·τ0 with m = 1, 2, 4, … up to a quarter
  of the segment. Confidence intervals (68.3 %) use the equivalent degrees of freedom of
  Greenhall & Riley (``allantools.edf_greenhall``) for the power-law noise identified at each
  τ by the lag-1 autocorrelation method (Riley & Greenhall, ``allantools.autocorr_noise_id``;
  the identification needs about 30 averages, so longer τ keep the last identified type).
* **Estimator floor.** Each midpoint phase has the fit's standard uncertainty u_φ, i.e. a
  time error σ_x = u_φ/(2π f̄). White phase noise of that size alone gives
  σ_y(τ) = √3·σ_x/τ (from the IEEE 1139 overlapping estimator, E[(x_{i+2m} − 2x_{i+m} + x_i)²]
  = 6σ_x²); it is stated beside every τ so a reader sees what the measurement can resolve.
* **Estimator weighting.** A least-squares midpoint phase is the mean phase over its
  interval, so for white FM the chained estimate reads σ_y(τ)·√(1 − τ0/(2τ)) (derived from the
  second difference of interval-averaged phase): 29 % low at τ = τ0, 3 % at 8τ0.
* **Warm-up and drift.** The phase-continuous frequencies are fitted (least squares,
  ``scipy.optimize.curve_fit``) with ``f(t) = f∞ + D·t + A·exp(−t/τw)``; when the exponential
  is not significant (|A| < 3 u(A)) or its time constant is not inside the run, the straight
  line ``f∞ + D·t`` is used and no warm-up is found. The warm-up time is when the transient
  falls inside the stated band: ``t_w = τw·ln(|A|/(band·f̄))`` (0 when it starts inside).
  Drift D is quoted in ppm/h of f̄. Standard uncertainties come from the fit covariance
  scaled by the residual variance, inflated by (1 + ρ)/(1 − ρ) for a positive lag-1
  autocorrelation ρ of the residuals (the usual AR(1) effective-sample-size correction,
  e.g. Santer et al., Int. J. Climatol. 2008 — from memory), because flicker FM leaves
  correlated residuals that plain least squares would treat as independent.
* **Level drift** (%/h of the mean amplitude, straight line over the run, same u rule),
  **THD range** (min/max of the interval THD).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Any, Mapping, Sequence

import numpy as np

from benchfit.errors import MeasureError
from benchfit.measurement.result import _clean
from benchfit.measurement.drift import IntervalReading

__all__ = ["AdevPoint", "Stability", "stability", "overlapping_adev", "DEFAULT_BAND_PPM", "SUMMARY_QUANTITIES"]

#: default warm-up band: ±100 ppm of the mean frequency (±5 mHz at 50 Hz)
DEFAULT_BAND_PPM = 100.0
#: averages needed before the lag-1 noise identification is tried (allantools refuses fewer)
_NOISE_ID_MIN = 32
#: summary quantities logged as results and limitable in a spec:
#: quantity → (key of the value, key of its standard uncertainty or None, unit)
SUMMARY_QUANTITIES: Mapping[str, tuple[str, str | None, str]] = MappingProxyType({
    "drift_ppm_per_h": ("drift_ppm_per_h", "drift_u_ppm_per_h", "ppm/h"),
    "warmup_s": ("warmup_s", "warmup_u_s", "s"),
    "adev_1s": ("adev_1s", "adev_1s_u", ""),
    "level_drift_pct_per_h": ("level_drift_pct_per_h", "level_drift_u_pct_per_h", "%/h"),
    "final_frequency_hz": ("final_frequency_hz", "final_frequency_u_hz", "Hz"),
    "thd_max_pct": ("thd_max_pct", None, "%"),
})
_NOISE_NAMES = {2: "white PM", 1: "flicker PM", 0: "white FM", -1: "flicker FM", -2: "random-walk FM"}


@dataclass(frozen=True)
class AdevPoint:
    """Overlapping Allan deviation at one averaging time.

    ``ci_low``/``ci_high`` bound the 68.3 % confidence interval (chi-squared with ``edf``
    degrees of freedom); ``floor`` is the estimator's white-PM floor at this τ.
    """

    tau_s: float
    adev: float
    ci_low: float
    ci_high: float
    n_terms: int
    edf: float
    noise: str
    floor: float

    def to_dict(self) -> dict[str, Any]:
        return {k: _clean(getattr(self, k)) for k in ("tau_s", "adev", "ci_low", "ci_high", "n_terms", "edf",
                                                       "noise", "floor")}


@dataclass(frozen=True)
class Stability:
    """Stability summary of one channel's run (frequencies in Hz, times in s).

    Every ``*_u`` is a standard uncertainty (k = 1). ``warmup_s`` is 0 when the run starts
    inside the band and None when it never settles inside it.
    """

    n_intervals: int
    interval_s: float
    duration_s: float
    mean_frequency_hz: float
    frequency_min_hz: float
    frequency_max_hz: float
    final_frequency_hz: float
    final_frequency_u_hz: float
    timebase_u_ppm: float
    drift_ppm_per_h: float
    drift_u_ppm_per_h: float
    model: str
    warmup_s: float | None
    warmup_u_s: float | None
    warmup_band_ppm: float
    warmup_tau_s: float | None
    warmup_tau_u_s: float | None
    warmup_step_ppm: float | None
    warmup_step_u_ppm: float | None
    level_mean: float | None
    level_unit: str
    level_drift_pct_per_h: float | None
    level_drift_u_pct_per_h: float | None
    thd_min_pct: float | None
    thd_max_pct: float | None
    adev: tuple[AdevPoint, ...]
    adev_1s: float | None
    adev_1s_u: float | None
    adev_1s_floor: float | None
    adev_span: str
    segments: int
    restarts: int
    warnings: tuple[str, ...] = field(default=())

    def to_dict(self) -> dict[str, Any]:
        out = {k: _clean(getattr(self, k)) for k in (
            "n_intervals", "interval_s", "duration_s", "mean_frequency_hz", "frequency_min_hz",
            "frequency_max_hz", "final_frequency_hz", "final_frequency_u_hz", "timebase_u_ppm",
            "drift_ppm_per_h", "drift_u_ppm_per_h", "model", "warmup_s", "warmup_u_s", "warmup_band_ppm",
            "warmup_tau_s", "warmup_tau_u_s", "warmup_step_ppm", "warmup_step_u_ppm", "level_mean",
            "level_unit", "level_drift_pct_per_h", "level_drift_u_pct_per_h", "thd_min_pct", "thd_max_pct",
            "adev_1s", "adev_1s_u", "adev_1s_floor", "adev_span", "segments", "restarts")}
        out["adev"] = [p.to_dict() for p in self.adev]
        out["warnings"] = list(self.warnings)
        return out


def overlapping_adev(x: np.ndarray, tau0_s: float, ms: Sequence[int]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Overlapping Allan deviation of time-error data by ``allantools.oadev``.

    Returns (τ in s, σ_y(τ), number of terms) for the averaging factors ``ms``.
    """
    import allantools

    taus, dev, _err, ns = allantools.oadev(np.asarray(x, dtype=np.float64), rate=1.0 / tau0_s,
                                           data_type="phase", taus=np.asarray(ms, dtype=np.float64) * tau0_s)
    return np.asarray(taus, dtype=np.float64), np.asarray(dev, dtype=np.float64), np.asarray(ns, dtype=np.int64)


def _ar1_factor(resid: np.ndarray) -> float:
    """(1 + ρ)/(1 − ρ) for a positive lag-1 autocorrelation ρ of the residuals, else 1."""
    r = resid - resid.mean()
    den = float(r @ r)
    if r.size < 4 or den <= 0:
        return 1.0
    rho = float(r[1:] @ r[:-1]) / den
    rho = min(rho, 0.95)
    return (1.0 + rho) / (1.0 - rho) if rho > 0 else 1.0


def _line(t: np.ndarray, y: np.ndarray) -> tuple[float, float, float, float, np.ndarray]:
    """Straight line y = a + b·t: (a, b, u(a) at t = 0, u(b), residuals), u with the AR(1) factor."""
    tm = float(t.mean())
    tc = t - tm
    sxx = float(tc @ tc)
    b = float(tc @ (y - y.mean())) / sxx
    a_mid = float(y.mean())
    resid = y - a_mid - b * tc
    dof = max(y.size - 2, 1)
    s2 = float(resid @ resid) / dof * _ar1_factor(resid)
    u_b = math.sqrt(s2 / sxx)
    a = a_mid - b * tm
    u_a = math.sqrt(s2 * (1.0 / y.size + tm * tm / sxx))
    return a, b, u_a, u_b, resid


def _warmup_fit(t: np.ndarray, f: np.ndarray, duration: float, tau0: float):
    """Fit f∞ + D·t + A·exp(−t/τ); returns (params, cov) or None when it fails or is not significant."""
    from scipy.optimize import curve_fit

    def model(tt, finf, d, a, tau):
        return finf + d * tt + a * np.exp(-tt / tau)

    # start: the line through the second half, the first reading's excess, τ = run/5
    half = t >= 0.5 * t[-1]
    d0 = float(np.polyfit(t[half], f[half], 1)[0]) if np.count_nonzero(half) >= 3 else 0.0
    finf0 = float(np.mean(f[half]) - d0 * np.mean(t[half]))
    a0 = float(np.mean(f[: max(3, f.size // 50)]) - finf0)
    best = None
    for tau_start in (duration / 10.0, duration / 5.0, duration / 2.5):
        try:
            # τ bounded to where the result is accepted below (and exp cannot overflow)
            p, cov = curve_fit(model, t, f, p0=(finf0, d0, a0, tau_start), max_nfev=4000,
                               bounds=((-np.inf, -np.inf, -np.inf, tau0), (np.inf, np.inf, np.inf, duration)))
        except (RuntimeError, ValueError):
            continue
        if not np.all(np.isfinite(cov)):
            continue
        rss = float(np.sum((f - model(t, *p)) ** 2))
        if best is None or rss < best[2]:
            best = (p, cov, rss)
    if best is None:
        return None
    p, cov, _ = best
    resid = f - model(t, *p)
    cov = cov * _ar1_factor(resid)
    a, tau = float(p[2]), float(p[3])
    u_a, u_tau = math.sqrt(max(cov[2, 2], 0.0)), math.sqrt(max(cov[3, 3], 0.0))
    if not (tau0 < tau < duration and abs(a) > 3.0 * u_a and u_tau < tau):
        return None
    return p, cov


def stability(readings: Sequence[IntervalReading], *, interval_s: float,
              band_ppm: float = DEFAULT_BAND_PPM, timebase_u_ppm: float = 0.0) -> Stability:
    """Stability statistics of one channel's interval readings.

    Parameters
    ----------
    readings : sequence of IntervalReading
        In time order, from one :class:`~benchfit.measurement.drift.IntervalTracker`.
    interval_s : float
        Interval length τ0 (s).
    band_ppm : float
        Warm-up band: settled when the transient stays within ±band of the final value (ppm).
    timebase_u_ppm : float
        Sample-clock standard uncertainty (ppm); enters the final frequency's u only.

    Raises
    ------
    MeasureError
        Fewer than 8 phase-continuous frequencies (too short a run for any statistic).
    """
    if not (math.isfinite(band_ppm) and band_ppm > 0):
        raise MeasureError(f"band_ppm: {band_ppm!r} must be a positive number of ppm — e.g. band_ppm=100")
    warnings: list[str] = []
    good = [r for r in readings if r.phase_rad is not None]
    chained = [r for r in good if r.chain_frequency_hz is not None]
    if len(chained) < 8:
        raise MeasureError(f"run: only {len(chained)} phase-continuous interval(s) — at least 8 are needed; "
                           "record longer or use a shorter interval_s")
    missing = len(readings) - len(good)
    if missing:
        warnings.append(f"{missing} interval(s) without a tone were left out")
    # a chained frequency is the mean from the previous midpoint to this one: for back-to-back
    # intervals of equal length that span is centred on this interval's start
    t = np.array([r.t_start_s for r in chained], dtype=np.float64)
    f = np.array([r.chain_frequency_hz for r in chained], dtype=np.float64)
    fbar = float(np.mean(f))
    duration = float(readings[-1].t_mid_s - readings[0].t_mid_s) + float(interval_s)

    # ---- warm-up and drift
    fitted = _warmup_fit(t, f, float(t[-1] - t[0]) if t[-1] > t[0] else interval_s, interval_s)
    band_hz = band_ppm * 1e-6 * fbar
    if fitted is not None:
        p, cov = fitted
        finf, d, a, tau = (float(v) for v in p)
        final = finf + d * t[-1] + a * math.exp(-t[-1] / tau)
        g_final = np.array([1.0, t[-1], math.exp(-t[-1] / tau), a * t[-1] / tau ** 2 * math.exp(-t[-1] / tau)])
        final_u = math.sqrt(max(float(g_final @ cov @ g_final), 0.0))
        d_u = math.sqrt(max(cov[1, 1], 0.0))
        if abs(a) <= band_hz:
            warm, warm_u = 0.0, 0.0
        else:
            warm = tau * math.log(abs(a) / band_hz)
            g = np.array([0.0, 0.0, tau / a, math.log(abs(a) / band_hz)])  # ∂t_w/∂(f∞, D, A, τ)
            warm_u = math.sqrt(max(float(g @ cov @ g), 0.0))
            if warm > t[-1]:
                warnings.append(f"the frequency had not settled within ±{band_ppm:g} ppm by the end of the run "
                                f"(predicted at {warm:.0f} s) — run longer")
                warm, warm_u = None, None
        model_name = "exponential+linear"
        tau_w, tau_u = tau, math.sqrt(max(cov[3, 3], 0.0))
        step, step_u = a / fbar * 1e6, math.sqrt(max(cov[2, 2], 0.0)) / fbar * 1e6
    else:
        a0, d, u0, d_u, _ = _line(t, f)
        final = a0 + d * t[-1]
        final_u = math.sqrt(u0 ** 2 + (d_u * t[-1]) ** 2)
        warm, warm_u, tau_w, tau_u, step, step_u = 0.0, 0.0, None, None, None, None
        model_name = "linear"
    final_u = math.hypot(final_u, final * timebase_u_ppm * 1e-6)
    drift = d / fbar * 1e6 * 3600.0
    drift_u = d_u / fbar * 1e6 * 3600.0

    # ---- Allan deviation of the longest segment, with the fitted warm-up and drift removed:
    # they are stated on their own, and left in they would swamp σ_y at every τ beyond a few τ0
    segs: dict[int, list[IntervalReading]] = {}
    for r in good:
        segs.setdefault(r.segment, []).append(r)
    seg = max(segs.values(), key=len)
    ph = np.array([r.phase_rad for r in seg], dtype=np.float64)
    tm = np.array([r.t_mid_s for r in seg], dtype=np.float64)
    x = (ph - ph[0]) / (2.0 * math.pi * fbar) - (tm - tm[0])
    x = x - _model_time_error(tm, fitted, (final, d), fbar, model_name)
    span = ("whole run" if len(seg) == len(good) else f"longest unbroken segment ({len(seg)} intervals)") + \
        (", fitted warm-up and drift removed" if model_name != "linear" else ", fitted linear drift removed")
    sigma_x = float(np.median([r.phase_u_rad for r in seg])) / (2.0 * math.pi * fbar)
    adev_points = _adev_points(x, interval_s, sigma_x)
    adev_1s = adev_1s_u = floor_1s = None
    for pnt in adev_points:
        if abs(pnt.tau_s - 1.0) < 1e-3:  # a timebase-corrected interval of 1 s is a few ppm off
            # u: half the 68.3 % interval (chi-squared, Greenhall–Riley edf), the estimate's own scatter
            adev_1s, floor_1s = pnt.adev, pnt.floor
            adev_1s_u = 0.5 * (pnt.ci_high - pnt.ci_low)
    if adev_1s is None:
        warnings.append(f"adev_1s: τ = 1 s is not among the averaging times (interval {interval_s:g} s) — "
                        "use interval_s=1 (or a divisor of 1 s)")

    # ---- level and THD
    amps = np.array([r.amplitude for r in good], dtype=np.float64)
    ta = np.array([r.t_mid_s for r in good], dtype=np.float64)
    level_mean = float(np.mean(amps))
    lvl = lvl_u = None
    if amps.size >= 3 and level_mean > 0:
        _, b, _, u_b, _ = _line(ta, amps)
        lvl, lvl_u = b / level_mean * 100.0 * 3600.0, u_b / level_mean * 100.0 * 3600.0
    thd = [r.thd_pct for r in good if r.thd_pct is not None]
    restarts = sum(1 for r in good if r.chain_start) - 1
    if restarts > 0:
        warnings.append(f"the phase chain restarted {restarts} time(s); Allan deviation uses the longest "
                        "unbroken segment")
    return Stability(
        n_intervals=len(readings), interval_s=float(interval_s), duration_s=duration, mean_frequency_hz=fbar,
        frequency_min_hz=float(f.min()), frequency_max_hz=float(f.max()), final_frequency_hz=float(final),
        final_frequency_u_hz=float(final_u), timebase_u_ppm=float(timebase_u_ppm), drift_ppm_per_h=drift,
        drift_u_ppm_per_h=drift_u, model=model_name, warmup_s=warm, warmup_u_s=warm_u,
        warmup_band_ppm=float(band_ppm), warmup_tau_s=tau_w, warmup_tau_u_s=tau_u, warmup_step_ppm=step,
        warmup_step_u_ppm=step_u, level_mean=level_mean, level_unit=good[0].unit, level_drift_pct_per_h=lvl,
        level_drift_u_pct_per_h=lvl_u, thd_min_pct=min(thd) if thd else None, thd_max_pct=max(thd) if thd else None,
        adev=tuple(adev_points), adev_1s=adev_1s, adev_1s_u=adev_1s_u, adev_1s_floor=floor_1s, adev_span=span,
        segments=len(segs), restarts=max(restarts, 0), warnings=tuple(warnings))


def _model_time_error(tm: np.ndarray, fitted, line: tuple[float, float], fbar: float, model: str) -> np.ndarray:
    """Time error (s) the fitted frequency model accumulates from tm[0] to each tm: the integral of
    (f_model − f̄)/f̄, so that subtracting it leaves the random part of the phase."""
    t0 = tm[0]
    if model == "linear":
        final, d = line
        # f(t) = a + d·t with a = final − d·t_end; only the slope matters after the mean is removed
        a = final - d * tm[-1]
        return ((a - fbar) * (tm - t0) + 0.5 * d * (tm ** 2 - t0 ** 2)) / fbar
    finf, d, amp, tau = (float(v) for v in fitted[0])
    return ((finf - fbar) * (tm - t0) + 0.5 * d * (tm ** 2 - t0 ** 2)
            + amp * tau * (np.exp(-t0 / tau) - np.exp(-tm / tau))) / fbar


def _adev_points(x: np.ndarray, tau0: float, sigma_x: float) -> list[AdevPoint]:
    """Allan deviation with 68.3 % confidence intervals at m = 1, 2, 4, … ≤ (N − 1)/4."""
    import allantools

    n = x.size
    ms = [1 << k for k in range(0, 40) if (1 << k) <= (n - 1) // 4]
    if not ms:
        return []
    taus, dev, ns = overlapping_adev(x, tau0, ms)
    out: list[AdevPoint] = []
    alpha = 0
    for m, tau, sd, nt in zip(ms, taus, dev, ns):
        if n // m >= _NOISE_ID_MIN:
            try:
                alpha = int(allantools.autocorr_noise_id(x, af=m, data_type="phase", dmin=0, dmax=2)[0])
            except (NotImplementedError, ValueError, ZeroDivisionError, FloatingPointError):
                pass
        alpha = max(-2, min(2, alpha))
        edf = float(allantools.edf_greenhall(alpha=alpha, d=2, m=m, N=n, overlapping=True))
        lo, hi = allantools.confidence_interval(float(sd), edf)
        out.append(AdevPoint(tau_s=float(tau), adev=float(sd), ci_low=float(lo), ci_high=float(hi),
                             n_terms=int(nt), edf=edf, noise=_NOISE_NAMES.get(alpha, str(alpha)),
                             floor=math.sqrt(3.0) * sigma_x / float(tau)))
    return out
