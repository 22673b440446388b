"""Ring-down's derived values and their uncertainties, with the ω_d–α covariance.

Checked against sources outside the code under test: the first-order law of propagation
with the covariance term written out by hand (GUM, JCGM 100:2008 5.2.2), and a seeded
Monte Carlo propagation of distributions (JCGM 101:2008, 7) with numpy.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from benchfit.fit.ringdown import combine_rings, ring_figures

TWO_PI = 2 * math.pi


def _cov(u_w: float, u_a: float, rho: float) -> np.ndarray:
    return np.array([[u_w * u_w, rho * u_w * u_a], [rho * u_w * u_a, u_a * u_a]])


@pytest.mark.parametrize("rho", [-0.8, 0.0, 0.6])
def test_ring_figures_match_the_gum_formula_with_the_covariance_term(rho):
    wd, al = TWO_PI * 50.0, 15.0  # a hum-check tank: f_d = 50 Hz, Q ≈ 10
    cov = _cov(0.4, 0.3, rho)
    d = ring_figures(wd, al, cov)
    w0 = math.hypot(wd, al)
    # GUM 5.2.2: u²(y) = Σ c_i² u_i² + 2 c_1 c_2 u(x_1, x_2), c_i the partial derivatives
    g_w0 = np.array([wd / w0, al / w0])
    g_q = np.array([wd / (2 * al * w0), -wd * wd / (2 * al * al * w0)])  # Q = ω0/(2α)
    assert d["resonant_frequency_hz"].value == pytest.approx(w0 / TWO_PI, rel=1e-15)
    assert d["q_factor"].value == pytest.approx(w0 / (2 * al), rel=1e-15)
    # first-order propagation is exact arithmetic on both sides: agreement to rounding
    assert d["resonant_frequency_hz"].stderr == pytest.approx(math.sqrt(g_w0 @ cov @ g_w0) / TWO_PI, rel=1e-12)
    assert d["q_factor"].stderr == pytest.approx(math.sqrt(g_q @ cov @ g_q), rel=1e-12)
    assert d["damped_frequency_hz"].stderr == pytest.approx(0.4 / TWO_PI, rel=1e-12)
    assert d["decay_rate_per_s"].stderr == pytest.approx(0.3, rel=1e-12)


def test_the_covariance_changes_q_uncertainty_as_the_formula_says():
    # Q's two sensitivities have opposite signs, so a positive ω_d–α correlation lowers u(Q)
    # (GUM 5.2.2 covariance term); dropping the covariance would overstate it here
    wd, al = TWO_PI * 50.0, 15.0
    u_indep = ring_figures(wd, al, _cov(0.4, 0.3, 0.0))["q_factor"].stderr
    u_corr = ring_figures(wd, al, _cov(0.4, 0.3, 0.9))["q_factor"].stderr
    assert u_indep is not None and u_corr is not None and u_corr < u_indep


def test_ring_figures_agree_with_a_monte_carlo_propagation():
    # JCGM 101:2008: draw (ω_d, α) from the bivariate normal, evaluate the model, take the
    # standard deviation. Relative input uncertainties of 0.5 % and 2 % keep the model linear
    # enough that first order and Monte Carlo agree to well under 1 %; with 200,000 draws the
    # Monte Carlo standard deviation itself scatters by 1/√(2N) ≈ 0.16 %, so 1 % is > 5 σ.
    wd, al = TWO_PI * 50.0, 15.0
    cov = _cov(0.005 * wd, 0.02 * al, 0.5)
    d = ring_figures(wd, al, cov)
    rng = np.random.default_rng(2026)
    x = rng.multivariate_normal([wd, al], cov, size=200_000)
    w0 = np.hypot(x[:, 0], x[:, 1])
    assert d["resonant_frequency_hz"].stderr == pytest.approx(np.std(w0) / TWO_PI, rel=0.01)
    assert d["q_factor"].stderr == pytest.approx(np.std(w0 / (2 * x[:, 1])), rel=0.01)


def test_combined_rings_keep_the_correlation_of_independent_rings():
    # Monte Carlo (JCGM 101) over independent rings with their own covariances: the weighted
    # means' correlation over seeded repeats must match the reported one. 4,000 repeats give
    # the empirical correlation a standard error of about (1 − ρ²)/√N ≈ 0.013, so 0.05 is ~4 σ.
    rng = np.random.default_rng(7)
    k = 6
    u_w = rng.uniform(0.2, 0.6, k)
    u_a = rng.uniform(0.1, 0.4, k)
    rho = rng.uniform(0.3, 0.8, k)
    covs = [_cov(u_w[i], u_a[i], rho[i]) for i in range(k)]
    truth = np.array([TWO_PI * 50.0, 15.0])
    n = 4000
    draws = np.stack([rng.multivariate_normal(truth, c, size=n) for c in covs], axis=1)  # (n, k, 2)
    means = []
    reported = []
    for j in range(n):
        wd, al, cov = combine_rings(draws[j, :, 0], draws[j, :, 1], u_w ** 2, u_a ** 2, rho * u_w * u_a)
        means.append((wd, al))
        reported.append(cov[0, 1] / math.sqrt(cov[0, 0] * cov[1, 1]))
    m = np.array(means)
    empirical = float(np.corrcoef(m[:, 0], m[:, 1])[0, 1])
    assert np.ptp(reported) < 1e-12  # the correlation does not depend on the Birge widening
    assert reported[0] == pytest.approx(empirical, abs=0.05), (reported[0], empirical)
    # and the unwidened covariance is the formula's Σ w v cov / (Σw Σv)
    w, v = 1 / u_w ** 2, 1 / u_a ** 2
    c = float(np.sum(w * v * rho * u_w * u_a) / (np.sum(w) * np.sum(v)))
    assert reported[0] == pytest.approx(c * math.sqrt(np.sum(w) * np.sum(v)), rel=1e-12)
