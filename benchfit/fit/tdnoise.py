"""The noise of the two-channel time-domain residual, estimated from the two channels, not from the fit.

The time-domain refinement (:func:`benchfit.fit.lowpass._time_domain`) simulates the measured drive through
the model and fits the output samples. Under a right model its residual is the output's noise minus the
drive's noise passed through the simulation: for white noise of sd σ_y (output) and σ_x (drive) its variance
per sample is

    σ² = σ_y² + σ_x²·Σ|g_n|²,

g the simulation's discrete impulse response (the variance of filtered white noise). Σ|g_n|² is taken as the
mean of |H_sim|² over the record's DFT circle (Parseval), H_sim the simulation's response: the first-order
hold's :func:`benchfit.model.filter.sampled_transfer`, or H(j·2πf) for a band-limited drive (the response
:func:`benchfit.model.filter.simulate_band_limited` has on that grid).

That residual is not white: its spectrum is S(f) = σ_y² + σ_x²·|H_sim(f)|², and near the resonance the
drive's term can exceed the output's many times (σ_x = σ_y and Q ≈ 7: 55×). Scaled by one σ, the fit would
weigh those frequencies as if they were quiet, and its covariance (which assumes white residuals) would be
too small: on the non-periodic capture of tests/fit/test_identify.py (5 mV on the drive, 2 mV on the
output, Q ≈ 4.6) the seeded z-scores of C, Rs and Resr had sd 6.5–7.4 over 20 seeds. So the residual is
whitened bin by bin on the record's DFT grid, R_k/√S_k (:func:`whiten_by_spectrum`): least squares on the
Whittle approximation of the Gaussian likelihood of stationary noise (Whittle, 1953, from memory), whose
χ² has its usual meaning and whose covariance is that of the coloured noise (z sd 0.7–0.9 there after;
the circular filter joins the record's ends over the resonance's decay time, negligible for a record many
decay times long).

Each channel's white level is estimated on its own:

* periodic drive — the median of the Hann periodogram between the harmonics (``noise_floor_bins`` of
  :mod:`benchfit.fit.common`, the estimate the harmonic method uses). Only a white floor is measured: a
  hum or any line between the harmonics stays out of it (the median), so in the residual it is structure,
  not noise. Its relative standard uncertainty is that of the median of M exponential values,
  1/(ln 2·√M) (sample median: var = 1/(4·M·f(m)²), f the density at the median m), times √F for the
  Hann window's correlation of neighbouring bins (complex correlation 2/3 and 1/6 at one and two bins):
  F = 1 + 2·Σ_k Cov(1{P_0 < m}, 1{P_k < m})/¼ from the bivariate law of two correlated periodogram values
  (|Z_2|² given |Z_1|² is a scaled non-central χ² with 2 degrees of freedom). F ≈ 1.55.
  That floor counts as noise whatever lies between the harmonics: a drive whose edges wander by a sample
  (a square computed or generated with a jittering period) puts broadband content there which the
  simulation, fed the very samples, reproduces — it is signal to the time-domain fit. So the third
  differences below are computed too, and where they give a level lower beyond both estimates' u
  (3.29 combined standard uncertainties, the two-sided 99.9 % point) they are taken instead. Each
  estimator can only be raised by signal it mistakes for noise (a band-limited square's lines near Nyquist
  raise the differences, jitter the floor between the harmonics), so the lower one is the noise.
* non-periodic drive — the drive's spectrum has no band free of signal (a drive of steps falls only as
  1/f² up to Nyquist, far above its noise), so the level is taken in the time domain instead: the median
  absolute value of the third differences of non-overlapping blocks of four samples, c = (1, −3, 3, −1)/√20
  (zero on any quadratic), over Φ⁻¹(¾) — the robust scale estimate of the finest-scale coefficients of
  wavelet shrinkage (Donoho & Johnstone, 1994, from memory). A drive of steps or ramps and an output
  behind the low-pass are smooth at the sample scale except at a few edges, which the median ignores.
  Gaussian noise is assumed (the Φ⁻¹(¾) constant); the relative variance of the σ² estimate is
  1/(4·M·φ(m)²·m²), m = Φ⁻¹(¾), for M blocks. A drive that is itself broadband at the sample scale (a
  white-noise excitation) cannot be told from its noise this way: its level then counts as noise and
  χ²ᵣ comes out low — the record says which estimator was used.

The estimate's own uncertainty matters: at 10⁵ samples the residual's χ²ᵣ has a spread of 0.5 %, the
noise estimate one of 2–3 %. χ²ᵣ is then a ratio of two variance estimates and its limit is the 99.9 % point
of F(ν, ν_σ) (:func:`chi2_red_limit`), ν_σ = 2/u_rel² the estimate's effective degrees of freedom (the
relative uncertainty of an uncertainty, GUM G.3, from memory), u_rel that of the whitening's scale: the two
levels' relative u weighted by their shares of S averaged over the circle (:func:`combine`).

No I/O; pure computation.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass
from functools import lru_cache
from typing import NamedTuple

import numpy as np

from benchfit.fit.common import noise_floor_bins

__all__ = ["Floor", "ResidualNoise", "noise_gain", "whiten_by_spectrum", "periodic_floor", "difference_floor", "channel_floor", "combine",
           "chi2_red_limit"]

#: Hann window: complex correlation of two periodogram bins one and two bins apart (white noise)
_HANN_BIN_CORRELATION = (2.0 / 3.0, 1.0 / 6.0)
#: third difference (zero on a quadratic), unit norm
_DIFFERENCE = np.array([1.0, -3.0, 3.0, -1.0]) / math.sqrt(20.0)
#: Φ⁻¹(3/4): the median of |Z| for a standard normal Z
_MAD_NORMAL = 0.6744897501960817
#: two estimates of one level disagree beyond this many combined standard uncertainties (two-sided 99.9 %)
_DISAGREE = 3.29


class Floor(NamedTuple):
    """A channel's white noise level: σ² per sample, its relative standard uncertainty, the estimator."""

    var: float
    u_rel: float
    estimator: str


@dataclass(frozen=True)
class ResidualNoise:
    """The residual's noise σ (per sample, the output's unit) and how it was estimated."""

    sigma: float
    sigma_output: float
    sigma_drive: float
    noise_gain: float  # Σ|g_n|², the drive noise's power gain through the simulation
    u_rel_var: float  # relative standard uncertainty of σ²
    dof: float  # effective degrees of freedom of the whitened χ²ᵣ's noise scale (combine)
    method: str
    u_rel_var_output: float = math.nan  # relative standard uncertainty of σ_y² and of σ_x²
    u_rel_var_drive: float = math.nan
    estimator_output: str = ""  # which estimate each channel's level is
    estimator_drive: str = ""

    def to_dict(self, unit: str) -> dict:
        """The record, with the output channel's ``unit`` (that of every σ; per sample)."""
        return {**asdict(self), "unit": unit}


def _circle_mean(values: np.ndarray, n: int) -> float:
    """The mean over the DFT circle of an ``n``-sample record of a real, even function given on its rfft grid."""
    last = 1.0 if n % 2 == 0 else 2.0  # the Nyquist bin (even n) is counted once
    total = values[0] + 2.0 * float(np.sum(values[1:-1])) + last * values[-1] if values.size > 1 else values[0]
    return float(total) / n


def noise_gain(response: np.ndarray, n: int) -> float:
    """Σ|g_n|²: the mean of |H|² over the DFT circle of an ``n``-sample record, from its rfft-grid values."""
    return _circle_mean(np.abs(np.asarray(response)) ** 2, n)


def whiten_by_spectrum(residual: np.ndarray, spectrum: np.ndarray) -> np.ndarray:
    """The residual divided, bin by bin, by the root of its noise spectrum (rfft grid; unit variance per sample)."""
    return np.fft.irfft(np.fft.rfft(residual) / np.sqrt(spectrum), n=residual.size)


@lru_cache(maxsize=1)
def _hann_median_factor() -> float:
    """F: the variance of the median of Hann periodogram bins over that of independent ones (module docstring)."""
    from scipy.integrate import quad
    from scipy.special import chndtr  # the non-central χ² CDF

    m = math.log(2.0)  # the median of a unit exponential
    extra = 0.0
    for rho in _HANN_BIN_CORRELATION:
        r = rho * rho

        def density(e: float, r: float = r) -> float:
            return math.exp(-e) * float(chndtr(2.0 * m / (1.0 - r), 2.0, 2.0 * r * e / (1.0 - r)))

        both = quad(density, 0.0, m)[0]
        extra += 2.0 * (both - 0.25) / 0.25
    return 1.0 + extra


def periodic_floor(h, x: np.ndarray, fs: float) -> Floor | None:
    """A channel's white floor between the harmonics of ``h``."""
    got = noise_floor_bins(h, x, fs)
    if got is None:
        return None
    sigma2, m = got
    return Floor(sigma2, math.sqrt(_hann_median_factor() / m) / math.log(2.0), "between the harmonics")


def difference_floor(x: np.ndarray) -> Floor | None:
    """A channel's white noise level from its blocks' third differences."""
    x = np.asarray(x, dtype=float)
    m = x.size // _DIFFERENCE.size
    if m < 16:
        return None
    d = x[:m * _DIFFERENCE.size].reshape(m, _DIFFERENCE.size) @ _DIFFERENCE
    sigma = float(np.median(np.abs(d))) / _MAD_NORMAL
    phi = math.exp(-0.5 * _MAD_NORMAL ** 2) / math.sqrt(2.0 * math.pi)
    return Floor(sigma * sigma, 1.0 / (2.0 * math.sqrt(m) * phi * _MAD_NORMAL), "third differences")


def channel_floor(h, x: np.ndarray, fs: float) -> Floor | None:
    """A periodic channel's level: between the harmonics, or its third differences' where lower beyond both u."""
    a, b = periodic_floor(h, x, fs), difference_floor(x)
    if a is None or b is None:
        return a or b
    if a.var - b.var > _DISAGREE * math.hypot(a.var * a.u_rel, b.var * b.u_rel):
        return b
    return a


def combine(output: Floor | None, drive: Floor | None, response: np.ndarray, n: int, method: str,
            floor: float = 0.0) -> tuple[ResidualNoise, np.ndarray]:
    """The residual's noise: its record and its spectrum S_k = σ_y² + σ_x²·|H_k|² on the rfft grid of ``n`` samples.

    ``response`` is the simulation's H on that grid; ``floor`` the least S (a noise-free capture). A level not
    estimated adds 0. σ² = σ_y² + σ_x²·Σ|g|² (the mean of S) has the relative u of the two estimates
    (independent); χ²ᵣ of the residual whitened by S rests on them with the weights mean(σ_y²/S) and
    mean(σ_x²·|H|²/S), from which its denominator's degrees of freedom ``dof`` follow.
    """
    none = Floor(0.0, math.inf, "not estimated")
    output, drive = output or none, drive or none
    (vy, uy, _), (vx, ux, _) = output, drive
    h2 = np.abs(np.asarray(response)) ** 2
    spectrum = np.maximum(vy + vx * h2, floor)
    gain = _circle_mean(h2, n)
    var = vy + vx * gain
    u_rel = math.hypot(vy * uy if vy > 0 else 0.0, vx * gain * ux if vx > 0 else 0.0) / var if var > 0 else math.inf
    wy = _circle_mean(vy / spectrum, n)
    wx = _circle_mean(vx * h2 / spectrum, n)
    u_scale = math.hypot(wy * uy if vy > 0 else 0.0, wx * ux if vx > 0 else 0.0)
    dof = 2.0 / (u_scale * u_scale) if u_scale > 0 else math.inf
    return (ResidualNoise(math.sqrt(var), math.sqrt(vy), math.sqrt(vx), gain, u_rel, dof, method, uy, ux,
                          output.estimator, drive.estimator), spectrum)


def chi2_red_limit(dof: int, noise_dof: float = math.inf) -> float:
    """χ²ᵣ above which the residuals show structure beyond the noise: the 99.9 % point of F(ν, ν_σ).

    With the noise known (``noise_dof`` infinite: a σ from the fit's own covariance model) that is the
    99.9 % point of χ²/ν. scipy.special's quantiles, without loading scipy.stats (same values).
    """
    from scipy.special import chdtri, fdtri

    if not math.isfinite(noise_dof):
        return float(chdtri(dof, 0.001) / dof)
    return float(fdtri(dof, noise_dof, 0.999))
