"""Trim advice from fitted values (benchfit.design.trim), without a simulator."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from benchfit.design.astable import astable_timing
from benchfit.design.trim import suggest_capacitor_trim, suggest_trim
from benchfit.errors import DesignError
from benchfit.fit.result import DerivedValue, FitParameter, FitQuality, FitResult


def make_fit(L=0.3, C=30e-6, uL=None, uC=None, rho=None, f0=None, uf0=1e-3, fixed_c=False,
             model="lc-lowpass"):
    f0 = 1 / (2 * math.pi * math.sqrt(L * C)) if f0 is None else f0
    params = {"L": FitParameter(L, uL, False, "H"), "C": FitParameter(C, uC, fixed_c, "F"),
              "Rs": FitParameter(25.0, 0.1, False, "ohm"), "Resr": FitParameter(0.5, 0.01, False, "ohm"),
              "Rload": FitParameter(10e3, None, True, "ohm")}
    corr = {} if rho is None else {"L,C": rho}
    return FitResult("hc07_as_found.wav", model, "two-channel", params,
                     {"resonant_frequency_hz": DerivedValue(f0, uf0)}, corr, FitQuality(1e-4, 0.9999, 50))


def test_separately_determined_l_and_c_propagate_like_monte_carlo():
    # L and C known to 1 % and 2 % with correlation −0.6: the GUM law of propagation
    # (JCGM 100:2008 5.2) used by the advice is checked against a Monte Carlo propagation
    # (JCGM 101:2008, GUM Supplement 1) of the same inputs
    L, C, rl, rc, rho = 0.3, 30e-6, 0.01, 0.02, -0.6
    fit = make_fit(L, C, uL=rl * L, uC=rc * C, rho=rho)
    adv = suggest_trim(fit, 50.0, part_tolerance=0.0)
    ch = adv.capacitor
    f0 = 1 / (2 * math.pi * math.sqrt(L * C))
    # C_new = C·(f0/F)² (f0 ∝ 1/√C with everything else unchanged; Nilsson & Riedel resonance)
    assert ch.needed == pytest.approx(C * (f0 / 50.0) ** 2, rel=1e-12)
    added = ch.parts.value
    assert ch.chosen == pytest.approx(C + added, rel=1e-12)
    assert ch.predicted_hz == pytest.approx(1 / (2 * math.pi * math.sqrt(L * (C + added))), rel=1e-12)
    assert "add" in ch.action and "across the capacitor bank" in ch.action
    # Monte Carlo: 200 000 draws of (ln L, ln C); sampling error of a std ≈ 1/√(2N) = 0.16 %,
    # linearisation error ≈ (2 %)² — 2 % relative covers both
    rng = np.random.default_rng(7)
    cov = np.array([[rl ** 2, rho * rl * rc], [rho * rl * rc, rc ** 2]])
    z = rng.multivariate_normal([0, 0], cov, 200_000)
    Ls, Cs = L * np.exp(z[:, 0]), C * np.exp(z[:, 1])
    f_new = 1 / (2 * math.pi * np.sqrt(Ls * (Cs + added)))
    assert ch.predicted_u_hz == pytest.approx(f_new.std(), rel=0.02)
    # the added part's tolerance adds in quadrature: ½·(tol/√3)·ΔC'/(C + ΔC') relative
    with_tol = suggest_trim(fit, 50.0, part_tolerance=0.10).capacitor
    extra = ch.predicted_hz * 0.5 * (0.10 / math.sqrt(3)) * added / (C + added)
    assert with_tol.predicted_u_hz ** 2 == pytest.approx(ch.predicted_u_hz ** 2 + extra ** 2, rel=1e-9)


def test_fixed_c_works_from_f0():
    fit = make_fit(uL=0.003, uC=None, fixed_c=True, uf0=0.002)
    ch = suggest_trim(fit, 50.0, part_tolerance=0.0).capacitor
    # only f0's standard error remains: u(f_new)/f_new = u(f0)/f0 (C exact, part exact)
    f0 = fit.derived["resonant_frequency_hz"].value
    assert ch.predicted_u_hz / ch.predicted_hz == pytest.approx(0.002 / f0, rel=1e-12)
    assert any("fixed" in n for n in suggest_trim(fit, 50.0).notes)


def test_only_lc_known_uses_the_bank_and_its_tolerance():
    # a correlation of −0.99999 means the fit determined LC but not L and C
    fit = make_fit(C=56e-6, L=0.3 * 30 / 56, uL=0.02, uC=6e-6, rho=-0.99999, uf0=0.001)
    f0 = fit.derived["resonant_frequency_hz"].value
    adv = suggest_trim(fit, 50.0, bank=[22e-6, 10e-6, 1e-6], bank_tolerance=0.2, part_tolerance=0.0)
    ch = adv.capacitor
    assert ch.present == pytest.approx(33e-6, rel=1e-12)
    assert ch.needed == pytest.approx(33e-6 * (f0 / 50.0) ** 2, rel=1e-12)
    w = 33e-6 / ch.chosen
    expect = ch.predicted_hz * math.hypot(0.001 / f0, 0.5 * (1 - w) * 0.2 / math.sqrt(3))
    assert ch.predicted_u_hz == pytest.approx(expect, rel=1e-12)
    assert any("bank's nominal" in n for n in adv.notes)
    # without the bank the advice says that the C error is left out
    adv2 = suggest_trim(fit, 50.0)
    assert any("NOT in the prediction" in n for n in adv2.notes)
    # the note names the parameter (bank=), the command line its option (project convention, no source)
    from benchfit.cli.common import cli_words

    note = next(n for n in adv2.notes if "NOT in the prediction" in n)
    assert "(bank=)" in note and "(--bank)" in cli_words(note)


def test_decrease_removes_or_swaps_a_bank_part():
    # bank nominal 22 + 10 + 1 µF, fitted 33 µF, resonance 47 Hz → needs less C for 50 Hz
    L, C = 1 / ((2 * math.pi * 47.0) ** 2 * 33e-6), 33e-6
    fit = make_fit(L, C, uL=L * 0.005, uC=C * 0.005, rho=0.0)
    adv = suggest_trim(fit, 50.0, bank=[22e-6, 10e-6, 1e-6], part_tolerance=0.0)
    ch = adv.capacitor
    need = C * (47 / 50) ** 2          # 29.16 µF
    assert ch.needed == pytest.approx(need, rel=1e-12)
    assert ch.chosen < C
    assert "10 µF" in ch.action        # the only part whose removal or swap lands near 29 µF
    assert abs(ch.chosen / need - 1) < 0.01  # E12 parts in parallel within 1 %
    assert ch.predicted_hz == pytest.approx(47.0 * math.sqrt(C / ch.chosen), rel=1e-12)
    # without the bank: rebuild advice, and the new parts' tolerance is on the whole value
    ch2 = suggest_trim(fit, 50.0, part_tolerance=0.1).capacitor
    assert "rebuild" in ch2.action
    assert ch2.predicted_u_hz > ch2.predicted_hz * 0.5 * 0.1 / math.sqrt(3) * 0.99


def test_timer_advice_meets_the_target_in_the_scaled_equations():
    ra, rb, c1 = 1e3, 9.1e3, 1.5e-6
    nominal = astable_timing(ra, rb, c1).frequency_hz
    measured = nominal * 1.012  # this unit runs 1.2 % fast
    adv = suggest_trim(None, 50.0, timer_frequency_hz=measured, timer_frequency_u_hz=0.01,
                       ra_ohm=ra, rb_ohm=rb, c1_farad=c1, supply_v=12.0)
    rb_change = next(c for c in adv.changes if c.kind == "timer-rb")
    scale = nominal / measured
    exact = astable_timing(ra, rb_change.needed, c1).frequency_hz / scale
    assert exact == pytest.approx(50.0, rel=1e-12)
    chosen = astable_timing(ra, rb_change.chosen, c1).frequency_hz / scale
    assert rb_change.predicted_hz == pytest.approx(chosen, rel=1e-12)
    assert abs(chosen / 50.0 - 1) < 0.005  # two E24 resistors in series or parallel
    vc = next(c for c in adv.changes if c.kind == "timer-control")
    at = astable_timing(ra, rb, c1, supply_v=12.0, control_voltage_v=vc.chosen).frequency_hz / scale
    assert at == pytest.approx(50.0, rel=1e-12)
    assert vc.present == pytest.approx(8.0)  # ⅔ of 12 V, the internal divider


def ringdown_fit(f0=53.0, uf0=0.004, fixed_l=None):
    params = {}
    if fixed_l is not None:
        c = 1 / ((2 * math.pi * f0) ** 2 * fixed_l)
        params = {"L": FitParameter(fixed_l, None, True, "H"),
                  "C": FitParameter(c, 2 * c * uf0 / f0, False, "F")}
    return FitResult("hc04_ring.wav", "ringdown", "ringdown", params,
                     {"resonant_frequency_hz": DerivedValue(f0, uf0)}, {}, FitQuality(0.01, 0.99, 900))


def test_ringdown_fits_are_accepted():
    # L fixed (two 150 mH chokes), C from the ring frequency: only f0's error remains, entering
    # with the weight w = C/(C + ΔC') because C itself came from f0 (ln C = −2 ln f0 + const)
    fit = ringdown_fit(fixed_l=0.3)
    ch = suggest_trim(fit, 50.0, part_tolerance=0.0).capacitor
    w = fit.parameters["C"].value / ch.chosen
    assert ch.predicted_u_hz / ch.predicted_hz == pytest.approx(w * 0.004 / 53.0, rel=1e-9)
    assert ch.predicted_hz == pytest.approx(1 / (2 * math.pi * math.sqrt(0.3 * ch.chosen)), rel=1e-12)
    # nothing fixed: the bank's nominal value carries the advice
    ch2 = suggest_trim(ringdown_fit(), 50.0, bank=[22e-6, 10e-6, 1e-6]).capacitor
    assert ch2.present == pytest.approx(33e-6) and ch2.needed == pytest.approx(33e-6 * (53 / 50) ** 2)


def test_report_helper_and_json_round_trip():
    fit = make_fit(uL=0.003, uC=0.3e-6, rho=-0.5, uf0=0.01)
    round_tripped = FitResult.from_dict(json.loads(json.dumps(fit.to_dict())))
    a, b = suggest_trim(fit, 50.0), suggest_trim(round_tripped, 50.0)
    assert a.to_dict() == b.to_dict()
    json.dumps(a.to_dict(), allow_nan=False)
    text = "\n".join(a.summary_lines())
    assert "Hz" in text and "µF" in text and "k = 2" in text
    assert suggest_capacitor_trim(fit, 50.0) is not None
    # within two standard uncertainties of the target: nothing to adjust
    f0 = fit.derived["resonant_frequency_hz"].value
    assert suggest_capacitor_trim(fit, f0 + 0.015) is None
    assert suggest_capacitor_trim(make_fit(model="rc-highpass"), 50.0) is None


@pytest.mark.parametrize("call", [
    lambda f: suggest_trim(f, 0.0),
    lambda f: suggest_trim(f, -50.0),
    lambda f: suggest_trim(make_fit(model="rc-highpass"), 50.0),
    lambda f: suggest_trim(ringdown_fit(), 50.0),            # no C, no fixed L, no bank
    lambda f: suggest_trim(f, 50.0, series="E5"),
    lambda f: suggest_trim(f, 50.0, part_tolerance=1.5),
    lambda f: suggest_trim(f, 50.0, timer_frequency_hz=50.3, ra_ohm=1e3),
    lambda f: suggest_trim(None, 50.0),
    lambda f: suggest_trim(f, 50.0, bank=[22e-6, -1e-6]),
])
def test_bad_trim_requests(call):
    fit = make_fit(uL=0.003, uC=None, rho=None)
    with pytest.raises(DesignError) as e:
        call(fit)
    assert "\n" not in str(e.value)
