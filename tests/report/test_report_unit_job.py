"""run_unit as a per-unit job: fit options reach the fitter, fit failures are reported, picklable."""

from __future__ import annotations

import json
import pickle

import pytest

import benchfit
from benchfit.errors import FitError
from benchfit.report.assemble import FitOptions, run_unit
from report_builders import make_fit
from test_report_cli import SPEC, run, write_unit

FIT_SPEC = """
[spec]
name = "hum-check filter"
decision_rule = "guard-banded"

[[limit]]
quantity = "frequency_hz"
channel = "output"
nominal = 50.0
tolerance = 0.25

[[limit]]
quantity = "resonant_frequency_hz"
min = 45.0
max = 55.0
"""


@pytest.fixture
def unit_files(tmp_path, monkeypatch):
    monkeypatch.setenv("BENCHFIT_LOG", str(tmp_path / "log.sqlite"))
    spec = tmp_path / "fit_spec.toml"
    spec.write_text(FIT_SPEC, encoding="utf-8")
    return {"wav": write_unit(tmp_path / "hc05.wav", 50.03), "spec": spec, "out": tmp_path / "out"}


def test_fit_options_reach_the_fitter(unit_files, monkeypatch, capsys):
    calls = []

    def fake_fit_lowpass(capture, *, drive=None, response=None, fix=None):
        calls.append({"source": capture.source, "drive": drive, "response": response, "fix": fix})
        return make_fit(file=capture.source, f0=49.6, f0_u=0.05)

    monkeypatch.setattr(benchfit, "fit_lowpass", fake_fit_lowpass)
    code, out, err = run(["report", str(unit_files["wav"]), "--unit", "HC-05", "--spec", str(unit_files["spec"]),
                          "--out", str(unit_files["out"]), "--response", "output", "--fix", "Rload=10k",
                          "--json"], capsys)
    assert code == 0, err
    assert calls == [{"source": str(unit_files["wav"]), "drive": None, "response": "output",
                      "fix": {"Rload": 10000.0}}]
    twin = json.loads(open(json.loads(out)["json"], encoding="utf-8").read())
    row = {r["quantity"]: r for r in twin["results"]}["resonant_frequency_hz"]
    assert row["as_left"]["value"] == 49.6 and row["decision"] == "pass"
    assert twin["trim"] is not None                    # design helper's capacitor advice included
    html = open(json.loads(out)["html"], encoding="utf-8").read()
    assert html.count("<svg") == 3                     # waveform, spectrum, fit


def test_spec_with_fitted_quantity_fits_by_default_and_reports_fit_errors(unit_files, monkeypatch, capsys):
    def failing_fit(capture, *, drive=None, response=None, fix=None):
        raise FitError(f"{capture.source}: the drive has no periodic content — record the drive channel")

    monkeypatch.setattr(benchfit, "fit_lowpass", failing_fit)
    code, out, err = run(["report", str(unit_files["wav"]), "--unit", "HC-05", "--spec", str(unit_files["spec"]),
                          "--out", str(unit_files["out"]), "--no-figures", "--json"], capsys)
    assert code == 1                                   # the fitted limit is not measured → unit fails
    twin = json.loads(open(json.loads(out)["json"], encoding="utf-8").read())
    assert len(twin["fit_errors"]) == 1 and "periodic" in twin["fit_errors"][0]
    assert {r["quantity"]: r["decision"] for r in twin["results"]} == {
        "frequency_hz": "pass", "resonant_frequency_hz": "not measured"}


def test_unknown_fit_option_is_one_line(unit_files, monkeypatch, capsys):
    def ringdown_without_drive(capture, *, fix=None):
        return make_fit(file=capture.source)

    monkeypatch.setattr(benchfit, "fit_ringdown", ringdown_without_drive)
    code, _, err = run(["report", str(unit_files["wav"]), "--unit", "HC-05", "--spec", str(SPEC), "--no-log",
                        "--out", str(unit_files["out"]), "--model", "ringdown", "--drive", "output"], capsys)
    assert code == 2                                   # bad input, found before any capture is read
    lines = [x for x in err.splitlines() if x.startswith("error:")]
    assert len(lines) == 1 and "--drive" in lines[0]
    assert not unit_files["out"].exists()              # nothing written


def test_run_unit_is_a_picklable_job(unit_files):
    # an integrator can hand (run_unit, arguments) to a process pool
    job = pickle.loads(pickle.dumps((run_unit, FitOptions(model="lc-lowpass", fix={"Rload": 1e4}))))
    fn, options = job
    result = fn([unit_files["wav"]], unit="HC-05", spec=SPEC, out_dir=unit_files["out"], log_path=None,
                with_figures=False)
    assert result.verdict in ("pass", "conditional pass") and result.exit_code == 0
    assert result.html_path.exists() and result.json_path.exists() and result.run_id is None
    assert options.fix == {"Rload": 1e4}
