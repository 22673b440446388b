"""The interval tracker: chained phases, restarts, per-interval level/THD/duty, purity."""

from __future__ import annotations

import math

import numpy as np
import pytest

from benchfit.measurement.drift import IntervalTracker, midpoint_phase
from benchfit.measurement.tone import fit_harmonics

FS = 2000.0


def _tone(f, n, phase=0.0, start=0, amp=1.0):
    t = (start + np.arange(n)) / FS
    return amp * np.cos(2 * math.pi * f * t + phase)


def test_midpoint_phase_of_a_noise_free_tone():
    """A noise-free tone: the phase at the record's midpoint is 2π f t_mid + φ (definition)."""
    n = 1000
    x = _tone(50.0, n, phase=0.3)
    fit = fit_harmonics(x, FS, 50.0, 1)
    psi, u = midpoint_phase(complex(fit.phasors[0]), fit.phasor_cov[0], 50.0, n, FS)
    expect = math.remainder(2 * math.pi * 50.0 * (n - 1) / (2 * FS) + 0.3, 2 * math.pi)
    assert psi == pytest.approx(expect, abs=1e-10)
    assert u < 1e-7  # rounding only: RSS from the normal equations cancels at the 1e-16 relative level


def test_chained_frequency_of_a_steady_tone_is_exact():
    """Noise-free 50.0123 Hz: every chained frequency equals it to 1e-9 Hz, no restarts."""
    tr = IntervalTracker(FS, n_harmonics=1)
    n = int(FS)
    x = _tone(50.0123, 20 * n)
    rs = [tr.push(x[k * n:(k + 1) * n], k * n) for k in range(20)]
    assert rs[0].chain_start and rs[0].chain_frequency_hz is None
    assert all(not r.chain_start for r in rs[1:])
    for r in rs[1:]:
        assert r.chain_frequency_hz == pytest.approx(50.0123, abs=1e-9)
    assert {r.segment for r in rs} == {0}


def test_a_frequency_step_restarts_the_chain():
    """A 0.4 Hz step between intervals is 0.4 cycle off the prediction: ambiguous, so the chain
    restarts (a new segment) instead of counting a wrong number of cycles."""
    tr = IntervalTracker(FS, n_harmonics=1)
    n = int(FS)
    rs = [tr.push(_tone(50.0, n, start=k * n), k * n) for k in range(5)]
    rs += [tr.push(_tone(50.4, n, start=k * n), k * n) for k in range(5, 10)]
    segs = [r.segment for r in rs if r.phase_rad is not None]
    assert max(segs) >= 1
    later = [r for r in rs[7:] if r.chain_frequency_hz is not None]
    assert later and all(r.chain_frequency_hz == pytest.approx(50.4, abs=1e-6) for r in later)


def test_silence_gives_no_tone_and_the_next_tone_reacquires():
    tr = IntervalTracker(FS)
    n = int(FS)
    a = tr.push(np.zeros(n), 0)
    assert a.frequency_hz is None and any("no tone" in w for w in a.warnings)
    b = tr.push(_tone(60.0, n, start=n), n)
    c = tr.push(_tone(60.0, n, start=2 * n), 2 * n)
    assert b.chain_start and c.chain_frequency_hz == pytest.approx(60.0, abs=1e-9)


def test_square_wave_gives_duty_and_thd():
    """A 30 % duty square at 50 Hz: duty 30 % (IEEE 181 high time / period), and THD_F of an
    ideal 30 % pulse train over harmonics 2…10 from its Fourier series |sin(kπD)|/k."""
    n = int(FS) * 4
    fs = 8000.0
    t = np.arange(n) / fs
    x = np.where((t * 50.0) % 1.0 < 0.3, 1.0, -1.0)
    tr = IntervalTracker(fs, n_harmonics=10)
    m = int(fs)
    r = tr.push(x[:m], 0)
    # edges fall between samples: the 50 % instants can be off by up to one sample (100/160 %)
    assert r.duty_cycle_pct == pytest.approx(30.0, abs=0.65)
    ak = np.array([abs(math.sin(k * math.pi * 0.3)) / k for k in range(1, 11)])
    thd = 100 * math.sqrt(float(np.sum(ak[1:] ** 2))) / ak[0]
    # sampled edges (160 samples per period) blur the series a little: 2 % of the value
    assert r.thd_pct == pytest.approx(thd, rel=0.02)


def test_a_sine_switches_the_duty_search_off():
    tr = IntervalTracker(FS)
    n = int(FS)
    r = tr.push(_tone(50.0, n), 0)
    assert r.duty_cycle_pct is None and tr._duty is False


def test_chained_frequency_uncertainty_is_honest():
    """A steady 50.0123 Hz tone in seeded white noise: z = (f − f_true)/u over 300 chained
    intervals has a spread of 1 (the phase u comes from the fit covariance, which reaches the
    Cramér–Rao bound for white noise: Rife & Boorstyn 1974). Adjacent z share a phase, so the
    effective number is about 150: 0.85…1.15 is a 3-sigma band for the sample std. The mean
    telescopes to the two end phases, so 3/√150 is a loose bound for it."""
    rng = np.random.default_rng(1057)
    n = int(FS)
    t = np.arange(300 * n) / FS
    x = np.cos(2 * math.pi * 50.0123 * t + 0.4) + 0.05 * rng.normal(size=t.size)
    tr = IntervalTracker(FS, n_harmonics=1)
    rs = [tr.push(x[k * n:(k + 1) * n], k * n) for k in range(300)]
    z = np.array([(r.chain_frequency_hz - 50.0123) / r.chain_frequency_u_hz for r in rs[1:]])
    assert abs(z.mean()) < 3 / math.sqrt(150)
    assert 0.85 < z.std(ddof=1) < 1.15
