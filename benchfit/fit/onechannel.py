"""One-channel lc-lowpass fit: only the filter's output was captured (the sound-card case).

The drive is modelled as a rectangular wave at the measured fundamental f, high for a
fraction D of each period (given with ``drive_duty`` or fitted), with unknown gain G (an
AC-coupled capture has unknown scale and no DC) and unknown time offset τ. Its phasors are
P_k(D) = (2/(kπ))·sin(kπD)·e^{−jkπD} (REFERENCES §5), so the output phasors are modelled as

    Y_k = G · P_k(D) · e^{−jkωτ} · H(jkω)

and fitted (whitened complex residuals) for k = 1…K, K being the highest order that stands
above the noise. G is solved linearly at every step (variable projection). Because G is
free, only the *ratios* |H(kω)|/|H(ω)| and the relative phases matter: the data determine
the shape of H — resonant frequency, Q and the ESR zero — but not the impedance scale
(one part must be fixed, usually L) and hardly the load. A rectangular wave of duty D and
its inverse of duty 1 − D differ only in sign and timing, so D is reported as the smaller
of the two. When the capture's input coupling time constant is known
(``Capture.calibration.coupling_tau_s``) the phasors are corrected for that high-pass first, and its
start transient (a coupling that starts from rest with the record) is fitted with the harmonics
(:func:`benchfit.fit.common.harmonics_after_start_transient`).

A timer whose output resistance differs high and low (r_high ≠ r_low) is a switched, time-varying
source, whose output is not G·P_k(D)·H(jkω): the fit compares the model above with the exact
periodic steady state of the switched source (:mod:`benchfit.fit.asymmetry`,
:mod:`benchfit.model.switched`; F-test) and, when the data call for it, fits the asymmetry
r_high − r_low (reported as ``drive_asymmetry_ohm``) while Rs keeps the time average. The switched
circuit's output can then also tell Rs from the load; where the identifiability analysis finds
them apart they are fitted instead of integrated out (below). The drive's levels need no model:
a timer's low level above ground and high level below the supply (a bipolar stage's VOL, VOH)
only scale the harmonics, switched source or not (:mod:`benchfit.model.switched`), and G takes
that scale.

With L (or C) known the shape still leaves two parts open: Rs and the load share the damping
along a direction the output does not see, and the ESR shows only through the magnitude of its
zero (information ∝ ESR²), where a core loss in the choke looks the same. Both are integrated
out over stated ranges (:mod:`benchfit.fit.marginal`) unless given with ``fix``: Rs, the ESR and
the load are then reported as not separated, and ``total_loss_ohm`` (2·L·α, the series resistance
of the same damping: Rs + ESR + L/(C·Rload), with a core loss's L/(C·Rp)) is the loss the data do
determine. The core-loss comparison (F-test, AIC/BIC) runs as in the two-channel fit; Rp is
fitted only when the data support it and determine it. Otherwise a core loss is integrated out
too, as a share of ESR + L/(C·Rp), which is all the output shows of the two to first order
(:func:`_core_loss_nuisances`), and Rp is reported as not separated from the ESR.
"""

from __future__ import annotations

import math
from typing import Mapping

import numpy as np

from benchfit.errors import FitError
from benchfit.model.filter import (PARAMETER_NAMES, PART_NAMES, rectangular_phasors,
                                   rectangular_phasors_duty_derivative, transfer_at, transfer_log_derivatives_at,
                                   transfer_powers)
from benchfit.fit.asymmetry import NAME as ASYMMETRY
from benchfit.fit.budgets import (assemble, compare_core_loss, core_loss_not_separated, input_specs, propagate,
                                  source_name)
from benchfit.fit.common import (MAX_ORDER, SIGNIFICANCE, check_not_silent, complex_mult_cov,
                                 harmonics_after_start_transient, parts_of, quality_complex, start_parts, subset,
                                 whiten, whitening)
from benchfit.fit.asymmetry import BOUND as ASYMMETRY_BOUND
from benchfit.fit.asymmetry import FIGURE as ASYMMETRY_FIGURE
from benchfit.fit.asymmetry import asymmetric_phasors, asymmetry_ohm, compare_drive_asymmetry, marginal_asymmetry, \
    with_asymmetry
from benchfit.fit.identify import fit_log_parameters, identify, solve
from benchfit.fit.marginal import Nuisance, figures_of, load_nuisance, marginalise
from benchfit.fit.marginal import apply as apply_marginal
from benchfit.fit.result import FitCurves

__all__ = ["fit_one_channel", "OutputResidual"]

_DUTY_MIN = 0.02
#: a subharmonic candidate needs this many periods in the record ...
_MIN_SUB_PERIODS = 8.0
#: ... and at least this fraction of the strongest line's amplitude
_MIN_SUB_RATIO = 0.01
#: a harmonic weaker than this fraction of the fundamental (−100 dBc) is below the converter's own
#: distortion and quantisation (sound-card ADCs reach about −90…−110 dB THD, from memory), so it
#: says nothing about the filter: a capture with no harmonic above it is treated as a pure sine
_MIN_HARMONIC_REL = 1e-5
#: the smallest standard uncertainty a phasor is given, relative to the fundamental: about one
#: code step of a 24-bit capture (2⁻²³ ≈ 1.2e-7 of full scale). A noise-free (synthetic, float)
#: file otherwise yields zero uncertainties, and the whitened fit divides by them
_U_FLOOR_REL = 1e-7


def _turned(x: np.ndarray, k: np.ndarray) -> np.ndarray:
    """x_k·(x₁*/|x₁|)^k along the last axis (the phasors turned so that the first one is real)."""
    return x * (np.conj(x[..., :1]) / np.maximum(np.abs(x[..., :1]), 1e-300)) ** k


def _shape_costs(k: np.ndarray, z: np.ndarray, w: np.ndarray, pk: np.ndarray, r: np.ndarray,
                 q: np.ndarray) -> np.ndarray:
    """:func:`_shape_grid`'s cost Σw|z − g·s^k·N_k|² minus the constant Σw|z|², at the optimal g and sign, over
    f0/f = ``r``, Q = ``q`` and the duties of the rectangular phasors ``pk`` (D, K): shape (R, Q, D).

    M₁ = P₁·H₂(1), so (M₁*/|M₁|)^k = (P₁*/|P₁|)^k·(H₂(1)*/|H₂(1)|)^k and N_k = A_k·B_k with A = H₂ turned by
    its own first phase and B = P turned by its own (:func:`_turned`): the sums over k are then products of an
    (R·Q, K) and a (K, D) matrix instead of sums over an (R, Q, D, K) array
    (tests/fit/test_onechannel_shape_grid.py checks them against the direct sums).
    """
    kr = k[None, None, :] / r[:, None, None]  # (R, 1, K)
    h2 = 1.0 / (1.0 - kr ** 2 + 1j * kr / q[None, :, None])  # (R, Q, K)
    a_turned = _turned(h2, k).reshape(-1, k.size)  # (R·Q, K)
    b_turned = _turned(pk, k)  # (D, K)
    den = (np.abs(a_turned) ** 2) @ (w * np.abs(b_turned) ** 2).T  # Σ w|N_k|², the same for both signs
    out = np.full(den.shape, math.inf)
    for sign in (1.0, -1.0):
        # Σ w·Re(N_k*·s^k·z_k) = Re Σ A_k*·(B_k*·s^k·w·z_k)
        num = (np.conj(a_turned) @ (np.conj(b_turned) * (np.where(k % 2 == 0, sign, 1.0) * w * z)).T).real
        out = np.minimum(out, -num * num / np.maximum(den, 1e-300))  # −2g·num + g²·den at g = num/den
    return out.reshape(r.size, q.size, pk.shape[0])


def _shape_grid(k: np.ndarray, yk: np.ndarray, amp_u: np.ndarray,
                duty: float | None, basins: int = 1) -> list[tuple[float, float, float]]:
    """Coarse starts (f0/f, Q, D) from the output phasors, independent of gain and timing, best first.

    One per valley of the coarse cost along f0/f (its local minima over Q and D), at most ``basins``.

    The timing offset τ cancels in Z_k = Y_k·(Y₁*/|Y₁|)^k, which the model predicts as
    G·s^k·N_k with N_k = M_k·(M₁*/|M₁|)^k, M_k = P_k(D)·H₂(k) and s = sign(G). H₂ is the plain
    two-pole response 1/(1 − (k/r)² + j·k/(r·Q)) with r = f0/f. G is solved in closed form at
    each grid point, for both signs.
    """
    d = np.array([duty]) if duty is not None else np.linspace(_DUTY_MIN, 0.5, 17)
    w = 1.0 / np.maximum(amp_u, 1e-300) ** 2
    rot = np.conj(yk[0]) / max(abs(yk[0]), 1e-300)
    z = yk * rot ** k
    pk = rectangular_phasors(k[None, :], d[:, None])  # type: ignore[arg-type]  # broadcasts: (D, K)

    def costs(r: np.ndarray, q: np.ndarray) -> np.ndarray:
        return _shape_costs(k, z, w, pk, r, q)

    def best_of(r: np.ndarray, q: np.ndarray) -> tuple[float, float, float]:
        c = costs(r, q)
        i, j, l = np.unravel_index(int(np.argmin(c)), c.shape)
        return float(r[i]), float(q[j]), float(d[l])

    step = (40.0 / 0.15) ** (1.0 / 63.0)
    r_coarse = np.geomspace(0.15, 40.0, 64)
    profile = costs(r_coarse, np.geomspace(0.2, 60.0, 24)).min(axis=(1, 2))
    # the valleys along f0/f: the deepest point between each pair of neighbouring drive harmonics (a
    # resonance there leaves the same harmonics below it; the cost peaks where it sits on one). A
    # resonance above the drive frequency and one below it can explain much the same harmonic ratios,
    # and a drive the model does not describe exactly (r_high ≠ r_low) may rank the wrong one first,
    # so the caller may try more than the deepest
    band = np.floor(r_coarse)
    minima = [int(np.flatnonzero(band == b)[np.argmin(profile[band == b])]) for b in np.unique(band)]
    minima.sort(key=lambda i: float(profile[i]))
    # a resonance near a drive harmonic is narrower than the coarse steps (9 % in r): refine
    # around each coarse point, over a wider Q range, so the solver starts in the right valley
    return [best_of(np.geomspace(r_coarse[i] / step ** 2, r_coarse[i] * step ** 2, 41), np.geomspace(0.2, 300.0, 40))
            for i in minima[:max(basins, 1)]]


#: the relative step of a forward difference, √(double-precision ε), as scipy.optimize uses for "2-point"
_FORWARD_STEP = math.sqrt(np.finfo(float).eps)
#: valleys of the shape grid tried when the ideal-drive model does not fit its deepest one
_BASINS = 3
#: the ideal-drive fit is taken as adequate unless its χ² exceeds its degrees of freedom at this level
#: (χ² survival function), the decision level of the model comparisons (fit.asymmetry, fit.budgets)
_ADEQUATE_P = 1e-3


def _ideal_drive_fits(residual, base) -> bool:
    """Does the ideal-drive fit's χ² agree with the noise (χ² test on its degrees of freedom)?"""
    from scipy.special import chdtrc  # χ²'s survival function, as scipy.stats.chi2.sf computes it

    r = residual(base[0])
    dof = max(r.size - len(base[1].names), 1)
    return float(chdtrc(dof, float(r @ r))) >= _ADEQUATE_P


def _deepest_basin(residual, fix: Mapping[str, float], fits: list):
    """Of ideal-drive fits from different valleys of the shape grid, the one to go on from.

    When the ideal drive does not fit, its ranking of the valleys says little: on an ngspice unit with
    r_high/r_low = 25/8 Ω tuned 24 % above the drive frequency (tests/fit/test_onechannel_basins.py) the
    valley below the drive frequency came out 2 % deeper on the grid (its ideal-drive fit 0.5 % lower in
    χ²), and the switched-source refit from there stayed at L = 2.06 H for 0.3 H, its χ² 3·10¹¹ times
    that of the refit from the valley above (noise-free, duty given). So each valley
    is judged by the best the fit's models reach from it: the ideal drive and, unless given as 0, the
    switched source (:func:`benchfit.fit.asymmetry.compare_drive_asymmetry`).

    Returns (extra, the :func:`solve` tuple, the comparison on that valley or None), the comparison
    kept so that :func:`_drive_asymmetry` need not redo it on the same base fit."""
    ranked: list[tuple[float, int]] = []
    compared = []
    for extra, base in fits:
        values, ident = base[0], base[1]
        r = residual(values)
        chi2 = float(r @ r)
        cmp = None
        if ASYMMETRY not in fix and not {"L", "C"} <= set(ident.undetermined):
            ex_now = {n: (values[n], lo, hi) for n, (_, lo, hi) in extra.items()}
            cmp = compare_drive_asymmetry(residual, values, ident.names, ex_now)
            if cmp[0] is not None and cmp[0]["test"].startswith("extra"):
                chi2 = min(chi2, float(cmp[0]["chi2"][1]))
        ranked.append((chi2, len(ranked)))
        compared.append(cmp)
    i = min(ranked)[1]
    return fits[i][0], fits[i][1], compared[i]


def true_fundamental(y: np.ndarray, fs: float, f_peak: float) -> float:
    """The lowest m-th subharmonic (m ≤ 12) of the strongest line that stands out in the spectrum.

    Behind a resonant filter the strongest output line may be a harmonic of the drive (the
    one nearest the resonance), so the fundamental is looked for below it: the Hann-window
    spectrum at f_peak/m must exceed 30× the median level of the neighbouring bins.
    """
    from benchfit.measurement.tone import fit_harmonics

    n = y.size
    spec = np.abs(np.fft.rfft((y - y.mean()) * np.hanning(n)))
    a_peak = float(fit_harmonics(y, fs, f_peak, orders=np.array([1])).amplitudes[0])
    best = f_peak
    for m in range(2, 13):
        fm = f_peak / m
        b = fm * n / fs
        if b < _MIN_SUB_PERIODS:
            # a drive fundamental shows many periods in the record; a few cycles at a very low
            # frequency are input-coupling drift or leakage from DC, not a subharmonic
            break
        # behind a low-pass the fundamental keeps at least ~1/(k·Q) of the strongest line
        # (k ≤ 12, Q ≲ 30): a candidate far weaker than 1 % of it is noise or a mains spur
        a_m = float(fit_harmonics(y, fs, fm, orders=np.array([1])).amplitudes[0])
        if a_m < _MIN_SUB_RATIO * a_peak:
            continue
        i = int(round(b))
        lo, hi = max(1, i - 25), min(spec.size, i + 26)
        around = np.concatenate([spec[lo:max(lo, i - 3)], spec[min(hi, i + 4):hi]])
        if around.size < 8:
            continue
        if spec[max(i - 1, 1):i + 2].max() > 30.0 * float(np.median(around)):
            best = fm
    return best


#: the parameters :meth:`OutputResidual.log_jacobian` has derivatives for
_JACOBIAN_NAMES = frozenset(PART_NAMES) | {"phase", "duty", ASYMMETRY}


class OutputResidual:
    """Whitened residuals of the output phasors against Y_k = G·P_k(D)·e^{−jkφ}·H(jkω) (module docstring).

    G is solved linearly at every call (variable projection): with m the whitened model and y the whitened
    data, G = m·y/(m·m) and r = y − G·m. :meth:`log_jacobian` gives ∂r/∂ln(part) and ∂r/∂(phase, duty,
    asymmetry) by the chain rule ∂r = −∂G·m − G·∂m with ∂G = (∂m·y − 2G·m·∂m)/(m·m), ∂m the whitened
    ∂Y_k: in closed form for the ideal drive (:func:`benchfit.model.filter.transfer_log_gradient`,
    :func:`rectangular_phasors_duty_derivative`), by forward differences of the model for the switched
    source. So a refit needs no finite differences of the whole residual.
    """

    def __init__(self, w: np.ndarray, wy: np.ndarray, k: np.ndarray, f: float, drive_duty: float | None):
        self.w, self.wy, self.k, self.f, self.drive_duty = w, wy, k, f, drive_duty
        self.fk = k * f
        # each harmonic's whitening W (a real 2×2 map of (Re, Im)) as the complex map z ↦ p·z + q·z̄:
        # p = ((W₀₀ + W₁₁) + j(W₁₀ − W₀₁))/2, q = ((W₀₀ − W₁₁) + j(W₁₀ + W₀₁))/2 (write z = x + jy and
        # collect the terms in z and z̄). So whitened vectors (the (Re, Im) pairs in whiten's order) come
        # from a few complex products instead of a 2×2 product per harmonic (tests/fit/test_closed_jacobian.py)
        a, b, c, d = w[:, 0, 0], w[:, 0, 1], w[:, 1, 0], w[:, 1, 1]
        self._p = 0.5 * ((a + d) + 1j * (c - b))
        self._q = 0.5 * ((a - d) + 1j * (c + b))
        self._powers = transfer_powers(self.fk)  # s², s, 1 at every harmonic, for H and its derivatives
        # the last residual and Jacobian and the values they were evaluated at: an optimiser asks for the
        # Jacobian where it has just evaluated the residual, and a refit's driver for both again at its end
        self._last: tuple | None = None
        self._last_r: tuple | None = None
        self._last_j: tuple | None = None

    def _white(self, z: np.ndarray) -> np.ndarray:
        """:func:`benchfit.fit.common.whiten` of z (1-D), or of each row of z (2-D: (rows, harmonics), each
        row whitened to the (Re, Im) pairs of its harmonics in turn), by the complex form of the whitening."""
        return (self._p * z + self._q * np.conj(z)).view(float)

    def _duty(self, v: Mapping[str, float]) -> float:
        return float(v["duty"] if "duty" in v else self.drive_duty)  # type: ignore[arg-type]  # given when not fitted

    def model(self, v: Mapping[str, float]) -> np.ndarray:
        """The drive-normalised output phasors P_k(D)·e^{−jkφ}·H(jkω), or the switched source's."""
        k, duty = self.k, self._duty(v)
        if ASYMMETRY in v:  # a switched source, r_high ≠ r_low (benchfit.fit.asymmetry)
            return asymmetric_phasors(k, self.f, duty, parts_of(v), v[ASYMMETRY]) * np.exp(-1j * k * v["phase"])
        return self._ideal(v)[0]

    def _ideal(self, v: Mapping[str, float]) -> tuple:
        """The ideal drive's model phasors and what its derivatives reuse: (m, P_k·e^{−jkφ}, e^{−jkφ}, H, its
        denominator, the parts)."""
        rot = np.exp(-1j * self.k * v["phase"])
        pr = rectangular_phasors(self.k, self._duty(v)) * rot
        parts = parts_of(v)
        h, den = transfer_at(self._powers, parts)
        return pr * h, pr, rot, h, den, parts

    def _state(self, v: Mapping[str, float], key: tuple) -> tuple:
        """(key, m, whitened m, m·m, gain, the ideal drive's pieces or None) at ``v`` (``key`` its items), kept for
        the last values: the Jacobian is mostly asked for where the residual has just been evaluated."""
        if self._last is not None and self._last[0] == key:
            return self._last
        if ASYMMETRY in v:
            m, pieces = self.model(v), None
        else:
            pieces = self._ideal(v)
            m = pieces[0]
        wm = self._white(m)
        mm = max(float(wm @ wm), 1e-300)
        self._last = (key, m, wm, mm, float(wm @ self.wy) / mm, pieces)
        return self._last

    def gain(self, wm: np.ndarray) -> float:
        return float(wm @ self.wy) / max(float(wm @ wm), 1e-300)

    def __call__(self, v: Mapping[str, float]) -> np.ndarray:
        key = tuple(v.items())
        if self._last_r is not None and self._last_r[0] == key:
            return self._last_r[1]
        _, _, wm, _, g, _ = self._state(v, key)
        r = self.wy - g * wm
        r.flags.writeable = False  # handed out again for the same values
        self._last_r = (key, r)
        return r

    def log_jacobian(self, v: Mapping[str, float], names: tuple[str, ...]) -> np.ndarray | None:
        """∂r/∂ln x for the parts and ∂r/∂x for phase, duty and asymmetry among ``names``, columns in that
        order; None for any other parameter."""
        if not _JACOBIAN_NAMES.issuperset(names):
            return None
        values_key = tuple(v.items())
        key = (values_key, tuple(names))
        if self._last_j is not None and self._last_j[0] == key:
            return self._last_j[1]
        _, m, wm, mm, g, pieces = self._state(v, values_key)
        dm = self._switched_derivatives(v, names, m) if pieces is None else self._ideal_derivatives(v, names, pieces)
        wdm = self._white(dm)  # a row per parameter
        dg = wdm @ (self.wy - 2.0 * g * wm) / mm
        j = (-dg[:, None] * wm[None, :] - g * wdm).T
        j.flags.writeable = False
        self._last_j = (key, j)
        return j

    def _ideal_derivatives(self, v: Mapping[str, float], names: tuple[str, ...], pieces: tuple) -> np.ndarray:
        """The ideal drive's model derivatives (a row per name), in closed form."""
        k = self.k
        m, pr, rot, h, den, lp = pieces
        parts = tuple(n for n in names if n in PART_NAMES)
        rows = np.empty((len(names), k.size), dtype=complex)
        dh = transfer_log_derivatives_at(self._powers, lp, parts, h, den)
        if names[:len(parts)] == parts:  # the usual order: the parts, then the extras
            np.multiply(pr, dh, out=rows[:len(parts)])
        else:
            rows[[names.index(n) for n in parts]] = pr * dh
        if "phase" in names:
            rows[names.index("phase")] = -1j * k * m
        if "duty" in names:
            rows[names.index("duty")] = rectangular_phasors_duty_derivative(k, self._duty(v)) * rot * h
        return rows

    def _switched_derivatives(self, v: Mapping[str, float], names: tuple[str, ...], m: np.ndarray) -> np.ndarray:
        """The switched source's model derivatives (a row per name), by forward differences from its phasors m.

        Its periodic steady state has no closed-form derivative here; the step is scipy's own for a 2-point
        difference, √ε·max(1, |x|) in the fit's variable (ln part, or the extra itself), so the refit sees
        the derivatives scipy's solver estimated, from one model call per column instead of a residual call.
        """
        cols = []
        for n in names:
            x = math.log(v[n]) if n in PART_NAMES else float(v[n])
            step = _FORWARD_STEP * max(1.0, abs(x))
            moved = dict(v)
            moved[n] = math.exp(x + step) if n in PART_NAMES else x + step
            cols.append((self.model(moved) - m) / step)
        return np.stack(cols) if cols else np.zeros((0, m.size), dtype=complex)


def fit_one_channel(cap, ri: int, fix: dict[str, float], guess: dict[str, float],
                    drive_duty: float | None, fix_specs=None):
    """Fit the lc-lowpass model to the output channel ``ri`` alone (see the module docstring)."""
    from benchfit.measurement.tone import fit_tone

    where = source_name(cap)
    fs = cap.sample_rate
    y = np.asarray(cap.samples[ri], dtype=float)
    name = cap.channel_names[ri]
    check_not_silent(y, cap, ri, "response")
    tone = fit_tone(y, fs, n_harmonics=9)
    if tone is None or tone.amplitudes[0] <= SIGNIFICANCE * tone.amplitudes_u[0]:
        raise FitError(f"{where}: channel {name!r} has no periodic content — capture a few periods of "
                       "the filter's output while the drive runs, or use fit_ringdown()")
    f = tone.frequency_hz
    f_low = true_fundamental(y, fs, f)
    if f_low != f:
        refit = fit_tone(y, fs, n_harmonics=max(9, int(round(f / f_low)) + 3), frequency_hz=f_low)
        f = refit.frequency_hz if refit is not None else f_low
    kmax = max(1, min(MAX_ORDER, int(math.floor((0.5 * fs - 1e-9) / f))))
    f, hy_all, start_note = harmonics_after_start_transient(y, fs, f, kmax, cap.calibration.coupling_tau_s,
                                                            cap.units[ri])
    a1 = float(hy_all.amplitudes[0])
    u_floor = _U_FLOOR_REL * a1
    above_noise = hy_all.amplitudes > SIGNIFICANCE * np.maximum(hy_all.amplitudes_u, u_floor)
    real = above_noise & (hy_all.amplitudes > _MIN_HARMONIC_REL * a1) & (hy_all.orders >= 2)
    if not np.any(real):
        # a pure sine (or one whose harmonics drown in the noise): at most the converter's own
        # quantisation pattern stands out, which says nothing about the filter
        raise FitError(f"{where}: channel {name!r} has no harmonics above the noise, so its shape says "
                       "nothing about the filter — capture the drive too and use method='two-channel', "
                       "or use fit_ringdown()")
    strong = np.nonzero(above_noise)[0]
    keep = hy_all.orders <= int(hy_all.orders[strong[-1]])
    hy = subset(hy_all, keep)  # orders 1…K; the fit included all orders below the limit
    orders = hy.orders
    yk = hy.phasors
    cov = hy.phasor_cov + u_floor ** 2 * np.eye(2)  # never below the resolution floor (see _U_FLOOR_REL)
    tau_c = cap.calibration.coupling_tau_s
    fk = orders * f
    if tau_c:
        jwt = 2j * math.pi * fk * tau_c
        corr = (1.0 + jwt) / jwt  # undo the input's first-order high-pass
        yk = yk * corr
        cov = complex_mult_cov(corr, cov)
    w = whitening(cov)
    wy = whiten(w, yk)
    k = orders.astype(float)

    residual = OutputResidual(w, wy, k, f, drive_duty)
    model_phasors, gain = residual.model, residual.gain

    # start: shape grid on magnitudes, then the timing phase by a scan
    amp_u = np.sqrt(0.5 * (cov[:, 0, 0] + cov[:, 1, 1]))
    duty0 = None if drive_duty is None else min(drive_duty, 1.0 - drive_duty)

    def base_fit(r0: float, q0: float, d0: float):
        start = start_parts(2 * math.pi * f * r0, q0, None, fix, guess)
        duty_start = drive_duty if drive_duty is not None else d0
        best = (math.inf, 0.0)
        for phase in np.linspace(-math.pi, math.pi, 73)[:-1]:
            v = {**start, "phase": float(phase), "duty": duty_start}
            r = residual(v)
            c = float(r @ r)
            if c < best[0]:
                best = (c, float(phase))
        extra = {"phase": (best[1], -4 * math.pi, 4 * math.pi)}
        if drive_duty is None:
            extra["duty"] = (d0, _DUTY_MIN * 0.5, 1.0 - _DUTY_MIN * 0.5)
        return extra, solve(residual, start, fix, extra)

    grid = _shape_grid(k, yk, amp_u, duty0, _BASINS)
    extra, base = base_fit(*grid[0])
    compared = None
    if len(grid) > 1 and not _ideal_drive_fits(residual, base):
        extra, base, compared = _deepest_basin(residual, fix, [(extra, base)] + [base_fit(*g) for g in grid[1:]])
    values, ident, fixed, folded, warnings, ok, msg, alts = base
    comparison, parts = None, PARAMETER_NAMES
    if "Rp" not in fix:  # a core loss (Rp across L): its loss rises as f², a shape the output shows
        comparison, chosen = compare_core_loss(residual, values, ident, fixed, fix,
                                               {n: (values[n], lo, hi) for n, (_, lo, hi) in extra.items()})
        if chosen is not None and comparison is not None:
            refit = solve(residual, chosen, fix, {n: (chosen[n], lo, hi) for n, (_, lo, hi) in extra.items()},
                          parts=PART_NAMES)
            if "Rp" in refit[1].undetermined:
                warnings = core_loss_not_separated(
                    comparison, warnings, "Rp is integrated out with them and the total loss is what to read",
                    "measure the choke's loss (or Q) on its own to split it")
            else:
                values, ident, fixed, folded, warnings, ok, msg, alts = refit
                warnings = list(warnings) + [comparison["note"]]
                parts = PART_NAMES
    # the valleys' comparison holds for this base fit unless the core-loss refit replaced it
    asym = _drive_asymmetry(residual, values, ident, fix, extra, parts, drive_duty,
                            compared if values is base[0] else None)
    if asym is not None and asym[1] is not None:
        values, ident, fixed, folded, warnings, ok, msg, alts = asym[1]
        extra[ASYMMETRY] = (values[ASYMMETRY], -ASYMMETRY_BOUND, ASYMMETRY_BOUND)
        warnings = list(warnings) + [asym[0]["note"]]
    if drive_duty is None:
        warnings = list(warnings)
        d = values["duty"]
        j = ident.names.index("duty")
        sd = math.sqrt(max(float(ident.cov_log[j, j]), 0.0))
        from benchfit.units import format_with_uncertainty

        text = (format_with_uncertainty(100 * min(d, 1 - d), 100 * sd, "%")
                if "duty" not in ident.undetermined and sd > 0
                else f"{100 * min(d, 1 - d):.1f} % (not determined)")
        warnings.insert(0, f"duty: the drive's duty cycle was fitted as {text} "
                           "(or its complement; the output alone cannot tell which)")
    nuis = _core_loss_nuisances(_nuisances(values, fix, ident), values, fix, comparison)
    marg = None
    if nuis:
        ex_now = {n: (values[n], lo, hi) for n, (_, lo, hi) in extra.items()}
        try:
            marg = marginalise(residual, values, fix, nuis, ex_now, parts,
                               {ASYMMETRY_FIGURE: asymmetry_ohm} if ASYMMETRY in extra else None)
        except ValueError as e:  # no point of the grid gave a fit with finite figures (no resonance)
            raise FitError(
                f"{where}: channel {name!r}: no fit of the output's shape over the stated range of "
                f"{', '.join(q.name for q in nuis)} gives a damped resonance (the fit's "
                f"1/(2π√(LC)) = {1 / (2 * math.pi * math.sqrt(values['L'] * values['C'])):.4g} Hz for a "
                f"{f:.4g} Hz drive) — "
                "capture the drive too and use method='two-channel', or give drive_duty and more of the parts "
                "with fix") from e
        held = {q.name: marg.best[q.name] for q in nuis}
        free = tuple(n for n in parts if n not in fix and n not in held)
        ex_now = {n: (marg.best[n], lo, hi) for n, (_, lo, hi) in extra.items()}
        values, names, jac, chi2_red, ok, msg = fit_log_parameters(residual, marg.best, free, {**fix, **held}, ex_now)
        ident = identify(jac, names, chi2_red)
        fixed, folded, alts = dict(fix), [], []
        warnings = [m for m in warnings if not m.startswith("Resr:")]  # the fold is replaced by the marginal
    mk = model_phasors(values)
    g = gain(whiten(w, mk))
    y_model_k = g * mk
    n_show = min(y.size, int(math.ceil(4 * fs / f)))
    t = np.arange(n_show) / fs
    y_model = hy.dc + sum((y_model_k[i] * np.exp(1j * k[i] * 2 * math.pi * f * t)).real
                          for i in range(k.size))
    curves = FitCurves(time_s=t, data=y[:n_show].copy(), model=np.asarray(y_model),
                       harmonic_hz=fk, h_measured=yk, h_model=y_model_k,
                       h_measured_u=amp_u,
                       residual=np.concatenate([(yk - y_model_k).real, (yk - y_model_k).imag]))
    msg = (f"{msg}; one-channel: the drive level is unknown, so the data fix the shape of H "
           "(resonant frequency, Q, ESR zero) and the parts only once one of them is known")
    warnings = list(warnings) + ([start_note] if start_note else [])
    specs = input_specs(fix_specs or {}, fixed, folded)
    sens = propagate(residual, values, ident, specs)
    result = assemble(cap, "one-channel", values, ident, fix, folded, warnings, curves,
                      quality_complex(yk, y_model_k), ok, msg, alts, specs, sens)
    if comparison is not None:
        from dataclasses import replace

        result = replace(result, adequacy={**result.adequacy,
                                           "model_comparison": {k: v for k, v in comparison.items() if k != "note"}})
    if asym is not None:
        result = with_asymmetry(result, asym[0], values, ident, specs, sens)
    result = result if marg is None else apply_marginal(result, marg)
    result = result if marg is None or ASYMMETRY not in extra else marginal_asymmetry(result, marg)
    return _load_beside_open_core_loss(result, nuis, fix)


def _load_beside_open_core_loss(result, nuis: tuple[Nuisance, ...], fix: Mapping[str, float]):
    """A load fitted (not integrated out) while a core loss is left open is reported as not separated.

    A switched source lets the data tell Rs from the load (:func:`_nuisances`), but a core loss the
    data leave open changes the response at second order through terms the load absorbs
    (:func:`_core_loss_nuisances`): on the ngspice unit with r_high ≠ r_low and no core loss the
    fitted load came out at about half its value, z ≈ −3 over ten seeds (tests/fit/test_honest_units.py).
    """
    from dataclasses import replace

    p = result.parameters.get("Rload")
    if "Rload" in fix or p is None or p.stderr is None or not any(q.name == "Rp" for q in nuis) \
            or any(q.name == "Rload" for q in nuis):
        return result
    params = dict(result.parameters)
    params["Rload"] = replace(p, stderr=None, u_fit=None)
    warn = (f"Rload: not separated by an output-only capture from a core loss in the choke (Rp across L), "
            f"which the data leave open; the fit's {p.value:.4g} Ω takes part of it — measuring the load "
            "resistance (then fix={'Rload': …}) or an LCR meter on the choke (then fix={'Rp': …}) would pin it")
    return replace(result, parameters=params, warnings=tuple(result.warnings) + (warn,))


def _drive_asymmetry(residual, values, ident, fix, extra, parts, drive_duty: float | None, compared=None):
    """Compare the ideal drive with a switched one (r_high ≠ r_low, :mod:`benchfit.fit.asymmetry`).

    Returns None when not compared (the asymmetry given as 0 with ``fix``), else (summary with a
    note and, when chosen, ``duty_high``: the duty of the phase whose resistance is r_high in
    r_high − r_low; the refit's :func:`solve` tuple when the data support the asymmetry, else None).
    """
    duty_fitted = drive_duty is None
    if ASYMMETRY in fix or {"L", "C"} <= set(ident.undetermined):
        return None
    ex_now = {n: (values[n], lo, hi) for n, (_, lo, hi) in extra.items()}
    summary, chosen = compared or compare_drive_asymmetry(residual, values, ident.names, ex_now)
    if summary is None:
        return None
    if chosen is None:
        summary["note"] = ""
        return summary, None
    z0 = math.sqrt(chosen["L"] / chosen["C"])
    chosen = {n: (v if n not in PART_NAMES or n in fix or v > 0 else 1e-3 * z0) for n, v in chosen.items()}
    refit = solve(residual, chosen, fix, {**ex_now, ASYMMETRY: (chosen[ASYMMETRY], -ASYMMETRY_BOUND,
                                                                 ASYMMETRY_BOUND)}, parts=parts)
    summary["duty_high"] = float(refit[0]["duty"] if duty_fitted else drive_duty)  # type: ignore[arg-type]
    sign = (f", the phase lasting {100 * refit[0]['duty']:.3g} % of the period taken as high (the output alone "
            "cannot tell which phase is high, so the sign is open)" if duty_fitted else "")
    summary["note"] = (f"{ASYMMETRY_FIGURE}: the data call for a drive whose source resistance differs between "
                       f"high and low (F-test p = {summary['p_value']:.2g}, ΔAIC = "
                       f"{summary['aic'][1] - summary['aic'][0]:.3g}); the fit uses the exact switched-source "
                       "model, Rs holds the time-averaged resistance D·r_high + (1 − D)·r_low and "
                       f"{ASYMMETRY_FIGURE} = r_high − r_low{sign}")
    return summary, refit


def _nuisances(values: Mapping[str, float], fix: Mapping[str, float], ident) -> tuple[Nuisance, ...]:
    """The parts an output-only capture cannot pin, with their stated plausible ranges.

    With the drive level unknown the output's shape fixes ω0, Q and the ESR zero: three numbers
    for C, Rs, ESR and Rload once L (or C) is known. So the ESR shows only through the magnitude of
    its zero (information ∝ ESR², a linearised error is meaningless near 0) and Rs and the load
    share the damping along a direction the data do not see. Both are integrated out
    (:mod:`benchfit.fit.marginal`) unless given; the scale (L or C) must be known.
    """
    if not ({"L", "C"} & set(fix)) or {"L", "C"} <= set(ident.undetermined):
        return ()
    total = figures_of(values)["total_loss_ohm"]
    if not (math.isfinite(total) and total > 0):
        return ()
    out = []
    if "Resr" not in fix:
        out.append(Nuisance("Resr", 0.0, total, "value", f"0…{total:.3g} Ω (rectangular)",
                            "the data's own bound: the ESR cannot exceed the total loss that damps the resonance",
                            "an ESR meter on the capacitor would pin it (then fix={'Resr': …})",
                            reportable="Rp" in fix or "Rp" in values,
                            why="not separated by an output-only capture: a core loss in the choke also turns "
                                "the roll-off above resonance from 1/f² towards 1/f, as the ESR does"
                                if "Rp" not in fix and "Rp" not in values else ""))
    # with a switched source (r_high ≠ r_low) the output is no longer a time-invariant response, and the
    # identifiability analysis may find Rs and the load apart: then they are fitted, not integrated out.
    # Beside a core loss the data leave open the load stays fitted too, and is only reported as not
    # separated (_load_beside_open_core_loss): gridding it as a third nuisance was tried and is worse.
    # The load and the core loss trade along a thin ridge oblique to the grid's axes (on the asymmetric
    # unit of tests/fit/units_issue11.py, seed 0: Rload 3.36 kΩ with Rp 5.0 kΩ lies Δχ² = 1.4 from the
    # truth, 10 kΩ and no core loss), so the posterior sat on one grid point: Rload 3356 ± 4 Ω (z = −1613),
    # Rs's mean z −1.28 over ten seeds, and 4.2 s per fit instead of 1.6 s. Profiling the load at each
    # (ESR + core loss, share) point follows that ridge instead
    split = ASYMMETRY in values and not {"Rs", "Rload"} & set(ident.undetermined)
    if "Rload" not in fix and "Rs" not in fix and not split:
        out.append(load_nuisance(values, total))
    return tuple(out)


#: cells across the ESR / core-loss split (its share θ, rectangular prior). To first order the output sees only
#: their sum (_core_loss_nuisances), but not to second order: on the ngspice unit rs12-c22 of
#: tests/fit/test_onechannel_basins.py (duty given) the profile χ² over θ runs from 77.3 near θ = 0.01 to 99.4 at
#: θ = 1/6 and 99.7 at θ = 1. So three cells are only the start: fit.marginal cuts the edge cells toward θ = 0
#: and θ = 1 where the posterior's mass lies there (fit.marginal._edge_refined)
_SHARE_POINTS = 3


def _core_loss_nuisances(nuis: tuple[Nuisance, ...], values: Mapping[str, float], fix: Mapping[str, float],
                         comparison) -> tuple[Nuisance, ...]:
    """Add a core loss (Rp across L) the data did not determine as a nuisance, split from the ESR.

    With the drive level unknown the output shows H only up to a scale: its two zeros and two
    poles. By :func:`benchfit.model.filter.coefficients_full` the core-loss conductance γ = 1/Rp and
    the ESR enter the numerator as (1 + sLγ)(1 + sC·ESR) and the damping a1 through L·γ + C·ESR;
    what else they change (the factor 1 + Rs·γ of a2 and of the load's term) C and the load absorb.
    So to first order the output sees only C·ESR + L·γ — the ESR plus the core loss's series
    equivalent at resonance, (L/C)/Rp — and the two zeros' product, a second-order effect far above
    resonance, is all that tells them apart (even exchanging them leaves the sum). Unless Rp is
    given or the model comparison found it determined, the ESR axis of the grid becomes that sum
    x = ESR + (L/C)/Rp (0 … the total loss, the data's own bound) and a share θ of it, uniform on
    0 … 1, is the core loss: both are reported as not separated, the total loss is determined.
    """
    if "Rp" in fix or "Rp" in values or not nuis:
        return nuis
    total = figures_of(values)["total_loss_ohm"]
    l_over_c = float(values["L"]) / float(values["C"])
    p_text = ("" if comparison is None else
              f" (the core-loss model comparison, F-test p = {comparison['p_value']:.2g}, neither calls for it "
              "nor rules it out)")
    measure = ("an LCR meter on the choke at the operating frequency (its Q or parallel loss resistance), "
               "an ESR meter on the capacitor, or a two-channel capture (drive and output) would split them "
               "(then fix={'Rp': …} or fix={'Resr': …})")
    out = [q for q in nuis if q.name != "Resr"]
    if "Resr" in fix:  # the ESR known: the core loss alone over the data's own bound, as a conductance
        g_max = total / l_over_c
        return tuple(out) + (Nuisance("Rp", 0.0, g_max, "conductance",
                                      f"{l_over_c / total:.3g} Ω … none (1/Rp rectangular on 0…{g_max:.3g} S)",
                                      "the data's own bound: the core loss's series equivalent at resonance, "
                                      "L/(C·Rp), cannot exceed the total loss that damps the resonance",
                                      "an LCR meter on the choke at the operating frequency would pin it "
                                      "(then fix={'Rp': …})", why="not determined by these data" + p_text),)
    why = ("not separated by an output-only capture from a core loss in the choke (Rp across L): to first "
           "order both enter the response only through C·ESR + L/Rp" + p_text)
    esr_and_core = Nuisance(
        "Resr", 0.0, total, "value", f"0…{total:.3g} Ω for ESR + L/(C·Rp) together (rectangular)",
        "the data's own bound: the ESR and the core loss together cannot exceed the total loss that damps "
        "the resonance", measure, reportable=False, why=why)
    core = Nuisance(
        "Rp", 0.0, 1.0, "share", f"a share of that sum uniform on 0…1 (Rp from {l_over_c / total:.3g} Ω to none)",
        "stated prior: the output alone does not tell the ESR from the core loss", measure, reportable=False,
        why=why, share_of="Resr", scale=1.0 / l_over_c, points=_SHARE_POINTS)
    return (esr_and_core,) + tuple(out) + (core,)
