"""Pure model functions of the lc-lowpass circuit against textbook values and scipy.

Check values are those of REFERENCES §6 (computed there from the textbook formulas and
checked against a scipy step simulation): Nilsson & Riedel, "Electric Circuits" (series
RLC: ω0 = 1/√(LC), Q = (1/R)·√(L/C)); Alexander & Sadiku, "Fundamentals of Electric
Circuits" (loaded divider H(s)). Tolerances are the number of digits the reference gives.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import signal

from benchfit.model.filter import (LowpassParts, coefficients, discretize, feedthrough, free_response_basis,
                                   rectangular_phasors, sampled_transfer, second_order, simulate, state_space,
                                   transfer)


def test_series_rlc_check_values():
    # REFERENCES §6: L = 100 µH, C = 10 µF, R = 0.5 Ω → f0 = 5032.921 Hz, Q = 6.324555,
    # f_d = 5017.169 Hz; decay rate R/(2L) = 2500 1/s (envelope τ = 2L/R = 400 µs)
    fig = second_order(LowpassParts(100e-6, 10e-6, 0.5))
    assert fig["resonant_frequency_hz"] == pytest.approx(5032.921, abs=5e-4)
    assert fig["q_factor"] == pytest.approx(6.324555, abs=5e-7)
    assert fig["damped_frequency_hz"] == pytest.approx(5017.169, abs=5e-4)
    assert fig["decay_rate_per_s"] == pytest.approx(1 / 400e-6, rel=1e-12)
    # textbook form Q = (1/R)·√(L/C) (Nilsson & Riedel)
    assert fig["q_factor"] == pytest.approx(math.sqrt(100e-6 / 10e-6) / 0.5, rel=1e-12)


def test_loaded_check_values():
    # REFERENCES §6 with R_L = 10 Ω, r_c = 0.05 Ω: f0 = 5144.365 Hz, Q = 2.09241,
    # DC gain 0.952381, |H| = 0.985205 (1 kHz), 2.03616 (5 kHz), 0.0670297 (20 kHz)
    p = LowpassParts(100e-6, 10e-6, 0.5, 0.05, 10.0)
    fig = second_order(p)
    # REFERENCES §6's f0 = √(a0/a2)/2π is the loaded natural frequency (issue 11 names it apart);
    # resonant_frequency_hz is the L-C resonance 1/(2π√(LC)) of DESIGN.md (textbook, Nilsson & Riedel)
    assert fig["natural_frequency_hz"] == pytest.approx(5144.365, abs=5e-4)
    assert fig["resonant_frequency_hz"] == pytest.approx(1 / (2 * math.pi * math.sqrt(100e-6 * 10e-6)), rel=1e-12)
    assert fig["q_factor"] == pytest.approx(2.09241, abs=5e-6)
    assert abs(transfer(0.0, p)) == pytest.approx(0.952381, abs=5e-7)
    mags = np.abs(transfer(np.array([1e3, 5e3, 20e3]), p))
    assert mags == pytest.approx([0.985205, 2.03616, 0.0670297], rel=5e-6)


def test_transfer_equals_impedance_divider():
    # direct impedance algebra: H = Z_sh/(Rs + sL + Z_sh), Z_sh = Rload ∥ (Resr + 1/(sC))
    p = LowpassParts(0.3, 33e-6, 20.0, 1.5, 10e3)
    f = np.geomspace(1.0, 1e5, 50)
    s = 2j * math.pi * f
    zc = p.Resr + 1 / (s * p.C)
    zsh = p.Rload * zc / (p.Rload + zc)
    h = zsh / (p.Rs + s * p.L + zsh)
    assert np.allclose(transfer(f, p), h, rtol=1e-12, atol=0)  # rounding only
    # and the textbook polynomials (REFERENCES §6) times 1/R_L are what coefficients() gives
    b, a = coefficients(p)
    RL, rc, R, L, C = p.Rload, p.Resr, p.Rs, p.L, p.C
    a_book = np.array([L * C * (RL + rc), L + C * (R * (RL + rc) + RL * rc), R + RL]) / RL
    assert np.allclose(a, a_book, rtol=1e-14)
    assert np.allclose(b, np.array([RL * rc * C, RL]) / RL, rtol=1e-14)


def test_open_output_is_the_plain_series_rlc():
    p = LowpassParts(0.3, 33e-6, 20.0, 0.0, math.inf)
    f = np.array([10.0, 50.0, 200.0])
    s = 2j * math.pi * f
    assert np.allclose(transfer(f, p), 1 / (p.L * p.C * s * s + p.Rs * p.C * s + 1), rtol=1e-13)


def test_state_space_matches_transfer():
    p = LowpassParts(0.3, 33e-6, 20.0, 1.5, 10e3)
    a, b, c = state_space(p)
    f = np.array([5.0, 50.0, 500.0, 5000.0])
    h_ss = [c @ np.linalg.solve(2j * math.pi * fi * np.eye(2) - a, b) for fi in f]
    assert np.allclose(h_ss, transfer(f, p), rtol=1e-12)


def test_simulation_matches_scipy_lsim():
    # scipy.signal.lsim with interp=True also holds the input linear between samples, so
    # the exact first-order-hold discretisation must agree to rounding (independent code)
    rng = np.random.default_rng(7)
    p = LowpassParts(100e-6, 10e-6, 0.5, 0.05, 10.0)
    fs = 1e6
    u = np.cumsum(rng.normal(size=3000))
    t = np.arange(u.size) / fs
    b, a = coefficients(p)
    _, y_ref, _ = signal.lsim((b, a), u, t, interp=True)
    assert np.max(np.abs(simulate(u, fs, p) - y_ref)) < 1e-9 * np.max(np.abs(y_ref))
    am, bm, cm = state_space(p)
    _, y_ref2, _ = signal.lsim((am, bm[:, None], cm[None, :], np.zeros((1, 1))), u, t,
                               X0=[0.02, -0.3], interp=True)
    y2 = simulate(u, fs, p, x0=(0.02, -0.3))
    assert np.max(np.abs(y2 - y_ref2)) < 1e-9 * np.max(np.abs(y_ref2))


@pytest.mark.parametrize("rp", [math.inf, 2000.0])
def test_sampled_transfer_is_the_steady_state_of_scipy_lsim(rp):
    # a sampled square drive (40 samples a period, not band-limited) through scipy.signal.lsim with
    # interp=True (independent code holding the input linear between samples): in steady state the
    # output's DFT over whole periods divided by the drive's is sampled_transfer at every harmonic;
    # H(j·2πkf) is off by about (π·k·f/fs)²/3 there (2 % at k = 3), the aliasing the fit must not see
    p = LowpassParts(0.3, 33e-6, 50.0, 1.5, 1e4, rp)
    fs, f, per = 2000.0, 50.0, 40
    u = np.tile(np.where(np.arange(per) < per // 2, 12.0, 0.0), 60)
    t = np.arange(u.size) / fs
    am, bm, cm = state_space(p)
    dm = np.array([[feedthrough(p)]])
    _, y, _ = signal.lsim((am, bm[:, None], cm[None, :], dm), u, t, interp=True)
    last = slice(u.size - 10 * per, u.size)  # after 50 periods: the transient is e^-70 down
    k = np.array([1, 3, 5, 7, 9])
    hk = np.fft.rfft(y[last])[10 * k] / np.fft.rfft(u[last])[10 * k]
    assert np.max(np.abs(hk / sampled_transfer(k * f, p, fs) - 1)) < 1e-6
    assert abs(hk[1] / transfer(3 * f, p) - 1) > 1e-2
    # and it tends to H(j·2πf) as the sampling gets fine
    assert np.max(np.abs(sampled_transfer(k * f, p, 1e7) / transfer(k * f, p) - 1)) < 1e-6


def test_step_response_textbook_overshoot():
    # underdamped step: overshoot = exp(−πζ/√(1−ζ²)) = 0.779467, peak at t_p = π/ω_d = 99.658 µs
    # (REFERENCES §6; Ogata, "Modern Control Engineering")
    p = LowpassParts(100e-6, 10e-6, 0.5)
    fs = 20e6
    u = np.ones(int(400e-6 * fs))
    u[0] = 0.0  # from rest, the step rises over the first sample (first-order hold)
    y = simulate(u, fs, p)
    k = int(np.argmax(y))
    # the step is centred half a sample late: overshoot to 1e-4, peak time to 2 samples
    assert y[k] - 1.0 == pytest.approx(0.779467, abs=1e-4)
    assert k / fs - 0.5 / fs == pytest.approx(99.658e-6, abs=2 / fs)


def test_discretisation_is_stable_and_free_response_decays():
    p = LowpassParts(0.3, 33e-6, 20.0, 1.5, 10e3)
    _, den = discretize(p, 48000.0)
    assert np.all(np.abs(np.roots(den)) < 1)  # poles inside the unit circle for a lossy circuit
    basis = free_response_basis(p, 48000.0, 48000)
    alpha = second_order(p)["decay_rate_per_s"]
    # envelope after 1 s is e^{−α·1 s} of the start (within the oscillation's phase)
    assert np.max(np.abs(basis[1, -500:])) < 2 * math.exp(-alpha * (1 - 500 / 48000)) * np.max(np.abs(basis[1]))


def test_rectangular_phasors_match_fft():
    # Fourier series of a pulse train (REFERENCES §5): |a_k| = (2/(kπ))·|sin(kπD)|, checked by FFT
    n, duty = 10000, 0.3
    x = (np.arange(n) < duty * n).astype(float)
    spec = np.fft.rfft(x) / n * 2
    k = np.arange(1, 12)
    ref = spec[k]
    # the sampled pulse's edges sit on samples: agreement to the discretisation, (πk/n)² ≈ 1e-6
    assert np.allclose(rectangular_phasors(k, duty), ref, atol=2e-4)
