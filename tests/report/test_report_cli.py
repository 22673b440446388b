"""`benchfit report` end to end on WAV files written by the test, and `benchfit log ...`."""

from __future__ import annotations

import json
import sqlite3
from pathlib import Path

import numpy as np
import pytest
import soundfile as sf

from benchfit.cli import main

ROOT = Path(__file__).resolve().parents[2]
SPEC = ROOT / "sample_captures" / "hc_spec.toml"
FS = 48000
GAIN = 2.0      # V per full scale, written in the sidecar


def write_unit(path: Path, f_hz: float, vpk: float = 1.8, h3: float = 0.04, seed: int = 1) -> Path:
    """A 1 s hum-check output: sine + 3rd harmonic (h3 × fundamental) + seeded noise, with sidecar."""
    rng = np.random.default_rng(seed)
    t = np.arange(FS) / FS
    v = vpk * np.sin(2 * np.pi * f_hz * t) + h3 * vpk * np.sin(2 * np.pi * 3 * f_hz * t + 0.3)
    v = v + rng.normal(0.0, 2e-4, t.size)
    sf.write(path, (v / GAIN).astype(np.float32), FS, subtype="FLOAT")
    sidecar = {"benchfit_sidecar": 1, "channels": [{"name": "output"}], "sample_rate_hz": FS,
               "device": "test card", "start_utc": "2026-12-01T17:00:00Z", "overflow_count": 0,
               "clip_count": 0, "calibration": {"profile": "test-profile", "gain_v_per_fs": [GAIN],
                                                "timebase_ppm": 0.0, "timebase_u_ppm": 0.5,
                                                "coupling_tau_s": None},
               "benchfit_version": "0.1.0"}
    path.with_suffix(".json").write_text(json.dumps(sidecar), encoding="utf-8")
    return path


def run(argv, capsys):
    """Run the CLI in-process; return (exit code, stdout, stderr)."""
    with pytest.raises(SystemExit) as info:
        main(argv)
    out = capsys.readouterr()
    return info.value.code or 0, out.out, out.err


@pytest.fixture
def bench(tmp_path, monkeypatch):
    monkeypatch.setenv("BENCHFIT_LOG", str(tmp_path / "log.sqlite"))
    monkeypatch.setenv("COLUMNS", "200")
    caps = tmp_path / "caps"
    caps.mkdir()
    return {"tmp": tmp_path, "good": write_unit(caps / "hc01.wav", 50.02),
            "found": write_unit(caps / "hc01_found.wav", 50.61, seed=2),
            "bad": write_unit(caps / "hc02.wav", 50.62, seed=3), "out": tmp_path / "reports"}


def test_report_pass_numbers_equal_measure_json_and_log(bench, capsys):
    code, out, err = run(["report", str(bench["good"]), "--as-found", str(bench["found"]), "--unit", "HC-01",
                          "--spec", str(SPEC), "--operator", "R. Okafor", "--out", str(bench["out"]),
                          "--json"], capsys)
    assert code == 0, err
    info = json.loads(out)
    assert info["verdict"] == "pass" and info["run_id"] == 1
    twin = json.loads(Path(info["json"]).read_text(encoding="utf-8"))
    html = Path(info["html"]).read_text(encoding="utf-8")
    assert html.count("<svg") == 3                       # waveform, spectrum, as-found overlay (no fit)
    # one source of truth: the report holds exactly what `benchfit measure --json` prints
    code, out, err = run(["measure", str(bench["good"]), "--json"], capsys)
    assert code == 0, err
    measured = json.loads(out.splitlines()[0])
    left = [m["measurement"] for m in twin["measurements"] if m["role"] == "as-left"]
    assert left == [measured]
    freq = {r["quantity"]: r for r in twin["results"]}["frequency_hz"]
    assert freq["as_left"]["value"] == measured["channels"][0]["frequency_hz"]
    assert freq["as_found"]["decision"] == "fail"        # 50.61 Hz is outside 50.00 ± 0.25 Hz
    # sidecar facts reach the record
    cap = [c for c in twin["captures"] if c["role"] == "as-left"][0]
    assert cap["device"] == "test card" and cap["calibration"]["profile"] == "test-profile"
    assert len(cap["sha256"]) == 64 and cap["sha256"] in html
    # the run is in the log
    code, out, _ = run(["log", "show", "1", "--json"], capsys)
    run_info = json.loads(out)
    assert run_info["unit"] == "HC-01" and run_info["verdict"] == "pass"
    assert {d["decision"] for d in run_info["decisions"]} == {r["decision"] for r in twin["results"]}
    logged = [r for r in run_info["results"] if r["role"] == "as-left" and r["quantity"] == "frequency_hz"]
    assert logged[0]["value"] == freq["as_left"]["value"]


def test_report_fail_exits_1_and_never_overwrites(bench, capsys):
    args = ["report", str(bench["bad"]), "--unit", "HC-02", "--spec", str(SPEC), "--out", str(bench["out"]),
            "--no-figures"]
    code, out, err = run(args, capsys)
    assert code == 1                                      # the unit failed its spec
    assert "HC-02: fail" in out
    code, _, _ = run(args, capsys)
    assert code == 1
    htmls = sorted(p.name for p in bench["out"].glob("HC-02_*.html"))
    assert len(htmls) == 2 and len(list(bench["out"].glob("HC-02_*.json"))) == 2


def test_report_bad_input_is_one_line_exit_2(bench, capsys):
    bad_spec = bench["tmp"] / "bad.toml"
    bad_spec.write_text('[[limit]]\nquantity = "frequency_hz"\ntolerance = 0.25\n', encoding="utf-8")
    code, out, err = run(["report", str(bench["good"]), "--unit", "HC-01", "--spec", str(bad_spec),
                          "--no-log"], capsys)
    assert code == 2
    lines = [x for x in err.splitlines() if x.startswith("error:")]
    assert len(lines) == 1 and "nominal" in lines[0] and "Traceback" not in err


def test_log_commands(bench, capsys):
    for path, unit in ((bench["good"], "HC-01"), (bench["bad"], "HC-02")):
        run(["report", str(path), "--unit", unit, "--spec", str(SPEC), "--out", str(bench["out"]),
             "--no-figures"], capsys)
    code, out, _ = run(["log", "list", "--json"], capsys)
    assert code == 0 and [r["unit"] for r in json.loads(out)["runs"]] == ["HC-01", "HC-02"]
    code, out, _ = run(["log", "list", "--unit", "HC-02", "--since", "2000-01-01", "--json"], capsys)
    assert [r["verdict"] for r in json.loads(out)["runs"]] == ["fail"]
    code, _, err = run(["log", "list", "--since", "yesterday"], capsys)
    assert code == 2 and "--since" in err
    # --last 1 keeps the latest; a count beyond SQL's 64-bit integers keeps every run (it was an OverflowError)
    for last, units in (("1", ["HC-02"]), ("9" * 30, ["HC-01", "HC-02"])):
        code, out, err = run(["log", "list", "--last", last, "--json"], capsys)
        assert code == 0 and [r["unit"] for r in json.loads(out)["runs"]] == units, err
    code, out, _ = run(["log", "show", "2"], capsys)
    assert code == 0 and "HC-02" in out and "fail" in out
    # export: CSV through pandas, refuses to overwrite without --overwrite
    dest = bench["tmp"] / "batch.csv"
    code, _, _ = run(["log", "export", "--format", "csv", "--out", str(dest)], capsys)
    assert code == 0
    import pandas as pd

    df = pd.read_csv(dest)
    assert set(df["unit"]) == {"HC-01", "HC-02"} and "uncertainty" in df.columns
    before = dest.read_bytes()
    code, _, err = run(["log", "export", "--format", "json", "--out", str(dest)], capsys)
    assert code == 2 and "--overwrite" in err and dest.read_bytes() == before
    code, _, _ = run(["log", "export", "--format", "json", "--out", str(dest), "--overwrite"], capsys)
    assert code == 0 and json.loads(dest.read_text(encoding="utf-8"))[0]["run_id"] == 1
    code, _, err = run(["log", "export", "--format", "xml"], capsys)
    assert code == 2 and "csv" in err
    # stats: one value per unit, limits from the spec
    plot = bench["tmp"] / "f.svg"
    code, out, _ = run(["log", "stats", "frequency_hz", "--spec", str(SPEC), "--plot", str(plot), "--json"],
                       capsys)
    assert code == 0
    stats = json.loads(out)
    values = sorted(df[(df["quantity"] == "frequency_hz")]["value"])
    assert stats["n"] == 2 and stats["min"] == values[0] and stats["max"] == values[1]
    assert (stats["lower"], stats["upper"]) == (49.75, 50.25)
    # Cp = (USL − LSL)/(6 s), definition from NIST/SEMATECH e-Handbook 6.1.6; numbers computed
    # rel 1e-12: float rounding only (same formula, different summation order)
    assert stats["cp"] == pytest.approx(0.5 / (6 * np.std(values, ddof=1)), rel=1e-12)
    assert plot.read_text(encoding="utf-8").lstrip().startswith("<?xml")
    code, _, err = run(["log", "stats", "frequency_hz", "--plot", str(plot)], capsys)
    assert code == 2 and "exists" in err


def test_log_on_a_foreign_file_is_one_line(bench, capsys):
    foreign = bench["tmp"] / "parts.db"
    con = sqlite3.connect(foreign)
    con.execute("CREATE TABLE stock (part TEXT)")
    con.commit()
    con.close()
    before = foreign.read_bytes()
    code, _, err = run(["log", "list", "--log", str(foreign)], capsys)
    assert code == 2 and err.count("\n") == 1 and "not a benchfit measurement log" in err
    assert foreign.read_bytes() == before


def _csv_without_time(path: Path, f_hz: float, seed: int) -> Path:
    """The same hum-check output as write_unit, in volts, as one CSV column with no time column."""
    rng = np.random.default_rng(seed)
    t = np.arange(FS) / FS
    v = 1.8 * np.sin(2 * np.pi * f_hz * t) + 0.072 * np.sin(2 * np.pi * 3 * f_hz * t + 0.3) + rng.normal(0, 2e-4, t.size)
    path.write_text("output\n" + "\n".join(f"{x:.7f}" for x in v) + "\n", encoding="utf-8")
    return path


def test_report_takes_the_sample_rate_of_a_csv_without_time(bench, capsys):
    caps = bench["tmp"] / "csv"
    caps.mkdir()
    a = _csv_without_time(caps / "HC-11.csv", 50.02, 4)
    _csv_without_time(caps / "HC-12.csv", 49.97, 5)
    # without the rate the file cannot be read: one error line naming the option report now has
    code, out, err = run(["report", str(a), "--unit", "HC-11", "--spec", str(SPEC), "--no-log"], capsys)
    lines = [x for x in err.splitlines() if x.strip()]
    assert code == 2 and len(lines) == 1 and "--sample-rate" in lines[0] and "Traceback" not in err, err
    code, out, err = run(["report", str(a), "--unit", "HC-11", "--spec", str(SPEC), "--no-log", "--no-figures",
                          "--sample-rate", "48k", "--out", str(bench["out"]), "--json"], capsys)
    assert code == 0, err
    twin = json.loads(Path(json.loads(out)["json"]).read_text(encoding="utf-8"))
    code, out, err = run(["measure", str(a), "--sample-rate", "48k", "--json"], capsys)
    measured = json.loads(out.splitlines()[0])
    assert [m["measurement"] for m in twin["measurements"] if m["role"] == "as-left"] == [measured]
    assert measured["sample_rate_hz"] == FS
    # a batch passes the rate to its workers
    code, out, err = run(["report", str(caps), "--each", "--spec", str(SPEC), "--no-log", "--no-figures",
                          "--sample-rate", "48000", "--jobs", "2", "--out", str(bench["tmp"] / "each"), "--json"],
                         capsys)
    assert code == 0, err
    units = [json.loads(line) for line in out.splitlines() if line.strip()]  # one JSON object a line
    assert sorted(u["unit"] for u in units if "unit" in u) == ["HC-11", "HC-12"], out
