"""Steps shared by the lc-lowpass fitting methods (two-channel in :mod:`benchfit.fit.lowpass`,
one-channel in :mod:`benchfit.fit.onechannel`): input checks, start values, whitening of complex
residuals, fit quality, and the harmonic fit's noise rescaling.

Both method modules import from here (and neither from the other), so there is no import circle.
"""

from __future__ import annotations

import math
from typing import Mapping

import numpy as np

from benchfit.errors import FitError
from benchfit.fit.result import FitQuality
from benchfit.model.filter import LowpassParts

__all__ = ["source_name", "SIGNIFICANCE", "MAX_ORDER", "check_not_silent", "start_parts", "quality_complex", "quality_real",
           "whitening", "whiten", "complex_mult_cov", "noise_rescaled", "harmonics_after_start_transient",
           "subset", "parts_of", "noise_floor_bins"]

#: a harmonic is used when its amplitude exceeds this many standard uncertainties
SIGNIFICANCE = 10.0
#: highest harmonic order considered
MAX_ORDER = 49


def source_name(cap) -> str:
    """The capture's file name for messages, or "capture"."""
    return cap.source or "capture"


def check_not_silent(x: np.ndarray, cap, index: int, role: str) -> None:
    """Reject a channel that is flat (all samples equal, or only rounding noise)."""
    span = float(np.max(x) - np.min(x))
    level = max(float(np.max(np.abs(x))), 1e-30)
    if span <= 1e-9 * level or span == 0.0 or float(np.std(x)) < 1e-12:
        raise FitError(f"{source_name(cap)}: {role} channel {cap.channel_names[index]!r} is silent "
                       f"(no signal) — check the wiring, or choose another channel with {role}=")


def start_parts(w0: float, q: float, dc_gain: float | None, fix: Mapping[str, float],
                guess: Mapping[str, float]) -> dict[str, float]:
    """Start values of all parts from a resonance estimate (ω0 in rad/s, Q) and given parts."""
    known = {**guess, **fix}
    w0 = w0 if math.isfinite(w0) and w0 > 0 else 1.0
    q = min(max(q if math.isfinite(q) and q > 0 else 1.0, 0.05), 500.0)
    if "L" in known:
        L = known["L"]
        C = known.get("C", 1.0 / (w0 * w0 * L))
    elif "C" in known:
        C = known["C"]
        L = 1.0 / (w0 * w0 * C)
    else:  # no scale known: take a characteristic impedance of 100 ohm
        L, C = 100.0 / w0, 1.0 / (100.0 * w0)
    z0 = math.sqrt(L / C)
    r_total = z0 / q
    rs = known.get("Rs", max(0.9 * r_total, 1e-6 * z0))
    resr = known.get("Resr", max(0.1 * r_total, 1e-4 * z0))
    if resr == 0.0:
        resr = 1e-4 * z0  # only a start value; a fixed 0 is applied by the caller
    if "Rload" in known:
        rl = known["Rload"]
    elif dc_gain is not None and 0.05 < dc_gain < 0.97:
        rl = rs * dc_gain / (1.0 - dc_gain)
    else:
        rl = 300.0 * z0
    out = {"L": L, "C": C, "Rs": rs, "Resr": resr, "Rload": rl}
    out.update(fix)
    return out


def quality_complex(measured: np.ndarray, model: np.ndarray) -> FitQuality:
    """NRMSE (rms(data − model)/rms(data)) and R² of complex points (2 real numbers each)."""
    d = measured - model
    ss_res = float(np.sum(np.abs(d) ** 2))
    ss_tot = float(np.sum(np.abs(measured - measured.mean()) ** 2))
    rms = float(np.sqrt(np.mean(np.abs(measured) ** 2)))
    nrmse = math.sqrt(ss_res / measured.size) / rms if rms > 0 else math.nan
    r2 = 1.0 - ss_res / ss_tot if ss_tot > 0 else math.nan
    return FitQuality(nrmse, r2, int(2 * measured.size))


def quality_real(data: np.ndarray, model: np.ndarray) -> FitQuality:
    d = data - model
    ss_res = float(d @ d)
    ss_tot = float(np.sum((data - data.mean()) ** 2))
    rms = float(np.sqrt(np.mean(data ** 2)))
    return FitQuality(math.sqrt(ss_res / data.size) / rms if rms > 0 else math.nan,
                      1.0 - ss_res / ss_tot if ss_tot > 0 else math.nan, int(data.size))


def whitening(cov: np.ndarray) -> np.ndarray:
    """Per-point 2×2 matrices W with W·cov·Wᵀ = I (inverse Cholesky factors), shape (K, 2, 2)."""
    out = np.empty_like(cov)
    for i, c in enumerate(cov):
        c = 0.5 * (c + c.T)
        tr = max(float(np.trace(c)), 1e-300)
        try:
            chol = np.linalg.cholesky(c + 1e-12 * tr * np.eye(2))
        except np.linalg.LinAlgError:
            chol = np.eye(2) * math.sqrt(tr / 2)
        out[i] = np.linalg.inv(chol)
    return out


def whiten(w: np.ndarray, z: np.ndarray) -> np.ndarray:
    """Whitened (Re, Im) residual vector of complex points z with matrices w."""
    return np.einsum("kij,kj->ki", w, np.stack([z.real, z.imag], axis=1)).ravel()


def complex_mult_cov(factor: np.ndarray, cov: np.ndarray) -> np.ndarray:
    """Covariance of (Re, Im) of factor·z given that of z (factor complex, per point)."""
    m = np.empty((factor.size, 2, 2))
    m[:, 0, 0] = factor.real
    m[:, 0, 1] = -factor.imag
    m[:, 1, 0] = factor.imag
    m[:, 1, 1] = factor.real
    return np.einsum("kij,kjl,kml->kim", m, cov, m)


def _waveform(h, n: int, fs: float) -> np.ndarray:
    """The harmonics of ``h`` (without its DC) as a waveform over ``n`` samples from the first one."""
    # by powers of e^{jωt} (one complex product per order; rounding grows by about one ulp per
    # order, 1e-14 at order 49)
    z = np.exp(2j * math.pi * h.frequency_hz * np.arange(n) / fs)
    zk = np.ones(n, dtype=complex)
    model = np.zeros(n, dtype=complex)
    phasor = dict(zip(h.orders.tolist(), h.phasors))
    for k in range(1, int(h.orders.max()) + 1):
        zk *= z
        if k in phasor:
            model += phasor[k] * zk
    return model.real


def _noise_floor(h, x: np.ndarray, fs: float) -> float | None:
    """σ² per sample of the noise between the harmonics (see :func:`noise_rescaled`), None if not told."""
    got = noise_floor_bins(h, x, fs)
    return None if got is None else got[0]


def noise_floor_bins(h, x: np.ndarray, fs: float) -> tuple[float, int] | None:
    """:func:`_noise_floor` and the number of periodogram bins its median is taken over."""
    n = x.size
    r = x - h.dc - _waveform(h, n, fs)
    w = 0.5 - 0.5 * np.cos(2 * math.pi * np.arange(n) / n)  # periodic Hann: no broadband leakage
    spec = np.abs(np.fft.rfft(r * w)) ** 2
    top = int(min(spec.size - 1, math.floor((h.orders.max() + 0.5) * h.frequency_hz * n / fs)))
    # leave out the bins next to every harmonic (fitted or not, folded into 0…fs/2)
    bins = np.arange(spec.size)
    f_bin = bins * fs / n
    harmonic = np.abs((f_bin / h.frequency_hz + 0.5) % 1.0 - 0.5) * h.frequency_hz
    clear = (harmonic > 2.5 * fs / n) & (bins >= 2) & (bins < top)
    band = spec[clear]
    if band.size < 16 or h.sigma <= 0:
        return None
    return float(np.median(band)) / (math.log(2.0) * float(w @ w)), int(band.size)


def noise_rescaled(h, x: np.ndarray, fs: float):
    """The harmonic fit with its phasor covariance scaled to the noise *between* the harmonics.

    The fit's own σ² = RSS/(N − p) also counts the harmonics above the highest fitted order
    (a square drive has them up to Nyquist), which would inflate every phasor's variance. The
    noise that matters for P_k is the one near k·f: it is taken as the median of the residual's
    Hann-window periodogram over 0 … (K + ½)·f, divided by ln 2 (the median of an exponential
    distribution, the law of |X|² for Gaussian noise) and by Σw², assuming a white floor there.
    """
    from dataclasses import replace

    sigma2 = _noise_floor(h, x, fs)
    if sigma2 is None:
        return h
    return replace(h, phasor_cov=h.phasor_cov * (sigma2 / h.sigma ** 2))


#: the start transient is named in a note when its amplitude exceeds this many standard uncertainties
_TRANSIENT_NOTE_SIGMAS = 5.0


def harmonics_after_start_transient(y: np.ndarray, fs: float, f: float, kmax: int, tau_s: float | None,
                                    unit: str):
    """The fundamental and the noise-rescaled harmonics of ``y``, fitted with the input coupling's start transient.

    An AC-coupled input (a first-order high-pass of time constant τ, known from the calibration) that
    starts from rest at the first sample — a card whose coupling or DC-blocking filter starts with the
    stream — adds A·e^{−t/τ} to the record whatever the signal (the filter's response to its initial
    state). It leaks into harmonic k as about 1/k, a shape no filter model has, and pulls the fitted
    fundamental: on a symmetric drive recorded so (the demo's sample captures before they were
    regenerated) the one-channel fit called the drive uneven, r_high ≠ r_low at F-test p ≈ 1e-8, and on
    an ngspice unit the fundamental came out 0.5 mHz (60 of its standard uncertainties) high. So with τ
    known the term is fitted with DC and the harmonics, by the Frisch–Waugh–Lovell theorem (from memory):
    A from the part e⊥ of e = e^{−t/τ} that DC and the harmonics do not explain (e minus its own harmonic
    fit b), then the harmonics of y − A·e. The fundamental ``f`` (a start value) is fitted again on
    y − A·e (up to 15 orders, those of the caller's tone fit) and A refitted at it. The harmonics'
    covariance gains Var(A)·b·bᵀ with Var(A) = σ²/|e⊥|² (the joint fit's own covariance, by the Woodbury
    identity), σ² the noise between the harmonics as in :func:`noise_rescaled`.

    Returns (fundamental in Hz, HarmonicFit, a note naming the transient when it stands out of the
    noise, else None). Without τ: ``f`` and the plain noise-rescaled harmonic fit.
    """
    from dataclasses import replace

    from benchfit.measurement.tone import fit_harmonics

    if not tau_s:
        return f, noise_rescaled(fit_harmonics(y, fs, f, kmax), y, fs), None
    n = y.size
    e = np.exp(-np.arange(n) / (fs * tau_s))

    def transient_at(freq: float):
        b = fit_harmonics(e, fs, freq, kmax)
        e_perp = e - b.dc - _waveform(b, n, fs)
        ee = float(e_perp @ e_perp)
        return b, ee, (float(e_perp @ y) / ee if ee > 0.0 else 0.0)

    b, ee, amp = transient_at(f)
    if not ee > 0.0:
        return f, noise_rescaled(fit_harmonics(y, fs, f, kmax), y, fs), None
    f = fit_harmonics(y - amp * e, fs, f, min(kmax, 15), fit_frequency=True).frequency_hz
    b, ee, amp = transient_at(f)
    clean = y - amp * e
    h = fit_harmonics(clean, fs, f, kmax)
    sigma2 = _noise_floor(h, clean, fs)
    if sigma2 is None:
        sigma2 = h.sigma ** 2
    else:
        h = replace(h, phasor_cov=h.phasor_cov * (sigma2 / h.sigma ** 2))
    var_a = sigma2 / ee
    bk = np.stack([b.phasors.real, b.phasors.imag], axis=1)
    h = replace(h, phasor_cov=h.phasor_cov + var_a * bk[:, :, None] * bk[:, None, :])
    u_a = math.sqrt(var_a)
    if abs(amp) <= _TRANSIENT_NOTE_SIGMAS * u_a:
        return f, h, None
    from benchfit.units import format_with_uncertainty

    return f, h, (f"input coupling: the record starts with the AC coupling's start transient "
                  f"({format_with_uncertainty(amp, u_a, unit)} at the first sample, decaying with the profile's "
                  f"τ = {tau_s:g} s); it is fitted with the harmonics and left out of them — start recording a "
                  "few time constants after the input is connected, or check the profile's coupling time "
                  "constant")


def subset(h, keep: np.ndarray):
    """A HarmonicFit restricted to the orders where ``keep`` is true (other fields unchanged)."""
    from dataclasses import replace

    return replace(h, orders=h.orders[keep], phasors=h.phasors[keep], phasor_cov=h.phasor_cov[keep])


def parts_of(v: Mapping[str, float]) -> LowpassParts:
    """The model's parts from a dict of fitted values (no core loss unless "Rp" is given)."""
    return LowpassParts(v["L"], v["C"], v["Rs"], v["Resr"], v["Rload"], v.get("Rp", math.inf))
