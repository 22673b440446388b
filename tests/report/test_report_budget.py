"""The report shows the GUM budget of each limited quantity (issue 11), from the measurement itself."""

from __future__ import annotations

from pathlib import Path

import pytest

import benchfit
from benchfit.capture.capture import Capture
from benchfit.report.assemble import build_report
from benchfit.report.html import render_html
from benchfit.report.spec import load_spec
from report_builders import make_capture

ROOT = Path(__file__).resolve().parents[2]
SPEC = load_spec(ROOT / "sample_captures" / "hc_spec.toml")


def test_budget_rows_follow_the_results_and_name_the_uncalibrated_clock():
    cap = make_capture()
    # the same samples without any calibration: the clock is uncalibrated → default row and note
    bare = Capture(cap.samples, cap.sample_rate, cap.channel_names, ("FS",), source="hc07_bare.wav")
    m = benchfit.measure(bare)
    rep = build_report(unit="HC-07", spec=SPEC, as_left=[(bare, m)], created_utc="2026-12-01T17:30:00Z")
    rows = {r["quantity"]: r for r in rep["results"]}
    b = rows["frequency_hz"]["as_left"]["budget"]
    assert b == m.to_dict()["channels"][0]["budget"]["frequency_hz"]  # copied, never recomputed
    # the budget's u is the one the decision used: U = 2u (GUM 6.2.1, k = 2)
    assert rows["frequency_hz"]["as_left"]["expanded_u"] == pytest.approx(2 * b["u"], rel=1e-12)  # rounding only
    html = render_html(rep)
    assert html.count('class="budget-row"') >= 1
    assert "timebase (not calibrated: stated default)" in html
    assert any("timebase not calibrated" in w for w in rep["warnings"])


def test_spec_conditions_fix_parts_with_their_tolerance(monkeypatch):
    # [conditions] fix_L = "300m±10%" reaches the fit as a FixedValue; --fix wins over the spec
    from benchfit.fit.tolerance import FixedValue
    from benchfit.report.assemble import FitOptions, _with_spec_fixes
    from benchfit.report.spec import parse_spec

    import tomllib

    sp = parse_spec(tomllib.loads('[spec]\nname = "t"\n[conditions]\nfix_L = "300m±10%"\nfix_Rload = "10k"\n'
                                  '[[limit]]\nquantity = "resonant_frequency_hz"\nnominal = 50.0\n'
                                  'tolerance = 1.0\n'), "t.toml")
    opts = _with_spec_fixes(FitOptions(fix={"Rload": FixedValue(9.9e3, 99.0)}), sp)
    assert opts.fix["L"].value == pytest.approx(0.3) and opts.fix["L"].half_width == pytest.approx(0.03)
    assert "spec [conditions]" in opts.fix["L"].source
    assert opts.fix["Rload"].value == 9.9e3  # the command line's value is kept
