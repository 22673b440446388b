"""Every current and voltage the unit model reports (benchfit.model.unit.predict, model.stress) against ngspice.

Source of every reference value: ngspice (an independent circuit simulator), transient analysis of the
same circuit (tests/model/unitspice.py): an ideal PULSE behind the timer's output resistance — different
high and low (a behavioural source, 25 Ω / 8 Ω), or one resistance for the symmetric case — an optional
divider, Rs, L with an optional core loss Rp across it, C with its ESR and the load. Each unit is run
once, from rest, to its periodic steady state; peaks are read on ngspice's own time points and RMS values
and the I²R loss integrated over two whole periods (trapezoidal rule on those points).

Tolerance, one figure for every quantity: TOL = 2e-5 of the quantity's own scale (its largest magnitude
over the period; twice that, relative, for the loss, a square of currents). It covers
* ngspice's trapezoidal integration at its 5 µs maximum step: 2.8e-5 of the fundamental measured at a
  25 µs step (tests/fit/test_switched_model.py), falling as the step squared: ≤ 1.2e-6 here; reltol 1e-6;
* the 0.2 µs PULSE edges (the model's are instantaneous): a ramp changes a smooth quantity by
  O((t_r/T)²), and one that jumps at an edge (the core-loss branch's v_L/Rp, the divider's direct path)
  by at most jump·t_r/T ≈ 1e-5 of its scale in the RMS, and its peak by |dq/dt|·t_r ≈ 1e-6;
* the settling: the run lasts 16 time constants of the slowest mode, e^{−16} ≈ 1e-7;
* reading peaks on ≤ 5 µs (ngspice) and ≈ T/4000 (the model's 2049 points a phase) spacing, ½·|q''|·(Δt/2)² ≲ 1e-6;
* the trapezoidal RMS over ≤ 5 µs steps, (Δt·ω)²/12 ≲ 1e-6 at the harmonics that carry the power.
Before the fix this test came with, the choke's current with a core loss was 1.2 % off (linear path: its
I_k ignored Rp) or 1.1e-3 off (switched path: L's own current, not the choke's terminal current), and the
timer's peak current behind a divider 1.4 % high (the Gibbs overshoot of a truncated harmonic sum at the
divider's jump).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from benchfit.model.filter import LowpassParts, coefficients_full
from benchfit.model.stress import stress_checks
from benchfit.model.unit import Drive, UnitModel, predict
from unitspice import SpiceUnit, simulate_unit

pytestmark = pytest.mark.ngspice

TOL = 2e-5
EDGE = 0.2e-6
MAX_STEP = 5e-6

BASE = dict(f=50.0, duty=0.52, v_high=12.0, v_low=0.0, r_src=25.0, r_low=8.0, L=0.3, Rs=12.0, C=33e-6,
            Resr=1.5, Rload=1e4)
UNITS = {
    "asymmetric-esr-load": SpiceUnit(**BASE),
    "asymmetric-core-loss": SpiceUnit(**{**BASE, "Rp": 2000.0}),
    "asymmetric-divider-core-loss": SpiceUnit(**{**BASE, "f": 50.0, "duty": 0.523, "v_high": 10.6, "v_low": 0.08,
                                                 "Rs": 24.0, "Resr": 0.6, "Rp": 2000.0, "divider": (220.0, 56.0)}),
    "symmetric-core-loss": SpiceUnit(**{**BASE, "r_src": 15.0, "r_low": None, "Rp": 2000.0}),
}


def _model(u: SpiceUnit) -> UnitModel:
    r_low = u.r_src if u.r_low is None else u.r_low
    return UnitModel(Drive(u.f, u.duty, u.v_high, u.v_low, r_high=u.r_src, r_low=r_low, divider=u.divider),
                     LowpassParts(u.L, u.C, u.Rs, u.Resr, u.Rload, math.inf if u.Rp is None else u.Rp))


def _slowest_decay(unit: UnitModel) -> float:
    """The smallest decay rate (1/s) of the circuit's modes in either phase (poles of H, coefficients_full)."""
    rates = []
    for r in (unit.drive.r_high, unit.drive.r_low):
        p = unit.with_drive(r_high=r, r_low=r).effective_filter()
        rates += [-float(np.real(z)) for z in np.roots(coefficients_full(p)[1])]
    return min(rates)


def _mean(t: np.ndarray, q: np.ndarray, span: float) -> float:
    """Mean of q over [0, span] by the trapezoidal rule on the simulator's points (ends interpolated)."""
    inside = (t > 0) & (t < span)
    tt = np.concatenate([[0.0], t[inside], [span]])
    qq = np.concatenate([[np.interp(0.0, t, q)], q[inside], [np.interp(span, t, q)]])
    return float(np.sum(0.5 * (qq[1:] + qq[:-1]) * np.diff(tt))) / span


@pytest.fixture(scope="module", params=list(UNITS), ids=list(UNITS))
def case(request, tmp_path_factory):
    u = UNITS[request.param]
    unit = _model(u)
    period = 1.0 / u.f
    settle = math.ceil(16.0 / _slowest_decay(unit) / period) * period  # whole periods: t = 0 at a rising edge
    sim = simulate_unit(tmp_path_factory.mktemp(request.param), u, fs=1.0 / MAX_STEP, settle=settle,
                        keep=2 * period + 1e-4, name=request.param, edge=EDGE, max_step=MAX_STEP, raw=True)
    return u, unit, sim


def test_currents_and_voltages_match_ngspice(case):
    u, unit, sim = case
    pr = predict(unit)
    t, span = sim["t"], 2.0 / u.f
    rms = lambda q: math.sqrt(_mean(t, q ** 2, span))  # noqa: E731
    i_c = (sim["out"] - sim["vc"]) / u.Resr
    # the choke's current is its terminal current (L with its core loss as one part, the current in Rs)
    checks = {"output_max_v": (pr.output_max_v, sim["out"].max(), sim["out"]),
              "output_min_v": (pr.output_min_v, sim["out"].min(), sim["out"]),
              "inductor_peak_a": (pr.inductor_peak_a, np.abs(sim["is"]).max(), sim["is"]),
              "inductor_rms_a": (pr.inductor_rms_a, rms(sim["is"]), sim["is"]),
              "capacitor_max_v": (pr.capacitor_max_v, sim["vc"].max(), sim["vc"]),
              "capacitor_min_v": (pr.capacitor_min_v, sim["vc"].min(), sim["vc"]),
              # the capacitor's (ripple) current, through its ESR: v(nc)/Resr
              "capacitor_rms_a": (pr.capacitor_rms_a, rms(i_c), i_c),
              "source_peak_a": (pr.source_peak_a, np.abs(sim["it"]).max(), sim["it"]),
              "source_rms_a": (pr.source_rms_a, rms(sim["it"]), sim["it"])}
    bad = {k: (m, s, (m - s) / np.abs(w).max()) for k, (m, s, w) in checks.items()
           if abs(m - s) > TOL * np.abs(w).max()}
    assert not bad, bad
    # the I²R loss in every resistance before the choke: Rs, the timer's output stage (the voltage across
    # it times its current, ramps included) and the divider's two resistors
    p_sim = u.Rs * sim["is"] ** 2 + (sim["timer"] - sim["pin"]) * sim["it"]
    if u.divider is not None:
        p_sim = p_sim + u.divider[0] * sim["it"] ** 2 + sim["tap"] ** 2 / u.divider[1]
    assert pr.series_loss_w == pytest.approx(_mean(t, p_sim, span), rel=2 * TOL)
    # the stress checks read the same figures
    by_name = {s.quantity: s.value for s in stress_checks(pr)}
    assert by_name["timer_output_peak_a"] == pytest.approx(np.abs(sim["it"]).max(), rel=TOL)
    assert by_name["capacitor_peak_v"] == pytest.approx(np.abs(sim["vc"]).max(), rel=TOL)
    assert by_name["capacitor_ripple_a"] == pytest.approx(rms(i_c), rel=TOL)
    assert by_name["output_peak_v"] == pytest.approx(np.abs(sim["out"]).max(), rel=TOL)
