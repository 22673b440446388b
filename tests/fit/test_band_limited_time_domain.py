"""The time-domain refinement (time_domain=True) honours a band-limited drive, and keeps the first-order hold otherwise.

The simulation takes the drive as linear between samples; for a drive behind an anti-alias filter its
samples are first pre-filtered by 1/sinc²(ωT/2) (benchfit.model.filter.band_limit_prefilter), so the
simulated output has the continuous response H(j·2πf) in band. The captures and the truth are those of
tests/fit/test_band_limited_drive.py (the textbook Fourier series of a square through the impedance
divider of the L-C ladder), imported, not copied.

Both channels carry white noise of sd NOISE, and the residual of a right model is the output's noise minus
the drive's noise passed through the model, of variance NOISE²·(1 + Σ|g_n|²) with g the model's impulse
response (the variance of filtered white noise; Σ|g_n|² = mean of |H|² over the frequency circle, Parseval).
The fit whitens its residual by that noise's spectrum NOISE²·(1 + |H(f)|²), its levels estimated from the two
channels (benchfit.fit.tdnoise), so its own χ²ᵣ is checked here as well as the residual against the
synthesised noise: the estimates against the truth (within their stated u), χ²ᵣ of a right model inside the F(ν, ν_σ) interval of a ratio of two variance
estimates, and structure the model lacks (a mains tone on the output lead) above it, with every fit
uncertainty scaled by √χ²ᵣ.
"""

from __future__ import annotations

import math
from functools import lru_cache

import numpy as np
import pytest
from scipy.signal import freqz
from scipy.stats import chi2, f

from benchfit.capture.capture import Capture
from benchfit import fit_lowpass
from benchfit.model.filter import (LowpassParts, _inverse_sinc2_series, band_limit_prefilter, free_response_basis,
                                   prefilter_drive, prefiltered_transfer, simulate_band_limited)
from test_band_limited_drive import C, F, FS, L, RESR, RLOAD, RS, _band_limited, _h, _period, _sharp, _with_noise

NOISE = 3e-5  # the band-limited capture's noise on each channel (test_band_limited_drive._band_limited)
SHARP_NOISE = 2e-3  # the sharp-edged capture's (test_band_limited_drive._sharp)
FIX = {"L": L, "Rload": RLOAD}
#: two-sided 99.9 % point of a normal z (the noise estimates' z-scores are honest: test_time_domain_noise.py)
Z_999 = 3.29


def _noise_gain() -> float:
    """Σ|g_n|² of the divider: the mean of |H|² over the frequency circle (1 Hz grid)."""
    grid = np.fft.rfftfreq(int(FS), 1.0 / FS)
    gain = np.abs(_h(np.maximum(grid, 1e-9))) ** 2
    return float(2.0 * gain[1:-1].sum() + gain[0] + gain[-1]) / int(FS)


def _chi2_of_noise(residual: np.ndarray) -> float:
    """Σ residual² over its variance for a right model: the output's noise and the drive's through H."""
    return float(residual @ residual) / (NOISE ** 2 * (1.0 + _noise_gain()))


@lru_cache(maxsize=None)
def _fit(kind: str, seed: int, hum_v: float = 0.0):
    """The time-domain fit of a capture of test_band_limited_drive, with a 60 Hz tone of amplitude hum_v on the output."""
    cap = (_band_limited if kind == "band-limited" else _sharp)(seed)
    if hum_v:
        s = cap.samples.copy()
        s[1] = s[1] + hum_v * np.sin(2 * np.pi * 60.0 * np.arange(cap.n_samples) / FS)
        cap = Capture(s, FS, cap.channel_names, cap.units, source=f"hum-{cap.source}")
    return fit_lowpass(cap, fix=FIX, time_domain=True)


def _noise_is_estimated(r, noise: float) -> None:
    """The fit's noise record against the synthesised noise, and its χ²ᵣ inside the interval of a right model."""
    nz = r.adequacy["noise"]
    # each channel's white level within its stated u of the truth, and the residual's σ² = σ_y² + σ_x²·Σ|g|²
    # (the divider's Σ|g|², computed here) within the combination's
    assert abs(nz["sigma_output"] ** 2 / noise ** 2 - 1.0) < Z_999 * nz["u_rel_var_output"], nz
    assert abs(nz["sigma_drive"] ** 2 / noise ** 2 - 1.0) < Z_999 * nz["u_rel_var_drive"], nz
    # Σ|g|² rests on the damping Rs + Resr and on L·C, fitted here to better than 10⁻³ of the divider's
    assert nz["noise_gain"] == pytest.approx(_noise_gain(), rel=1e-3)
    assert abs(nz["sigma"] ** 2 / (noise ** 2 * (1.0 + _noise_gain())) - 1.0) < Z_999 * nz["u_rel_var"], nz
    # χ²ᵣ is the residual's variance over an estimated one: inside the central 99.9 % of F(ν, ν_σ)
    # (scipy.stats.f), the upper point being the fit's own limit
    dof, chi2_red = r.adequacy["dof"], r.adequacy["chi2_red"]
    assert r.adequacy["chi2_red_limit"] == pytest.approx(float(f.ppf(0.999, dof, nz["dof"])), rel=1e-9)
    assert float(f.ppf(0.0005, dof, nz["dof"])) < chi2_red < float(f.ppf(0.9995, dof, nz["dof"])), chi2_red
    assert not any(w.startswith("fit: the residuals are") for w in r.warnings)


@pytest.mark.parametrize("seed", range(3))
def test_band_limited_time_domain_leaves_noise_only_and_finds_the_parts(seed):
    r = _fit("band-limited", seed)
    de = r.adequacy["drive_edges"]
    assert de["drive_edges"] == "band-limited" and de["decided"]
    td = de["time_domain"]
    assert "1/sinc²" in td["simulation"] and td["samples_dropped_each_end"] == 7
    assert td["images_rel"] is not None and td["images_over_u"] is not None
    # the fit's own check, and the residual against the synthesised noise: below the 99.9 % point of χ²
    # (scipy.stats.chi2) for its degrees of freedom — residuals are noise only
    assert r.adequacy["chi2_red"] < r.adequacy["chi2_red_limit"]
    res = r.curves.residual
    assert res.size == r.curves.data.size == int(FS * 2.0) - 14
    assert _chi2_of_noise(res) < chi2.ppf(0.999, res.size - 3)
    _noise_is_estimated(r, NOISE)
    # the parts within 3 combined standard uncertainties of the divider's values (a 3σ bound)
    for name, truth in (("C", C), ("Rs", RS), ("Resr", RESR)):
        p = r.parameters[name]
        assert p.stderr is not None and abs(p.value - truth) < 3 * p.stderr, (seed, name, p.value, p.stderr)


def test_band_limited_time_domain_forced_sharp_shows_the_model_error():
    # the first-order-hold simulation of the same samples fits worse on the same output samples: the two
    # models have the same parameters, so Δχ² = 2·ln(likelihood ratio); above 2·ln(1000) the data favour
    # the band-limited model by more than 1000 to 1 (equal-size models, AIC; common practice, no source)
    band = _fit("band-limited", 0)
    sharp = fit_lowpass(_band_limited(0), fix=FIX, time_domain=True, drive_edges="sharp")
    assert sharp.adequacy["drive_edges"]["time_domain"]["samples_dropped_each_end"] == 0
    assert np.allclose(sharp.curves.time_s[7:-7], band.curves.time_s)
    gain = _chi2_of_noise(sharp.curves.residual[7:-7]) - _chi2_of_noise(band.curves.residual)
    assert gain > 2.0 * math.log(1000.0), gain
    # but only by Δχ² ≈ 10² on 96 000 samples (measured): far inside the spread of χ²ᵣ (its noise estimate's
    # u is 2.6 %), so the fit's own check cannot see it and does not flag it
    assert sharp.adequacy["chi2_red"] < sharp.adequacy["chi2_red_limit"]


def test_unmodelled_structure_is_flagged_and_scales_the_uncertainties():
    # mains pickup on the output lead, 4 mV at 60 Hz (between the drive's harmonics): no part of the model can
    # produce it, so the residual carries its power A²/2. The fit weighs the residual by its noise spectrum,
    # S(f) = σ_y² + σ_x²·|H(f)|² (the drive's noise through the model; 60 Hz is near the resonance, where that
    # term is most of S), so χ²ᵣ rises by A²/(2·S(60 Hz)); S from the fit's noise levels and the divider's H
    # (computed here). The noise levels themselves are unchanged: the tone is one periodogram bin, which the
    # median ignores
    clean, hum = _fit("sharp", 0), _fit("sharp", 0, 4e-3)
    nz = hum.adequacy["noise"]
    assert nz["sigma"] == pytest.approx(clean.adequacy["noise"]["sigma"], rel=1e-3)
    rise = hum.adequacy["chi2_red"] - clean.adequacy["chi2_red"]
    amp, n = 4e-3, hum.curves.residual.size
    s60 = nz["sigma_output"] ** 2 + nz["sigma_drive"] ** 2 * float(np.abs(_h(np.array([60.0]))[0]) ** 2)
    expected = amp ** 2 / 2.0 / s60
    # up to the cross term 2·Σ e·a of the noise and the tone, of relative sd 2√2·√S/(A·√n), at its two-sided
    # 99.9 % point; the tone, orthogonal over the record to the drive's harmonics, is not absorbed
    cross = 2.0 * math.sqrt(2.0) * math.sqrt(s60) / (amp * math.sqrt(n))
    assert rise == pytest.approx(expected, rel=Z_999 * cross), (rise, expected)
    assert hum.adequacy["chi2_red"] > hum.adequacy["chi2_red_limit"]
    assert any(w.startswith("fit: the residuals are") and "Birge" in w for w in hum.warnings)
    # the covariance is the same noise's, scaled by χ²ᵣ: with the same noise and nearly the same parts (moved by
    # ≪ 1 % by the tone) the Jacobians agree, so the ratio of the fit uncertainties is √ of the χ²ᵣ ratio
    scale = math.sqrt(hum.adequacy["chi2_red"] / clean.adequacy["chi2_red"])
    for name in ("C", "Rs", "Resr"):
        p = hum.parameters[name]
        assert p.u_fit / clean.parameters[name].u_fit == pytest.approx(scale, rel=0.01), name
        assert "scaled by √χ²ᵣ" in p.budget.contributions[0].name


@pytest.mark.parametrize("seed", range(2))
def test_sharp_edged_time_domain_keeps_the_first_order_hold(seed):
    r = _fit("sharp", seed)
    de = r.adequacy["drive_edges"]
    assert de["drive_edges"] == "sharp"
    assert de["time_domain"] == {"simulation": "first-order hold (drive linear between samples)",
                                 "samples_dropped_each_end": 0}
    assert r.curves.time_s[0] == 0.0 and r.curves.residual.size == int(FS * 2.0)
    _noise_is_estimated(r, SHARP_NOISE)


def test_prefilter_response_is_inverse_sinc_squared():
    # the taps' response by scipy.signal.freqz against 1/sinc²(ωT/2) from numpy.sinc
    taps = band_limit_prefilter()
    assert taps.size == 15 and np.allclose(taps, taps[::-1])  # symmetric: zero phase about its centre
    w, resp = freqz(taps, worN=2 * np.pi * np.linspace(0.0, 0.45, 901))
    resp = resp * np.exp(1j * w * 7)  # remove the centre's delay of 7 samples
    assert np.max(np.abs(resp.imag)) < 1e-12
    eps = resp.real * np.sinc(w / (2 * np.pi)) ** 2 - 1.0
    # matched to 1/sinc² at DC through s³ (s = sin²(ωT/2)): the error is of order s⁴, so eps/s⁴ stays
    # bounded as ω → 0; a missed s³ (or s²) term of coefficient ≈ 0.1 would make it exceed 100 at ωT = 0.05
    low = (w >= 0.05) & (w < 0.3)
    assert np.max(np.abs(eps[low]) / np.sin(w[low] / 2) ** 8) < 10.0
    # over the band: within 1 % (the orders near 0.45·fs of a square behind an L-C low-pass carry relative
    # uncertainties of tens of per cent, so the size that matters is the χ² test below)
    assert np.max(np.abs(eps)) < 1e-2


def test_prefilter_series_is_that_of_inverse_sinc_squared():
    # x²/sin²x against its series in s = sin²x: the difference is the s⁴ term and beyond (below s⁴ here);
    # at x = 0.03 a coefficient off by 10⁻³ of s³ would exceed s⁴, and rounding (10⁻¹⁶) stays below it
    x = np.array([0.03, 0.1, 0.4])
    s = np.sin(x) ** 2
    series = np.polyval(_inverse_sinc2_series(4)[::-1], s)
    assert np.all(np.abs(series - (x / np.sin(x)) ** 2) < s ** 4)


def test_band_limited_simulation_matches_the_fourier_series_truth():
    # benchfit's band-limited simulation of the noise-free drive against the capture's output, the textbook
    # series through the divider: after the start (an initial state solved by least squares, as the fit
    # does) the two agree far below the noise — Σ(difference)²/NOISE² ≪ 1, so no fitted part moves by more
    # than a small fraction of its u. The hold's images are what the image step removes: near Nyquist the
    # first is about half of H (the ESR's zero keeps H falling only as 1/f there)
    period_t, k, terms = _period(int(0.45 * FS / F), 0.0)
    x = np.tile(0.5 + terms.real.sum(axis=0), 4)
    truth = np.tile(0.5 * RLOAD / (RS + RLOAD) + (_h(k * F)[:, None] * terms).real.sum(axis=0), 4)
    p = LowpassParts(L, C, RS, RESR, RLOAD)
    sim, trim = simulate_band_limited(x, FS, p)
    basis = free_response_basis(p, FS, sim.size)
    target = truth[trim:x.size - trim] - sim
    coef, *_ = np.linalg.lstsq(basis.T, target, rcond=None)
    diff = target - basis.T @ coef
    assert float(diff @ diff) / NOISE ** 2 < 0.01
    images = prefiltered_transfer(k * F, p, FS) / _h(k * F) - 1.0
    assert np.max(np.abs(images)) > 0.1


def test_prefilter_drops_the_ends_it_cannot_cover():
    u = np.arange(20.0)
    out, trim = prefilter_drive(u)
    assert trim == 7 and out.size == 20 - 14
    # a ramp passes a symmetric filter whose taps sum to 1 unchanged (its response at DC is 1, slope kept)
    assert np.allclose(out, u[7:-7])


def test_core_loss_the_harmonic_fit_chose_is_kept_in_the_time_domain():
    # a choke with core loss, Rp = 2 kΩ across L (the divider with Rs + (jωL ∥ Rp) in series, computed here):
    # the harmonic fit calls for Rp (its F-test), and the refinement keeps it. Dropped, the same fit left
    # χ²ᵣ = 10 and called the loss ESR (5.3 Ω for 0.8 Ω, measured) — flagged, but no answer
    rp = 2000.0

    def h_core(freq: np.ndarray) -> np.ndarray:
        w = 2j * np.pi * freq
        zc = RESR + 1.0 / (w * C)
        zp = zc * RLOAD / (zc + RLOAD)
        return zp / (RS + w * L * rp / (w * L + rp) + zp)

    _, k, terms = _period(int(0.45 * FS / F), 0.0)
    x = 0.5 + terms.real.sum(axis=0)
    y = 0.5 * RLOAD / (RS + RLOAD) + (h_core(k * F)[:, None] * terms).real.sum(axis=0)
    r = fit_lowpass(_with_noise(x, y, 0, NOISE, "core-loss"), fix=FIX, time_domain=True)
    assert r.adequacy["model_comparison"]["chosen"].endswith("core loss Rp")
    assert r.adequacy["chi2_red"] < r.adequacy["chi2_red_limit"]
    # the parts within 3 combined standard uncertainties of the divider's values (a 3σ bound)
    for name, truth in (("C", C), ("Rs", RS), ("Resr", RESR), ("Rp", rp)):
        p = r.parameters[name]
        assert p.stderr is not None and abs(p.value - truth) < 3 * p.stderr, (name, p.value, p.stderr)
