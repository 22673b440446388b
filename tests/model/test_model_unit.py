"""The unit model (drive + filter → spec quantities and stresses) against ngspice.

Source of every reference value: ngspice (independent circuit simulator), transient analysis
of the same circuit (tests/model/unitspice.py), analysed over whole periods of the steady
state. Tolerances: the simulator's PULSE has 1 µs edges (the model's drive is ideal), which
changes harmonic k by sinc(k·f·1µs) — below 1e-5 for k ≤ 40 at 60 Hz — and the transient is
run at reltol 1e-6; 1e-3 relative on levels and currents and 2e-3 on THD leave room for the
interpolation onto the analysis grid (48 kHz) and nothing else.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from benchfit.model.filter import LowpassParts
from benchfit.model.unit import CaptureChain, Drive, UnitModel, predict, predict_quantities
from unitspice import SpiceUnit, harmonics, simulate_unit

pytestmark = pytest.mark.ngspice


def _thd(a: np.ndarray, h: int = 10) -> float:
    return float(np.sqrt(np.sum(a[1:h] ** 2)) / a[0])


def test_given_lc_off_resonance_thd_matches_ngspice(tmp_path):
    # the case: 288 mH with 10 µF driven at 60 Hz by a 0…12 V square (50 %), 10 Ω
    # in series, open output: THD about 7.5 % by hand (REFERENCES §5/§6 harmonic sum)
    su = SpiceUnit(f=60.0, duty=0.5, v_high=12.0, v_low=0.0, r_src=0.0, L=0.288, Rs=10.0,
                   C=10e-6, Resr=0.0, Rload=1e9)
    sim = simulate_unit(tmp_path, su, settle=2.0, keep=0.5)
    a, dc = harmonics(sim["out"], 48000.0, 60.0)
    unit = UnitModel(Drive(60.0, 0.5, 12.0), LowpassParts(0.288, 10e-6, 10.0, 0.0, 1e9))
    pr = predict(unit, CaptureChain(n_harmonics=10))
    assert pr.thd == pytest.approx(_thd(a), rel=2e-3)
    assert pr.thd_pct == pytest.approx(7.47, abs=0.02)   # the "THD 7.5 %"
    assert pr.amplitude == pytest.approx(a[0], rel=1e-3)
    assert pr.vdc == pytest.approx(dc, rel=1e-3)
    assert pr.inductor_peak_a == pytest.approx(np.max(np.abs(sim["il"])), rel=2e-3)
    assert pr.capacitor_min_v == pytest.approx(np.min(sim["vc"]), abs=2e-3 * 12)


def test_hum_check_unit_with_divider_and_asymmetric_source(tmp_path):
    # a hum-check unit (invented demo values, DESIGN.md): timer 10.6 V / 0.08 V, 52.3 % duty,
    # 220 Ω over 56 Ω divider, 300 mH, 24 Ω, 33 µF with 0.6 Ω ESR, 10 kΩ load
    su = SpiceUnit(f=50.0, duty=0.523, v_high=10.6, v_low=0.08, r_src=10.0, L=0.300, Rs=24.0,
                   C=33e-6, Resr=0.6, Rload=10e3, divider=(220.0, 56.0))
    sim = simulate_unit(tmp_path, su, settle=1.5, keep=0.6)
    a, dc = harmonics(sim["out"], 48000.0, 50.0)
    unit = UnitModel(Drive(50.0, 0.523, 10.6, 0.08, 10.0, 10.0, divider=(220.0, 56.0)),
                     LowpassParts(0.300, 33e-6, 24.0, 0.6, 10e3))
    pr = predict(unit)
    assert pr.thd == pytest.approx(_thd(a), rel=2e-3)
    assert pr.amplitude == pytest.approx(a[0], rel=1e-3)
    ac_rms = math.sqrt(np.sum(a ** 2) / 2)
    q = predict_quantities(unit, CaptureChain(ac_coupled=True))
    assert q["vrms"] == pytest.approx(ac_rms, rel=1e-3)
    assert q["thd_pct"] == pytest.approx(100 * _thd(a), rel=2e-3)
    assert pr.inductor_rms_a == pytest.approx(float(np.sqrt(np.mean(sim["il"] ** 2))), rel=2e-3)
    assert pr.output_max_v - pr.output_min_v == pytest.approx(np.ptp(sim["out"]), rel=2e-3)


def test_asymmetric_source_is_switched_and_continuous_with_the_linear_model():
    # r_high ≠ r_low takes the exact switched-source path (benchfit.model.switched; checked against
    # ngspice in tests/fit/test_switched_model.py). As the difference goes to 0 it must join the linear
    # path: a 1e-6 Ω difference moves every quantity by ~1e-6·(∂q/∂R)/q ≲ 1e-7 relative, so 1e-6
    # bounds it while any plumbing error (a level, the divider, a DC term) shows far above it
    for divider, v_low in ((None, 0.0), ((47.0, 100.0), 0.4)):
        base = UnitModel(Drive(50.0, 0.3, 10.0, v_low, r_high=20.0, r_low=20.0, divider=divider),
                         LowpassParts(0.3, 33e-6, 20.0, 1.5, 10e3))
        near = base.with_drive(r_high=20.0 + 1e-6)
        a, b = predict(base).to_dict(), predict(near).to_dict()
        for key in ("amplitude", "vdc", "vrms", "vpp", "thd", "output_max_v", "output_min_v", "inductor_peak_a",
                    "inductor_rms_a", "capacitor_max_v", "capacitor_min_v", "capacitor_rms_a", "source_peak_a", "source_rms_a"):
            assert b[key] == pytest.approx(a[key], rel=1e-6, abs=1e-9), (divider, key)
        qa, qb = predict_quantities(base), predict_quantities(near)
        for key in ("amplitude", "vdc", "vrms", "thd_pct"):
            assert qb[key] == pytest.approx(qa[key], rel=1e-6, abs=1e-9), (divider, key)
        assert predict(near).notes and not predict(base).notes
    d = Drive(50.0, 0.25, 10.0, 0.0, r_high=40.0, r_low=8.0)
    assert d.r_average == pytest.approx(0.25 * 40 + 0.75 * 8)
    # the averaged resistance stays what the filter "sees" on average (series loss, design margins)
    assert UnitModel(d, LowpassParts(0.3, 33e-6, 20.0, 0.0, 10e3)).effective_filter().Rs == pytest.approx(36.0)
