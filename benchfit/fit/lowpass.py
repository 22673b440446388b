"""Back-solve the effective parts of an L-C low-pass: :func:`fit_lowpass`.

Methods
-------
two-channel
    Drive and output captured together. The drive's fundamental f is estimated precisely
    (:func:`benchfit.measurement.tone.fit_tone`); both channels' complex phasors X_k, Y_k are
    fitted by least squares at k·f for the orders where the drive stands clearly above the
    noise (|X_k| > 10·u), H_k = Y_k/X_k is formed with its 2×2 (Re, Im) covariance
    propagated from both phasor covariances, and the model H(jkω) is fitted on the
    whitened complex residuals. A drive whose harmonics explain less than 90 % of its
    variance is not periodic and is refused — unless ``time_domain=True``.
    ``time_domain=True`` refines the parts by simulating the output from the measured drive
    samples (exact discretisation, :func:`benchfit.model.filter.simulate`) with the initial
    state and an output offset solved linearly at each step. For a drive far from periodic
    the start comes instead from the cross-spectral estimate H = P_xy/P_xx (Welch).
one-channel
    Only the output captured (see :mod:`benchfit.fit.onechannel`).

The parts are fitted as logarithms (they stay positive); what the data cannot determine is
found from the Jacobian and from a search for a second, equally good solution
(:mod:`benchfit.fit.identify`) and reported with ``stderr=None`` and a warning naming the
part to measure and fix.

Known limitation: the harmonic method takes the drive's sampled phasors as the circuit's
input. A drive with sharp edges sampled without an anti-alias filter (a scope export) has
aliased harmonics, which biases the highest orders by about (π·k·f/fs)²/3; the time-domain
refinement holds the drive linear between samples and so avoids most of it (what is left is
the timing of each edge within one sample).
"""

from __future__ import annotations

import math
import re
from pathlib import Path
from typing import Literal, Mapping, get_args

import numpy as np

from benchfit.errors import FitError
from benchfit.model.filter import PARAMETER_NAMES, PART_NAMES, free_response_basis, simulate, transfer
from benchfit.fit.identify import solve
from benchfit.fit.budgets import (MODEL_NAME, assemble, channel_gain_ratio, compare_core_loss,  # noqa: F401
                                  input_specs, propagate, source_name)
from benchfit.fit.common import (MAX_ORDER, SIGNIFICANCE, check_not_silent, complex_mult_cov,  # noqa: F401
                                 noise_rescaled, parts_of, quality_complex, quality_real, start_parts, subset,
                                 whiten, whitening)
from benchfit.fit.onechannel import fit_one_channel
from benchfit.fit.tolerance import FixedValue, as_fixed
from benchfit.fit.result import PARAMETER_UNITS, FitCurves, FitResult

__all__ = ["fit_lowpass", "MethodOption", "MODEL_NAME"]

MethodOption = Literal["auto", "two-channel", "one-channel"]

_DRIVE_NAMES = re.compile(r"^(drive|in|input|source|src|v_?in|vin)\b", re.I)
_RESPONSE_NAMES = re.compile(r"^(out|output|response|resp|v_?out|vout)\b", re.I)


# --- input checks ----------------------------------------------------------------------

def as_capture(capture):
    """A Capture (a path is loaded with :func:`benchfit.capture.load.load`)."""
    if isinstance(capture, (str, Path)):
        from benchfit.capture.load import load

        return load(capture)
    return capture



def check_parts(fix: Mapping[str, float] | None, guess: Mapping[str, float] | None,
                where: str) -> tuple[dict[str, float], dict[str, float]]:
    """Validate ``fix`` and ``guess``: known names, finite, positive (Resr may be fixed at 0)."""
    out = []
    for option, parts in (("fix", fix), ("guess", guess)):
        clean: dict[str, float] = {}
        for name, value in (parts or {}).items():
            if name not in PART_NAMES:
                raise FitError(f"{option}: unknown part {name!r} — use one of "
                               f"{', '.join(PARAMETER_NAMES)}")
            v = float(value)
            zero_ok = name == "Resr" and option == "fix"
            if not math.isfinite(v) or v < 0 or (v == 0 and not zero_ok):
                need = "zero or positive" if zero_ok else "positive"
                raise FitError(f"{option}: {name} must be a finite, {need} value in "
                               f"{PARAMETER_UNITS[name]}, not {value!r} — correct the value")
            clean[name] = v
        out.append(clean)
    return out[0], out[1]


def pick_channels(cap, drive: str | int | None, response: str | int | None) -> tuple[int, int]:
    """Drive and response channel indices: given, else by name, else the first and second."""
    from benchfit.errors import CaptureError

    try:
        di = cap.channel_index(drive) if drive is not None else None
        ri = cap.channel_index(response) if response is not None else None
    except CaptureError as e:
        raise FitError(str(e)) from e
    names = cap.channel_names
    if di is None:
        hits = [i for i, n in enumerate(names) if _DRIVE_NAMES.match(n) and i != ri]
        di = hits[0] if hits else next(i for i in range(cap.n_channels) if i != ri)
    if ri is None:
        hits = [i for i, n in enumerate(names) if _RESPONSE_NAMES.match(n) and i != di]
        ri = hits[0] if hits else next(i for i in range(cap.n_channels) if i != di)
    if di == ri:
        raise FitError(f"{source_name(cap)}: drive and response are the same channel "
                       f"({names[di]!r}) — pass different channels as drive= and response=")
    return di, ri


# --- shared fitting steps ----------------------------------------------------------------

def grid_start(f_hz: np.ndarray, h: np.ndarray, u: np.ndarray) -> tuple[float, float, float | None]:
    """ω0 (rad/s), Q and DC gain of the best two-pole response b0/(1 − (f/f0)² + j f/(f0·Q)).

    A coarse grid over f0 and Q with b0 solved in closed form at each point (weights 1/u²);
    robust where a linearised (Levy-type) solution is thrown off by noise or the ESR zero.
    """
    w = 1.0 / np.maximum(u, 1e-300) ** 2
    f0 = np.geomspace(max(f_hz[0] * 0.05, 1e-6), f_hz[-1] * 5.0, 160)
    q = np.geomspace(0.1, 200.0, 48)
    x = f_hz[None, None, :] / f0[:, None, None]
    m = 1.0 / (1.0 - x * x + 1j * x / q[None, :, None])  # (F, Q, K)
    num = np.sum(w * (np.conj(m) * h).real, axis=-1)
    den = np.sum(w * np.abs(m) ** 2, axis=-1)
    b0 = num / np.maximum(den, 1e-300)
    cost = -b0 * num
    i, j = np.unravel_index(int(np.argmin(cost)), cost.shape)
    return 2 * math.pi * float(f0[i]), float(q[j]), float(b0[i, j]) if b0[i, j] > 0 else None


# --- the public entry point --------------------------------------------------------------

def fit_lowpass(capture, *, method: MethodOption = "auto", drive: str | int | None = None,
                response: str | int | None = None, fix: Mapping[str, float] | None = None,
                guess: Mapping[str, float] | None = None, drive_duty: float | None = None,
                time_domain: bool = False) -> FitResult:
    """Back-solve effective L, C, Rs, Resr and Rload of the lc-lowpass model.

    Parameters
    ----------
    capture : Capture or path
        The waveform(s); a path is loaded with :func:`benchfit.load`.
    method : {"auto", "two-channel", "one-channel"}
        "auto" uses two-channel when the capture has two or more channels.
    drive, response : str or int, optional
        Channel names or 0-based indices; default by name (drive/in/source,
        out/output/response), else the first and second channel.
    fix : mapping, optional
        Parts held at known values, SI units (H, F, ohm); Resr may be 0.
    guess : mapping, optional
        Start values for parts, SI units.
    drive_duty : float, optional
        One-channel only: the drive's duty cycle (0…1, high time / period); fitted when None.
    time_domain : bool
        Two-channel only: refine by fitting the simulated output to the samples.

    Returns
    -------
    FitResult
        Method "two-channel" or "one-channel".

    Raises
    ------
    FitError
        Bad option, silent response, a drive with no periodic content.
    """
    cap = as_capture(capture)
    where = source_name(cap)
    if method not in get_args(MethodOption):
        raise FitError(f"method {method!r}: unknown — use one of {', '.join(get_args(MethodOption))}")
    fix_specs = {n: as_fixed(v) for n, v in (fix or {}).items()}
    fix_d, guess_d = check_parts({n: fv.value for n, fv in fix_specs.items()}, guess, where)
    fix_specs = {n: fix_specs[n] for n in fix_d}
    if drive_duty is not None and not (0.0 < float(drive_duty) < 1.0):
        raise FitError(f"drive_duty: {drive_duty!r} is not between 0 and 1 (the duty cycle is high "
                       "time / period) — pass e.g. drive_duty=0.5")
    if method == "auto":
        method = "two-channel" if cap.n_channels >= 2 else "one-channel"
    if method == "two-channel":
        if cap.n_channels < 2:
            raise FitError(f"{where}: two-channel fitting needs the drive and the output, but the "
                           "capture has one channel — use method='one-channel'")
        di, ri = pick_channels(cap, drive, response)
        return _two_channel(cap, di, ri, fix_d, guess_d, time_domain, fix_specs)
    if response is not None:
        from benchfit.errors import CaptureError

        try:
            ri = cap.channel_index(response)
        except CaptureError as e:
            raise FitError(str(e)) from e
    elif cap.n_channels == 1:
        ri = 0
    else:
        ri = pick_channels(cap, drive, None)[1]
    return fit_one_channel(cap, ri, fix_d, guess_d, drive_duty, fix_specs)


def _two_channel(cap, di: int, ri: int, fix: dict[str, float], guess: dict[str, float],
                 time_domain: bool, fix_specs: Mapping[str, FixedValue] | None = None) -> FitResult:
    from benchfit.measurement.tone import fit_harmonics, fit_tone

    where = source_name(cap)
    fs = cap.sample_rate
    x = np.asarray(cap.samples[di], dtype=float)
    y = np.asarray(cap.samples[ri], dtype=float)
    check_not_silent(y, cap, ri, "response")
    check_not_silent(x, cap, di, "drive")
    tone = fit_tone(x, fs, n_harmonics=9)
    if tone is None or tone.amplitudes[0] <= SIGNIFICANCE * tone.amplitudes_u[0]:
        if time_domain:  # any drive will do: start from the cross-spectral estimate of H
            return _aperiodic(cap, x, y, di, fix, guess)
        raise FitError(f"{where}: drive channel {cap.channel_names[di]!r} has no periodic content — "
                       "capture at least a few periods of the drive, use time_domain=True for a "
                       "non-periodic drive, or use fit_ringdown()")
    f = tone.frequency_hz
    kmax = max(1, min(MAX_ORDER, int(math.floor((0.5 * fs - 1e-9) / f))))
    hx_all = noise_rescaled(fit_harmonics(x, fs, f, kmax), x, fs)
    # a periodic drive is explained by its harmonics: require 90 % of its variance
    var_x = float(np.sum((x - x.mean()) ** 2))
    if var_x <= 0 or hx_all.rss > 0.1 * var_x:
        if time_domain:
            return _aperiodic(cap, x, y, di, fix, guess)
        raise FitError(f"{where}: drive channel {cap.channel_names[di]!r} is not periodic (its harmonics "
                       f"at {f:.4g} Hz explain {100 * max(0.0, 1 - hx_all.rss / var_x):.0f} % of it) — "
                       "use time_domain=True for a non-periodic drive, or check the drive channel")
    keep = hx_all.amplitudes > SIGNIFICANCE * hx_all.amplitudes_u
    orders = hx_all.orders[keep]
    if orders.size < 2:
        raise FitError(f"{where}: the drive has fewer than two harmonics above the noise — a square "
                       "drive is needed for two-channel fitting; check the drive channel")
    # both channels fitted with every order below the limit (the unused ones stay in the
    # model, so they cannot leak into the used ones), then the drive's strong orders selected
    hy_all = noise_rescaled(fit_harmonics(y, fs, f, kmax), y, fs)
    hx = subset(hx_all, keep)
    hy = subset(hy_all, keep)
    if not np.any(hy.amplitudes > SIGNIFICANCE * hy.amplitudes_u):
        raise FitError(f"{where}: response channel {cap.channel_names[ri]!r} shows no response at the "
                       "drive's harmonics — check the wiring, or choose the channel with response=")
    xk, yk = hx.phasors, hy.phasors
    hk = yk / xk
    cov = complex_mult_cov(1.0 / xk, hy.phasor_cov) + complex_mult_cov(-yk / xk ** 2, hx.phasor_cov)
    w = whitening(cov)
    fk = orders * f
    u_abs = np.sqrt(np.maximum(np.einsum("ki,kij,kj->k",
                                         np.stack([hk.real, hk.imag], 1) / np.abs(hk)[:, None],
                                         cov, np.stack([hk.real, hk.imag], 1) / np.abs(hk)[:, None]),
                               0.0))

    def residual(v: dict[str, float]) -> np.ndarray:
        return whiten(w, hk - v.get("gain_ratio", 1.0) * transfer(fk, parts_of(v)))

    ratio, ratio_note = channel_gain_ratio(cap, di, ri)
    w0, q, b0 = grid_start(fk, hk, np.sqrt(0.5 * (cov[:, 0, 0] + cov[:, 1, 1])))
    start = start_parts(w0, q, b0, fix, guess)
    fix_g = {**fix, "gain_ratio": 1.0}
    values, ident, fixed, folded, warnings, ok, msg, alts = solve(residual, start, fix_g)
    comparison = None
    if "Rp" not in fix:
        comparison, chosen = compare_core_loss(residual, values, ident, fixed, fix_g)
        if chosen is not None:
            values, ident, fixed, folded, warnings, ok, msg, alts = solve(residual, chosen, fix_g, parts=PART_NAMES)
            warnings = list(warnings) + [comparison["note"]]
    fixed.pop("gain_ratio", None)
    if cap.units[di] != cap.units[ri] or "FS" in (cap.units[di], cap.units[ri]):
        warnings = list(warnings) + [
            f"{cap.channel_names[ri]}: drive and output are not both calibrated in volts "
            f"({cap.units[di]}, {cap.units[ri]}), so a gain difference between the inputs looks like "
            "loss in the load — calibrate the inputs, or fix Rload (--fix Rload=…)"]
    if ratio_note:
        warnings = list(warnings) + [ratio_note]
    specs = input_specs(fix_specs or {}, fixed, folded, ratio)
    sens = propagate(residual, {**values, "gain_ratio": 1.0}, ident, specs)
    h_model = transfer(fk, parts_of(values))
    n_show = min(x.size, int(math.ceil(4 * fs / f)))
    t = np.arange(n_show) / fs
    y_model = hy.dc + sum((xk[i] * h_model[i] * np.exp(1j * orders[i] * 2 * math.pi * f * t)).real
                          for i in range(orders.size))
    curves = FitCurves(time_s=t, data=y[:n_show].copy(), model=np.asarray(y_model),
                       harmonic_hz=fk, h_measured=hk, h_model=h_model, h_measured_u=u_abs,
                       residual=np.concatenate([(hk - h_model).real, (hk - h_model).imag]))
    quality = quality_complex(hk, h_model)
    if time_domain:
        values, ident, fixed, folded2, warn2, ok, msg, alts, curves, quality, td_res = _time_domain(
            x, y, fs, values, fixed, fix, hy.sigma, curves)
        folded = sorted(set(folded) | set(folded2))
        warnings = warnings + [m for m in warn2 if m not in warnings]
        specs = input_specs(fix_specs or {}, fixed, folded, ratio)
        sens = propagate(td_res, {**values, "gain_ratio": 1.0}, ident, specs)
    result = assemble(cap, "two-channel", values, ident, fix, folded, warnings, curves, quality, ok, msg,
                      alts, specs, sens)
    if comparison is not None:
        from dataclasses import replace

        result = replace(result, adequacy={**result.adequacy,
                                           "model_comparison": {k: v for k, v in comparison.items() if k != "note"}})
    return result


def _aperiodic(cap, x: np.ndarray, y: np.ndarray, di: int, fix: dict[str, float],
               guess: dict[str, float]) -> FitResult:
    """Time-domain fit for a drive that is not periodic, started from H = P_xy/P_xx (Welch).

    Bins with magnitude-squared coherence γ² > 0.9 are used for the start; their relative
    random error √(1−γ²)/(|γ|·√(2·n_d)) for n_d averaged segments is the usual one for a
    frequency-response estimate (Bendat & Piersol, *Random Data*, from memory).
    """
    from scipy.signal import coherence, csd, welch

    where = source_name(cap)
    fs = cap.sample_rate
    nper = int(min(max(256, x.size // 8), 16384))
    if x.size < 2 * nper:
        raise FitError(f"{where}: the record is too short for a non-periodic drive — capture longer")
    f, pxx = welch(x, fs, nperseg=nper)
    _, pxy = csd(x, y, fs, nperseg=nper)
    _, coh = coherence(x, y, fs, nperseg=nper)
    sel = (f > 0) & (coh > 0.9) & (pxx > 0)
    if np.count_nonzero(sel) < 4:
        raise FitError(f"{where}: drive channel {cap.channel_names[di]!r} and the response are not "
                       "related (coherence below 0.9 everywhere) — check the channels and the wiring")
    n_d = max(1.0, 2.0 * x.size / nper - 1.0)  # Welch segments with 50 % overlap
    h = pxy[sel] / pxx[sel]
    g = np.sqrt(coh[sel])
    u = np.abs(h) * np.sqrt(1.0 - coh[sel]) / (g * math.sqrt(2.0 * n_d)) + 1e-12 * np.abs(h).max()
    fk = f[sel]
    w0, q, b0 = grid_start(fk, h, u)
    start = start_parts(w0, q, b0, fix, guess)
    # a first fit to the spectral estimate, then the time-domain fit from there
    uu = np.maximum(u, 1e-300)

    def residual(v: dict[str, float]) -> np.ndarray:
        d = (h - transfer(fk, parts_of(v))) / uu
        return np.concatenate([d.real, d.imag])

    start, _, fixed0, _, _, _, _, _ = solve(residual, start, fix)
    curves = FitCurves(harmonic_hz=fk, h_measured=h, h_measured_u=u)
    sigma = 1e-3 * float(np.std(y))  # scales χ² only; the covariance is rescaled by χ²_red
    values, ident, fixed, folded, warnings, ok, msg, alts, curves, quality, td_res = _time_domain(
        x, y, fs, start, dict(fix), fix, sigma, curves)
    ratio, ratio_note = channel_gain_ratio(cap, di, cap.n_channels - 1 - di if cap.n_channels == 2 else di)
    if ratio_note:
        warnings = list(warnings) + [ratio_note]
    specs = input_specs({}, fixed, folded, ratio)
    sens = propagate(td_res, {**values, "gain_ratio": 1.0}, ident, specs)
    return assemble(cap, "two-channel", values, ident, fix, folded, warnings, curves, quality, ok, msg,
                    alts, specs, sens)


def _time_domain(x, y, fs, values, fixed, user_fix, sigma, curves):
    """Refine by fitting the exactly discretised simulation of the measured drive to the output."""
    n = y.size
    sigma = max(float(sigma), 1e-12 * max(float(np.max(np.abs(y))), 1e-30))

    def model(v: dict[str, float]) -> np.ndarray:
        p = parts_of(v)
        sim = v.get("gain_ratio", 1.0) * simulate(x, fs, p)
        basis = free_response_basis(p, fs, n)
        design = np.stack([np.ones(n), basis[0], basis[1]], axis=1)
        coef, *_ = np.linalg.lstsq(design, y - sim, rcond=None)
        return sim + design @ coef

    def residual(v: dict[str, float]) -> np.ndarray:
        return (y - model(v)) / sigma

    start = {k: (v if v > 0 else 1e-3) for k, v in values.items()}
    fix_now = {k: v for k, v in fixed.items()}
    values, ident, fixed, folded, warnings, ok, msg, alts = solve(residual, start, fix_now)
    ym = model(values)
    curves = FitCurves(time_s=np.arange(n) / fs, data=y.copy(), model=ym,
                       harmonic_hz=curves.harmonic_hz, h_measured=curves.h_measured,
                       h_model=transfer(curves.harmonic_hz, parts_of(values)),
                       h_measured_u=curves.h_measured_u, residual=y - ym)
    folded = [k for k in fixed if k not in user_fix and k in PART_NAMES]  # undetermined, held at 0
    return values, ident, fixed, folded, warnings, ok, msg, alts, curves, quality_real(y, ym), residual
