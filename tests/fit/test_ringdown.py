"""Ring-down fits: ngspice-simulated free ringing, and textbook second-order facts.

ngspice (an independent circuit simulator) drives the filter with a slow square wave; the
true resonant frequency and Q are those of the circuit's characteristic polynomial
(REFERENCES §6; ω0² = a0/a2, Q = √(a0·a2)/a1). Seeded noise of 2 mV rms is added; the
fits' own standard errors are below 0.05 % (f0) and 0.5 % (Q), so the acceptance bands
f0 ± 0.3 % and Q ± 3 % leave room for the noise and for ngspice's integration error.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from benchfit.capture.capture import Capture
from benchfit.errors import FitError
from benchfit.model.filter import LowpassParts, second_order, simulate
from benchfit.fit.ringdown import fit_ringdown

from fitspice import Circuit, simulate_square

FS = 20000.0


@pytest.mark.ngspice
@pytest.mark.parametrize("circuit,square_hz", [
    (Circuit(0.1, 2.2e-6, 5.0, 0.1, 100e3), 4.0),   # 339 Hz tank, Q ≈ 40
    (Circuit(0.3, 33e-6, 5.0, 0.5, 10e3), 2.0),     # the hum-check filter with low losses, Q ≈ 14
])
def test_ringdown_recovers_ngspice_f0_and_q(tmp_path, circuit, square_hz):
    _, out = simulate_square(tmp_path, circuit, freq=square_hz, duty=0.5, high=5.0, fs=FS,
                             settle=0.0, keep=1.0)
    rng = np.random.default_rng(21)
    cap = Capture((out + rng.normal(0.0, 2e-3, out.size))[None, :], FS, ("tank",), ("V",),
                  source="ringdown.csv")
    r = fit_ringdown(cap)
    truth = second_order(LowpassParts(circuit.L, circuit.C, circuit.Rs, circuit.Resr, circuit.Rload))
    f0 = r.derived["resonant_frequency_hz"]
    q = r.derived["q_factor"]
    assert r.method == "ringdown" and r.parameters == {}
    assert f0.value == pytest.approx(truth["resonant_frequency_hz"], rel=0.003)  # band: docstring
    assert q.value == pytest.approx(truth["q_factor"], rel=0.03)  # band: docstring
    assert f0.stderr is not None and 0 < f0.stderr < 0.003 * f0.value
    assert q.stderr is not None and 0 < q.stderr < 0.03 * q.value
    # the relations the result must satisfy: ω0² = ω_d² + α² and Q = ω0/(2α) (REFERENCES §6)
    wd = 2 * math.pi * r.derived["damped_frequency_hz"].value
    alpha = r.derived["decay_rate_per_s"].value
    assert (2 * math.pi * f0.value) ** 2 == pytest.approx(wd * wd + alpha * alpha, rel=1e-12)
    assert q.value == pytest.approx(2 * math.pi * f0.value / (2 * alpha), rel=1e-12)


def _ringing_capture(p: LowpassParts, square_hz: float, noise: float, seed: int) -> Capture:
    fs = 48000.0
    t = np.arange(int(1.0 * fs)) / fs
    drive = 5.0 * (((t * square_hz) % 1.0) < 0.5)
    y = simulate(drive, fs, p) + np.random.default_rng(seed).normal(0.0, noise, t.size)
    return Capture(y[None, :], fs, ("output",), ("V",), source="synthetic.wav")


def test_ringdown_series_rlc_matches_textbook_q():
    # unloaded series RLC: Q = (1/R)·√(L/C) (Nilsson & Riedel, "Electric Circuits", series RLC)
    L, C, R = 0.1, 1e-6, 20.0
    r = fit_ringdown(_ringing_capture(LowpassParts(L, C, R, 0.0, math.inf), 10.0, 2e-3, 3))
    q_textbook = math.sqrt(L / C) / R
    f0_textbook = 1.0 / (2 * math.pi * math.sqrt(L * C))
    assert r.derived["q_factor"].value == pytest.approx(q_textbook, rel=0.01)  # 2 mV noise on a 5 V step
    assert r.derived["resonant_frequency_hz"].value == pytest.approx(f0_textbook, rel=1e-3)
    # log decrement over m cycles, δ = (1/m)·ln(x_n/x_{n+m}) = 2πζ/√(1−ζ²) (REFERENCES §6;
    # Thomson, "Theory of Vibration with Applications", log decrement)
    zeta = 1.0 / (2 * q_textbook)
    delta = 2 * math.pi * zeta / math.sqrt(1 - zeta * zeta)
    alpha = r.derived["decay_rate_per_s"].value
    fd = r.derived["damped_frequency_hz"].value
    assert alpha / fd == pytest.approx(delta, rel=0.01)  # δ = α·T_d; same noise margin


def test_ringdown_with_fixed_L_gives_C():
    L, C = 0.1, 1e-6
    r = fit_ringdown(_ringing_capture(LowpassParts(L, C, 20.0, 0.0, math.inf), 10.0, 2e-3, 4),
                     fix={"L": L})
    assert r.parameters["L"].fixed
    # C = 1/(ω0²·L) for the unloaded tank (textbook ω0 = 1/√(LC)); noise margin as above
    assert r.parameters["C"].value == pytest.approx(C, rel=2e-3)
    assert r.parameters["C"].stderr is not None
    assert any(w.startswith("C:") for w in r.warnings)


def test_ringdown_rejects_a_pure_sine():
    fs = 48000.0
    t = np.arange(12000) / fs
    cap = Capture(np.sin(2 * math.pi * 50 * t)[None, :], fs, ("output",), ("V",), source="sine.wav")
    with pytest.raises(FitError) as e:
        fit_ringdown(cap)
    assert "sine.wav" in str(e.value) and "\n" not in str(e.value)


def test_ringdown_rejects_silence_and_unknown_fix():
    cap = Capture(np.zeros((1, 4800)), 48000.0, ("output",), ("V",), source="quiet.wav")
    with pytest.raises(FitError, match="silent"):
        fit_ringdown(cap)
    cap2 = _ringing_capture(LowpassParts(0.1, 1e-6, 20.0, 0.0, math.inf), 10.0, 2e-3, 5)
    with pytest.raises(FitError, match="L or C"):
        fit_ringdown(cap2, fix={"Rs": 10.0})
