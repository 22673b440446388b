"""Recover ngspice's part values from simulated captures (two-channel, one-channel, time domain).

ngspice (an independent circuit simulator) solves the square-driven Rs-L-(C+ESR)||Rload
circuit; the tests add seeded Gaussian noise and require benchfit's fit to return the
simulator's parts. True resonance figures come from the circuit's characteristic polynomial
(REFERENCES §6: ω0² = a0/a2, Q = √(a0·a2)/a1), checked against the textbook in
tests/model/test_model_filter.py.

Noise: 5 mV rms on the 12 V drive and 2 mV rms on the output (a sound-card-like floor,
about −70 dB re the drive). With 0.6 s records (30…72 periods) the fits' own standard
errors are 0.01…0.3 %, so the acceptance bands below (C 1 %, Rs 5 %, f0 0.5 %, one-channel
f0 2 %) leave room for the noise and for the sampled square's aliasing (sharp 50 µs edges
sampled at 20 kHz without an anti-alias filter bias the highest harmonics by up to
(π·k·f/fs)²/3, about 1 % at 2 kHz).
"""

from __future__ import annotations


import numpy as np
import pytest

from benchfit.capture.capture import Capture
from benchfit.model.filter import LowpassParts, second_order
from benchfit.fit.lowpass import fit_lowpass

from fitspice import Circuit, simulate_square

pytestmark = pytest.mark.ngspice

FS = 20000.0

# (circuit, drive frequency Hz, duty): resonance near / below / above the drive; Q ≈ 4, 0.6, 40
CASES = {
    "near-resonance-50pct": (Circuit(0.3, 33e-6, 20.0, 1.5, 10e3), 50.0, 0.5),
    "low-q-below-30pct": (Circuit(0.3, 33e-6, 150.0, 0.8, 2.2e3), 120.0, 0.3),
    "high-q-above-40pct": (Circuit(0.1, 2.2e-6, 5.0, 0.1, 100e3), 60.0, 0.4),
}


def _truth(c: Circuit) -> dict[str, float]:
    return second_order(LowpassParts(c.L, c.C, c.Rs, c.Resr, c.Rload))


def _capture(drive: np.ndarray, out: np.ndarray, seed: int, channels=("drive", "output")) -> Capture:
    rng = np.random.default_rng(seed)
    noisy_drive = drive + rng.normal(0.0, 5e-3, drive.size)
    noisy_out = out + rng.normal(0.0, 2e-3, out.size)
    if channels == ("output",):
        return Capture(noisy_out[None, :], FS, channels, ("V",), source="ngspice.csv")
    return Capture(np.vstack([noisy_drive, noisy_out]), FS, channels, ("V", "V"), source="ngspice.csv")


@pytest.mark.parametrize("name", list(CASES))
def test_two_channel_recovers_ngspice_parts(tmp_path, name):
    c, f, duty = CASES[name]
    drive, out = simulate_square(tmp_path, c, freq=f, duty=duty, fs=FS)
    cap = _capture(drive, out, seed=11)
    r = fit_lowpass(cap, method="two-channel", fix={"L": c.L, "Rload": c.Rload})
    p = r.parameters
    assert r.method == "two-channel"
    assert p["L"].fixed and p["Rload"].fixed
    # C within 1 % (noise and aliasing margin, module docstring); its stderr must be finite
    assert p["C"].value == pytest.approx(c.C, rel=0.01)
    assert p["C"].stderr is not None and 0 < p["C"].u_fit < 0.01 * c.C  # the fit's own (noise) part
    # the combined u (with the ±3 % default gain ratio of unmatched inputs) covers the error: 3 u
    assert abs(p["C"].value - c.C) < 3 * p["C"].stderr
    # Rs within 5 %; when the data cannot split ESR from Rs, Rs carries the sum and a
    # warning names Resr (module behaviour, see fit.lowpass.solve)
    folded = any(w.startswith("Resr:") for w in r.warnings)
    expected_rs = c.Rs + c.Resr if folded else c.Rs
    assert p["Rs"].value == pytest.approx(expected_rs, rel=0.05)
    # f0 within 0.5 % of the characteristic polynomial's √(a0/a2)/2π
    truth = _truth(c)
    f0 = r.derived["resonant_frequency_hz"]
    assert f0.value == pytest.approx(truth["resonant_frequency_hz"], rel=0.005)
    assert f0.stderr is not None and f0.stderr > 0
    assert r.quality.r_squared > 0.999  # a correct model explains the harmonics (noise is −70 dB)


def test_two_channel_time_domain_refinement(tmp_path):
    c, f, duty = CASES["near-resonance-50pct"]
    drive, out = simulate_square(tmp_path, c, freq=f, duty=duty, fs=FS)
    cap = _capture(drive, out, seed=12)
    r = fit_lowpass(cap, method="two-channel", fix={"L": c.L, "Rload": c.Rload}, time_domain=True)
    # same bands as the frequency-domain fit (noise margin, module docstring)
    assert r.parameters["C"].value == pytest.approx(c.C, rel=0.01)
    assert r.parameters["Rs"].value == pytest.approx(c.Rs, rel=0.05)
    assert r.derived["resonant_frequency_hz"].value == pytest.approx(
        _truth(c)["resonant_frequency_hz"], rel=0.005)
    assert r.curves.model.size == cap.n_samples  # the simulated output covers the whole record
    # residual rms close to the added 2 mV output noise (the model is exact up to ngspice's error)
    assert np.sqrt(np.mean(r.curves.residual ** 2)) < 4e-3


@pytest.mark.parametrize("name,duty_given", [("near-resonance-50pct", None),
                                             ("high-q-above-40pct", 0.4)])
def test_one_channel_recovers_f0_with_L_fixed(tmp_path, name, duty_given):
    c, f, duty = CASES[name]
    _, out = simulate_square(tmp_path, c, freq=f, duty=duty, fs=FS)
    cap = _capture(np.zeros_like(out), out, seed=13, channels=("output",))
    r = fit_lowpass(cap, fix={"L": c.L}, drive_duty=duty_given)
    assert r.method == "one-channel"
    truth = _truth(c)
    # f0 within 2 % (gain-free fit of the output's harmonics; module docstring)
    assert r.derived["resonant_frequency_hz"].value == pytest.approx(
        truth["resonant_frequency_hz"], rel=0.02)
    # Q is a shape parameter too: the data determine it; 10 % band (common practice, no source)
    assert r.derived["q_factor"].value == pytest.approx(truth["q_factor"], rel=0.10)
    if duty_given is None:
        assert any(w.startswith("duty:") for w in r.warnings)
