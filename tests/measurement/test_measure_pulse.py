"""IEEE Std 181 pulse parameters (benchfit.measurement.pulse): trapezoids with known edges and
duty, an RC edge, an underdamped edge, and a square through AC coupling."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import signal

from benchfit.measurement.pulse import (_running_sum_at, compensate_coupling, estimate_coupling_tau,
                                        fit_coupling, pulse_parameters, state_levels)

from _measurement_signals import FS, times, tone, trapezoid, rc_square


@pytest.mark.parametrize("duty, seconds", [
    (0.30, 0.537),   # ends inside a period
    (0.62, 0.5113),  # ends inside a high state: a partial period must not count
    (0.50, 1.0),
])
def test_trapezoid_duty_and_edges_exact(duty, seconds):
    # A synthetic trapezoid must reproduce its duty exactly (REFERENCES §4 check values);
    # linear 0–100 % edges of 2 ms (96 samples) give t10–90 = 0.8 × 2 ms, found exactly by
    # linear interpolation because both bracketing samples lie on the ramp (the corners are
    # 9.6 samples away from the 10 % and 90 % levels).
    x = trapezoid(times(seconds), 50.37, duty, 2e-3, low=-0.2, high=4.8, delay_s=1.23e-3)
    p = pulse_parameters(x, FS)
    assert p.two_level
    assert p.state_low == pytest.approx(-0.2, abs=1e-12)
    assert p.state_high == pytest.approx(4.8, abs=1e-12)
    assert p.duty_cycle_pct == pytest.approx(100 * duty, abs=1e-9)  # rounding of sample times only
    assert p.rise_time_s == pytest.approx(1.6e-3, rel=1e-9)
    assert p.fall_time_s == pytest.approx(1.6e-3, rel=1e-9)
    assert p.period_s == pytest.approx(1 / 50.37, rel=1e-9)
    assert p.overshoot_pct == 0.0 and p.undershoot_pct == 0.0
    assert p.n_periods == int(seconds * 50.37 - 1.23e-3 * 50.37)  # whole periods after the first rise


def test_partial_period_would_bias_a_naive_average():
    # the same record measured naively (high samples / all samples) is off: shows the check bites
    x = trapezoid(times(0.5113), 50.37, 0.62, 200e-6, delay_s=1.23e-3)
    naive = 100 * float(np.mean(x > 0.5))
    assert abs(naive - 62.0) > 0.2
    assert pulse_parameters(x, FS).duty_cycle_pct == pytest.approx(62.0, abs=1e-9)  # exact trapezoid


def test_rc_edge_rise_time_is_tau_ln9():
    # single-pole RC edge: t10–90 = τ·ln 9 = 2.19722 τ (REFERENCES §4/§6, derivable).
    # τ = 0.5 ms is 24 samples; linear interpolation on the exponential errs by < 1e-4 relative.
    tau = 0.5e-3
    x = rc_square(times(0.8), 40.0, 0.5, tau, low=0.0, high=2.0)  # 12.5 ms flats = 25 τ
    p = pulse_parameters(x, FS)
    assert p.rise_time_s == pytest.approx(tau * math.log(9), rel=2e-4)
    assert p.fall_time_s == pytest.approx(tau * math.log(9), rel=2e-4)
    assert p.duty_cycle_pct == pytest.approx(50.0, abs=0.01)  # equal RC delays on both edges


def test_underdamped_edge_overshoot():
    # second-order low-pass step response: overshoot M_p = exp(−πζ/√(1−ζ²)) (Ogata, Modern
    # Control Engineering; REFERENCES §6). The square (edges on samples) drives an exact
    # zero-order-hold simulation by scipy.signal.lsim; f0 = 800 Hz gives 60 samples per
    # ringing period, so the sampled peak is within 0.2 % of amplitude of the true one.
    zeta, f0 = 0.3, 800.0
    w0 = 2 * math.pi * f0
    t = times(0.6)
    sq = np.where(np.mod(np.arange(t.size), 960) < 480, 1.0, 0.0)  # 50 Hz, 50 %
    _, y, _ = signal.lsim(([w0 ** 2], [1, 2 * zeta * w0, w0 ** 2]), sq, t)
    y = y[960:]  # drop the first period (start-up)
    p = pulse_parameters(y, FS)
    mp = 100 * math.exp(-math.pi * zeta / math.sqrt(1 - zeta ** 2))
    assert p.two_level
    assert p.overshoot_pct == pytest.approx(mp, abs=0.2)
    assert p.undershoot_pct == pytest.approx(mp, abs=0.2)  # symmetric for a linear system
    # the histogram modes ignore the ringing peaks (IEEE 181 state levels)
    assert p.state_high == pytest.approx(1.0, abs=2e-3)
    assert p.state_low == pytest.approx(0.0, abs=2e-3)


def _ac_coupled_square(duty=0.62, f=60.0, corner_hz=3.0, seconds=1.0, noise=0.0, seed=0):
    """60 Hz square through a first-order 3 Hz high-pass (scipy.signal.butter, bilinear),
    in steady state (the first 0.5 s ≈ 9.4 τ is discarded)."""
    t = times(seconds + 0.5)
    sq = trapezoid(t, f, duty, 30e-6, low=-1.0, high=1.0, delay_s=0.4e-3)
    b, a = signal.butter(1, corner_hz, "highpass", fs=FS)
    y = signal.lfilter(b, a, sq)[int(0.5 * FS):]
    if noise:
        y = y + np.random.default_rng(seed).normal(0, noise, y.size)
    return y


def test_ac_coupled_square_is_compensated():
    # τ of a first-order high-pass with corner fc is 1/(2π fc) = 53.05 ms for 3 Hz.
    tau_true = 1 / (2 * math.pi * 3.0)
    y = _ac_coupled_square(noise=2e-3, seed=4)
    fit = fit_coupling(y, FS)
    assert fit is not None
    # the bilinear discretisation warps 3 Hz by < 1e-8; the noise leaves ~0.05 % on τ
    assert fit.tau_s == pytest.approx(tau_true, rel=3e-3)
    assert fit.tau_u_s < 0.01 * tau_true
    assert estimate_coupling_tau(y, FS) == pytest.approx(fit.tau_s)  # same computation
    p = pulse_parameters(y, FS)
    assert p.coupling_source == "estimated"
    assert p.duty_cycle_pct == pytest.approx(62.0, abs=0.05)  # noise moves edges by ~ns
    assert p.state_high - p.state_low == pytest.approx(2.0, rel=5e-3)  # modes of noisy states: ~1e-3
    assert p.overshoot_pct < 0.5  # noise peaks only (2 mV of 2 V ≈ 0.1 % per σ)
    # without compensation the droop masquerades as a level step: the check above bites
    raw = pulse_parameters(y, FS, compensate=False)
    assert raw.overshoot_pct > 3.0
    assert abs((raw.state_high - raw.state_low) - 2.0) > 0.03


@pytest.mark.parametrize("square_hz, corner_hz", [(5.0, 3.0), (10.0, 20.0), (20.0, 1.0), (5.0, 0.5)])
def test_estimate_coupling_tau_for_calibration(square_hz, corner_hz):
    # the calibration use: a 5–20 Hz square recorded through the card; droop from 1 % to 99 %
    # per half period. τ = 1/(2π fc) of scipy.signal.butter's first-order high-pass.
    t = times(4.0)
    sq = trapezoid(t, square_hz, 0.5, 30e-6, low=-0.5, high=0.5, delay_s=0.4e-3)
    b, a = signal.butter(1, corner_hz, "highpass", fs=FS)
    y = signal.lfilter(b, a, np.tile(sq, 2))[t.size:]  # steady state: the second copy
    y = y + np.random.default_rng(7).normal(0, 3e-4, t.size)
    tau = estimate_coupling_tau(y, FS)
    # 0.3 mV noise gives ≤ 0.03 % on τ in these cases (seeded runs); 0.2 % allows margin
    assert tau == pytest.approx(1 / (2 * math.pi * corner_hz), rel=2e-3)


def test_calibrated_coupling_is_used():
    tau_true = 1 / (2 * math.pi * 3.0)
    y = _ac_coupled_square(duty=0.4)
    p = pulse_parameters(y, FS, coupling_tau_s=tau_true)
    assert p.coupling_source == "calibration"
    assert p.coupling_tau_s == tau_true
    assert p.duty_cycle_pct == pytest.approx(40.0, abs=0.01)  # noise-free
    assert p.state_high - p.state_low == pytest.approx(2.0, rel=1e-3)  # noise-free; histogram-mode median


def test_compensation_inverts_a_first_order_highpass():
    # the inverse of y' = x' − y/τ is x = y + (1/τ)∫y dt: a ramp-free record comes back
    tau = 0.02
    t = times(1.0)
    x = trapezoid(t, 25.0, 0.5, 1e-4, low=-1, high=1) + 0.3 * np.sin(2 * math.pi * 75 * t)
    b, a = signal.butter(1, 1 / (2 * math.pi * tau), "highpass", fs=FS)
    y = signal.lfilter(b, a, np.tile(x, 2))[t.size:]  # steady state: second copy
    z = compensate_coupling(y, FS, tau, span=t.size)
    err = (z - z.mean()) - (x - x.mean())
    # the trapezoidal integral is the exact inverse of the bilinear (scipy.signal.butter)
    # high-pass; what is left is the filter's start-up tail after 50 τ and rounding
    assert float(np.sqrt(np.mean(err ** 2))) < 1e-6


def test_no_coupling_found_on_dc_coupled_or_sine():
    assert estimate_coupling_tau(trapezoid(times(0.5), 50.0, 0.5, 1e-4), FS) is None
    assert estimate_coupling_tau(tone(times(0.5), 50.0, 1.0, 0.0), FS) is None


def test_sine_is_not_two_level():
    # a sine has ~41 % of its samples within ±10 % of amplitude of its extremes: not bimodal
    s = state_levels(tone(times(0.5), 50.0, 1.0, 0.3))
    assert not s.two_level
    assert 0.35 < s.fraction_in_states < 0.5  # arcsine law: 2·acos(0.8)/π = 0.41
    p = pulse_parameters(tone(times(0.5), 50.0, 1.0, 0.3), FS)
    assert not p.two_level and p.duty_cycle_pct is None and p.rise_time_s is None


def test_noisy_square_duty_uncertainty_is_honest():
    # duty_cycle_u_pct = spread of per-period ratios / √n; compare with the spread of the
    # duty over 40 seeded records (±35 %: Monte Carlo error of a 40-run std is 11 %)
    vals, us = [], []
    for seed in range(40):
        rng = np.random.default_rng(seed)
        x = trapezoid(times(0.3), 50.0, 0.45, 300e-6, delay_s=rng.uniform(0, 0.02))
        x = x + rng.normal(0, 0.02, x.size)
        p = pulse_parameters(x, FS)
        vals.append(p.duty_cycle_pct)
        us.append(p.duty_cycle_u_pct)
    assert float(np.mean(us)) == pytest.approx(float(np.std(vals, ddof=1)), rel=0.35)
    assert float(np.mean(vals)) == pytest.approx(45.0, abs=0.01)  # mean of 40: ~0.002 % std


def test_heavy_droop_is_still_found():
    # a cheap card with a 20 Hz corner: a 50 Hz square droops ~70 % per half period, so only
    # ~20 % of the raw samples sit near the states; the droop fit still recovers τ = 1/(2π·20 Hz)
    t = times(2.5)
    sq = trapezoid(t, 50.0, 0.6, 30e-6, low=-1.0, high=1.0, delay_s=0.4e-3)
    b, a = signal.butter(1, 20.0, "highpass", fs=FS)
    y = signal.lfilter(b, a, sq)[int(1.5 * FS):] + np.random.default_rng(1).normal(0, 1e-3, 48000)
    p = pulse_parameters(y, FS)
    assert p.two_level and p.coupling_source == "estimated"
    # 1 mV noise on 2 V leaves ~0.05 % on τ; 0.3 % allows 6σ
    assert p.coupling_tau_s == pytest.approx(1 / (2 * math.pi * 20.0), rel=3e-3)
    assert p.duty_cycle_pct == pytest.approx(60.0, abs=0.02)  # 1 mV noise on 30 µs edges: ~1e-3 %


@pytest.mark.parametrize("kind", ["sine", "sine+2nd", "triangle", "sawtooth", "noise"])
def test_no_droop_or_pulse_found_on_other_waves(kind):
    from _measurement_signals import fourier_wave

    t = times(1.0)
    x = {"sine": lambda: tone(t, 50.0, 1.0, 0.3),
         "sine+2nd": lambda: tone(t, 50.0, 1.0, 0.3) + 0.3 * np.sin(2 * math.pi * 100.0 * t),
         "triangle": lambda: fourier_wave(t, 50.3, "triangle"),
         "sawtooth": lambda: fourier_wave(t, 50.3, "sawtooth"),
         "noise": lambda: np.random.default_rng(0).normal(size=t.size)}[kind]()
    p = pulse_parameters(x, FS)
    assert not p.two_level and p.coupling_tau_s is None


@pytest.mark.parametrize("n", [1, 97, 48_000])
def test_running_sum_at_the_flats_is_numpys_cumsum(n):
    # the droop fit's running sum at a subset of indices equals numpy.cumsum's there (oracle:
    # numpy.cumsum); the two sum in a different order, so equal within rounding of a sum of n terms
    rng = np.random.default_rng(n)
    x = rng.normal(0.45, 1.0, n)
    idx = np.unique(rng.integers(0, n, size=max(1, n // 7)))
    want = np.cumsum(x)[idx]
    got = _running_sum_at(x, idx, x[idx])
    assert np.allclose(got, want, rtol=0, atol=n * 4 * np.spacing(np.max(np.abs(np.cumsum(x)))))
