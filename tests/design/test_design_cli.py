"""``benchfit design …`` through the real entry point: JSON output, tables, exit codes."""

from __future__ import annotations

import json
import math

import pytest

from benchfit.cli import main
from benchfit.fit.result import DerivedValue, FitParameter, FitQuality, FitResult


def run(capsys, *args):
    try:
        main(list(args))
        code = 0
    except SystemExit as e:
        code = e.code if isinstance(e.code, int) else 0
    out, err = capsys.readouterr()
    return code, out, err


def test_astable_json(capsys):
    code, out, err = run(capsys, "design", "astable", "--frequency", "6.86998k", "--cap", "10n",
                         "--duty", "52.381%", "--series", "E12", "--supply", "5", "--trials", "500", "--json")
    assert code == 0, err
    d = json.loads(out)
    # E12 holds 1 kΩ and 10 kΩ, the REFERENCES §7 check circuit (exact ln2 form; printed digits)
    assert (d["ra_ohm"], d["rb_ohm"], d["c_farad"]) == (1e3, 10e3, 10e-9)
    assert d["timing"]["frequency_hz"] == pytest.approx(6869.98, abs=0.005)
    assert d["spread"]["n_trials"] == 500


def test_astable_table_has_units(capsys):
    code, out, _ = run(capsys, "design", "astable", "--frequency", "50", "--trim-pot", "10k",
                       "--trials", "500")
    assert code == 0
    for text in ("RA", "kΩ", "F", "Hz", "%", "trimmer"):
        assert text in out


def test_filter_json_and_table(capsys):
    code, out, err = run(capsys, "design", "filter", "--frequency", "50", "--inductance", "300m",
                         "--rs", "400", "--load", "10k", "--duty", "50%", "--json")
    assert code == 0, err
    d = json.loads(out)
    assert d["solved_for"] == "C"
    # C = (1 + Rs/Rload)/(ω²L) for f0 = 50 Hz (REFERENCES §6, ω0² = a0/a2 with no ESR)
    assert d["nominal_value"] == pytest.approx(1.04 / ((2 * math.pi * 50) ** 2 * 0.3), rel=1e-12)
    code, out, _ = run(capsys, "design", "filter", "--frequency", "50", "--capacitance", "33u",
                       "--rs", "20", "--load", "10k")
    assert code == 0 and "mH" in out and "THD" in out and "Caution" in out


def test_combine_series_and_stock(capsys, tmp_path):
    code, out, _ = run(capsys, "design", "combine", "300m", "--kind", "L", "--series", "E6", "--json")
    assert code == 0
    d = json.loads(out)
    assert d["combinations"][0]["parts"] == [0.15, 0.15]
    assert d["cautions"]
    stock = tmp_path / "drawer.csv"
    stock.write_text("value,qty\n4k7,1\n2.2kΩ,2\n1k,1\n10k,1\n", encoding="utf-8")
    code, out, err = run(capsys, "design", "combine", "3.2k", "--kind", "R", "--stock", str(stock),
                         "--top", "3", "--json")
    assert code == 0, err
    d = json.loads(out)
    assert d["combinations"][0]["parts"] == [1000.0, 2200.0] and d["combinations"][0]["error"] == 0.0
    code, out, _ = run(capsys, "design", "combine", "3.2k", "--kind", "R", "--stock", str(stock))
    assert code == 0 and "3.2 kΩ" in out


def _fit_file(tmp_path):
    L, C = 0.3, 30e-6
    f0 = 1 / (2 * math.pi * math.sqrt(L * C))
    fit = FitResult("hc07_as_found.wav", "lc-lowpass", "two-channel",
                    {"L": FitParameter(L, 0.003, False, "H"), "C": FitParameter(C, 0.3e-6, False, "F"),
                     "Rs": FitParameter(25.0, 0.2, False, "ohm"), "Resr": FitParameter(0.5, 0.01, False, "ohm"),
                     "Rload": FitParameter(10e3, None, True, "ohm")},
                    {"resonant_frequency_hz": DerivedValue(f0, 0.01)}, {"L,C": -0.3},
                    FitQuality(1e-4, 0.9999, 50))
    path = tmp_path / "hc07_fit.json"
    path.write_text(json.dumps(fit.to_dict()), encoding="utf-8")
    return path


def test_trim_json_and_table(capsys, tmp_path):
    path = _fit_file(tmp_path)
    code, out, err = run(capsys, "design", "trim", "--fit", str(path), "--target", "50", "--json",
                         "--timer-frequency", "50.6", "--ra", "1k", "--rb", "9.1k", "--c1", "1.5u",
                         "--supply", "12")
    assert code == 0, err
    d = json.loads(out)
    kinds = [c["kind"] for c in d["changes"]]
    assert kinds == ["capacitor", "timer-rb", "timer-control"]
    low, high = d["changes"][0]["predicted_interval_k2_hz"]
    assert low < 50.0 < high
    code, out, _ = run(capsys, "design", "trim", "--fit", str(path), "--target", "50", "--bank", "22u,10u,1u")
    assert code == 0 and "across" in out and "µF" in out and "k = 2" in out


@pytest.mark.parametrize("args", [
    ("design", "astable", "--frequency", "-50"),
    ("design", "astable", "--frequency", "50", "--duty", "40%"),
    ("design", "astable", "--frequency", "50", "--series", "E7"),
    ("design", "astable", "--frequency", "50", "--tolerance-r", "5"),
    ("design", "astable", "--frequency", "fifty"),
    ("design", "filter", "--frequency", "50"),
    ("design", "filter", "--frequency", "50", "--inductance", "0", "--rs", "10"),
    ("design", "combine", "0", "--kind", "C"),
    ("design", "combine", "1k", "--kind", "Q"),
    ("design", "combine", "1k", "--kind", "R", "--stock", "/nonexistent/stock.csv"),
    ("design", "trim", "--fit", "/nonexistent/fit.json", "--target", "50"),
])
def test_bad_input_exits_2_with_one_line(capsys, args):
    code, out, err = run(capsys, *args)
    assert code == 2
    lines = [x for x in err.strip().splitlines() if x.strip()]
    assert len(lines) == 1 and lines[0].startswith("error: ")
    assert "Traceback" not in err


def test_bad_files_exit_2(capsys, tmp_path):
    bad_json = tmp_path / "fit.json"
    bad_json.write_text("{not json", encoding="utf-8")
    code, _, err = run(capsys, "design", "trim", "--fit", str(bad_json), "--target", "50")
    assert code == 2 and err.startswith("error: ") and str(bad_json) in err
    wrong = tmp_path / "other.json"
    wrong.write_text(json.dumps({"hello": 1}), encoding="utf-8")
    code, _, err = run(capsys, "design", "trim", "--fit", str(wrong), "--target", "50")
    assert code == 2 and err.startswith("error: ")
    stock = tmp_path / "s.csv"
    stock.write_text("value\n4k7\nbanana\n", encoding="utf-8")
    code, _, err = run(capsys, "design", "combine", "5k", "--kind", "R", "--stock", str(stock))
    assert code == 2 and "row 3" in err
