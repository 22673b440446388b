#!/usr/bin/env python3
"""Print predicted vs ngspice re-simulated frequency, level and THD for the trim-advice cases.

The same scenarios as tests/design/test_design_advice_ngspice.py (invented hum-check units):
a passing unit, a wrong choke, a fast timer, an off-resonance filter and a timer whose output
resistance differs high and low (25 Ω / 8 Ω) driving the filter directly. For each: the advice's
verdict and changes, and the predicted value ± u (k = 1) next to what benchfit measures on the
ngspice re-simulation of the changed unit. Needs ngspice. Run from the repository root:

    PYTHONPATH=$PWD python3 scripts/advice_ngspice.py
"""

from __future__ import annotations

import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path[:0] = [str(ROOT / "tests"), str(ROOT / "tests" / "model"), str(ROOT / "tests" / "design"), str(ROOT)]

import numpy as np  # noqa: E402

import benchfit  # noqa: E402
from benchfit.design.advice import TimerParts, advise  # noqa: E402
from test_design_advice_ngspice import (ASYM_SPEC, NOMINAL, SPEC, _applied, _asym_unit,  # noqa: E402
                                        _capture_measure, _unit)
from unitspice import simulate_astable  # noqa: E402


def _row(name, adv, after):
    ch = after.to_dict()["channels"][0] if after is not None else {}
    print(f"\n{name}: verdict {adv.verdict!r}, p_pass {adv.plan.p_pass:.3f}")
    for c in adv.plan.changes:
        print(f"  change: {c.text}")
    for q, (v, u) in adv.plan.predicted.items():
        got = ch.get(q)
        print(f"  {q:13s} predicted {v:10.4f} ± {u:.4f}   re-simulated {'—' if got is None else f'{got:10.4f}'}")


def main() -> None:
    tmp = Path(tempfile.mkdtemp(prefix="advice_ngspice_"))
    cases = [("passing unit", _unit(), None),
             ("wrong choke (197 mH)", _unit(L=0.197, Rs=17.0, f=50.05), "choke"),
             ("off-resonance filter (18 µF bank)", _unit(C=18e-6), "c")]
    for name, u, kind in cases:
        cap, meas = _capture_measure(tmp, u, name.split()[0])
        fit = benchfit.fit_lowpass(cap, fix={"C": u.C, "Rload": 10e3})
        adv = advise(SPEC, fit=fit, measurement=meas.to_dict(), n_trials=600,
                     nominal=NOMINAL if kind != "c" else None)
        if not adv.plan.changes:
            _row(name, adv, meas)
            continue
        new = dict(L=u.L, Rs=u.Rs, C=u.C, f=u.f)
        for c in adv.plan.changes:
            if c.part == "L" and c.action == "replace":
                new["L"], new["Rs"] = c.new_value, 24.0
            elif c.part == "C" and c.action == "add in parallel":
                new["C"] += sum(c.values)
            elif c.part == "Rdamp":
                new["Rs"] += sum(c.values)
        _, after = _capture_measure(tmp, _unit(**new), name.split()[0] + "_after")
        _row(name, adv, after)
    u = _asym_unit()
    cap, meas = _capture_measure(tmp, u, "asymmetric")
    fit = benchfit.fit_lowpass(cap, fix={"C": u.C, "Rload": 10e3})
    adv = advise(ASYM_SPEC, fit=fit, measurement=meas.to_dict(), n_trials=600)
    c_new, rs_new = _applied(adv.plan.changes, u.C, u.Rs)
    _, after = _capture_measure(tmp, _asym_unit(C=c_new, Rs=rs_new), "asymmetric_after")
    _row(f"asymmetric timer 25/8 Ω (fit: r_high − r_low = {fit.derived['drive_asymmetry_ohm'].value:.3f} Ω)",
         adv, after)
    ra, rb, vcc = 1e3, 13.7e3, 12.0
    v_sat = vcc * 10.0 / (ra + 10.0)
    k_low = np.log((2 * vcc / 3 - v_sat) / (vcc / 3 - v_sat))
    c1 = 1.0 / (50.40 * (np.log(2) * (ra + rb) + k_low * rb))
    f_meas = simulate_astable(tmp, ra=ra, rb=rb, c1=c1, name="timer")
    adv = advise(SPEC, timer=TimerParts(ra, rb, 1e-6, vcc), timer_frequency_hz=f_meas,
                 timer_frequency_u_hz=0.001, n_trials=600)
    f_after = simulate_astable(tmp, ra=ra, rb=rb + sum(adv.plan.changes[0].values), c1=c1, name="timer_after")
    print(f"\ntimer 0.8 % fast (ngspice {f_meas:.4f} Hz): verdict {adv.verdict!r}")
    print(f"  change: {adv.plan.changes[0].text}")
    v, u = adv.plan.predicted["frequency_hz"]
    print(f"  frequency_hz  predicted {v:10.4f} ± {u:.4f}   re-simulated {f_after:10.4f}")


if __name__ == "__main__":
    main()
