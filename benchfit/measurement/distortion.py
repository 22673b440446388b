"""Harmonic distortion by least squares at the estimated frequency (IEEE Std 1241 style).

Pure functions; no I/O. Everything comes from a multi-harmonic least-squares fit
(:func:`benchfit.measurement.tone.fit_tone`) at the fitted fundamental, so a record that does
not hold a whole number of periods (non-coherent sampling) suffers no window scalloping:
each harmonic's amplitude is a fitted parameter, not a DFT bin. What remains is leakage from
components that are *not* fitted (harmonics above H, noise) into the fitted ones; it falls
as 1/(number of periods) — about 4·10⁻⁵ of the fundamental for an ideal square over 30
periods with H = 10, 10⁻⁶ over 500 periods.

Definitions (all relative to the fundamental, as IEC 61000-2-2 and IEEE 1241 do):

* **THD** (THD_F) = √(Σ_{h=2..H} A_h²) / A_1, with A_h the peak amplitude of harmonic h and
  H = min(requested H, highest order below Nyquist). The default H is 10, i.e. harmonics
  2…10. H is stored with the result because THD depends on it.
* **THD+N** = rms of everything except DC and the fundamental, over the full recorded
  bandwidth (0 … fs/2), divided by the fundamental's rms A_1/√2. It is computed directly as
  the rms of ``x − dc − A_1·cos(ω t + φ_1)`` over the longest whole number of periods.
* **SINAD** = −20·log10(THD+N as a ratio), in dB (IEEE 1241: fundamental rms over the rms of
  noise and distortion).
* **SNR (fit)** = power in the fitted orders 1…H over the power of the fit residual, in dB;
  used only to warn about noisy records.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from benchfit.measurement.levels import whole_period_span
from benchfit.measurement.tone import HarmonicFit

__all__ = ["Distortion", "max_harmonic_order", "analyse_distortion"]


@dataclass(frozen=True, eq=False)
class Distortion:
    """Harmonic table and distortion figures of one channel.

    Attributes
    ----------
    harmonics_h : int
        Highest harmonic order included (H).
    orders : ndarray of int
        1…H.
    frequencies_hz : ndarray
        k·f for each order (Hz).
    amplitudes : ndarray
        Peak amplitude of each order (sample units).
    amplitudes_u : ndarray
        Standard uncertainty of each amplitude (linearised, from the fit covariance).
    phases_deg : ndarray
        Cosine phase of each order at the first sample (degrees, −180…180].
    thd : float or None
        THD_F as a ratio (None when H < 2).
    thd_u : float or None
        Standard uncertainty of ``thd`` (ratio).
    thd_n : float
        THD+N as a ratio (full bandwidth).
    sinad_db : float
        SINAD (dB).
    snr_fit_db : float
        Power in the fitted orders over residual power (dB); +inf for a perfect fit.
    """

    harmonics_h: int
    orders: np.ndarray
    frequencies_hz: np.ndarray
    amplitudes: np.ndarray
    amplitudes_u: np.ndarray
    phases_deg: np.ndarray
    thd: float | None
    thd_u: float | None
    thd_n: float
    sinad_db: float
    snr_fit_db: float


def max_harmonic_order(frequency_hz: float, sample_rate: float, requested: int) -> int:
    """Highest order ≤ ``requested`` whose frequency lies below Nyquist (at least 1)."""
    below = int(math.ceil(0.5 * sample_rate / frequency_hz)) - 1
    return max(1, min(int(requested), below))


def _thd_with_u(fit: HarmonicFit) -> tuple[float | None, float | None]:
    """THD_F and its linearised standard uncertainty from the phasors and their covariances."""
    if fit.orders.size < 2:
        return None, None
    p = fit.phasors
    a1 = abs(p[0])
    if a1 <= 0:
        return None, None
    h = p[1:]
    s = float(np.sum(np.abs(h) ** 2))
    thd = math.sqrt(s) / a1
    cov = fit.phasor_cov
    # noise floor of sqrt(S): mean per-axis variance of the harmonic phasors
    floor = math.sqrt(float(np.sum(0.5 * (cov[1:, 0, 0] + cov[1:, 1, 1]))))
    if math.sqrt(s) > 3.0 * floor:
        root = math.sqrt(s)
        g = np.stack([h.real, h.imag], axis=1) / (a1 * root)  # ∂THD/∂(Re, Im) of each harmonic
        var_h = float(np.einsum("ki,kij,kj->", g, cov[1:], g))
        g1 = -thd / a1 * np.array([p[0].real, p[0].imag]) / a1  # ∂THD/∂(Re, Im) of P_1
        var_1 = float(g1 @ cov[0] @ g1)
        return thd, math.sqrt(max(var_h + var_1, 0.0))
    # harmonics at the noise floor: the linearisation fails; quote the floor itself
    return thd, floor / a1


def _cosine(n: int, step_rad: float, phasor: complex, block: int = 4096) -> np.ndarray:
    """``Re(phasor · exp(j·step·m))`` for m = 0…n−1, by block rotation (few transcendentals).

    The sequence is the outer product of one block's rotations and the blocks' start
    rotations, so only ``block + n/block`` sines and cosines are evaluated; the rounding
    error stays at the 1e-15 level because every factor is computed directly.
    """
    blocks = -(-n // block)
    inner = np.exp(1j * step_rad * np.arange(block))
    starts = phasor * np.exp(1j * step_rad * block * np.arange(blocks))
    # Re(s·i) = Re s·Re i − Im s·Im i: one real (blocks × 2)·(2 × block) product, written contiguous
    lhs = np.stack([starts.real, -starts.imag], axis=1)
    return (lhs @ np.stack([inner.real, inner.imag])).reshape(-1)[:n]


def analyse_distortion(x: np.ndarray, sample_rate: float, fit: HarmonicFit) -> Distortion:
    """Harmonic table, THD, THD+N and SINAD from a multi-harmonic fit of ``x``.

    Parameters
    ----------
    x : ndarray
        The samples the fit was made on.
    sample_rate : float
        Sample rate (Hz).
    fit : HarmonicFit
        Fit of orders 1…H (contiguous, starting at 1) at the fitted frequency.

    Returns
    -------
    Distortion
    """
    x = np.asarray(x, dtype=np.float64)
    f = fit.frequency_hz
    # whole periods only: over a partial period the harmonics' cross terms do not average out
    n, _ = whole_period_span(x.size, sample_rate, f)
    x = x[:n]
    p1 = fit.phasors[0]
    a1 = abs(p1)
    # THD+N: rms of x − dc − fundamental, computed directly over the whole record
    resid = _cosine(n, 2.0 * math.pi * f / sample_rate, p1)
    np.subtract(x, resid, out=resid)  # in place: no second record-long array
    resid -= fit.dc
    rest_rms = math.sqrt(float(resid @ resid) / n)
    thd_n = rest_rms / (a1 / math.sqrt(2.0)) if a1 > 0 else math.inf
    sinad = -20.0 * math.log10(thd_n) if 0 < thd_n < math.inf else (math.inf if thd_n == 0 else -math.inf)
    thd, thd_u = _thd_with_u(fit)
    sig = float(np.sum(np.abs(fit.phasors) ** 2)) / 2.0
    noise = fit.rss / fit.n_samples
    snr = 10.0 * math.log10(sig / noise) if noise > 0 and sig > 0 else (math.inf if sig > 0 else -math.inf)
    return Distortion(
        harmonics_h=int(fit.orders.max()), orders=fit.orders.copy(),
        frequencies_hz=fit.orders * f, amplitudes=fit.amplitudes, amplitudes_u=fit.amplitudes_u,
        phases_deg=np.degrees(fit.phases_rad), thd=thd, thd_u=thd_u, thd_n=thd_n,
        sinad_db=sinad, snr_fit_db=snr,
    )
