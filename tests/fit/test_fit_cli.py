"""`benchfit fit` end to end: the --json contract, tables, figures, one-line errors (exit 2)."""

from __future__ import annotations

import json
import math
import os
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from benchfit.model.filter import LowpassParts, simulate

FS = 20000.0
PARTS = LowpassParts(0.3, 33e-6, 20.0, 1.5, 10e3)


def _write_csv(path: Path, columns: dict[str, np.ndarray]) -> Path:
    n = len(next(iter(columns.values())))
    t = np.arange(n) / FS
    header = "time (s)," + ",".join(f"{k} (V)" for k in columns)
    np.savetxt(path, np.column_stack([t, *columns.values()]), delimiter=",", header=header,
               comments="", fmt="%.9g")
    return path


def _filter_capture(path: Path, seed: int = 1) -> Path:
    n_settle, n = int(0.5 * FS), int(0.5 * FS)
    t = np.arange(n_settle + n) / FS
    drive = 12.0 * (((t * 50.0) % 1.0) < 0.5)
    out = simulate(drive, FS, PARTS)
    rng = np.random.default_rng(seed)
    return _write_csv(path, {"drive": drive[n_settle:] + rng.normal(0, 5e-3, n),
                             "output": out[n_settle:] + rng.normal(0, 2e-3, n)})


@pytest.fixture
def run(capsys, monkeypatch):
    """benchfit.cli.main in this process: (exit code, stdout, stderr)."""
    from benchfit.cli import main

    monkeypatch.setenv("COLUMNS", "120")

    def _run(*args: str):
        try:
            main(list(args))
            code = 0
        except SystemExit as e:
            code = e.code if isinstance(e.code, int) else (0 if e.code is None else 1)
        out = capsys.readouterr()
        return code, out.out, out.err

    return _run


def test_json_output_follows_the_contract(tmp_path, run):
    f = _filter_capture(tmp_path / "hc03_drive_output.csv")
    code, out, err = run("fit", str(f), "--fix", "L=300m", "--fix", "Rload=10k", "--json")
    assert code == 0, err
    d = json.loads(out)
    assert d["model"] == "lc-lowpass" and d["method"] == "two-channel"
    assert d["file"].endswith("hc03_drive_output.csv")
    # the DESIGN.md keys unchanged; issue 11 adds u_fit, budget, conditional_on
    assert {k: d["parameters"]["L"][k] for k in ("value", "stderr", "fixed", "unit")} == {
        "value": 0.3, "stderr": None, "fixed": True, "unit": "H"}
    assert d["parameters"]["L"]["conditional_on"] == ["L"] and "L" in d["conditional_on"]
    assert any(w.startswith("L, Rload: fixed without a tolerance") for w in d["warnings"])
    # 2 mV noise on the output: C within 1 % (stderr ≈ 0.01 %)
    assert d["parameters"]["C"]["value"] == pytest.approx(33e-6, rel=0.01)
    assert d["parameters"]["C"]["stderr"] > 0
    assert "C,Rs" in d["correlations"]


def test_table_output_and_png_figure(tmp_path, run):
    f = _filter_capture(tmp_path / "unit.csv", seed=2)
    png = tmp_path / "fit.png"
    code, out, err = run("fit", str(f), "--fix", "L=300m", "--plot", str(png))
    assert code == 0, err
    assert "effective parts" in out and "resonant frequency" in out and "Hz" in out
    assert "not determined" in out or "fitted" in out
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_ringdown_command(tmp_path, run):
    t = np.arange(int(1.0 * FS)) / FS
    drive = 5.0 * (((t * 10.0) % 1.0) < 0.5)
    y = simulate(drive, FS, LowpassParts(0.1, 1e-6, 20.0, 0.0, math.inf))
    y += np.random.default_rng(3).normal(0, 2e-3, y.size)
    f = _write_csv(tmp_path / "ring.csv", {"tank": y})
    svg = tmp_path / "ring.svg"
    code, out, err = run("fit", str(f), "--model", "ringdown", "--json", "--plot", str(svg))
    assert code == 0, err
    d = json.loads(out)
    assert d["method"] == "ringdown" and d["parameters"] == {}
    f0 = 1 / (2 * math.pi * math.sqrt(0.1 * 1e-6))  # textbook ω0 = 1/√(LC) (Nilsson & Riedel)
    # the 20 Ω series loss lowers nothing in ω0 for an unloaded tank; 2 mV noise → 0.1 %
    assert d["derived"]["resonant_frequency_hz"]["value"] == pytest.approx(f0, rel=1e-3)
    assert svg.read_text().lstrip().startswith("<?xml")


@pytest.mark.parametrize("args,needle", [
    (["--fix", "Lx=1"], "unknown name"),
    (["--fix", "C=-33u"], "must be positive"),
    (["--fix", "L=abc"], "is not a number"),
    (["--model", "bandpass"], "not one of lc-lowpass, ringdown"),
    (["--method", "stereo"], "not one of auto, two-channel, one-channel"),
    (["--drive-duty", "150%"], "between 0 and 1"),
    (["--plot", "fig.pdf"], ".svg or .png"),
    (["--drive", "nosuch"], "no channel"),
])
def test_bad_options_exit_2_with_one_line(tmp_path, run, args, needle):
    f = _filter_capture(tmp_path / "u.csv", seed=4)
    code, out, err = run("fit", str(f), *args)
    assert code == 2
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: ") and needle in lines[0]
    assert "Traceback" not in err


def test_silent_response_and_no_periodic_drive_exit_2(tmp_path, run):
    n = int(0.2 * FS)
    drive = 12.0 * ((np.arange(n) // 200) % 2)
    f = _write_csv(tmp_path / "silent.csv", {"drive": drive, "output": np.zeros(n)})
    code, _, err = run("fit", str(f))
    assert code == 2 and "silent" in err and len(err.strip().splitlines()) == 1
    rng = np.random.default_rng(5)
    g = _write_csv(tmp_path / "noise.csv", {"drive": rng.normal(0, 1, n), "output": rng.normal(0, 1, n)})
    code, _, err = run("fit", str(g))
    assert code == 2 and err.startswith("error: ") and len(err.strip().splitlines()) == 1


def test_help_has_example_and_safety_note():
    env = dict(os.environ, COLUMNS="120")
    res = subprocess.run([sys.executable, "-m", "benchfit", "fit", "--help"], capture_output=True,
                         text=True, env=env, timeout=60)
    assert res.returncode == 0
    assert "--fix L=300m" in res.stdout and "Safety" in res.stdout


def test_cli_method_choices_match_the_library():
    from typing import get_args

    from benchfit.cli.fit_cmd import MethodChoice, Model, ModelOption
    from benchfit.cli.fit_cmd import MethodOption as MethodEnum
    from benchfit.fit.lowpass import MethodOption

    assert get_args(MethodChoice) == get_args(MethodOption)
    # the enums typer shows list exactly those choices
    assert tuple(m.value for m in MethodEnum) == get_args(MethodChoice)
    assert tuple(m.value for m in ModelOption) == get_args(Model)


@pytest.mark.parametrize("given", [None, "band-limited"])
def test_drive_edges_choice_is_shown_and_given_choice_kept(tmp_path, run, given):
    # a drive of exact samples has edges within one sample (benchfit.fit.edges: its lines below Nyquist
    # follow the square's 1/k trend), so auto calls it sharp; a given choice is used and said to be given
    f = _filter_capture(tmp_path / "unit.csv", seed=3)
    extra = () if given is None else ("--drive-edges", given)
    code, out, err = run("fit", str(f), "--fix", "L=300m", "--fix", "Rload=10k", *extra, "--json")
    assert code == 0, err
    de = json.loads(out)["adequacy"]["drive_edges"]
    assert de["drive_edges"] == (given or "sharp") and de["choice"] == (given or "auto")
    code, out, err = run("fit", str(f), "--fix", "L=300m", "--fix", "Rload=10k", *extra)
    assert code == 0, err
    want = "drive edges sharp (from the drive's lines below Nyquist)" if given is None else \
        "drive edges band-limited (given) → H(j2πkf)"
    assert want in " ".join(out.split()), out


@pytest.mark.parametrize("given", ["sharp", "band-limited"])
def test_time_domain_model_check_names_its_simulation(tmp_path, run, given):
    # with --time-domain the model-check line names the simulation the refinement used, as the record does
    f = _filter_capture(tmp_path / "unit.csv", seed=3)
    args = ("fit", str(f), "--fix", "L=300m", "--fix", "Rload=10k", "--time-domain", "--drive-edges", given)
    code, out, err = run(*args, "--json")
    assert code == 0, err
    adq = json.loads(out)["adequacy"]
    td = adq["drive_edges"]["time_domain"]
    assert td["samples_dropped_each_end"] == (7 if given == "band-limited" else 0)
    # the noise the time-domain χ²ᵣ is judged against, estimated from the channels, in the output's unit
    assert adq["noise"]["unit"] == "V" and adq["noise"]["sigma"] > 0
    code, out, err = run(*args)
    assert code == 0, err
    want = ("time-domain simulation of the band-limited drive" if given == "band-limited"
            else "time-domain simulation, first-order hold")
    assert f"drive edges {given} (given) → {want}" in " ".join(out.split()), out
    assert re.search(r"χ²ᵣ against the channels' noise σ = [0-9.]+ ± [0-9.]+ [mµ]?V per sample", " ".join(out.split())), out


def test_sharp_synchronous_drive_shows_its_edge_timing_term(tmp_path, run):
    # the capture's drive is a square sampled with its edges between samples, 400 samples a period (a
    # synchronous record): where within its sample each edge lies is unknown, a budget row of every part
    # (benchfit.fit.edges.edge_timing; issue 11)
    t = np.arange(int(FS)) / FS
    drive = 12.0 * ((((t + 0.3 / FS) * 50.0) % 1.0) < 0.5)  # every edge 0.7 sample before a sample
    y = simulate(drive, FS, PARTS)[int(0.5 * FS):]
    rng = np.random.default_rng(3)
    f = _write_csv(tmp_path / "sharp.csv", {"drive": drive[int(0.5 * FS):] + rng.normal(0, 5e-3, y.size),
                                           "output": y + rng.normal(0, 2e-3, y.size)})
    code, out, err = run("fit", str(f), "--fix", "L=300m±10%", "--fix", "Rload=10k±1%")
    assert code == 0, err
    check = next(line for line in out.splitlines() if line.startswith("model check"))
    assert "the edges fall within one sample, their timing u = 0.2 sample (10 µs) is in the budget" in check
    code, out, err = run("fit", str(f), "--fix", "L=300m±10%", "--fix", "Rload=10k±1%", "--json")
    d = json.loads(out)
    rows = [r for r in d["parameters"]["Resr"]["budget"]["contributions"]
            if r["name"].startswith("drive edge timing within a sample")]
    # 1/√24 sample at 20 kHz (two kinds of edge, each uniform on ±½ sample: GUM 4.3.7) = 10.2 µs
    assert len(rows) == 1 and rows[0]["u_input"] == pytest.approx(1 / (24 ** 0.5 * FS), rel=0.01)
    assert d["adequacy"]["drive_edges"]["edge_timing"]["n_edges"] >= 49
