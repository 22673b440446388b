"""Spec files and the ILAC-G8:09/2019 decision rules."""

from __future__ import annotations

from pathlib import Path

import pytest

from benchfit.errors import SpecError
from benchfit.report.spec import Decision, decide, load_spec, overall_verdict, parse_spec

ROOT = Path(__file__).resolve().parents[2]

# Values are chosen exactly representable in binary (U = 0.25) so that "at the guard band"
# and "at the tolerance limit" are exact comparisons, not rounding accidents.
TL_U = 5.0     # upper tolerance limit
TL_L = 1.0     # lower tolerance limit
U = 0.25       # expanded uncertainty, k = 2; guard band w = U


# ILAC-G8:09/2019 4.2.1: binary statement, simple acceptance (w = 0, AL = TL): pass or fail.
@pytest.mark.parametrize("value, expected", [
    (4.0, "pass"),     # well inside
    (4.9, "pass"),     # inside, within U of the limit: still pass under simple acceptance
    (5.0, "pass"),     # at the limit: accepted (limit included)
    (5.1, "fail"),     # outside, within U: still fail
    (6.0, "fail"),
])
def test_simple_acceptance_ilac_4_2_1(value, expected):
    d = decide(value, U, None, TL_U, "simple")
    assert d.decision == expected
    assert d.rule == "simple"


# ILAC-G8:09/2019 4.2.2: binary statement with guard band, AL = TL − w: pass or fail.
@pytest.mark.parametrize("value, expected", [
    (4.5, "pass"),     # below AL = 4.75
    (4.75, "pass"),    # at AL: accepted (acceptance limit included)
    (4.875, "fail"),   # between AL and TL: rejected by the guard band
    (5.0, "fail"),     # at TL
    (5.125, "fail"),
])
def test_binary_guard_band_ilac_4_2_2(value, expected):
    assert decide(value, U, None, TL_U, "guard-banded-binary").decision == expected


# ILAC-G8:09/2019 4.2.3: non-binary with guard band w = U:
# pass < TL − w; conditional pass in [TL − w, TL]; conditional fail in (TL, TL + w]; fail > TL + w.
@pytest.mark.parametrize("value, expected", [
    (4.5, "pass"),
    (4.75, "conditional pass"),    # exactly at TL − w
    (4.875, "conditional pass"),   # inside the guard band
    (5.0, "conditional pass"),     # exactly at TL (benchfit's documented choice)
    (5.125, "conditional fail"),   # outside, within w
    (5.25, "conditional fail"),    # exactly at TL + w
    (5.5, "fail"),                 # beyond TL + w
])
def test_non_binary_guard_band_upper_limit_ilac_4_2_3(value, expected):
    assert decide(value, U, None, TL_U, "guard-banded").decision == expected


@pytest.mark.parametrize("value, expected", [
    (1.5, "pass"),
    (1.25, "conditional pass"),    # at TL + w on the lower side
    (1.0, "conditional pass"),     # at TL
    (0.875, "conditional fail"),
    (0.75, "conditional fail"),    # at TL − w
    (0.5, "fail"),
])
def test_non_binary_guard_band_lower_limit_ilac_4_2_3(value, expected):
    assert decide(value, U, TL_L, None, "guard-banded").decision == expected


def test_two_sided_takes_the_worse_side():
    # 49.75 … 50.25 Hz with U = 0.125 Hz: 50.1875 is inside but within U of the upper limit
    assert decide(50.1875, 0.125, 49.75, 50.25, "guard-banded").decision == "conditional pass"
    assert decide(50.0, 0.125, 49.75, 50.25, "guard-banded").decision == "pass"
    assert decide(49.5, 0.125, 49.75, 50.25, "guard-banded").decision == "fail"


def test_missing_uncertainty_falls_back_to_simple_with_a_note():
    d = decide(4.9, None, None, TL_U, "guard-banded")
    assert (d.decision, d.rule) == ("pass", "simple")
    assert "simple acceptance" in d.note


def test_missing_value_is_not_measured_and_fails():
    d = decide(None, U, TL_L, TL_U, "guard-banded")
    assert d.decision == "not measured" and d.failed


def test_overall_verdict():
    def dec(label):
        return Decision(label, 1.0, 0.1, "guard-banded")
    assert overall_verdict([dec("pass"), dec("pass")]) == "pass"
    assert overall_verdict([dec("pass"), dec("conditional pass")]) == "conditional pass"
    assert overall_verdict([dec("conditional pass"), dec("conditional fail")]) == "fail"
    assert overall_verdict([dec("pass"), dec("not measured")]) == "fail"


def test_demo_spec_matches_the_hum_check_scenario():
    spec = load_spec(ROOT / "sample_captures" / "hc_spec.toml")
    f = spec.limit_for("frequency_hz")
    assert (f.lower, f.upper, f.nominal) == (49.75, 50.25, 50.0)   # 50.00 Hz ± 0.25 Hz
    thd = spec.limit_for("thd_pct")
    assert (thd.lower, thd.upper) == (None, 5.0)                    # THD ≤ 5 %
    v = spec.limit_for("vrms")
    assert (v.lower, v.upper, v.unit) == (1.0, 1.6, "V")            # 1.0–1.6 V rms
    assert spec.conditions["load_ohm"] == 10000 and spec.conditions["supply_v"] == 12.0
    assert spec.decision_rule == "guard-banded"
    assert not spec.needs_fit


def test_tolerance_pct_and_fitted_quantity():
    spec = parse_spec({"spec": {"decision_rule": "simple"},
                       "limit": [{"quantity": "C", "nominal": 33e-6, "tolerance_pct": 10}]})
    lim = spec.limits[0]
    assert lim.lower == pytest.approx(29.7e-6, rel=1e-12)   # float rounding of 33e-6 × 0.9
    assert lim.upper == pytest.approx(36.3e-6, rel=1e-12)   # float rounding of 33e-6 × 1.1
    assert lim.source == "fit" and spec.needs_fit


@pytest.mark.parametrize("data, key", [
    ({"limit": [{"quantity": "frequency_hz", "nominal": 50, "tolerance": -1}]}, "tolerance"),
    ({"limit": [{"quantity": "frequncy_hz", "max": 1}]}, "quantity"),
    ({"limit": [{"quantity": "vrms", "min": 2, "max": 1}]}, "min"),
    ({"limit": [{"quantity": "vrms", "max": "1.6 V"}]}, "max"),
    ({"limit": [{"quantity": "frequency_hz", "tolerance": 0.25}]}, "nominal"),
    ({"limit": [{"quantity": "frequency_hz", "nominal": 50, "tolerance": 0.2, "max": 51}]}, "tolerance"),
    ({"limit": [{"quantity": "vrms", "max": 1.6, "colour": "red"}]}, "colour"),
    ({"spec": {"decision_rule": "strict"}, "limit": [{"quantity": "vrms", "max": 1.6}]}, "decision_rule"),
    ({"spec": {}}, "limit"),
    ({"limit": [{"quantity": "thd_pct", "max": 5, "unit": "V"}]}, "unit"),
    ({"limit": [{"quantity": "vrms", "max": 1.6, "channel": 0}]}, "channel"),
])
def test_bad_spec_gives_one_line_naming_the_key(data, key):
    with pytest.raises(SpecError) as info:
        parse_spec(data, "unit.toml")
    msg = str(info.value)
    assert "\n" not in msg
    assert msg.startswith("unit.toml")
    assert key in msg
    assert " — " in msg   # "<where>: <what is wrong> — <what to do>"


def test_bad_toml_and_missing_file(tmp_path):
    p = tmp_path / "bad.toml"
    p.write_text("[spec\nname = 1\n", encoding="utf-8")
    with pytest.raises(SpecError, match="not valid TOML"):
        load_spec(p)
    with pytest.raises(SpecError, match="not found"):
        load_spec(tmp_path / "missing.toml")
