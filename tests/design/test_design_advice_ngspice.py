"""Trim advice closed on the whole spec, re-simulated in ngspice (issue 10, "done when").

Source of every check: ngspice (independent circuit simulator) — the unit is simulated, captured,
measured and fitted by benchfit as on the bench, the advice is computed, the advised change is
put into the ngspice circuit, and the re-simulated unit is measured again and judged against the
hum-check spec (sample_captures/hc_spec.toml limits, copied below). The timer is simulated from
its charging law with a hysteretic discharge switch (tests/model/unitspice.py; NE555 block
diagram thresholds ⅓ and ⅔ Vcc, REFERENCES §7).

Unit values are the invented hum-check scenario (DESIGN.md): timer levels 10.6 V / 0.08 V,
220 Ω over 56 Ω divider, two 150 mH chokes (300 mH), 33 µF bank, 10 kΩ load. The capture is
AC-coupled by removing the mean (an ideal DC block, as a line input sees the output).
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "model"))  # the shared ngspice helper

import benchfit  # noqa: E402
from benchfit.capture.capture import Capture  # noqa: E402
from benchfit.design.advice import TimerParts, advise  # noqa: E402
from benchfit.design.filter import design_filter  # noqa: E402
from benchfit.report.spec import parse_spec  # noqa: E402
from unitspice import SpiceUnit, simulate_astable, simulate_unit  # noqa: E402

pytestmark = pytest.mark.ngspice



def _spec(vrms_min: float, vrms_max: float):
    return parse_spec({
        "spec": {"decision_rule": "guard-banded"},
        "conditions": {"load_ohm": 10000, "supply_v": 12.0},
        "limit": [{"quantity": "frequency_hz", "nominal": 50.0, "tolerance": 0.25},
                  {"quantity": "thd_pct", "max": 5.0},
                  {"quantity": "vrms", "unit": "V", "min": vrms_min, "max": vrms_max}]})


SPEC = _spec(1.0, 1.6)
NOMINAL = {"L": 0.300, "C": 33e-6}
FS = 48000.0


def _unit(**kw) -> SpiceUnit:
    base = dict(f=50.02, duty=0.523, v_high=10.6, v_low=0.08, r_src=0.0, L=0.300, Rs=24.0, C=33e-6,
                Resr=0.0, Rload=10e3, divider=(220.0, 56.0))
    base.update(kw)
    return SpiceUnit(**base)


def _simulate_capture_measure(tmp_path, u: SpiceUnit, name: str):
    """The ngspice run (unitspice.simulate_unit's arrays), its AC-coupled capture and benchfit's measurement."""
    sim = simulate_unit(tmp_path, u, fs=FS, settle=0.6, keep=0.5, name=name)
    x = sim["out"] - np.mean(sim["out"])
    cap = Capture(x, FS, ("output",), ("V",), source=f"ngspice:{name}")
    return sim, cap, benchfit.measure(cap)


def _capture_measure(tmp_path, u: SpiceUnit, name: str):
    return _simulate_capture_measure(tmp_path, u, name)[1:]


def _passes(meas, spec=SPEC) -> bool:
    ch = meas.to_dict()["channels"][0]
    return all((lim.lower is None or ch[lim.quantity] >= lim.lower) and
               (lim.upper is None or ch[lim.quantity] <= lim.upper) for lim in spec.limits)


def _advise_from_sim(tmp_path, u: SpiceUnit, name: str, **kw):
    cap, meas = _capture_measure(tmp_path, u, name)
    fit = benchfit.fit_lowpass(cap, fix={"C": 33e-6, "Rload": 10e3})
    return meas, advise(SPEC, fit=fit, measurement=meas.to_dict(), n_trials=600, **kw)


def _close(pred, meas, k=3.0) -> None:
    """Re-simulated value within k predicted standard uncertainties (plus 1 % of the value for the
    model's stated approximations: linear averaged source, ideal edges)."""
    ch = meas.to_dict()["channels"][0]
    for q, (v, u) in pred.items():
        assert abs(ch[q] - v) <= k * u + 0.01 * abs(v), (q, ch[q], v, u)


def test_passing_unit_gets_no_change(tmp_path):
    meas, adv = _advise_from_sim(tmp_path, _unit(), "pass", nominal=NOMINAL)
    assert _passes(meas)
    assert adv.verdict == "no change" and adv.plan.changes == ()
    assert adv.to_dict()["changes"] == [] and adv.to_dict()["verdict"] == "no change"
    assert "no change" in " ".join(adv.summary_lines())


def test_wrong_choke_is_replaced_and_the_replaced_unit_passes(tmp_path):
    # one 150 mH choke is a 47 mH part: 197 mH, 17 Ω of winding (sample_captures HC-07)
    bad = _unit(L=0.197, Rs=17.0, f=50.05)
    meas, adv = _advise_from_sim(tmp_path, bad, "choke", nominal=NOMINAL)
    assert not _passes(meas)                                   # THD above 5 %
    assert adv.verdict == "replace"
    first = adv.plan.changes[0]
    assert first.part == "L" and first.action == "replace" and first.new_value == pytest.approx(0.3)
    assert first.text.startswith("replace: L is 19")           # "replace: L is 198 mH, nominal 300 mH"
    # re-simulate with a new 300 mH choke whose winding is 24 Ω (within the stated ±20 % of Rs)
    _, after = _capture_measure(tmp_path, _unit(L=0.300, Rs=24.0, f=50.05), "choke_after")
    assert _passes(after)
    _close(adv.plan.predicted, after)


def test_timer_fast_gets_a_series_trim_and_lands_in_spec(tmp_path):
    # RA 1 kΩ, RB 13.7 kΩ, C1 1 µF nominal (50.80 Hz by the ideal equations). The simulated
    # discharge switch has 10 Ω on-resistance, so the discharge node sits at v_sat = Vcc·10/(RA + 10)
    # and C1 discharges toward it: t_L = RB·C1·ln((⅔Vcc − v_sat)/(⅓Vcc − v_sat)) (charging law,
    # REFERENCES §7 "discharge-transistor saturation"). C1 is chosen so the unit runs at 50.40 Hz,
    # 0.8 % fast.
    ra, rb, vcc = 1e3, 13.7e3, 12.0
    v_sat = vcc * 10.0 / (ra + 10.0)
    k_low = np.log((2 * vcc / 3 - v_sat) / (vcc / 3 - v_sat))
    c1_true = 1.0 / (50.40 * (np.log(2) * (ra + rb) + k_low * rb))
    f_meas = simulate_astable(tmp_path, ra=ra, rb=rb, c1=c1_true, name="timer")
    assert f_meas == pytest.approx(50.40, rel=5e-4)   # ngspice vs the charging law (1 µs steps)
    adv = advise(SPEC, timer=TimerParts(1e3, 13.7e3, 1e-6, 12.0), timer_frequency_hz=f_meas,
                 timer_frequency_u_hz=0.001, n_trials=600)
    assert adv.verdict == "adjust"
    ch = adv.plan.changes[0]
    assert ch.part == "RB" and ch.action == "add in series"
    r_add = sum(ch.values)
    assert 80 < r_add < 200                                     # about 110 Ω, not a rebuilt RB
    f_after = simulate_astable(tmp_path, ra=1e3, rb=13.7e3 + r_add, c1=c1_true, name="timer_after")
    v, u = adv.plan.predicted["frequency_hz"]
    assert 49.75 <= f_after <= 50.25
    # the ngspice switch's finite on-resistance and 1 µs step are calibrated out by the measured
    # frequency; what is left is the attribution term, inside 3 u
    assert abs(f_after - v) <= 3 * u + 1e-4 * v, (f_after, v, u)
    assert u < 0.01


def test_off_resonance_filter_thd_failure_is_fixed_by_the_advised_change(tmp_path):
    # the bank was built as 18 µF: the tank sits near 69 Hz, THD about 6 %
    bad = _unit(C=18e-6)
    cap, meas = _capture_measure(tmp_path, bad, "offres")
    assert not _passes(meas)
    fit = benchfit.fit_lowpass(cap, fix={"C": 18e-6, "Rload": 10e3})
    adv = advise(SPEC, fit=fit, measurement=meas.to_dict(), n_trials=600)
    assert adv.verdict == "adjust"
    assert adv.plan.p_pass >= 0.95
    c_new, rs_new = _applied(adv.plan.changes, 18e-6, 24.0)
    _, after = _capture_measure(tmp_path, _unit(C=c_new, Rs=rs_new), "offres_after")
    assert _passes(after)
    _close(adv.plan.predicted, after)


def test_high_q_design_is_flagged_for_timer_current(tmp_path):
    # 300 mH tuned to 50 Hz, driven straight from the timer through 10 Ω: Q ≈ 9.4
    d = design_filter(50.0, inductance=0.3, rs_ohm=10.0, amplitude_v=12.0)
    opt = d.options[0]
    flagged = [s for s in opt.stress if s.flagged]
    assert any(s.quantity == "timer_output_peak_a" for s in flagged)
    assert not d.recommended or d.recommended.label != opt.label
    sim = simulate_unit(tmp_path, SpiceUnit(f=50.0, duty=0.5, v_high=12.0, v_low=0.0, r_src=0.0, L=0.3,
                                            Rs=10.0, C=opt.capacitance_f, Resr=0.0, Rload=1e9),
                        settle=1.5, keep=0.2, name="highq")
    i_peak = float(np.max(np.abs(sim["il"])))
    assert i_peak > 0.2                                         # NE555: ±200 mA (TI SLFS022)
    pred = next(s for s in opt.stress if s.quantity == "timer_output_peak_a").value
    assert pred == pytest.approx(i_peak, rel=0.02)


# --- an asymmetric timer (r_high ≠ r_low) driving the filter directly ------------------------------

#: a timer straight into the filter (no divider), sourcing through 25 Ω and sinking through 8 Ω
#: (REFERENCES §11; the issue-11 asymmetric unit), 40 Ω of winding and wiring, 33 µF with 1.5 Ω ESR
ASYM_SPEC = _spec(5.0, 8.0)


def _asym_unit(**kw) -> SpiceUnit:
    base = dict(f=50.02, duty=0.52, v_high=12.0, v_low=0.0, r_src=25.0, r_low=8.0, L=0.300, Rs=40.0, C=33e-6,
                Resr=1.5, Rload=10e3)
    base.update(kw)
    return SpiceUnit(**base)


def _applied(changes, c: float, rs: float) -> tuple[float, float]:
    """The bank and the series resistance after the advised filter changes."""
    for ch in changes:
        if ch.part == "C" and ch.action == "add in parallel":
            c += sum(ch.values)
        elif ch.part == "C" and ch.action == "add in series":
            c = 1.0 / (1.0 / c + 1.0 / sum(ch.values))
        elif ch.part == "Rdamp":
            rs += sum(ch.values)
        else:
            pytest.fail(f"unexpected change {ch}")
    return c, rs


@pytest.mark.parametrize("duty", [None, 0.52])
def test_asymmetric_timer_advice_is_met_as_predicted(tmp_path, duty):
    # the level is too high (vrms 8.8 V for a 5…8 V limit); the fit finds the switched drive (its
    # drive_asymmetry_ohm, r_high − r_low = ±17 Ω) and the advice predicts every plan with it; with the
    # duty given (0.52, the 25 Ω phase's share) the advice knows which phase is high
    cap, meas = _capture_measure(tmp_path, _asym_unit(), "asym")
    assert not _passes(meas, ASYM_SPEC)
    fit = benchfit.fit_lowpass(cap, fix={"C": 33e-6, "Rload": 10e3})
    assert abs(abs(fit.derived["drive_asymmetry_ohm"].value) - 17.0) < 0.5   # the fit saw the timer's 25/8 Ω
    adv = advise(ASYM_SPEC, fit=fit, measurement=meas.to_dict(), n_trials=600, duty=duty)
    assert adv.verdict == "adjust" and adv.plan.p_pass >= 0.95
    assert any("switched-source" in n for n in adv.notes)
    c_new, rs_new = _applied(adv.plan.changes, 33e-6, 40.0)
    sim, _, after = _simulate_capture_measure(tmp_path, _asym_unit(C=c_new, Rs=rs_new), "asym_after")
    # every limit the plan was predicted to meet is met ...
    assert all(p >= 0.95 for p in adv.plan.p_limits.values())
    assert _passes(after, ASYM_SPEC)
    # ... at the predicted value: k = 3 on the prediction's u, plus 5e-4 relative for the measurement's
    # method error the ratio q_meas·m(after)/m(before) does not cancel (measure's THD and vrms differ from a
    # whole-period projection of the same ngspice samples by 1.0e-3 before and 1.1e-3 after the change,
    # so about 1e-4 is left); the 1 µs ngspice edges move harmonic 10 by (π·10·f·t_r)²/6 ≈ 4e-7. The
    # time-invariant model with the averaged resistance (before the fit's switched drive reached the
    # advice) missed the THD by 7.7 u, 4e-3 relative.
    ch = after.to_dict()["channels"][0]
    for q, (v, u) in adv.plan.predicted.items():
        assert abs(ch[q] - v) <= 3 * u + 5e-4 * abs(v), (q, ch[q], v, u)
    # the stresses: the output alone cannot tell which phase is high, so each is the worse of the drive and its
    # complement (the two differ by 8 % in the capacitor's peak here); none is below the re-simulated figure by
    # more than the fitted parts allow: the 1.5 Ω ESR the fit folded into Rs moves the capacitor's own voltage
    # by up to ESR·peak current ≈ 0.19 V, and the fitted L and Rs (u 0.02 % and 0.3 %) move the peak current
    # by < 1 %. With the advice's one phase taken as high, the capacitor's minimum was predicted −4.48 V for
    # a re-simulated −5.77 V.
    st = {s.quantity: s.value for s in adv.plan.stress}
    i_peak = float(np.max(np.abs(sim["it"])))
    slack_v = 1.5 * i_peak
    assert st["timer_output_peak_a"] >= 0.99 * i_peak
    assert st["capacitor_peak_v"] >= float(np.max(np.abs(sim["vc"]))) - slack_v
    assert st["capacitor_min_v"] <= float(np.min(sim["vc"])) + slack_v
    assert st["output_peak_v"] >= float(np.max(np.abs(sim["out"]))) - slack_v
    if duty is not None:
        # the phase known: the stresses are this drive's, so they also lie no further above the re-simulated
        # figures than the same fitted-part slack (the worse of drive and complement was 8 % above in the peak)
        assert st["capacitor_peak_v"] <= float(np.max(np.abs(sim["vc"]))) + slack_v
        assert st["capacitor_min_v"] >= float(np.min(sim["vc"])) - slack_v
        assert st["timer_output_peak_a"] <= 1.01 * i_peak
