"""The report model, its HTML rendering and the files written (objects built in the tests)."""

from __future__ import annotations

import json
import re
from pathlib import Path


from benchfit.report.assemble import build_report
from benchfit.report.spec import uncertainty_keys
from benchfit.report.html import format_u, format_value, render_html, write_report
from benchfit.report.spec import load_spec, parse_spec
from report_builders import make_capture, make_fit, make_measurement

ROOT = Path(__file__).resolve().parents[2]
SPEC = load_spec(ROOT / "sample_captures" / "hc_spec.toml")
CREATED = "2026-12-01T17:30:00Z"


def _report(m=None, unit="HC-07", **kw):
    m = m or make_measurement()
    return build_report(unit=unit, spec=SPEC, as_left=[(make_capture(), m)], created_utc=CREATED, **kw)


def test_results_copy_the_measurement_contract_and_expand_u_with_k2():
    m = make_measurement(f=50.02, f_u=0.004, vrms=1.2738, vrms_u=0.002, thd=4.0, thd_u=0.02)
    rep = _report(m)
    # one source of truth: the twin holds exactly Measurement.to_dict() (= `measure --json`)
    assert rep["measurements"][0]["measurement"] == m.to_dict()
    d = m.to_dict()["channels"][0]
    rows = {r["quantity"]: r for r in rep["results"]}
    assert rows["frequency_hz"]["as_left"]["value"] == d["frequency_hz"]
    assert rows["vrms"]["as_left"]["value"] == d["vrms"]
    assert rows["thd_pct"]["as_left"]["value"] == d["thd_pct"]
    # U = k·u with k = 2 (JCGM 100:2008, 6.2.1)
    assert rows["frequency_hz"]["as_left"]["expanded_u"] == 2 * d["frequency_u_hz"]
    assert rows["thd_pct"]["as_left"]["expanded_u"] == 2 * 0.02
    assert rep["verdict"] == "pass" and rep["exit_code"] == 0
    # the JSON twin is valid strict JSON
    json.loads(json.dumps(rep, allow_nan=False))


def test_uncertainty_key_names():
    assert uncertainty_keys("frequency_hz")[0] == "frequency_u_hz"   # DESIGN.md contract name
    assert uncertainty_keys("thd_pct")[0] == "thd_u_pct"
    assert uncertainty_keys("vrms")[0] == "vrms_u"


def test_guard_banded_decisions_and_exit_code():
    # 50.245 Hz with U = 0.008 Hz: inside, within U of 50.25 Hz → conditional pass (ILAC-G8 4.2.3)
    rep = _report(make_measurement(f=50.245, f_u=0.004, thd=4.0))
    assert {r["quantity"]: r["decision"] for r in rep["results"]}["frequency_hz"] == "conditional pass"
    assert rep["verdict"] == "conditional pass" and rep["exit_code"] == 0
    # THD 5.02 % with U = 0.04 %: outside by less than U → conditional fail → unit fails, exit 1
    rep = _report(make_measurement(thd=5.02, thd_u=0.02))
    assert {r["quantity"]: r["decision"] for r in rep["results"]}["thd_pct"] == "conditional fail"
    assert rep["verdict"] == "fail" and rep["exit_code"] == 1


def test_as_found_column_and_uncalibrated_level():
    found = make_measurement(file="hc07_found.wav", f=50.6, unit="FS")
    rep = build_report(unit="HC-07", spec=SPEC, as_left=[(make_capture(), make_measurement())],
                       as_found=[(make_capture(source="hc07_found.wav", unit="FS"), found)], created_utc=CREATED)
    rows = {r["quantity"]: r for r in rep["results"]}
    assert rows["frequency_hz"]["as_found"]["decision"] == "fail"        # 0.35 Hz above the upper limit
    assert rows["vrms"]["as_found"]["decision"] == "not measured"        # FS cannot be judged in V
    assert "calibration" in rows["vrms"]["as_found"]["note"]
    assert rep["as_found_verdict"] == "fail" and rep["verdict"] == "pass"
    assert [c["role"] for c in rep["captures"]] == ["as-found", "as-left"]


def test_fitted_quantities_and_trim_advice():
    spec = parse_spec({"spec": {"decision_rule": "guard-banded"},
                       "limit": [{"quantity": "frequency_hz", "nominal": 50.0, "tolerance": 0.25},
                                 {"quantity": "resonant_frequency_hz", "min": 45.0, "max": 55.0}]})
    fit = make_fit(f0=49.6, f0_u=0.05)
    rep = build_report(unit="HC-07", spec=spec, as_left=[(make_capture(), make_measurement())],
                       fits_left=[fit], created_utc=CREATED)
    row = {r["quantity"]: r for r in rep["results"]}["resonant_frequency_hz"]
    assert row["as_left"]["value"] == 49.6 and row["as_left"]["expanded_u"] == 0.1
    assert row["decision"] == "pass"
    assert rep["fits"][0]["fit"] == fit.to_dict()
    # the unit passes every limit with its guard band, so the advice (judged on the whole spec,
    # issue 10) is "no change" — no longer a capacitor change towards f0 = 50 Hz
    assert rep["trim"] is not None and rep["trim"]["target_hz"] == 50.0
    assert rep["trim"]["verdict"] == "no change" and rep["trim"]["advice"]["changes"] == []
    assert any(line.startswith("no change") for line in rep["trim"]["lines"])
    html = render_html(rep, [])
    assert 'id="trim-advice"' in html and "Effective parts" in html


def test_user_text_is_escaped():
    evil = "<script>alert(1)</script>"
    rep = build_report(unit=evil, spec=SPEC, as_left=[(make_capture(source="<img src=x onerror=1>.wav"),
                                                       make_measurement())],
                       operator='"><b>op</b>', notes=[evil], created_utc=CREATED)
    html = render_html(rep, [])
    assert "<script" not in html.lower()
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in html
    assert "<img" not in html and "<b>op</b>" not in html
    assert "&lt;b&gt;op&lt;/b&gt;" in html


def test_html_shows_the_measured_numbers_with_units():
    m = make_measurement(f=50.0213, f_u=0.004)
    html = render_html(_report(m), [])
    # the as-left frequency, rounded to the decimal place of U = 8 mHz (JCGM 100:2008, 7.2.6)
    assert format_value(50.0213, "Hz", 0.008) == "50.0213 Hz"
    assert "50.0213 Hz" in html and "8.0 mHz" in html       # U to two significant digits
    for text in ("output frequency", "49.75 Hz … 50.25 Hz", "≤ 5%", "1 V … 1.6 V", "guard-banded",
                 "5e5e5e", "USB audio interface", "bench-card-1", "IEEE Std 1057", "IEEE Std 181",
                 "ILAC-G8:09/2019", "k = 2", "inductive", "qualified"):
        assert text in html, text


def test_format_value():
    assert format_u(0.00023, "Hz") == "230 µHz"              # no exponent notation
    assert format_u(0.008, "Hz") == "8.0 mHz"                # two significant digits kept
    assert format_u(0.17, "1/s") == "0.17 s⁻¹"               # no SI prefix on a reciprocal unit
    assert format_value(0.0213, "V", 0.0004) == "21.30 mV"   # value to the place of 2 digits of U
    assert format_value(4.0, "%") == "4%"
    assert format_value(None, "Hz") == "—"
    assert format_value(34.3e-6, "F") == "34.3 µF"
    assert format_value(41.0, "ohm") == "41 Ω"


def test_write_report_never_overwrites(tmp_path):
    rep = _report(unit="HC-07/../x")
    h1, j1 = write_report(rep, "first", tmp_path)
    h2, j2 = write_report(rep, "second", tmp_path)
    # the serial's "/" cannot escape the output directory
    assert h1.parent == tmp_path and h1.name == "HC-07_.._x_20261201T173000Z.html"
    assert h2 != h1 and h2.stem == h1.stem + "-2" and j2.stem == j1.stem + "-2"
    assert h1.read_text(encoding="utf-8") == "first" and h2.read_text(encoding="utf-8") == "second"
    assert json.loads(j1.read_text(encoding="utf-8"))["unit"] == "HC-07/../x"


def test_no_external_urls_with_figures():
    from benchfit.report import figures

    cap, m, fit = make_capture(), make_measurement(), make_fit()
    figs = [{"title": "w", "svg": figures.waveform_svg(cap, 0)},
            {"title": "s", "svg": figures.spectrum_svg(m.channels[0])},
            {"title": "f", "svg": figures.fit_svg(fit)}]
    html = render_html(_report(m, fits_left=[fit]), figs)
    assert html.count("<svg") == 3
    assert not re.search(r"""(?:src|href)\s*=\s*["']?\s*https?://""", html, re.I)
    assert not re.search(r"url\(\s*['\"]?\s*https?://", html, re.I)
    assert "<?xml" not in html and "<!DOCTYPE svg" not in html
