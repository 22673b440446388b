"""The Stability section of ``benchfit report --drift``: drift limits judged, section and figures.

The drift run is built here from a synthetic phase series with a known warm-up (no tone fits,
to stay fast); the numbers judged are the stability module's, checked elsewhere
(tests/measurement/test_drift_*.py). Here: the plumbing from run to decision and page.
"""

from __future__ import annotations

import json
import math
import sys
from pathlib import Path

import numpy as np
import pytest

from benchfit.cli import main
from benchfit.errors import SpecError
from benchfit.measurement.drift_run import DriftRun
from benchfit.measurement.stability import stability
from benchfit.report.assemble import load_drift

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT / "tests" / "measurement"))
from drift_helpers import phase_from_fractional, readings_from_phase  # noqa: E402

SPEC = """
[spec]
name = "hum-check box with stability"
decision_rule = "guard-banded"

[[limit]]
quantity = "frequency_hz"
nominal = 50.0
tolerance = 0.25

[[limit]]
quantity = "warmup_s"
max = {warm_max}

[[limit]]
quantity = "drift_ppm_per_h"
min = -100.0
max = 100.0

[[limit]]
quantity = "adev_1s"
max = 1e-5
"""


def _run_dict() -> dict:
    rng = np.random.default_rng(3)
    t = np.arange(1, 400) + 0.0
    y = -500e-6 * np.exp(-t / 60.0) + 20e-6 / 3600 * t + rng.normal(0, 1e-6, t.size)
    readings = readings_from_phase(phase_from_fractional(y, 50.02, 1.0), 50.02, 1.0)
    st = stability(readings, interval_s=1.0, band_ppm=100.0)
    return DriftRun(channel="output", channel_unit="V", sample_rate_hz=8000.0, interval_s=1.0,
                    readings=tuple(readings), stability=st, file="hc08_run.flac", unit="HC-08").to_dict()


@pytest.fixture
def files(tmp_path):
    run = tmp_path / "run.json"
    run.write_text(json.dumps(_run_dict()))
    return run


def _report(tmp_path, run, warm_max, figures=True):
    spec = tmp_path / "spec.toml"
    spec.write_text(SPEC.format(warm_max=warm_max))
    out = tmp_path / "out"
    try:
        main([
            "report", str(ROOT / "sample_captures" / "hc08_output.flac"), "--unit", "HC-08", "--spec", str(spec),
            "--drift", str(run), "--out", str(out), "--no-log", "--json"] + ([] if figures else ["--no-figures"]))
        code = 0
    except SystemExit as e:
        code = e.code
    (page,) = [p for p in out.glob("*.html") if p.name != "index.html"]  # (the folder's index beside it)
    return code, page.read_text(), json.loads(page.with_suffix(".json").read_text())


def test_drift_limits_are_judged_and_the_section_drawn(tmp_path, files, capsys):
    code, html, rep = _report(tmp_path, files, 300.0)
    capsys.readouterr()
    assert code == 0
    rows = {r["quantity"]: r for r in rep["results"]}
    st = rep["stability"]["stability"]
    assert rows["warmup_s"]["as_left"]["value"] == st["warmup_s"]
    assert rows["warmup_s"]["source"] == "drift" and rows["warmup_s"]["decision"] == "pass"
    # the truth: τ ln(500/100) = 96.6 s, recovered well within its uncertainty (seeded)
    assert abs(st["warmup_s"] - 60.0 * math.log(5.0)) < 4 * st["warmup_u_s"] + 1.0
    assert rows["adev_1s"]["as_left"]["u"] == pytest.approx(st["adev_1s_u"])
    assert "series" not in rep["stability"]
    assert "<h2>Stability</h2>" in html
    stab = html[html.index("<h2>Stability</h2>"):html.index("<h2>Figures</h2>")]
    assert stab.count("<svg") == 2 and "Allan deviation" in stab


def test_a_failing_warmup_fails_the_unit(tmp_path, files, capsys):
    code, _, rep = _report(tmp_path, files, 30.0, figures=False)
    capsys.readouterr()
    assert code == 1
    assert {r["quantity"]: r["decision"] for r in rep["results"]}["warmup_s"] == "fail"


def test_without_a_drift_run_the_limit_is_not_measured(tmp_path, capsys):
    spec = tmp_path / "spec.toml"
    spec.write_text(SPEC.format(warm_max=300.0))
    out = tmp_path / "out"
    with pytest.raises(SystemExit) as e:
        main(["report", str(ROOT / "sample_captures" / "hc08_output.flac"), "--unit", "HC-08", "--spec", str(spec),
              "--out", str(out), "--no-log", "--no-figures"])
    assert e.value.code == 1
    rep = json.loads(next(out.glob("*.json")).read_text())
    row = {r["quantity"]: r for r in rep["results"]}["warmup_s"]
    assert row["decision"] == "not measured" and "drift='RUN.json'" in row["as_left"]["note"]
    capsys.readouterr()


def test_load_drift_refuses_other_json(tmp_path):
    p = tmp_path / "x.json"
    p.write_text('{"file": "a.wav"}')
    with pytest.raises(SpecError, match="not a drift run"):
        load_drift(p)
