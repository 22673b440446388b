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
    the start comes instead from the cross-spectral estimate H = P_xy/P_xx (Welch). Its residual is
    whitened by the noise a right model leaves — the output's, and the drive's through the model —
    estimated from the two channels apart from the fit (:mod:`benchfit.fit.tdnoise`, recorded in
    ``adequacy["noise"]``), so its χ²ᵣ, warning and Birge scaling test the model.
one-channel
    Only the output captured (see :mod:`benchfit.fit.onechannel`).

The parts are fitted as logarithms (they stay positive); what the data cannot determine is
found from the Jacobian and from a search for a second, equally good solution
(:mod:`benchfit.fit.identify`) and reported with ``stderr=None`` and a warning naming the
part to measure and fix.

Undetermined parts are integrated out, not held (two-channel, harmonic method). With the load free
and L or C known, the drive frequency is refined (on the output, whose few harmonics cannot pull it)
and the parts are fitted again with the channel gain ratio free under its stated prior; a load the
data then leave unseparated from Rs (or an ESR folded at 0, with the load known) is marginalised over
the same stated ranges as in the output-only fit (:mod:`benchfit.fit.marginal`), and reported as not
determined, with the range, its source and the measurement that would pin it. A load the data
determine stays fitted.

The sampled drive is taken as linear between samples in both methods: the harmonic method's model
of H_k = Y_k/X_k is the exact first-order-hold response of the sampled output to the sampled drive
(:func:`benchfit.model.filter.sampled_transfer`, the frequency response of the time-domain
refinement's :func:`benchfit.model.filter.simulate`), not H(j·2πkf). A drive with edges within one
sample (a scope's export without an anti-alias filter) has its harmonics above Nyquist folded onto
the kept orders, which moves Y_k/X_k from H(j·2πkf) by about (π·k·f/fs)²/3: on the asymmetric ngspice
unit (50 Hz at 20 kS/s, L ± 10 % only, load free) that biased Q by +0.27 ± 0.07 of its u (mean z over
200 seeds; +0.24 from the noise-free samples, linearised; scripts/coverage_freeload.py). A drive that
*is* band-limited (both channels behind the same anti-alias filter, e.g. a sound card's line input) is
modelled by H(j·2πkf) instead: which of the two applies is decided from the drive channel itself
(:mod:`benchfit.fit.edges`, ``drive_edges="auto"``) or given. The time-domain refinement follows the
same choice: a band-limited drive is simulated after a 1/sinc² pre-filter of its samples
and the hold's images removed (:func:`benchfit.model.filter.simulate_band_limited`, which drops 7
samples at each end), so that the simulation has the response H(j·2πf); how much the images step
removed at the kept orders is recorded beside the choice. What
is left with sharp edges is the timing of each edge within one sample.
"""

from __future__ import annotations

import math
import re
from pathlib import Path
from typing import Literal, Mapping, get_args

import numpy as np

from benchfit.errors import FitError
from benchfit.measurement.threads import one_blas_thread
from benchfit.model.filter import (PARAMETER_NAMES, PART_NAMES, PREFILTER_TAPS, free_response_basis,
                                   prefiltered_transfer, sampled_transfer, simulate, simulate_band_limited,
                                   transfer)
from benchfit.fit.identify import fit_log_parameters, identify, solve
from benchfit.fit.marginal import Nuisance, figures_of, load_nuisance, marginalise
from benchfit.fit.marginal import apply as apply_marginal
from benchfit.fit.budgets import (MODEL_NAME, assemble, channel_gain_ratio, compare_core_loss,  # noqa: F401
                                  core_loss_not_separated, input_specs, propagate, source_name)
from benchfit.fit.common import (MAX_ORDER, SIGNIFICANCE, check_not_silent, complex_mult_cov,  # noqa: F401
                                 noise_rescaled, parts_of, quality_complex, quality_real, start_parts, subset,
                                 whiten, whitening)
from benchfit.fit.edges import DriveEdges, classify_drive_edges, edge_timing
from benchfit.fit.onechannel import fit_one_channel
from benchfit.fit.propagate import InputSpec
from benchfit.fit.tdnoise import channel_floor, combine, difference_floor, whiten_by_spectrum
from benchfit.fit.tolerance import FixedValue, fixed_specs
from benchfit.fit.result import PARAMETER_UNITS, DerivedValue, FitCurves, FitResult
from benchfit.units import format_quantity

__all__ = ["fit_lowpass", "MethodOption", "MODEL_NAME"]

MethodOption = Literal["auto", "two-channel", "one-channel"]

_DRIVE_NAMES = re.compile(r"^(drive|in|input|source|src|v_?in|vin)\b", re.I)
_RESPONSE_NAMES = re.compile(r"^(out|output|response|resp|v_?out|vout)\b", re.I)

#: how the time-domain residual's noise is estimated (benchfit.fit.tdnoise), for the record
_PERIODIC_NOISE = ("each channel's white floor between the harmonics (median of the Hann periodogram), or the "
                   "median of its third differences where that is lower beyond both estimates' u (content between "
                   "the harmonics that is not noise: edges that wander, drift); the residual whitened by "
                   "σ_y² + σ_x²·|H(f)|², the drive's noise through the fitted model")
_APERIODIC_NOISE = ("each channel's white level from the median of its third differences (Gaussian noise, a "
                    "drive smooth at the sample scale between edges); the residual whitened by "
                    "σ_y² + σ_x²·|H(f)|², the drive's noise through the fitted model")
#: the residual's noise spectrum at the fitted parts differs from the start's by more than this somewhere: the
#: fit is repeated
_SPECTRUM_MOVED = 1e-3


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

@one_blas_thread  # as measure(): the result does not depend on the caller's BLAS threads
def fit_lowpass(capture, *, method: MethodOption = "auto", drive: str | int | None = None,
                response: str | int | None = None, fix: Mapping[str, float] | None = None,
                guess: Mapping[str, float] | None = None, drive_duty: float | None = None,
                time_domain: bool = False, drive_edges: DriveEdges = "auto") -> FitResult:
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
    drive_edges : {"auto", "sharp", "band-limited"}
        Two-channel only: how the drive was sampled. "sharp" (edges within a sample, no anti-alias
        filter: the first-order-hold model), "band-limited" (behind an anti-alias filter: H(j·2πkf),
        in the time domain the simulation of the 1/sinc²-pre-filtered drive), "auto" decided from the
        drive (:mod:`benchfit.fit.edges`; a non-periodic drive is taken as sharp); the choice, its
        evidence and, with ``time_domain``, the simulation used are in ``result.adequacy["drive_edges"]``.

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
    fix_specs = fixed_specs(fix)
    fix_d, guess_d = check_parts({n: fv.value for n, fv in fix_specs.items()}, guess, where)
    fix_specs = {n: fix_specs[n] for n in fix_d}
    if drive_duty is not None and not (0.0 < float(drive_duty) < 1.0):
        raise FitError(f"drive_duty: {drive_duty!r} is not between 0 and 1 (the duty cycle is high "
                       "time / period) — pass e.g. drive_duty=0.5")
    if drive_edges not in get_args(DriveEdges):
        raise FitError(f"drive_edges {drive_edges!r}: unknown — use one of {', '.join(get_args(DriveEdges))}")
    if method == "auto":
        method = "two-channel" if cap.n_channels >= 2 else "one-channel"
    if method == "two-channel":
        if cap.n_channels < 2:
            raise FitError(f"{where}: two-channel fitting needs the drive and the output, but the "
                           "capture has one channel — use method='one-channel'")
        di, ri = pick_channels(cap, drive, response)
        return _two_channel(cap, di, ri, fix_d, guess_d, time_domain, fix_specs, drive_edges)
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
                 time_domain: bool, fix_specs: Mapping[str, FixedValue] | None = None,
                 drive_edges: DriveEdges = "auto") -> FitResult:
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
            return _aperiodic(cap, x, y, di, ri, fix, guess, drive_edges)
        raise FitError(f"{where}: drive channel {cap.channel_names[di]!r} has no periodic content — "
                       "capture at least a few periods of the drive, use time_domain=True for a "
                       "non-periodic drive, or use fit_ringdown()")
    f = tone.frequency_hz
    kmax = max(1, min(MAX_ORDER, int(math.floor((0.5 * fs - 1e-9) / f))))
    # the estimate's own noise moves every k·f the model is evaluated at: an input of the budget
    f_spec = _frequency_spec(f, tone.frequency_u_hz)
    hx_all = noise_rescaled(fit_harmonics(x, fs, f, kmax), x, fs)
    # a periodic drive is explained by its harmonics: require 90 % of its variance
    var_x = float(np.sum((x - x.mean()) ** 2))
    if var_x <= 0 or hx_all.rss > 0.1 * var_x:
        if time_domain:
            return _aperiodic(cap, x, y, di, ri, fix, guess, drive_edges)
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
    xk = hx.phasors
    hk, cov = _ratio(hx, hy)
    fk = orders * f
    w = whitening(cov)
    u_abs = _abs_u(hk, cov)
    edges = _edges(x, fs, f, drive_edges, orders, hk, u_abs)
    model_h = _model_of(edges["drive_edges"], fs)
    t_spec = _timing_spec(edges, x, fs, f)

    def residual(v: dict[str, float]) -> np.ndarray:
        fv = fk * v.get("f_scale", 1.0)
        h = v.get("gain_ratio", 1.0) * model_h(fv, parts_of(v))
        if "drive_delay" in v:  # the drive's edges later than the model reads them (an input, never fitted)
            h = h * np.exp(-2j * math.pi * fv * v["drive_delay"])
        return whiten(w, hk - h)

    ratio, ratio_note = channel_gain_ratio(cap, di, ri)
    w0, q, b0 = grid_start(fk, hk, np.sqrt(0.5 * (cov[:, 0, 0] + cov[:, 1, 1])))
    start = start_parts(w0, q, b0, fix, guess)
    fix_g = {**fix, "gain_ratio": 1.0}
    values, ident, fixed, folded, warnings, ok, msg, alts = solve(residual, start, fix_g)
    comparison, parts = None, PARAMETER_NAMES
    if "Rp" not in fix:
        comparison, chosen = compare_core_loss(residual, values, ident, fixed, fix_g)
        if chosen is not None and comparison is not None:
            refit = solve(residual, chosen, fix_g, parts=PART_NAMES)
            if "Rp" in refit[1].undetermined and not {"L", "C"} <= set(refit[1].undetermined):
                # as in the one-channel fit: a core loss the data call for but cannot separate from the
                # other losses (typically with the load unknown) is not reported; the plain model is kept
                warnings = core_loss_not_separated(comparison, warnings,
                                                   "the plain model is kept, its uncertainties Birge-scaled",
                                                   "measure the choke's loss (or Q) on its own, or fix Rload, "
                                                   "to split it")
            else:
                values, ident, fixed, folded, warnings, ok, msg, alts = refit
                warnings = list(warnings) + [comparison["note"]]
                parts = PART_NAMES
    fixed.pop("gain_ratio", None)
    if cap.units[di] != cap.units[ri] or "FS" in (cap.units[di], cap.units[ri]):
        warnings = list(warnings) + [
            f"{cap.channel_names[ri]}: drive and output are not both calibrated in volts "
            f"({cap.units[di]}, {cap.units[ri]}), so a gain difference between the inputs looks like "
            "loss in the load — calibrate the inputs, or fix Rload (fix={'Rload': …})"]
    if ratio_note:
        warnings = list(warnings) + [ratio_note]
    marg, alts_base, gain_fitted = None, [], False
    nuis = () if time_domain else _nuisances(values, fix, ident, folded, alts)
    residual_m = _with_gain_prior(residual, ratio)
    # with the load free, whether the data determine it is decided with the gain ratio fitted (held at 1,
    # the DC level alone seems to pin a light load)
    load_free = not time_domain and "Rload" not in fix and bool({"L", "C"} & set(fix)) \
        and all(math.isfinite(v) for v in figures_of(values).values())
    if nuis or load_free:
        # a light load shows in H at parts in 10⁴, so f is refined first with every order used: a square
        # drive's harmonics above the ninth, left out of the tone model, pull its estimate (135 ppm on a
        # 15-period record: H_k off by parts in 10³ near a sharp resonance, and χ²ᵣ ≈ 6 on a unit that
        # the model describes exactly). The base fit above keeps its f: refined there, it moves the core-loss
        # F-test of exact-model captures with sharp edges across its p < 0.001 threshold (left for later)
        # On the output: behind the low-pass it has almost no harmonics left to pull the estimate (the
        # drive's with all 49 orders is still 8 ppm off, which biases Q by 2–3 of its u), and its
        # fundamental is the strongest line in the capture; the drive when the output is weak
        fine = fit_tone(y, fs, n_harmonics=min(kmax, 15), frequency_hz=f)
        if fine is None or not fine.amplitudes[0] > SIGNIFICANCE * fine.amplitudes_u[0]:
            fine = fit_tone(x, fs, n_harmonics=kmax, frequency_hz=f) if kmax > 9 else None
        if fine is not None and abs(fine.frequency_hz - f) < 1e-3 * f:
            f = fine.frequency_hz
            f_spec = _frequency_spec(f, fine.frequency_u_hz)
            hx, hy, hk, cov = _harmonic_h(x, y, fs, f, kmax, keep)
            xk, fk = hx.phasors, orders * f
            w = whitening(cov)
            u_abs = _abs_u(hk, cov)
            residual_m = _with_gain_prior(residual, ratio)  # residual reads hk, w, fk from this scope
            # what the data leave open is decided again at this f (an ESR folded at the coarse f may not be)
            z0 = math.sqrt(values["L"] / values["C"])
            st = {k: (v if v > 0 else 1e-3 * z0) for k, v in values.items() if k in parts}
            # with the gain ratio fitted under its prior, so its ±3 % counts in what the data determine
            values, ident, fixed, folded, warnings2, ok, msg, alts = solve(
                residual_m, st, fix, {"gain_ratio": (1.0, 0.5, 2.0)}, parts=parts, max_nfev=600)
            gain_fitted = True
            warnings = [m for m in warnings if not m.startswith("Resr:")] + [m for m in warnings2 if m not in warnings]
            nuis = _nuisances(values, fix, ident, folded, alts)
    if nuis:
        # integrated out over stated ranges (fit.marginal), the channel gain ratio fitted with a prior
        try:
            marg = marginalise(residual_m, values, fix, nuis, {"gain_ratio": (1.0, 0.5, 2.0)}, parts,
                               start_for=_valley_start(values))
        except ValueError:  # no grid point has finite figures (no resonance: the damped frequency is
            marg = None     # undefined); the base fit's linearised treatment stays
    if marg is not None:
        alts_base = list(alts)  # the base fit's equally good solutions, checked against the posterior
        held = {q.name: marg.best[q.name] for q in nuis}
        free = tuple(n for n in parts if n not in fix and n not in held)
        values, names, jac, chi2_red, ok, msg = fit_log_parameters(
            residual_m, marg.best, free, {**fix, **held}, {"gain_ratio": (marg.best["gain_ratio"], 0.5, 2.0)})
        ident = identify(jac, names, chi2_red)
        fixed, folded, alts = dict(fix), [], []
        warnings = [m for m in warnings if not m.startswith("Resr:")]  # the fold is replaced by the marginal
        specs = {**input_specs(fix_specs or {}, fixed, folded), **f_spec, **t_spec}  # the gain ratio is inside the fit now
        sens = propagate(residual_m, values, ident, specs)
    elif gain_fitted:  # refined, and the data determine everything at the refined f
        specs = {**input_specs(fix_specs or {}, fixed, folded), **f_spec, **t_spec}
        sens = propagate(residual_m, values, ident, specs)
    else:
        specs = {**input_specs(fix_specs or {}, fixed, folded, ratio), **f_spec, **t_spec}
        sens = propagate(residual, {**values, "gain_ratio": 1.0}, ident, specs)
    h_model = values.get("gain_ratio", 1.0) * model_h(fk, parts_of(values))
    n_show = min(x.size, int(math.ceil(4 * fs / f)))
    t = np.arange(n_show) / fs
    y_model = hy.dc + sum((xk[i] * h_model[i] * np.exp(1j * orders[i] * 2 * math.pi * f * t)).real
                          for i in range(orders.size))
    curves = FitCurves(time_s=t, data=y[:n_show].copy(), model=np.asarray(y_model),
                       harmonic_hz=fk, h_measured=hk, h_model=h_model, h_measured_u=u_abs,
                       residual=np.concatenate([(hk - h_model).real, (hk - h_model).imag]))
    quality = quality_complex(hk, h_model)
    noise = None
    if time_domain:
        floors = (channel_floor(hy_all, y, fs), channel_floor(hx_all, x, fs))
        values, ident, fixed, folded2, warn2, ok, msg, alts, curves, quality, td_res, noise = _time_domain(
            x, y, fs, values, fixed, fix, floors, curves, edges["drive_edges"], _PERIODIC_NOISE, parts)
        edges = {**edges, "time_domain": _td_record(edges["drive_edges"], values, fs, fk, hk, u_abs)}
        folded = sorted(set(folded) | set(folded2))
        warnings = warnings + [m for m in warn2 if m not in warnings]
        specs = {**input_specs(fix_specs or {}, fixed, folded, ratio), **t_spec}
        sens = propagate(td_res, {**values, "gain_ratio": 1.0}, ident, specs)
    result = assemble(cap, "two-channel", values, ident, fix, folded, warnings, curves, quality, ok, msg,
                      alts, specs, sens, noise.dof if noise is not None else None)
    from dataclasses import replace

    extra = {"drive_edges": edges}
    if noise is not None:
        extra["noise"] = noise.to_dict(cap.units[ri])
    if comparison is not None:
        extra["model_comparison"] = {k: v for k, v in comparison.items() if k != "note"}
    result = replace(result, adequacy={**result.adequacy, **extra})
    if marg is None:
        return result
    result = apply_marginal(result, marg)
    return _other_modes(result, residual_m, alts_base, marg, fix, parts)


def _other_modes(result: FitResult, residual_m, alternatives: list, marg, fix: Mapping[str, float],
                 parts: tuple[str, ...]) -> FitResult:
    """Say so where an equally good solution lies outside the grid's posterior (a missed mode).

    The grid over the load range has 15 points per pass and refines around the posterior's bulk, so a
    second, narrow minimum (a heavy load trades places with Rs: 12 Ω with 220 Ω or 41 Ω with 725 Ω fit
    equally well) can fall between its points. Each equally good solution the base fit found
    (:func:`benchfit.fit.identify.solve`) is refitted with the gain prior; one within Δχ² = 4·s (s the
    Birge factor, the same Δχ² < 4 as that search) whose load differs from the reported value makes the
    load and Rs not determined, and every figure that differs between the two gets half the spread as
    a rectangular row (or is not determined beyond a 5 % difference, as for the base fit's solutions).
    """
    from dataclasses import replace

    from benchfit.uncertainty import Contribution

    s = max(1.0, marg.chi2_red)
    best = float(np.min(marg.chi2))
    free = tuple(n for n in parts if n not in fix)
    modes = []
    for alt in alternatives:
        try:
            v, *_ = fit_log_parameters(residual_m, alt, free, dict(fix),
                                       {"gain_ratio": (marg.best["gain_ratio"], 0.5, 2.0)}, max_nfev=600)
        except Exception:  # a start that does not converge says nothing about a second mode
            continue
        r = residual_m(v)
        rl = result.parameters["Rload"].value
        if float(r @ r) - best < 4.0 * s and (rl is None or abs(v["Rload"] - rl) > 0.1 * rl):
            modes.append(v)
    if not modes:
        return result
    params = dict(result.parameters)
    for name in ("Rs", "Rload"):
        p = params[name]
        if not p.fixed:
            params[name] = replace(p, stderr=None, u_fit=None)
    derived = dict(result.derived)
    for name, dv in list(derived.items()):
        if dv.value is None or dv.stderr is None:
            continue
        other = [figures_of(m).get(name) for m in modes]
        diff = max((abs(o - dv.value) for o in other if o is not None and math.isfinite(o)), default=0.0)
        if diff > 0.05 * abs(dv.value):
            derived[name] = DerivedValue(dv.value, None, None, dv.budget)
        elif diff > dv.stderr:
            b = dv.budget.with_rows(Contribution("other equally good solution (half the spread)", "B", "rectangular",
                                                 diff / 2, dv.budget.unit, 1.0)) if dv.budget is not None else None
            derived[name] = DerivedValue(dv.value, math.hypot(dv.stderr, diff / 2), dv.u_fit, b, dv.conditional_on)
    shown = "; or ".join(f"Rs = {m['Rs']:.3g} Ω, Rload = {m['Rload']:.3g} Ω" for m in modes)
    note = (f"Rs, Rload: another solution fits these data as well ({shown}) — they are not determined; "
            "measuring the load resistance (then fix={'Rload': …}) would pick one")
    return replace(result, parameters=params, derived=derived, warnings=tuple(result.warnings) + (note,))


def _nuisances(values: Mapping[str, float], fix: Mapping[str, float], ident, folded: list[str],
               alternatives: list) -> tuple[Nuisance, ...]:
    """The parts a two-channel capture did not pin, with their stated plausible ranges.

    With the drive measured the data determine H itself, so a load is usually seen — through the DC
    gain only as far as the channels' gain ratio is known (±3 % unless calibrated, while a 10 kΩ load
    behind 12 Ω takes 0.1 %), and through the damping it adds, Z0²/Rload beside Rs. A light load is
    therefore often traded against Rs (undetermined, or two equally good solutions), and the ESR shows
    only through the magnitude of its zero (its information ∝ ESR², so it is folded at 0 when small).
    Those are integrated out (:mod:`benchfit.fit.marginal`) over the same ranges as in the
    output-only fit; a part the data determine stays fitted. The scale (L or C) must be known.
    """
    if not ({"L", "C"} & set(fix)) or {"L", "C"} <= set(ident.undetermined):
        return ()
    figs = figures_of(values)
    total = figs["total_loss_ohm"]
    if not (math.isfinite(total) and total > 0) or not all(math.isfinite(v) for v in figs.values()):
        return ()  # no resonance (the damped frequency is undefined): the grid has nothing to weigh
    und = set(ident.undetermined) | set(folded)
    if alternatives:  # two equally good solutions: the losses between Rs and the load
        und |= {"Rs", "Rload"}
    out = []
    load = "Rload" not in fix and bool({"Rload", "Rs"} & und)
    # the ESR only where the load is settled: with the load open too, the ESR is flagged with it (it has a
    # share of the same near-null direction) and is refitted at every grid point of the load instead
    if "Resr" not in fix and "Resr" in und and not load:
        out.append(Nuisance("Resr", 0.0, total, "value", f"0…{total:.3g} Ω (rectangular)",
                            "the data's own bound: the ESR cannot exceed the total loss that damps the resonance",
                            "an ESR meter on the capacitor would pin it (then fix={'Resr': …})"))
    if load:
        out.append(load_nuisance(values, total))
    return tuple(out)


def _edges(x: np.ndarray, fs: float, f: float, choice: DriveEdges, orders: np.ndarray, hk: np.ndarray,
           u_abs: np.ndarray) -> dict:
    """The sampling model to use (given, or decided from the drive) and its evidence, for the adequacy record.

    Also how much the choice can matter here: the two models differ by about (π·k·f/fs)²/3 at the highest
    kept order, compared with that order's relative u of |H_k|. Far below it (``effect_over_u`` ≪ 1) the
    choice is immaterial to the fit.
    """
    ev = classify_drive_edges(x, fs, f).to_dict()
    if choice != "auto":
        ev = {**ev, "drive_edges": choice, "decided": True, "reason": f"given (drive_edges={choice!r}); "
              f"the drive's own evidence says {ev['drive_edges']}: {ev['reason']}"}
    top = int(np.argmax(orders))
    effect = (math.pi * float(orders[top]) * f / fs) ** 2 / 3.0
    rel_u = float(u_abs[top] / max(abs(hk[top]), 1e-300))
    return {**ev, "choice": choice, "model_difference_rel": effect,
            "effect_over_u": effect / rel_u if rel_u > 0 else None}


def _model_of(kind: str, fs: float):
    """H_k's model: the first-order-hold response for sharp edges, H(j·2πkf) for a band-limited drive."""
    if kind == "band-limited":
        return transfer
    return lambda freq, p: sampled_transfer(freq, p, fs)


def _frequency_spec(f: float, f_u: float | None) -> dict[str, InputSpec]:
    """The fundamental's estimate as an input of the budget (its u moves every k·f of the model)."""
    if not f_u:
        return {}
    ppm = 1e6 * float(f_u) / f
    return {"f_scale": InputSpec("f_scale", FixedValue(1.0, float(f_u) / f, "normal", f"u = {ppm:.2g} ppm",
                                                       "the fundamental's least-squares fit (benchfit.measurement.tone)"),
                                 "1", f"fundamental frequency estimate (u = {ppm:.2g} ppm, normal)", "frequency")}


def _timing_spec(edges: dict, x: np.ndarray, fs: float, f: float) -> dict[str, InputSpec]:
    """The sharp drive's edge timing within a sample as an input of the budget (:func:`benchfit.fit.edges.edge_timing`).

    Records the timing in ``edges`` (under "edge_timing"); empty for a band-limited drive (its samples carry
    the edges' timing) and for edges resolved by the sampling.
    """
    if edges["drive_edges"] != "sharp":
        return {}
    timing = edge_timing(x, fs, f)
    if timing is None or timing.u_s <= 0:
        return {}
    edges["edge_timing"] = timing.to_dict()
    us = format_quantity(timing.u_s, "s", 2)
    text = f"u = {timing.u_samples:.2g} sample = {us}"
    fv = FixedValue(0.0, math.sqrt(3.0) * timing.u_s, "rectangular", text,
                    "the drive's edges fall between samples, where within is not known: rms over the first "
                    f"edge's phase of the mean timing error of {timing.n_edges} edges (benchfit.fit.edges)")
    return {"drive_delay": InputSpec("drive_delay", fv, "s", f"drive edge timing within a sample ({text}, rectangular)",
                                     "timing")}


def _harmonic_h(x: np.ndarray, y: np.ndarray, fs: float, f: float, kmax: int, keep: np.ndarray):
    """Both channels' harmonic fits at f (all orders below kmax), the kept orders' H_k and its covariance."""
    from benchfit.measurement.tone import fit_harmonics

    hx = subset(noise_rescaled(fit_harmonics(x, fs, f, kmax), x, fs), keep)
    hy = subset(noise_rescaled(fit_harmonics(y, fs, f, kmax), y, fs), keep)
    return (hx, hy) + _ratio(hx, hy)


def _ratio(hx, hy) -> tuple[np.ndarray, np.ndarray]:
    """H_k = Y_k/X_k of the kept orders and its (Re, Im) covariance (first order in both channels' noise)."""
    xk, yk = hx.phasors, hy.phasors
    cov = complex_mult_cov(1.0 / xk, hy.phasor_cov) + complex_mult_cov(-yk / xk ** 2, hx.phasor_cov)
    return yk / xk, cov


def _abs_u(hk: np.ndarray, cov: np.ndarray) -> np.ndarray:
    """Standard uncertainty of |H_k| from the (Re, Im) covariance."""
    d = np.stack([hk.real, hk.imag], 1) / np.abs(hk)[:, None]
    return np.sqrt(np.maximum(np.einsum("ki,kij,kj->k", d, cov, d), 0.0))


def _valley_start(values: Mapping[str, float]):
    """Start values of Rs and C for a grid point's load (and ESR) that keep the fitted resonance.

    The response's denominator, normalised to 1 at DC, is 1 + a1·s + a2·s² with (Rload = 1/g)
    a1 = (L·g + C·(1 + g·(Rs + ESR)) ... ) — exactly: a1 = [g·L + C·(Rs + ESR + g·Rs·ESR)]/(1 + g·Rs),
    a2 = L·C·(1 + g·ESR)/(1 + g·Rs). Holding the base fit's a1 and a2 and solving for Rs and C gives the
    start on the valley of equally good fits; the load can trade places with Rs far beyond the reach of
    the previous grid point's solution (a heavy load: two solutions, e.g. 12 Ω with 220 Ω or 41 Ω with
    725 Ω, differ by Δχ² < 1).
    """
    L0 = float(values["L"])

    def coeffs(rs: float, c: float, e: float, g: float) -> tuple[float, float]:
        d = 1.0 + g * rs
        return (g * L0 + c * (rs + e + g * rs * e)) / d, L0 * c * (1.0 + g * e) / d

    g0 = 0.0 if math.isinf(values["Rload"]) else 1.0 / float(values["Rload"])
    a1, a2 = coeffs(float(values["Rs"]), float(values["C"]), float(values["Resr"]), g0)

    def start(fx: Mapping[str, float]) -> dict[str, float]:
        r = float(fx.get("Rload", values["Rload"]))
        g = 0.0 if math.isinf(r) else 1.0 / r
        e = float(fx.get("Resr", values["Resr"]))
        # from a2: C = a2·(1 + g·Rs)/(L·(1 + g·e)); into a1, linear in Rs:
        # a1·(1 + g·Rs)·L·(1 + g·e) = g·L²·(1 + g·e) + a2·(1 + g·Rs)·(Rs + e + g·Rs·e) — quadratic in Rs
        k = a2 / (L0 * (1.0 + g * e))
        # k·(1 + g·Rs)·(Rs·(1 + g·e) + e) − a1·(1 + g·Rs) + g·L0 = 0
        qa = k * g * (1.0 + g * e)
        qb = k * (1.0 + g * e) + k * g * e - a1 * g
        qc = k * e - a1 + g * L0
        if abs(qa) < 1e-300:
            rs = -qc / qb if qb != 0 else math.nan
        else:
            disc = qb * qb - 4 * qa * qc
            rs = (-qb + math.sqrt(disc)) / (2 * qa) if disc >= 0 else math.nan
        if not (math.isfinite(rs) and rs > 0):
            return {}
        return {"Rs": rs, "C": k * (1.0 + g * rs)}

    return start


def _with_gain_prior(residual, ratio: FixedValue):
    """The residual with the channel gain ratio as a fitted parameter and its prior as one more point.

    The ratio's stated uncertainty (a rectangular ±3 % unless the inputs are calibrated) enters as a
    normal prior of the same standard uncertainty, (g − 1)/u: the usual Gaussian stand-in for a Type B
    input whose only known moment is its standard uncertainty (GUM 4.3.7; the approximation is that of a
    fit with a prior term, common practice, no source). Held at 1 instead, the DC gain would read a
    light load to 0.1 % although the channels agree only to a few per cent.
    """
    u = float(ratio.u) if ratio.u else 0.03 / math.sqrt(3.0)

    def residual_m(v: dict[str, float]) -> np.ndarray:
        return np.append(residual(v), (v.get("gain_ratio", 1.0) - ratio.value) / u)

    return residual_m


def _aperiodic(cap, x: np.ndarray, y: np.ndarray, di: int, ri: int, fix: dict[str, float],
               guess: dict[str, float], drive_edges: DriveEdges = "auto") -> FitResult:
    """Time-domain fit for a drive that is not periodic, started from H = P_xy/P_xx (Welch).

    The drive's edges cannot be classified without its harmonics (:mod:`benchfit.fit.edges`), so the
    first-order hold is assumed unless ``drive_edges`` says otherwise; the record says which.

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
    kind = "sharp" if drive_edges == "auto" else drive_edges
    how = (f"given (drive_edges={drive_edges!r})" if drive_edges != "auto" else
           "the drive is not periodic, so its edges are not classified; first-order hold assumed (sharp edges)")
    values, ident, fixed, folded, warnings, ok, msg, alts, curves, quality, td_res, noise = _time_domain(
        x, y, fs, start, dict(fix), fix, (difference_floor(y), difference_floor(x)), curves, kind,
        _APERIODIC_NOISE)
    ratio, ratio_note = channel_gain_ratio(cap, di, ri)
    if ratio_note:
        warnings = list(warnings) + [ratio_note]
    specs = input_specs({}, fixed, folded, ratio)
    sens = propagate(td_res, {**values, "gain_ratio": 1.0}, ident, specs)
    result = assemble(cap, "two-channel", values, ident, fix, folded, warnings, curves, quality, ok, msg,
                      alts, specs, sens, noise.dof)
    from dataclasses import replace

    edges = {"drive_edges": kind, "decided": drive_edges != "auto", "reason": how, "choice": drive_edges,
             "time_domain": _td_record(kind, values, fs, fk, h, u)}
    return replace(result, adequacy={**result.adequacy, "drive_edges": edges, "noise": noise.to_dict(cap.units[ri])})


def _td_record(kind: str, values: Mapping[str, float], fs: float, fk: np.ndarray, hk: np.ndarray,
               u_abs: np.ndarray) -> dict:
    """Which simulation the time-domain fit used and, for a band-limited drive, what its image step removed.

    ``images_rel`` is the largest |H / prefiltered_transfer − 1| at the frequencies ``fk`` for the fitted
    parts: how far the pre-filtered first-order hold alone would be from H(j·2πf) (the hold's images and
    the pre-filter's design error, :func:`benchfit.model.filter.simulate_band_limited`);
    ``images_over_u`` the largest ratio of that to the relative u of the measured |H_k|.
    """
    if kind != "band-limited":
        return {"simulation": "first-order hold (drive linear between samples)", "samples_dropped_each_end": 0}
    p = parts_of(values)
    err = np.abs(transfer(fk, p) / prefiltered_transfer(fk, p, fs) - 1.0)
    rel_u = u_abs / np.maximum(np.abs(hk), 1e-300)
    return {"simulation": "first-order hold of the drive pre-filtered by 1/sinc², the hold's images removed "
                          "on the record's DFT grid (band-limited drive)",
            "samples_dropped_each_end": PREFILTER_TAPS // 2,
            "images_rel": float(np.max(err)) if err.size else None,
            "images_over_u": float(np.max(err / rel_u)) if err.size and np.all(rel_u > 0) else None}


def _time_domain(x, y, fs, values, fixed, user_fix, floors, curves, kind: str = "sharp", how: str = "",
                 parts: tuple[str, ...] = PARAMETER_NAMES):
    """Refine by fitting the exactly discretised simulation of the measured drive to the output.

    ``kind`` "band-limited": the drive is simulated as band-limited (:func:`benchfit.model.filter.
    simulate_band_limited`), whose response is the continuous H(j·2πf); the samples at the ends that its
    pre-filter does not cover are left out of the fit.

    The residual is whitened by the spectrum of the noise a right model leaves (:mod:`benchfit.fit.tdnoise`):
    ``floors`` are the output's and the drive's white levels (σ², relative u), estimated from the channels as
    ``how`` says, the drive's passed through the simulation's response at the start values. The spectrum is
    computed again at the fitted parts and the fit repeated from there when it moved (a start far from the
    result). Also returns the :class:`benchfit.fit.tdnoise.ResidualNoise` used. ``parts``: the model's parts
    (with "Rp" when the harmonic fit chose the core-loss model, which the refinement keeps).
    """
    trim = PREFILTER_TAPS // 2 if kind == "band-limited" else 0
    y = y[trim:y.size - trim]
    n = y.size
    floor = (1e-12 * max(float(np.max(np.abs(y))), 1e-30)) ** 2
    grid = np.fft.rfftfreq(n, 1.0 / fs)

    def noise_at(v: Mapping[str, float]):
        p = parts_of(v)
        resp = transfer(grid, p) if kind == "band-limited" else sampled_transfer(grid, p, fs)
        return combine(floors[0], floors[1], v.get("gain_ratio", 1.0) * resp, n, how, floor)

    def drive_response(p) -> np.ndarray:
        return simulate_band_limited(x, fs, p)[0] if kind == "band-limited" else simulate(x, fs, p)

    def model(v: dict[str, float]) -> np.ndarray:
        p = parts_of(v)
        sim = v.get("gain_ratio", 1.0) * drive_response(p)
        if v.get("drive_delay"):  # the drive later by τ: sim(t − τ), to first order (an input, never fitted)
            sim = sim - v["drive_delay"] * fs * np.gradient(sim)
        basis = free_response_basis(p, fs, n)
        design = np.stack([np.ones(n), basis[0], basis[1]], axis=1)
        coef, *_ = np.linalg.lstsq(design, y - sim, rcond=None)
        return sim + design @ coef

    def residual(v: dict[str, float]) -> np.ndarray:
        return whiten_by_spectrum(y - model(v), spectrum)

    start = {k: (v if v > 0 else 1e-3) for k, v in values.items()}
    fix_now = {k: v for k, v in fixed.items()}
    noise, spectrum = noise_at({**start, **fix_now})
    values, ident, fixed, folded, warnings, ok, msg, alts = solve(residual, start, dict(fix_now), parts=parts)
    again, spectrum_again = noise_at(values)
    if float(np.max(np.abs(spectrum_again / spectrum - 1.0))) > _SPECTRUM_MOVED:
        noise, spectrum = again, spectrum_again
        values, ident, fixed, folded, warnings, ok, msg, alts = solve(
            residual, {k: (v if v > 0 else 1e-3) for k, v in values.items()}, dict(fix_now), parts=parts)
    ym = model(values)
    response = (lambda freq, p, rate: transfer(freq, p)) if kind == "band-limited" else sampled_transfer
    curves = FitCurves(time_s=(np.arange(n) + trim) / fs, data=y.copy(), model=ym,
                       harmonic_hz=curves.harmonic_hz, h_measured=curves.h_measured,
                       h_model=response(curves.harmonic_hz, parts_of(values), fs),
                       h_measured_u=curves.h_measured_u, residual=y - ym)
    folded = [k for k in fixed if k not in user_fix and k in PART_NAMES]  # undetermined, held at 0
    return values, ident, fixed, folded, warnings, ok, msg, alts, curves, quality_real(y, ym), residual, noise
