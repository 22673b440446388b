"""555 astable equations, part choice, tolerance spread and trim range (benchfit.design.astable)."""

from __future__ import annotations

import json
import math
from pathlib import Path

import pytest

from benchfit.design.astable import (LN2, astable_timing, control_voltage_for_factor, design_astable,
                                     high_time_factor, tolerance_spread)
from benchfit.errors import DesignError

DATA = Path(__file__).resolve().parents[1] / "data"


@pytest.fixture(scope="module")
def ref():
    return json.loads((DATA / "design_ne555_check_values.json").read_text(encoding="utf-8"))


def test_exact_form_matches_check_values(ref):
    # REFERENCES: computed from the NE555 datasheet equations (§7); printed to 5–6 digits,
    # so the tolerance is half a unit of the last printed digit
    p = ref["parts"]
    t = astable_timing(p["ra_ohm"], p["rb_ohm"], p["c_farad"])
    e = ref["exact"]
    assert t.t_high_s == pytest.approx(e["t_high_s"], abs=0.5e-9)
    assert t.t_low_s == pytest.approx(e["t_low_s"], abs=0.5e-9)
    assert t.frequency_hz == pytest.approx(e["frequency_hz"], abs=0.005)
    assert t.duty == pytest.approx(e["duty"], abs=0.5e-6)
    assert t.duty == pytest.approx(11 / 21, rel=1e-12)  # (RA+RB)/(RA+2RB), exact


def test_datasheet_form_matches_check_values(ref):
    # REFERENCES §7: datasheet 0.693 and 1.44 constants (printed digits as above)
    p = ref["parts"]
    t = astable_timing(p["ra_ohm"], p["rb_ohm"], p["c_farad"], form="datasheet")
    assert t.t_high_s == pytest.approx(ref["datasheet"]["t_high_s"], abs=0.5e-9)
    assert t.frequency_hz == pytest.approx(ref["datasheet"]["frequency_hz"], abs=0.005)


@pytest.mark.parametrize("i", [0, 1])
def test_control_voltage_form_matches_check_values(ref, i):
    # REFERENCES §7: thresholds Vc and Vc/2 (NE555 datasheet pin description); printed digits
    p, c = ref["parts"], ref["control"][i]
    t = astable_timing(p["ra_ohm"], p["rb_ohm"], p["c_farad"], supply_v=p["supply_v"],
                       control_voltage_v=c["control_voltage_v"])
    assert t.t_high_s == pytest.approx(c["t_high_s"], abs=0.5e-9)
    assert t.t_low_s == pytest.approx(ref["exact"]["t_low_s"], abs=0.5e-9)  # independent of Vc
    assert t.frequency_hz == pytest.approx(c["frequency_hz"], abs=0.005)
    assert t.duty == pytest.approx(c["duty"], abs=0.5e-5)


def test_equations_against_an_event_driven_rc_simulation():
    # independent tool (scipy solve_ivp): integrate the RC charge/discharge between the
    # comparator thresholds Vc and Vc/2 (NE555 datasheet threshold rule) with events, and
    # compare the times with the closed form. rtol 1e-10 of the ODE solver → 1e-7 is ample.
    from scipy.integrate import solve_ivp

    ra, rb, c, vcc, vc = 2.2e3, 15e3, 470e-9, 12.0, 7.0

    def cross(level):
        ev = lambda t, v: v[0] - level  # noqa: E731
        ev.terminal = True
        return ev

    up = solve_ivp(lambda t, v: [(vcc - v[0]) / ((ra + rb) * c)], (0, 1), [vc / 2], events=cross(vc),
                   rtol=1e-11, atol=1e-13)
    down = solve_ivp(lambda t, v: [-v[0] / (rb * c)], (0, 1), [vc], events=cross(vc / 2),
                     rtol=1e-11, atol=1e-13)
    t = astable_timing(ra, rb, c, supply_v=vcc, control_voltage_v=vc)
    assert t.t_high_s == pytest.approx(up.t_events[0][0], rel=1e-7)
    assert t.t_low_s == pytest.approx(down.t_events[0][0], rel=1e-7)
    # diode variant: C charges through RA and the diode, toward Vcc − Vd (0.65 V, REFERENCES §11)
    up_d = solve_ivp(lambda t, v: [(vcc - 0.65 - v[0]) / (ra * c)], (0, 1), [vc / 2], events=cross(vc),
                     rtol=1e-11, atol=1e-13)
    td = astable_timing(ra, rb, c, supply_v=vcc, control_voltage_v=vc, diode=True)
    assert td.t_high_s == pytest.approx(up_d.t_events[0][0], rel=1e-7)


def test_diode_drop_charge_factor():
    # REFERENCES §11 (charging law): Vcc = 12 V, Vd = 0.65 V → ln(7.35/3.35) = 0.786, not ln 2
    assert high_time_factor(12.0, None, 0.65) == pytest.approx(math.log(7.35 / 3.35), rel=1e-12)
    assert round(high_time_factor(12.0, None, 0.65), 3) == 0.786
    # a "50 %" diode design built with equal RA = RB runs slow and long-high, as the issue found
    t = astable_timing(10e3, 10e3, 1e-6, supply_v=12.0, diode=True)
    assert t.duty == pytest.approx(0.786 / (0.786 + LN2), abs=1e-3) and t.duty > 0.52
    d = design_astable(50.0, 0.50, diode=True, n_trials=2000)
    assert d.timing.duty == pytest.approx(0.50, abs=0.01)          # RA chosen for the real factor
    assert d.timing.frequency_hz == pytest.approx(50.0, rel=0.01)
    assert any("0.786" in n for n in d.notes) and any("divide by two" in n for n in d.notes)


def test_timer_variation_widens_the_spread():
    # TI SLFS022 initial error 2.25 % (as 1σ): the frequency spread of a design with 1 % resistors
    # and a 1 % capacitor is then dominated by the timer itself
    a = design_astable(50.0, 0.55, tolerance_c=0.01, n_trials=4000, timer_variation=False)
    b = design_astable(50.0, 0.55, tolerance_c=0.01, n_trials=4000)
    # independent terms add in quadrature (GUM 5.1.2): initial error 2.25 % (1σ), 150 ppm/°C and
    # 0.3 %/V uniform over ±10 °C and ±0.5 V (u = half-width/√3, GUM 4.3.7); 5 % covers the
    # Monte Carlo error of a standard deviation from 4000 draws (1/√(2·4000) ≈ 1.1 %) and the
    # period-to-frequency non-linearity
    rel_timer = math.sqrt(0.0225 ** 2 + (150e-6 * 10 / math.sqrt(3)) ** 2 + (0.003 * 0.5 / math.sqrt(3)) ** 2)
    f = a.timing.frequency_hz
    expect = math.hypot(a.spread.frequency_std_hz, rel_timer * f)
    assert b.spread.frequency_std_hz == pytest.approx(expect, rel=0.05)
    assert b.spread.yield_fraction < a.spread.yield_fraction


def test_control_voltage_inverse():
    # ⅔·Vcc gives ln2 (REFERENCES §7: "V_c = ⅔V_CC gives back ln 2"); the inverse round-trips
    assert high_time_factor(12.0, 8.0) == pytest.approx(LN2, rel=1e-14)
    assert control_voltage_for_factor(LN2, 12.0) == pytest.approx(8.0, rel=1e-14)
    for vc in (1.0, 5.5, 11.0):
        assert control_voltage_for_factor(high_time_factor(12.0, vc), 12.0) == pytest.approx(vc, rel=1e-12)


def test_design_hits_frequency_and_duty():
    d = design_astable(50.0, 0.55, series="E24", n_trials=2000)
    # E24 steps are ≤ 10 %; two resistors and six capacitor choices get within 1 % (bound
    # from the series spacing, checked by the search)
    assert abs(d.frequency_error) < 0.01
    assert abs(d.timing.duty - 0.55) < 0.01
    t = astable_timing(d.ra_ohm, d.rb_ohm, d.c_farad)
    assert t.frequency_hz == pytest.approx(d.timing.frequency_hz, rel=1e-12)
    assert 1e3 <= d.ra_ohm <= 1e6 and 1e3 <= d.rb_ohm <= 1e6


def test_duty_below_half_needs_the_diode_or_a_low_control_voltage():
    with pytest.raises(DesignError, match="diode=True"):
        design_astable(50.0, 0.45)
    d = design_astable(50.0, 0.30, diode=True, n_trials=2000)
    assert abs(d.timing.duty - 0.30) < 0.01  # E24 resolution, as above
    # with Vc = 3 V on a 5 V supply the minimum duty is k/(k + ln2) = 0.469 (REFERENCES §7 form)
    k = high_time_factor(5.0, 3.0)
    d = design_astable(6000.0, 0.48, supply_v=5.0, control_voltage_v=3.0, n_trials=2000)
    assert d.timing.duty > k / (k + LN2)
    assert abs(d.timing.duty - 0.48) < 0.01


def test_a_duty_beyond_the_resistor_range_is_named_not_the_frequency():
    # basic astable at 12 V: duty = (RA + RB)/(RA + 2RB) from the 555 charging law (TI SLFS022; REFERENCES §7
    # form), so RA/RB ≤ 1000 caps it at 1001/1002 = 99.9 %; 50 Hz itself is reachable, so the duty is named
    with pytest.raises(DesignError, match=r"^duty: 99.99 % cannot be made .* to 99.9 % here; 50 Hz itself is in reach"):
        design_astable(50.0, 0.9999)
    d = design_astable(50.0, 0.99, n_trials=500)
    assert abs(d.timing.duty - 0.99) < 0.005


def test_spread_is_seeded_and_matches_first_order_propagation():
    ra, rb, c, tr, tc = 1e3, 10e3, 1e-6, 0.01, 0.10
    a = tolerance_spread(ra, rb, c, 70.0, tolerance_r=tr, tolerance_c=tc, n_trials=40000, seed=3)
    b = tolerance_spread(ra, rb, c, 70.0, tolerance_r=tr, tolerance_c=tc, n_trials=40000, seed=3)
    assert a == b
    # GUM (JCGM 100:2008) 5.1.2 law of propagation with uniform inputs u = tol/√3 (4.3.7):
    # f ∝ 1/(C·(k(RA+RB) + ln2·RB)), sensitivities of ln f to ln RA, ln RB, ln C
    den = LN2 * (ra + rb) + LN2 * rb
    s_a, s_b = LN2 * ra / den, 2 * LN2 * rb / den
    rel = math.sqrt((tc ** 2 + (s_a ** 2 + s_b ** 2) * tr ** 2) / 3)
    f_nom = 1 / (c * den)
    # 3 % covers the Monte Carlo error (1/√(2N) ≈ 0.4 %) and the second-order term of a
    # ±10 % capacitor (≈ tol² ≈ 1 %)
    assert a.frequency_std_hz / f_nom == pytest.approx(rel, rel=0.03)
    n = tolerance_spread(ra, rb, c, 70.0, tolerance_r=tr, tolerance_c=tc, n_trials=40000, seed=3,
                         distribution="normal")
    # normal with tolerance = 3σ: σ = tol/3 instead of tol/√3 (same 3 % allowance)
    rel_n = math.sqrt(tc ** 2 + (s_a ** 2 + s_b ** 2) * tr ** 2) / 3
    assert n.frequency_std_hz / f_nom == pytest.approx(rel_n, rel=0.03)


def test_yield_matches_the_uniform_distribution():
    # with only C spread, uniform ±10 %, and the target at the nominal frequency, the units
    # within ±1 % are those with C in [1/1.01 − 1, 1/0.99 − 1]: probability 0.020002/0.2
    ra, rb, c = 1e3, 10e3, 1e-6
    f_nom = astable_timing(ra, rb, c).frequency_hz
    s = tolerance_spread(ra, rb, c, f_nom, tolerance_r=0.0, tolerance_c=0.10, yield_within=0.01,
                         n_trials=40000, seed=11)
    p = (1 / 0.99 - 1 / 1.01) / 0.2
    # 4 binomial standard deviations (√(p(1−p)/n) ≈ 0.0015)
    assert s.yield_fraction == pytest.approx(p, abs=4 * math.sqrt(p * (1 - p) / 40000))
    assert s.yield_u == pytest.approx(math.sqrt(s.yield_fraction * (1 - s.yield_fraction) / 40000))


def test_trim_pot_covers_the_target_and_the_spread():
    d = design_astable(50.0, c1_farad=1e-6, trim_pot_ohm=5e3, tolerance_c=0.10, n_trials=5000, seed=1)
    tr = d.trim
    assert tr.kind == "pot" and tr.frequency_low_hz < 50.0 < tr.frequency_high_hz
    # setting the trimmer as advised gives the target exactly (same equations)
    t = astable_timing(d.ra_ohm, d.rb_ohm + tr.setting_for_target, d.c_farad)
    assert t.frequency_hz == pytest.approx(50.0, rel=1e-12)
    # the trimmer spans ±19 % of the period here against a ±10 % capacitor: most units trim
    assert tr.trimmable_fraction > 0.9


def test_control_pin_trim_setting_gives_the_target():
    d = design_astable(50.0, c1_farad=1e-6, control_range_v=(6.0, 10.0), n_trials=5000)
    tr = d.trim
    assert tr.kind == "control" and tr.unit == "V"
    assert 6.0 <= tr.setting_for_target <= 10.0
    t = astable_timing(d.ra_ohm, d.rb_ohm, d.c_farad, supply_v=12.0, control_voltage_v=tr.setting_for_target)
    assert t.frequency_hz == pytest.approx(50.0, rel=1e-12)
    assert any("3.3 kΩ" in c for c in d.cautions)


def test_summary_and_dict_are_complete():
    d = design_astable(50.0, trim_pot_ohm=10e3, n_trials=1000)
    text = "\n".join(d.summary_lines())
    for word in ("RA =", "Hz", "%", "trimmer"):
        assert word in text
    json.dumps(d.to_dict(), allow_nan=False)


@pytest.mark.parametrize("kwargs", [
    dict(frequency_hz=0.0), dict(frequency_hz=-50.0), dict(frequency_hz=50.0, duty=1.2),
    dict(frequency_hz=50.0, series="E5"), dict(frequency_hz=50.0, tolerance_r=1.5),
    dict(frequency_hz=50.0, distribution="triangular"), dict(frequency_hz=50.0, c1_farad=-1e-6),
    dict(frequency_hz=50.0, supply_v=12.0, control_voltage_v=13.0),
    dict(frequency_hz=50.0, trim_pot_ohm=1e3, control_range_v=(6.0, 9.0)),
    dict(frequency_hz=1e-3, c1_farad=1e-9),
])
def test_bad_requests_raise_one_line_design_errors(kwargs):
    with pytest.raises(DesignError) as e:
        design_astable(n_trials=200, **kwargs)
    msg = str(e.value)
    assert "\n" not in msg and ":" in msg
