"""The exact switched-source model (benchfit.model.switched) against ngspice and the linear model.

Source of truth: ngspice (an independent circuit simulator) solves the unit of fitspice.Unit: an
ideal rectangular source behind a state-dependent resistance (25 Ω while high, 8 Ω while low), Rs,
L (optionally with a core loss Rp across it), C with ESR and the load; it runs once per unit.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from benchfit.model.filter import LowpassParts, rectangular_phasors, transfer
from benchfit.model.switched import source_parts, source_phasors, switched_phasors, switched_waveform
from benchfit.model.unit import Drive, UnitModel, predict

from fitspice import Unit, simulate_unit

F, DUTY, HIGH, EDGE = 50.0, 0.52, 12.0, 2e-6
#: 80 kHz output grid: ngspice's step is then at most 0.5/fs = 6.25 µs (fitspice), and its trapezoidal
#: integration error, which falls as the step squared (measured: 2.8e-5 of the fundamental at the
#: 25 µs step of a 20 kHz grid), is about 2e-6 of the fundamental
FS = 80000.0
#: the drive's edges take 2 µs (a trapezoid, not a step): centred on the 50 % points, its phasors
#: differ from the step's by the factor sinc(k·f·t_r) ≈ 1 − (πk·f·t_r)²/6 < 3e-5 at k = 49, on a
#: harmonic far below the fundamental; with the integration error above, 1e-5 of the fundamental
#: bounds both with margin, while the averaged-resistance linear model misses by 1e-2
TOL_REL = 1e-5


def _parts(u: Unit) -> LowpassParts:
    return LowpassParts(u.L, u.C, u.Rs, u.Resr, u.Rload, u.Rp if u.Rp is not None else math.inf)


@pytest.mark.ngspice
@pytest.mark.parametrize("unit", [Unit(r_high=25.0, r_low=8.0, Resr=1.5),
                                  Unit(r_high=25.0, r_low=8.0, Resr=1.5, Rp=2000.0)], ids=["esr", "core-loss"])
def test_switched_source_matches_ngspice(tmp_path, unit):
    _, out = simulate_unit(tmp_path, unit, freq=F, duty=DUTY, high=HIGH, edge=EDGE, fs=FS, keep=0.1)
    p = _parts(unit)
    high, low = source_parts(p, unit.r_high, unit.r_low)
    # the ngspice grid starts at 0.4 s (20 whole periods); the source's 50 % points lie edge/2 later
    t = 0.4 + np.arange(out.size) / FS - EDGE / 2
    y = HIGH * switched_waveform(t, F, DUTY, high, low)
    n = out.size
    k = np.arange(1, 50)
    spec = np.fft.rfft(out) * 2 / n  # the record holds 5 whole periods: harmonic k is bin 5k
    y_spice = spec[k * int(round(n * F / FS))]
    y_model = HIGH * source_phasors(k, F, DUTY, p, unit.r_high, unit.r_low) * np.exp(-1j * k * math.pi * F * EDGE)
    a1 = abs(y_model[0])
    assert np.max(np.abs(y_spice - y_model)) < TOL_REL * a1, np.abs(y_spice - y_model)[:6] / a1
    # the waveform: the same bound on the time samples, relative to the fundamental's amplitude
    assert np.max(np.abs(y - out)) < 10 * TOL_REL * a1
    # the averaged-resistance linear model is what this one replaces: far outside the same bound
    r_avg = DUTY * unit.r_high + (1 - DUTY) * unit.r_low
    lin = HIGH * rectangular_phasors(k, DUTY) * transfer(k * F, LowpassParts(p.L, p.C, p.Rs + r_avg, p.Resr, p.Rload,
                                                                            p.Rp))
    assert np.abs(y_spice - lin * np.exp(-1j * k * math.pi * F * EDGE))[0] > 100 * TOL_REL * a1
    # the unit model's prediction (benchfit.model.unit, which uses this model for r_high ≠ r_low) reads
    # the same: amplitude, DC and RMS to the phasor bound; THD (H = 10, about 2.4 % here) to
    # √9·TOL_REL/0.024 ≈ 1.3e-3 relative, each of harmonics 2…10 being within TOL_REL of the fundamental
    # (the averaged-resistance model misses it by 36 %); vpp to 1e-4, the two grids (ngspice's 1600 and
    # the prediction's 4096 points a period) each missing the true peak by up to ½·y''·(Δt/2)² ≈ 2e-5
    pr = predict(UnitModel(Drive(F, DUTY, HIGH, 0.0, r_high=unit.r_high, r_low=unit.r_low), p))
    a_spice = np.abs(y_spice)
    assert pr.amplitude == pytest.approx(a_spice[0], rel=TOL_REL)
    thd = math.sqrt(np.sum(a_spice[1:10] ** 2)) / a_spice[0]
    assert pr.thd == pytest.approx(thd, rel=3 * TOL_REL / thd)
    assert pr.vdc == pytest.approx(float(np.mean(out)), abs=TOL_REL * a1)
    assert pr.vrms == pytest.approx(math.sqrt(float(np.mean(out ** 2))), rel=TOL_REL)
    assert pr.vpp == pytest.approx(float(np.ptp(out)), rel=1e-4)


@pytest.mark.parametrize("p", [LowpassParts(0.3, 33e-6, 28.8, 1.5, 1e4), LowpassParts(0.3, 33e-6, 20.0, 0.8, math.inf),
                               LowpassParts(0.3, 33e-6, 12.0, 1.5, 1e4, 2000.0), LowpassParts(0.3, 33e-6, 0.2, 0.0, 50.0),
                               LowpassParts(0.01, 1e-3, 50.0, 0.0, 1e3)],
                         ids=["esr", "open", "core-loss", "overdamped-load", "first-order"])
@pytest.mark.parametrize("duty", [0.52, 0.1])
def test_equal_resistances_reduce_to_the_linear_model(p, duty):
    # one resistance in both states: a time-invariant circuit, whose steady-state output is P_k(D)·H(jkω)
    # exactly (benchfit.model.filter); both are closed forms, so they agree to rounding (1e-12 allows
    # the matrix inverses' few-ulp errors times the condition of I − Φ_l·Φ_h, ≲ 1e3 here)
    k = np.arange(1, 50)
    y = switched_phasors(k, F, duty, p, p)
    ref = rectangular_phasors(k, duty) * transfer(k * F, p)
    assert np.max(np.abs(y - ref)) < 1e-12 * np.max(np.abs(ref))


def test_waveform_and_phasors_agree():
    # the closed-form phasors against the rfft of the model's own waveform on a fine grid (4096 points a
    # period): without core loss the output is continuous (only its slope jumps at the edges, through the
    # ESR), so the grid's aliasing error falls as N⁻² (about (2π/N)²·|Y_k|·k² ≲ 1e-6 of the fundamental)
    p = LowpassParts(0.3, 33e-6, 12.0, 1.5, 1e4)
    high, low = source_parts(p, 25.0, 8.0)
    n = 4096
    y = switched_waveform(np.arange(n) / (n * F), F, DUTY, high, low)
    k = np.arange(1, 30)
    spec = np.fft.rfft(y) * 2 / n
    ph = switched_phasors(k, F, DUTY, high, low)
    assert np.max(np.abs(spec[k] - ph)) < 1e-6 * abs(ph[0])


@pytest.mark.parametrize("p", [LowpassParts(0.3, 33e-6, 12.0, 1.5, 1e4), LowpassParts(0.3, 33e-6, 12.0, 1.5, 1e4, 2000.0),
                               LowpassParts(0.3, 33e-6, 12.0, 0.8, math.inf), LowpassParts(0.3, 33e-6, 0.2, 0.0, 50.0)],
                         ids=["esr", "core-loss", "open", "overdamped-load"])
def test_levels_off_the_rails_only_scale_the_output(p):
    # a timer's levels 0.15 V and 12 − 1.6 V (NE555 datasheet, TI SLFS022A: VOL, VOH) behind 25 Ω high and
    # 8 Ω low: the harmonics are the 1 V / 0 V drive's times u_h − u_l·(Rs_h + R_L)/(Rs_l + R_L), derived in
    # benchfit.model.switched; both sides are closed forms, so they agree to rounding (1e-12 as above)
    high, low = source_parts(p, 25.0, 8.0)
    u_h, u_l = HIGH - 1.6, 0.15
    k = np.arange(1, 50)
    y = switched_phasors(k, F, DUTY, high, low, u_h, u_l)
    rho = 1.0 if math.isinf(p.Rload) else (high.Rs + p.Rload) / (low.Rs + p.Rload)
    ref = (u_h - u_l * rho) * switched_phasors(k, F, DUTY, high, low)
    assert np.max(np.abs(y - ref)) < 1e-12 * np.max(np.abs(ref))
    # the offset is not a plain shift of the swing: with a load, ρ ≠ 1 moves the scale by u_l·(ρ − 1)
    if math.isfinite(p.Rload):
        swing = (u_h - u_l) * switched_phasors(k, F, DUTY, high, low)
        assert np.max(np.abs(y - swing)) > 1e-6 * np.max(np.abs(ref))


@pytest.mark.ngspice
def test_levels_off_the_rails_match_ngspice(tmp_path):
    # the same unit in ngspice (fitspice.Unit: the timer's open-circuit levels 0.15 V and 10.4 V), against
    # the model with those levels, to the bound TOL_REL of test_switched_source_matches_ngspice
    unit = Unit(r_high=25.0, r_low=8.0, Resr=1.5, v_low=0.15, v_drop=1.6)
    _, out = simulate_unit(tmp_path, unit, freq=F, duty=DUTY, high=HIGH, edge=EDGE, fs=FS, keep=0.1)
    high, low = source_parts(_parts(unit), unit.r_high, unit.r_low)
    n = out.size
    k = np.arange(1, 50)
    y_spice = (np.fft.rfft(out) * 2 / n)[k * int(round(n * F / FS))]
    y_model = switched_phasors(k, F, DUTY, high, low, HIGH - unit.v_drop, unit.v_low) * np.exp(-1j * k * math.pi * F * EDGE)
    a1 = abs(y_model[0])
    assert np.max(np.abs(y_spice - y_model)) < TOL_REL * a1, np.abs(y_spice - y_model)[:6] / a1
    # the DC: the low level through the low phase's divider plus the swing's mean (the model's own waveform)
    t = 0.4 + np.arange(n) / FS - EDGE / 2
    y = switched_waveform(t, F, DUTY, high, low, HIGH - unit.v_drop, unit.v_low)
    assert float(np.mean(out)) == pytest.approx(float(np.mean(y)), abs=TOL_REL * a1)
