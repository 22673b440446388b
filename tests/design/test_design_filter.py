"""Tuned L-C low-pass design and predicted output (benchfit.design.filter)."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from benchfit.design.filter import (design_filter, part_for_resonance, rectangular_response,
                                    resonant_frequency)
from benchfit.design.damped import design_damped, evaluate_filter
from benchfit.errors import DesignError
from benchfit.model.filter import LowpassParts


def test_resonance_check_values():
    # REFERENCES §6 check values [C]: L = 100 µH, C = 10 µF → f0 = 5032.921 Hz; with
    # R = 0.5 Ω, R_L = 10 Ω, r_c = 0.05 Ω → f0 = 5144.365 Hz (printed to 7 digits)
    assert resonant_frequency(100e-6, 10e-6) == pytest.approx(5032.921, abs=5e-4)
    assert resonant_frequency(100e-6, 10e-6, rs_ohm=0.5, esr_ohm=0.05, load_ohm=10.0) == \
        pytest.approx(5144.365, abs=5e-4)
    # and the inverse gives back the capacitor (same digits)
    c = part_for_resonance(5144.365, inductance=100e-6, rs_ohm=0.5, esr_ohm=0.05, load_ohm=10.0)
    assert c == pytest.approx(10e-6, rel=2e-7)
    # textbook C = 1/(ω²L) without load (Nilsson & Riedel, series RLC resonance)
    assert part_for_resonance(50.0, inductance=0.3) == pytest.approx(1 / ((2 * math.pi * 50) ** 2 * 0.3),
                                                                     rel=1e-15)


def _transparent():
    # resonance far above every harmonic used: |H| = 1 within 1e-9 up to harmonic 40 of 50 Hz
    return LowpassParts(L=1e-9, C=1e-12, Rs=1e-3)


@pytest.mark.parametrize("k,thd", [(9, 0.428795), (40, 0.470322)])
def test_square_wave_thd_truncated_sums(k, thd):
    # REFERENCES §5 truncated-sum table: square wave THD_F with harmonics 2…H (6 digits)
    r = rectangular_response(_transparent(), 50.0, duty=0.5, amplitude_v=1.0, n_harmonics=k)
    assert r.thd == pytest.approx(thd, abs=5e-7)


def test_rectangular_drive_fourier_coefficients():
    # REFERENCES §5 (rectangular pulse train, derivable): fundamental rms √2·A·sin(πD)/π,
    # DC = A·D; a flat response passes them unchanged (1e-9, see _transparent)
    a, d = 12.0, 0.25
    r = rectangular_response(_transparent(), 50.0, duty=d, amplitude_v=a, n_harmonics=40)
    assert r.fundamental_rms_v == pytest.approx(math.sqrt(2) * a * math.sin(math.pi * d) / math.pi, rel=1e-9)
    assert r.dc_v == pytest.approx(a * d, rel=1e-9)
    # AC rms of the first 40 harmonics approaches A·√(D(1−D)) (§5); the tail beyond 40 holds
    # Σ_{k>40} a_k²/2 ≤ (2A/π)²/(2·40) ≈ 1.5 % of the power → 1 % in rms
    assert r.ac_rms_v == pytest.approx(a * math.sqrt(d * (1 - d)), rel=0.01)


def test_prediction_against_a_time_domain_simulation():
    # independent tool (scipy.signal.lsim) on the textbook transfer function of REFERENCES §6,
    # H(s) = R_L(1 + s r_c C) / [LC(R_L+r_c)s² + (L + C(R(R_L+r_c) + R_L r_c))s + (R+R_L)],
    # driven by a 0/12 V square wave; harmonics from the FFT of 10 whole periods in steady state
    from scipy import signal

    L, C, R, RL, rc = 0.3, 33e-6, 400.0, 10e3, 0.5
    f, duty, amp, fs = 50.0, 0.5, 12.0, 100_000.0
    num = [RL * rc * C, RL]
    den = [L * C * (RL + rc), L + C * (R * (RL + rc) + RL * rc), R + RL]
    n_per = int(fs / f)
    t = np.arange(25 * n_per) / fs
    u = np.where((np.arange(t.size) % n_per) < duty * n_per, amp, 0.0)
    _, y, _ = signal.lsim((num, den), u, t)
    seg = y[-10 * n_per:]
    spec = np.fft.rfft(seg) / seg.size * 2
    harm = np.abs(spec[10 * np.arange(1, 41)])
    thd_sim = math.sqrt(np.sum(harm[1:] ** 2)) / harm[0]
    r = rectangular_response(LowpassParts(L, C, R, rc, RL), f, duty=duty, amplitude_v=amp, n_harmonics=40)
    # lsim holds the input linearly between samples: the 10 µs edges scale harmonic k by
    # sinc(k·10 µs/20 ms), at most 7e-4 off for k = 40, which carries well under 1 % of the
    # distortion power (→ < 1e-5 on THD); 25 periods settle the 2L/R = 1.5 ms transient.
    # 1e-4 relative leaves margin over those bounds
    assert r.fundamental_peak_v == pytest.approx(harm[0], rel=1e-4)
    assert r.thd == pytest.approx(thd_sim, rel=1e-4)
    assert r.dc_v == pytest.approx(np.mean(seg), rel=1e-4)


def test_design_solves_for_the_missing_part_and_brackets_it():
    d = design_filter(50.0, inductance=0.3, rs_ohm=400.0, load_ohm=10e3, series="E12")
    assert d.solved_for == "C"
    nominal, below, above = d.options[0], d.options[1], d.options[2]
    # the exact part puts the model's resonance at the drive frequency (float rounding only)
    assert nominal.resonant_frequency_hz == pytest.approx(50.0, rel=1e-12)
    assert below.capacitance_f <= d.nominal_value <= above.capacitance_f
    # more C → lower resonance (f0 ∝ 1/√C)
    assert below.resonant_frequency_hz > 50.0 > above.resonant_frequency_hz
    assert below.capacitance_f == 33e-6 and above.capacitance_f == 39e-6
    d2 = design_filter(50.0, capacitance=33e-6, rs_ohm=20.0, load_ohm=10e3, series="E6")
    assert d2.solved_for == "L" and d2.options[0].resonant_frequency_hz == pytest.approx(50.0, rel=1e-12)
    assert any("spike" in c for c in d2.cautions) and any("sound-card" in c for c in d2.cautions)
    json.dumps(d2.to_dict(), allow_nan=False)
    assert "Hz" in "\n".join(d2.summary_lines())


@pytest.mark.parametrize("kwargs", [
    dict(frequency_hz=50.0),
    dict(frequency_hz=50.0, inductance=0.3, capacitance=33e-6),
    dict(frequency_hz=50.0, inductance=0.3),                       # no loss anywhere
    dict(frequency_hz=-50.0, inductance=0.3, rs_ohm=10.0),
    dict(frequency_hz=50.0, inductance=0.0, rs_ohm=10.0),
    dict(frequency_hz=50.0, inductance=0.3, rs_ohm=-1.0),
    dict(frequency_hz=50.0, inductance=0.3, rs_ohm=10.0, duty=1.0),
    dict(frequency_hz=50.0, inductance=0.3, rs_ohm=10.0, series="E3"),
    dict(frequency_hz=50.0, inductance=0.3, rs_ohm=10.0, amplitude_v=0.0),
])
def test_bad_filter_requests(kwargs):
    with pytest.raises(DesignError) as e:
        design_filter(**kwargs)
    assert "\n" not in str(e.value)


# --- damped design, evaluation of a given L and C, stress (issue 10) -----------------------

def test_evaluate_given_lc_off_resonance():
    from benchfit.design.damped import evaluate_filter

    # 288 mH with 10 µF at 60 Hz, 0…12 V square, 10 Ω: THD 7.47 % — the unit model's harmonic
    # sum, which tests/model/test_model_unit.py checks against ngspice
    pred, stress = evaluate_filter(0.288, 10e-6, 60.0, rs_ohm=10.0)
    assert pred.thd_pct == pytest.approx(7.47, abs=0.02)
    assert pred.capacitor_min_v < 0 and any("non-polar" in s.text for s in stress)


def test_high_q_tuned_design_is_flagged_and_not_recommended():
    # Q ≈ 9.4 at 50 Hz from a 12 V square through 10 Ω: the fundamental alone is
    # (2/π)·12 V·Q ≈ 72 V peak, and the tank current ωC·72 V ≈ 0.76 A is far above the NE555's ±200 mA
    # (TI SLFS022 recommended output current; ngspice check in test_design_advice_ngspice.py)
    d = design_filter(50.0, inductance=0.3, rs_ohm=10.0, amplitude_v=12.0)
    assert all(o.flagged for o in d.options)
    assert d.recommended is None
    assert d.to_dict()["recommended"] is None
    assert any("not recommended" in line for line in d.summary_lines())


def test_damped_design_meets_thd_and_level_tolerance():
    from benchfit.design.damped import design_damped
    from benchfit.model.filter import LowpassParts
    from benchfit.model.unit import CaptureChain, Drive, UnitModel, predict_quantities

    d = design_damped(50.0, 0.3, rs_ohm=62.0, load_ohm=1e4, duty=0.477, amplitude_v=2.134,
                      thd_max_pct=5.0, level_tolerance=0.10, n_trials=200)
    assert d.prediction.thd_pct <= 5.0 and not [s for s in d.stress if s.flagged]
    assert d.capacitor.topology in ("single", "add2")                 # parallel before series
    # the chosen parts, rebuilt with the model: same figures (no hidden second calculation)
    r = 62.0 + (0.0 if d.damping is None else d.damping.value)
    q = predict_quantities(UnitModel(Drive(50.0, 0.477, 2.134), LowpassParts(0.3, d.capacitor.value, r, 0.0, 1e4)),
                           CaptureChain(ac_coupled=True))
    assert q["thd_pct"] == pytest.approx(d.prediction.thd_pct, rel=1e-9)
    # the table holds f0 = F points; tuned Q = 0.5 is overdamped: level low and THD high
    tuned = {(row.ratio, row.q): row for row in d.table}
    assert tuned[(1.0, 0.5)].thd_pct > tuned[(1.0, 1.5)].thd_pct
    assert d.yield_fraction >= max(row.yield_fraction for row in d.table if not row.flagged) - 0.1


@pytest.mark.parametrize("call, param", [
    (lambda: design_filter(50.0, inductance=1e-30, rs_ohm=1.0), "inductance"),
    (lambda: design_filter(50.0, inductance=0.3, rs_ohm=1e30), "rs_ohm"),
    (lambda: design_filter(50.0, capacitance=33e-6, rs_ohm=10.0, load_ohm=1e-9), "load_ohm"),
    (lambda: evaluate_filter(1e-30, 33e-6, 50.0, rs_ohm=1.0), "inductance"),
    (lambda: evaluate_filter(0.3, 33.0, 50.0, rs_ohm=1.0), "capacitance"),
    (lambda: design_damped(50.0, 300.0, rs_ohm=1.0), "inductance"),
])
def test_parts_no_bench_filter_holds_are_refused_by_the_library(call, param):
    # the bench ranges (benchfit.design.parts.BENCH_RANGES; common practice, no source) hold for Python
    # callers too: a prefix slip is one DesignError naming the parameter, not overflow warnings and nonsense
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("error")
        with pytest.raises(DesignError, match=rf"^{param}: .* is outside any bench part"):
            call()
