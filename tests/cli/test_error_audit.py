"""Error-message audit of the whole command line: bad input is ONE line, with the right exit code.

The contract (benchfit/errors.py, benchfit/cli/__init__.py): bad input prints exactly one
line ``error: <file or parameter>: <what is wrong> — <what to do>`` on stderr, exits 2 (3 for
an audio device), never shows a traceback; a unit failing its spec is exit 1; usage errors
(unknown option, bad option value, missing argument) follow the same one-line rule.

The table runs every command in-process through :func:`benchfit.cli.main` (a few cases go
through a subprocess to cover the real entry point). The bad files are generated here
with a seeded random generator; nothing is read from outside the test folder.
"""

from __future__ import annotations

import json
import os
import re
import subprocess
import sys
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pytest
import soundfile as sf

from benchfit.cli import main

FS = 48000  # Hz, the sample rate of the generated captures
SPEC_TOML = """\
[spec]
name = "hum-check box, 50 Hz reference tone"
decision_rule = "guard-banded"

[[limit]]
quantity = "frequency_hz"
nominal = 50.0
tolerance = 0.25
"""

def _csv(path: Path, times: np.ndarray, values: list[str]) -> None:
    rows = [f"{t:.7f},{v}" for t, v in zip(times, values)]
    path.write_text("time,output\n" + "\n".join(rows) + "\n", encoding="utf-8")


@pytest.fixture(scope="module")
def files(tmp_path_factory) -> dict[str, Path]:
    """Every bad (and a few good) input file the table refers to, by name."""
    d = tmp_path_factory.mktemp("audit")
    rng = np.random.default_rng(20261201)
    t = np.arange(FS // 2) / FS  # 0.5 s: 25 periods of 50 Hz
    sine = 0.5 * np.sin(2 * np.pi * 50 * t)
    square = np.where((t * 50) % 1 < 0.5, 0.8, -0.8)
    f: dict[str, Path] = {}

    def wav(name: str, data: np.ndarray, subtype: str = "PCM_24") -> None:
        f[name] = d / f"{name}.wav"
        sf.write(f[name], data, FS, subtype=subtype)

    wav("good", sine)
    wav("float_sine", sine, "FLOAT")  # noise-free: its harmonics' uncertainties come out as zero
    wav("two", np.stack([square, sine], axis=1))
    wav("silent", np.zeros_like(t), "PCM_16")
    wav("clipped", np.clip(3.0 * np.sin(2 * np.pi * 50 * t), -1.0, 1.0), "PCM_16")
    wav("noise", 0.2 * rng.standard_normal(t.size))
    wav("noise2", 0.2 * rng.standard_normal((t.size, 2)))
    raw = f["good"].read_bytes()
    f["cut_wav"] = d / "HC-05_cut.wav"
    f["cut_wav"].write_bytes(raw[: 44 + 3 * (FS // 4)])  # header says 0.5 s, data holds 0.25 s (24-bit mono)
    f["header_only_wav"] = d / "header_only.wav"
    f["header_only_wav"].write_bytes(raw[:30])  # cut inside the RIFF header: no data chunk
    f["text_wav"] = d / "notes.wav"
    f["text_wav"].write_text("these are bench notes, not audio\n", encoding="utf-8")
    f["pdf"] = d / "HC-02_datasheet.pdf"
    f["pdf"].write_text("%PDF-1.4 a document, not a capture\n", encoding="utf-8")
    f["junk_csv"] = d / "junk.csv"
    f["junk_csv"].write_bytes(rng.integers(0, 256, 3000, dtype=np.uint8).tobytes())
    f["empty_wav"] = d / "empty.wav"
    f["empty_wav"].write_bytes(b"")
    f["header_csv"] = d / "header.csv"
    f["header_csv"].write_text("time,output\n", encoding="utf-8")
    tc = t[:2000]
    vals = [f"{v:.5f}" for v in np.sin(2 * np.pi * 50 * tc)]
    bad = list(vals)
    bad[10] = "#VALUE!"  # a spreadsheet error cell on data row 11 (file line 12)
    f["value_csv"] = d / "value.csv"
    _csv(f["value_csv"], tc, bad)
    nan = list(vals)
    nan[7] = "nan"
    f["nan_csv"] = d / "nan.csv"
    _csv(f["nan_csv"], tc, nan)
    back = tc.copy()
    back[20], back[21] = back[21], back[20]  # two rows swapped: time goes backwards
    f["unsorted_csv"] = d / "unsorted.csv"
    _csv(f["unsorted_csv"], back, vals)
    jitter = tc + np.where(np.arange(tc.size) % 3 == 0, 4e-6, 0.0)  # 4 µs ≈ 19 % of a step
    f["irregular_csv"] = d / "irregular.csv"
    _csv(f["irregular_csv"], jitter, vals)
    f["sidecar_wav"] = d / "side.wav"
    f["sidecar_wav"].write_bytes(raw)
    f["sidecar_json"] = d / "side.json"
    f["sidecar_json"].write_text("{not json", encoding="utf-8")
    f["folder"] = d / "empty_folder"
    f["folder"].mkdir()
    f["folder_wav"] = d / "folder.wav"
    f["folder_wav"].mkdir()
    f["missing"] = d / "HC-09_nothere.wav"
    f["new_wav"] = d / "new_recording.wav"
    f["spec"] = d / "hc_spec.toml"
    f["spec"].write_text(SPEC_TOML, encoding="utf-8")
    f["spec_bad"] = d / "bad_spec.toml"
    f["spec_bad"].write_text("this is = = not toml\n", encoding="utf-8")
    f["fit_bad"] = d / "fit_bad.json"
    f["fit_bad"].write_text("{not json", encoding="utf-8")
    f["fit_wrong"] = d / "fit_wrong.json"
    f["fit_wrong"].write_text(json.dumps({"a": 1}), encoding="utf-8")
    f["stock_bad"] = d / "stock_bad.csv"
    f["stock_bad"].write_text("value\n4k7\nabc\n", encoding="utf-8")
    f["foreign_log"] = d / "notes.sqlite"
    f["foreign_log"].write_text("these are bench notes, not a database\n", encoding="utf-8")
    f["no_log"] = d / "never_written.sqlite"
    f["existing"] = d / "keep_me.csv"
    f["existing"].write_text("a file the user wants to keep\n", encoding="utf-8")
    f["existing_wav"] = d / "HC-04_take1.wav"
    f["existing_wav"].write_bytes(raw)  # an earlier recording the user wants to keep
    f["out_pdf"] = d / "figure.pdf"
    f["existing_svg"] = d / "hc03_fit.svg"
    f["existing_svg"].write_text("<svg>a figure the user wants to keep</svg>\n", encoding="utf-8")
    f["folder_svg"] = d / "figures.svg"
    f["folder_svg"].mkdir()
    # --- robustness sweep (issue 12): hostile numbers, nesting, encodings --------------------------
    f["huge_side_wav"] = d / "HC-10_huge.wav"
    f["huge_side_wav"].write_bytes(raw)
    f["huge_side_json"] = d / "HC-10_huge.json"
    f["huge_side_json"].write_text('{"benchfit_sidecar": 1, "channels": [{"name": "output"}], "sample_rate_hz": 1'
                                   + "0" * 400 + "}", encoding="utf-8")
    f["deep_side_wav"] = d / "HC-10_deep.wav"
    f["deep_side_wav"].write_bytes(raw)
    f["deep_side_json"] = d / "HC-10_deep.json"
    f["deep_side_json"].write_text('{"benchfit_sidecar": 1, "x": ' + "[" * 100000 + "]" * 100000 + "}",
                                   encoding="utf-8")
    # the same nesting in the other files the commands read (Python's parsers raise RecursionError)
    f["deep_spec"] = d / "deep_spec.toml"
    f["deep_spec"].write_text("x = " + "[" * 100000 + "]" * 100000 + "\n", encoding="utf-8")
    f["deep_json"] = d / "deep_run.json"
    f["deep_json"].write_text("[" * 100000 + "]" * 100000, encoding="utf-8")
    f["no_time_csv"] = d / "no_time.csv"
    f["no_time_csv"].write_text("output\n" + "\n".join(vals) + "\n", encoding="utf-8")
    huge = list(vals)
    huge[100] = "1e308"
    f["huge_csv"] = d / "huge_sample.csv"
    _csv(f["huge_csv"], tc, huge)
    f["nan_wav"] = d / "nan_sample.wav"
    nan_data = sine.astype(np.float32)
    nan_data[100] = np.nan
    sf.write(f["nan_wav"], nan_data, FS, subtype="FLOAT")
    f["spec_latin1"] = d / "latin1_spec.toml"
    f["spec_latin1"].write_bytes(SPEC_TOML.replace("hum-check box", "hum-check box \u00b5").encode("latin-1"))
    f["spec_list"] = d / "list_spec.toml"
    f["spec_list"].write_text(SPEC_TOML.replace('quantity = "frequency_hz"', 'quantity = ["frequency_hz"]'),
                              encoding="utf-8")
    f["spec_inf"] = d / "inf_spec.toml"
    f["spec_inf"].write_text(SPEC_TOML.replace("tolerance = 0.25", "tolerance = inf"), encoding="utf-8")
    f["spec_digits"] = d / "digits_spec.toml"
    f["spec_digits"].write_text(SPEC_TOML.replace("nominal = 50.0", "nominal = 1" + "0" * 400), encoding="utf-8")
    f["notes_folder"] = d / "projects"
    f["notes_folder"].mkdir()
    (f["notes_folder"] / "notes.txt").write_text("my notes\n", encoding="utf-8")
    f["log"] = d / "log.sqlite"
    with pytest.raises(SystemExit) as info:  # one real run in the log, for the log commands
        main(["measure", str(f["good"]), "--log", str(f["log"]), "--json"])
    assert info.value.code in (0, None)
    return f


@pytest.fixture(autouse=True)
def _isolated(tmp_path, monkeypatch):
    """No user log or calibration profile is read or written; fixed terminal width."""
    monkeypatch.setenv("BENCHFIT_LOG", str(tmp_path / "default_log.sqlite"))
    monkeypatch.setenv("BENCHFIT_CONFIG_DIR", str(tmp_path / "config"))
    monkeypatch.setenv("COLUMNS", "80")
    monkeypatch.chdir(tmp_path)  # a command that writes by default (report --out .) writes here


def run_cli(argv: list[str], capsys) -> tuple[int, str, str]:
    """Run the command line in-process; return (exit code, stdout, stderr)."""
    capsys.readouterr()
    with pytest.raises(SystemExit) as info:
        main(argv)
    out = capsys.readouterr()
    code = info.value.code
    return (0 if code is None else code), out.out, out.err


@dataclass(frozen=True)
class Case:
    """One bad invocation: argv ({name} = a file of the fixture), exit code, the line's pattern.

    ``names`` is the file key or the literal option/argument text the message must contain.
    """

    id: str
    argv: tuple[str, ...]
    code: int
    pattern: str
    names: str
    warnings_ok: bool = False


def C(id: str, argv: str | list[str], code: int, pattern: str, names: str, **kw) -> Case:
    return Case(id, tuple(argv.split() if isinstance(argv, str) else argv), code, pattern, names, **kw)


HELP = r" — see 'benchfit {}--help'$"

CASES = [
    # --- usage errors (click/typer): one line naming the option -------------------------
    C("measure-no-args", "measure", 2, r"^error: FILES: missing argument — give it; see 'benchfit measure --help'$",
      "FILES"),
    C("measure-harmonics-abc", "measure --harmonics abc {good}", 2,
      r"^error: --harmonics 'abc': not a whole number" + HELP.format("measure "), "--harmonics"),
    C("measure-harmonics-huge", "measure --harmonics 99999999999999999999999 {good}", 2,
      r"^error: --harmonics '99999999999999999999999': must be 1000 or less — ", "--harmonics"),
    C("measure-gain-u-too-big", "measure --gain-u 150% {good}", 2,
      r"^error: --gain-u '150%': a relative uncertainty of 100 % or more — give it as a percentage", "--gain-u"),
    C("measure-gain-u-not-a-number", "measure --gain-u abc {good}", 2, r"^error: .*--gain-u.* — ", "--gain-u"),
    C("measure-jobs-negative", "measure --jobs -1 {good}", 2,
      r"^error: --jobs '-1': must be 1 or more" + HELP.format("measure "), "--jobs"),
    C("measure-unknown-option", "measure --hamonics 3 {good}", 2,
      r"^error: --hamonics: no such option for 'benchfit measure' \(did you mean --harmonics\?\) — ", "--hamonics"),
    C("record-seconds-x", "record --seconds x {new_wav}", 2,
      r"^error: --seconds 'x': not a number" + HELP.format("record "), "--seconds"),
    C("fit-fix-without-value", "fit {two} --fix", 2, r"^error: --fix: needs a value" + HELP.format("fit "), "--fix"),
    C("report-no-spec", "report {good}", 2, r"^error: --spec: missing option — give it; ", "--spec"),
    # RUN that is not a whole number is a unit serial (its latest run): an unknown one is one line
    C("log-show-abc", "log show abc --log {log}", 2,
      r"^error: log show abc: no run id and no logged unit with this serial — .*see `benchfit log list`", "abc"),
    C("log-show-extra", "log show 1 2", 2, r"^error: benchfit log show: unexpected extra argument\(s\) 2 — ",
      "benchfit log show"),
    C("unknown-command", "frobnicate", 2, r"^error: benchfit: no such command 'frobnicate' — see 'benchfit --help'$",
      "frobnicate"),
    C("design-max-parts-9", "design combine 1k --kind R --max-parts 9", 2,
      r"^error: --max-parts '9': must be 3 or less" + HELP.format("design combine "), "--max-parts"),
    C("design-trials-5", "design astable --frequency 50 --trials 5", 2,
      r"^error: --trials '5': must be 100 or more" + HELP.format("design astable "), "--trials"),
    C("tune-no-target", "tune", 2, r"^error: --target: missing option — give it; ", "--target"),
    C("calibrate-no-profile", "calibrate gain {good} --rms 0.35", 2, r"^error: --profile: missing option — ",
      "--profile"),
    C("empty-channel", ["measure", "{good}", "--channel", ""], 2,
      r"^error: --channel: the value is empty — give the value it needs$", "--channel"),
    C("empty-file-argument", ["fit", ""], 2, r"^error: argument 2: an empty argument — ", "argument 2"),
    C("empty-log-path", ["measure", "{good}", "--log", ""], 2, r"^error: --log: the path is empty — ", "--log"),
    C("empty-spec-equals", ["report", "{good}", "--spec="], 2, r"^error: --spec: the path is empty — ", "--spec"),
    # --- capture readers, through measure ---------------------------------------------------
    C("missing-file", "measure {missing}", 2, r": no such file — check the path", "missing"),
    C("empty-wav", "measure {empty_wav}", 2, r": the file is empty — record or export it again$", "empty_wav"),
    C("folder-without-captures", "measure {folder}", 2,
      r": a folder with no capture files \(.*\) in it — give the capture files, or add --recursive", "folder"),
    C("header-only-csv", "measure {header_csv}", 2, r": holds a header or preamble but no numeric data rows — ",
      "header_csv"),
    C("value-cell", "measure {value_csv}", 2,
      r": line 12, column 'output': '#VALUE!' is not a number — fix or delete that row$", "value_csv"),
    C("nan-cell", "measure {nan_csv}", 2, r": line 9, column 'output': 'nan' is not a finite number — ", "nan_csv"),
    C("time-not-increasing", "measure {unsorted_csv}", 2, r"column 'time': time .* does not increase .* — sort the rows",
      "unsorted_csv"),
    C("time-irregular", "measure {irregular_csv}", 2,
      r"column 'time': time step .* s: the samples are not evenly spaced \(.*\) — export without gaps or resample$",
      "irregular_csv"),
    C("truncated-wav", "measure {header_only_wav}", 2, r": unreadable audio .* — the file is damaged",
      "header_only_wav"),
    C("text-named-wav", "measure {text_wav}", 2, r": not an audio file .* — give a WAV, FLAC or OGG recording",
      "text_wav"),
    C("binary-named-csv", "measure {junk_csv}", 2, r": not an audio file and not CSV text \(binary data\) — ",
      "junk_csv"),
    C("unknown-file-type", "measure {pdf}", 2,
      r": not a capture file \(\.pdf: neither audio nor a readable CSV export\) — give a WAV", "pdf"),
    C("broken-sidecar", "measure {sidecar_wav}", 2, r"side\.json: sidecar is not valid JSON .* — fix the sidecar",
      "sidecar_json"),
    C("no-such-channel", "measure {good} --channel 3", 2, r": no channel '3' — choose one of ch1", "good"),
    C("sample-rate-x", "measure {good} --sample-rate x", 2, r"^error: --sample-rate: 'x' is not a number — ",
      "--sample-rate"),
    # --- fit -----------------------------------------------------------------------------------
    C("fit-folder", "fit {folder}", 2, r": is a folder, not a capture file — give a WAV, FLAC, OGG or CSV file$",
      "folder"),
    C("fit-silent", "fit {silent}", 2, r": response channel 'ch1' is silent \(no signal\) — check the wiring",
      "silent"),
    C("fit-no-periodic-content", "fit {noise}", 2, r": channel 'ch1' has no periodic content — capture a few periods",
      "noise"),
    C("fit-drive-no-periodic-content", "fit {noise2}", 2, r": drive channel 'ch1' has no periodic content — ",
      "noise2"),
    C("fit-clipped-and-no-such-channel", "fit {clipped} --response 5", 2, r": no channel '5' — choose one of ch1",
      "clipped", warnings_ok=True),  # the clipping warning comes first, legitimately
    C("fit-unknown-model", "fit {two} --model bogus", 2,
      r"^error: --model 'bogus': not one of lc-lowpass, ringdown" + HELP.format("fit "), "--model"),
    C("fit-fix-unknown-name", "fit {two} --fix Q=3", 2, r"^error: --fix 'Q=3': unknown name 'Q' — use one of L, C",
      "--fix"),
    C("fit-fix-not-assignment", "fit {two} --fix L", 2, r"^error: --fix 'L': not NAME=VALUE — write it like --fix L=",
      "--fix"),
    C("fit-fix-negative", "fit {two} --fix L=-3", 2, r"^error: --fix 'L=-3': L must be positive — ", "--fix"),
    # a bare 1…100 is a percentage (--drive-duty 50 = 50 %), so the out-of-range value is 150
    C("fit-duty-out-of-range", "fit {two} --drive-duty 150", 2, r"^error: --drive-duty '150': the duty cycle must lie",
      "--drive-duty"),
    C("fit-plot-folder", "fit {two} --plot {folder_svg}", 2,
      r": is a folder — give --plot a file name ending in \.svg or \.png$", "folder_svg"),
    C("fit-plot-exists", "fit {two} --plot {existing_svg}", 2,
      r": file exists — choose another --plot or add --overwrite$", "existing_svg"),
    # a pure sine carries no filter shape (item: the solver used to break down on it)
    C("fit-pure-sine", "fit {good}", 2,
      r"^error: .*good\.wav: channel 'ch1' has no harmonics above the noise, so its shape says nothing about "
      r"the filter — capture the drive too and use --method two-channel, or use --model ringdown$", "good"),
    C("fit-pure-sine-float", "fit {float_sine}", 2,
      r": channel 'ch1' has no harmonics above the noise, .* or use --model ringdown$", "float_sine"),
    C("fit-plot-type", "fit {two} --plot {out_pdf}", 2, r"^error: --plot '.*figure\.pdf': unknown figure type — ",
      "--plot"),
    # --- report --------------------------------------------------------------------------------
    C("report-spec-missing", "report {good} --spec {missing} --unit HC-01 --no-log", 2,
      r": spec file not found — check the path of the spec file$", "missing"),
    C("report-spec-not-toml", "report {good} --spec {spec_bad} --unit HC-01 --no-log", 2,
      r": not valid TOML \(.*\) — fix the syntax$", "spec_bad"),
    C("report-spec-deep", "report {good} --spec {deep_spec} --unit HC-01 --no-log", 2,
      r": nested too deeply to be a spec file — fix the file", "deep_spec"),
    C("report-drift-deep", "report {good} --spec {spec} --unit HC-01 --no-log --drift {deep_json}", 2,
      r": not a readable drift run \(nested too deeply\) — give the JSON", "deep_json"),
    C("report-spec-folder", "report {good} --spec {folder} --unit HC-01 --no-log", 2,
      r": is a folder, not a spec file — ", "folder"),
    C("report-no-unit", "report {good} --spec {spec} --no-log", 2, r"^error: --unit: missing — give the serial",
      "--unit"),
    C("report-unit-with-each", "report {good} --spec {spec} --each --unit HC-01 --no-log", 2,
      r"^error: --unit 'HC-01': not used with --each — ", "--unit"),
    C("report-log-and-no-log", "report {good} --spec {spec} --unit HC-01 --log {no_log} --no-log", 2,
      r"^error: --log and --no-log: give only one — ", "--no-log"),
    C("report-foreign-log", "report {good} --spec {spec} --unit HC-01 --log {foreign_log}", 2,
      r": not a benchfit measurement log .* \(this file was left untouched\)$", "foreign_log"),
    C("report-unknown-model", "report {good} --spec {spec} --unit HC-01 --no-log --model bogus", 2,
      r"^error: --model 'bogus': not one of lc-lowpass, ringdown" + HELP.format("report "), "--model"),
    # --- log -----------------------------------------------------------------------------------
    C("log-since-not-a-date", "log list --since yesterday --log {log}", 2,
      r"^error: --since 'yesterday': not a date — write it like 2026-12-01", "--since"),
    C("log-show-huge-id", "log show 99999999999999999999999 --log {log}", 2,
      r"^error: run 99999999999999999999999: no such run in .* — run ids go from 1", "99999999999999999999999"),
    C("log-show-superscript", "log show ² --log {log}", 2,
      r"^error: log show ²: no run id and no logged unit with this serial — ", "²"),
    C("log-missing", "log list --log {no_log}", 2, r": no log file there — ", "no_log"),
    C("log-foreign", "log list --log {foreign_log}", 2, r": not a benchfit measurement log ", "foreign_log"),
    C("log-show-no-run", "log show 999 --log {log}", 2, r"^error: run 999: no such run in .* — run ids go from 1",
      "run 999"),
    C("log-export-format", "log export --format xml --log {log}", 2,
      r"^error: --format 'xml': not one of csv, json" + HELP.format("log export "), "--format"),
    C("log-export-exists", "log export --out {existing} --log {log}", 2,
      r": file exists — choose another --out or add --overwrite$", "existing"),
    C("log-stats-plot-exists", "log stats frequency_hz --plot {existing} --log {log}", 2,
      r": file exists — choose another --plot or add --overwrite$", "existing"),
    # --- design ------------------------------------------------------------------------------
    C("design-series", "design astable --frequency 50 --series E7", 2,
      r"^error: --series 'E7': unknown series — use one of E6, E12", "--series"),
    C("design-distribution", "design astable --frequency 50 --distribution weird", 2,
      r"^error: --distribution: unknown 'weird' — use one of uniform, normal$", "--distribution"),
    C("design-negative-frequency", "design astable --frequency -50", 2,
      r"^error: --frequency: '-50' must be positive — ", "--frequency"),
    C("design-duty-impossible", "design astable --frequency 50 --duty 30%", 2,
      r"^error: --duty: 30 % is impossible .* — use --diode", "--duty"),
    C("design-control-range", "design astable --frequency 50 --control-range 6", 2,
      r"^error: --control-range '6': not LOW:HIGH — ", "--control-range"),
    C("design-filter-neither-part", "design filter --frequency 50", 2,
      r"^error: --inductance/--capacitance: neither given — ", "--inductance"),
    # bench ranges (benchfit.design.parts.BENCH_RANGES; common practice, no source): a prefix slip, a drive
    # frequency no lumped L-C filter is used at (1e-300 Hz divided by zero), a solved part no bench holds
    C("design-filter-mega-choke", "design filter --frequency 50 --inductance 300 --rs 1", 2,
      r"^error: --inductance 300 H: outside any bench part \(1e-09…100 H\) — check the SI prefix .* --inductance 300m$",
      "--inductance"),
    C("design-filter-frequency-range", "design filter --frequency 1e-300 --inductance 300m --rs 1 --thd-max 5%", 2,
      r"^error: --frequency: 1e-300 Hz is outside any bench drive frequency \(0\.001…1e\+07 Hz\) — ", "--frequency"),
    C("design-filter-solved-part", "design filter --frequency 0.01 --inductance 1n --rs 1", 2,
      r"^error: --frequency: 0\.01 Hz with inductance 1e-09 H needs C = 2\.533e\+11 F, outside any bench part",
      "--frequency"),
    C("design-filter-trials-cap", "design filter --frequency 50 --inductance 300m --rs 1 --thd-max 5% "
      "--trials 1000000000", 2, r"^error: --trials '1000000000': must be 20000 or less", "--trials"),
    C("design-astable-duty-range", "design astable --frequency 50 --duty 99.99%", 2,
      r"^error: --duty: 99\.99 % cannot be made with resistors from 1 kΩ to 1 MΩ", "--duty"),
    C("design-combine-range", "design combine 1e-300 --kind R", 2,
      r"^error: VALUE: 1e-300 Ω is outside any part made \(1e-06…1e\+12 Ω\) — ", "VALUE"),
    C("design-kind", "design combine 1k --kind Z", 2, r"^error: --kind: unknown part kind 'Z' — use one of R, C, L$",
      "--kind"),
    C("design-stock-bad-row", "design combine 1k --kind R --stock {stock_bad}", 2,
      r" row 3: 'abc' is not a number — ", "stock_bad"),
    C("design-stock-binary", "design combine 1k --kind R --stock {junk_csv}", 2,
      r": not a text CSV file \(byte \d+ is not UTF-8\) — save the stock list as UTF-8 CSV$", "junk_csv"),
    C("design-stock-folder", "design combine 1k --kind R --stock {folder}", 2,
      r": is a folder, not a stock list — ", "folder"),
    C("design-trim-nothing", "design trim --target 50", 2, r"^error: --fit / --timer-frequency: neither given — ",
      "--fit"),
    C("design-trim-fit-not-json", "design trim --target 50 --fit {fit_bad}", 2, r": not a JSON file \(.*\) — save one",
      "fit_bad"),
    C("design-trim-fit-deep", "design trim --target 50 --fit {deep_json}", 2,
      r": not a JSON file \(nested too deeply\) — save one", "deep_json"),
    C("design-trim-fit-wrong", "design trim --target 50 --fit {fit_wrong}", 2, r": not a benchfit fit result ",
      "fit_wrong"),
    C("design-trim-timer-parts", "design trim --target 50 --timer-frequency 50.6", 2,
      r"^error: --timer-frequency: also give --ra, --rb, --c1 — ", "--timer-frequency"),
    # --- live capture and calibration ---------------------------------------------------------
    C("record-existing", "record --seconds 1 {existing_wav}", 2,
      r": already exists — choose another name or pass --overwrite$", "existing_wav"),
    C("record-onto-folder", "record --seconds 1 --overwrite {folder_wav}", 2,
      r": is a folder — give a WAV file name, e.g. .*take1\.wav$", "folder_wav"),
    C("record-sample-format", "record --seconds 1 --sample-format mp3 {new_wav}", 2,
      r"^error: --sample-format mp3: unknown sample format — choose one of pcm24, float$", "--sample-format"),
    C("record-channels", "record --seconds 1 --channels 5 {new_wav}", 2,
      r"^error: --channels '5': must be 2 or less" + HELP.format("record "), "--channels"),
    C("record-seconds-negative", "record --seconds -1 {new_wav}", 2,
      r"^error: --seconds: -1\.0 must be a positive number of seconds — e\.g\. --seconds 10$", "--seconds"),
    C("tune-window-zero", "tune --target 50 --window 0", 2,
      r"^error: --window: 0\.0 must be a positive number of seconds — e\.g\. --window 1$", "--window"),
    C("tune-window-short", "tune --target 50 --window 0.01", 2,
      r"^error: --window: 0\.01 s holds fewer than 2 cycles of 50 Hz — use at least 0\.04 s$", "--window"),
    C("tune-target-negative", "tune --target -5", 2, r"^error: --target: '-5' must be positive — ", "--target"),
    C("tune-target-nyquist", "tune --target 30k --rate 48000", 2,
      r"^error: --target: 30000 Hz is not below half the sample rate \(24000 Hz\) — raise --rate or check "
      r"--target$", "--target"),
    C("tune-channel-0", "tune --target 50 --channel 0", 2,
      r"^error: --channel '0': must be 1 or more" + HELP.format("tune "), "--channel"),
    C("tune-updates-0", "tune --target 50 --updates 0", 2,
      r"^error: --updates '0': must be 1 or more" + HELP.format("tune "), "--updates"),
    C("tune-harmonics-101", "tune --target 50 --harmonics 101", 2,
      r"^error: --harmonics '101': must be 100 or less" + HELP.format("tune "), "--harmonics"),
    C("tune-rate-fraction", "tune --target 50 --rate 44100.5", 2,
      r"^error: --rate: 44100\.5 must be a whole positive number of Hz — e\.g\. --rate 48000$", "--rate"),
    C("calibrate-no-file", "calibrate gain --rms 0.775 --profile audit", 2,
      r"^error: FILE: missing — give a recording to calibrate from, or use --record --seconds S$", "FILE"),
    C("calibrate-rms-negative", "calibrate gain {good} --rms -1 --profile audit", 2,
      r"^error: --rms: '-1' must be positive — ", "--rms"),
    C("calibrate-rms-u-too-big", "calibrate gain {good} --rms 0.35 --rms-u 1 --profile audit", 2,
      r"^error: --rms-u: '1' V is not smaller than the reading 0\.35 V — ", "--rms-u"),
    C("calibrate-timebase-frequency-zero", "calibrate timebase {good} --frequency 0 --profile audit", 2,
      r"^error: --frequency: '0' must be positive — give a number above zero after --frequency$", "--frequency"),
    C("calibrate-timebase-nyquist", "calibrate timebase {good} --frequency 30k --profile audit", 2,
      r"^error: --frequency: 30000\.0 Hz must be positive and below half the sample rate \(24000 Hz\) — "
      r"check --frequency, or record at a higher sample rate \(--rate\)$", "--frequency"),
    C("calibrate-record-no-seconds", "calibrate gain --record --rms 0.35 --profile audit", 2,
      r"^error: --seconds: missing — --record needs the recording length, e\.g\. --seconds 5$", "--seconds"),
    C("calibrate-record-seconds-negative", "calibrate coupling --record --seconds -2 --profile audit", 2,
      r"^error: --seconds: -2\.0 must be a positive number of seconds — e\.g\. --seconds 10$", "--seconds"),
    C("calibrate-record-channels-3", "calibrate gain --record --seconds 1 --channels 3 --rms 0.35 --profile audit",
      2, r"^error: --channels '3': must be 2 or less" + HELP.format("calibrate gain "), "--channels"),
    C("calibrate-record-onto-existing", "calibrate gain {existing_wav} --record --seconds 1 --rms 0.35 --profile audit",
      2, r": already exists — give a new name ending in \.wav, or leave FILE out to record into a scratch file$",
      "existing_wav"),
    # the safety paragraph comes only once the device is accepted: a refused device is one line
    C("calibrate-record-no-such-device",
      "calibrate gain --record --seconds 1 --rms 0.35 --profile audit --device no-such-device-7f3", 3,
      r"^error: (--device|PortAudio)\b.* — ", "device"),
    C("calibrate-bad-channel", "calibrate timebase {good} --frequency 50 --channel 4 --profile audit", 2,
      r"^error: --channel '4': no such channel — choose one of ch1 or 1…1$", "--channel"),
    C("record-no-such-device", "record --seconds 1 --device no-such-device-7f3 {new_wav}", 3,
      r"^error: (--device|PortAudio)\b.* — ", "device"),
    C("calibrate-silent", "calibrate gain {silent} --rms 0.35 --profile audit", 2,
      r"silent\.wav channel 1 \(ch1\): no steady tone found — ", "silent"),
    C("calibrate-clipped", "calibrate gain {clipped} --rms 0.35 --profile audit", 2,
      r"clipped\.wav channel 1 \(ch1\): the input reaches .* \(clipped\) — lower the level", "clipped"),
    # calibrate show takes the profile as its PROFILE argument, not as --profile
    C("calibrate-show-unknown", "calibrate show nosuchprofile", 2,
      r"^error: PROFILE 'nosuchprofile': no such calibration profile .* — create it", "PROFILE"),
    # --- robustness sweep (issue 12) ----------------------------------------------------------------
    C("sidecar-huge-number", "measure {huge_side_wav}", 2,
      r"HC-10_huge\.json: 'sample_rate_hz' must be a positive number of Hz, got 1000+\.\.\. — fix the sidecar",
      "huge_side_json"),
    C("sidecar-deep-nesting", "measure {deep_side_wav}", 2,
      r"HC-10_deep\.json: sidecar is nested too deeply to be a benchfit sidecar — ", "deep_side_json"),
    C("sample-rate-1e-300", "measure {no_time_csv} --sample-rate 1e-300", 2,
      r": sample rate 1e-300 Hz is outside what any recorder uses \(.*\) — check the time column", "no_time_csv"),
    C("sample-1e308", "measure {huge_csv}", 2,
      r": sample 100 of channel 1 is 1e\+308, beyond any reading .* — an overflow or error cell in the export; "
      r"fix or delete that sample$", "huge_csv"),
    C("nan-sample-wav", "measure {nan_wav}", 2, r": sample 100 of channel 1 is NaN or infinite — ", "nan_wav"),
    C("report-spec-not-utf8", "report {good} --spec {spec_latin1} --unit HC-01 --no-log", 2,
      r": not UTF-8 text \(byte \d+ is not UTF-8\) — save the spec as UTF-8$", "spec_latin1"),
    C("report-spec-quantity-list", "report {good} --spec {spec_list} --unit HC-01 --no-log", 2,
      r": limit 1\.quantity: unknown quantity \['frequency_hz'\] — use one of ", "spec_list"),
    C("report-spec-inf", "report {good} --spec {spec_inf} --unit HC-01 --no-log", 2,
      r"\(frequency_hz\): tolerance = inf is not finite — give a finite number$", "spec_inf"),
    C("report-no-output-channel", "report {two} --spec {spec} --unit HC-03 --no-log", 2,
      r"two\.wav: no channel 'output' for the spec's frequency_hz limit \(the capture has ch1, ch2\) — map one "
      r"with --channel output=CH", "two"),
    C("report-channel-not-assignment", "report {two} --spec {spec} --unit HC-03 --no-log --channel output", 2,
      r"^error: --channel 'output': not NAME=CH — write it like --channel output=2", "--channel"),
    C("report-channel-no-such", "report {two} --spec {spec} --unit HC-03 --no-log --channel output=7", 2,
      r"two\.wav: no channel '7' — choose one of ch1, ch2 or a number 1…2$", "two"),
    C("fit-fix-megahenry", "fit {two} --fix L=300M", 2,
      r"^error: --fix L=3e\+08 H: outside any bench part \(1e-09…100 H\) — check the SI prefix \(M mega, .*\), "
      r"e\.g\. --fix L=300m$", "--fix"),
    C("fit-fix-megahenry-with-tolerance", "fit {two} --fix L=300M±10%", 2,
      r"^error: --fix L=3e\+08 H: outside any bench part \(1e-09…100 H\) — check the SI prefix", "--fix"),
    C("fit-fix-farad", "fit {two} --fix C=33", 2, r"^error: --fix C=33 F: outside any bench part .* --fix C=33u$",
      "--fix"),
    C("log-stats-did-you-mean", "log stats frequency --log {log}", 2,
      r"^error: frequency: no logged values \(did you mean frequency_hz.*\?\) — the log holds .*frequency_hz",
      "frequency"),
    C("measure-plot-two-files", "measure {good} {float_sine} --plot out.svg", 2,
      r"^error: --plot 'out\.svg': draws one capture — give one file, or leave --plot out$", "--plot"),
    C("measure-plot-type", "measure {good} --plot {out_pdf}", 2,
      r"^error: --plot '.*figure\.pdf': unknown figure type — ", "--plot"),
    C("measure-plot-exists", "measure {good} --plot {existing_svg}", 2, r": file exists — choose another --plot$",
      "existing_svg"),
    C("demo-foreign-folder", "demo --out {notes_folder}", 2,
      r": the folder holds files the demo did not make — give --out a new or empty folder$", "notes_folder"),
    C("report-spec-400-digits", "report {good} --spec {spec_digits} --unit HC-01 --no-log", 2,
      r"\(frequency_hz\): nominal = 1000+\.\.\. is not finite — ", "spec_digits"),
]


def _argv(case: Case, files: dict[str, Path]) -> list[str]:
    return [re.sub(r"\{(\w+)\}", lambda m: str(files[m.group(1)]), a) for a in case.argv]


def test_table_is_broad():
    """The brief asks for at least 40 cases across all commands."""
    assert len(CASES) >= 40
    assert len({c.id for c in CASES}) == len(CASES)
    commands = {c.argv[0] for c in CASES}
    assert {"measure", "fit", "record", "tune", "report", "log", "design", "calibrate"} <= commands


@pytest.mark.parametrize("case", CASES, ids=[c.id for c in CASES])
def test_bad_input_is_one_line(case: Case, files, capsys):
    code, out, err = run_cli(_argv(case, files), capsys)
    assert "Traceback" not in err and "Traceback" not in out
    lines = [ln for ln in err.splitlines() if ln.strip()]
    if case.warnings_ok:
        lines = [ln for ln in lines if not ln.startswith("warning:")]
    assert len(lines) == 1, f"expected one stderr line, got {len(lines)}:\n{err}"
    line = lines[0]
    assert code == case.code, f"exit {code}, expected {case.code}: {line}"
    assert line.startswith("error: ")
    assert re.search(case.pattern, line), f"{line!r} does not match {case.pattern!r}"
    named = str(files[case.names]) if case.names in files else case.names
    assert named in line, f"the message does not name {named!r}: {line}"
    # "<file or parameter>: <what is wrong> — <what to do>": the fix follows a dash
    problem, dash, fix = line.partition(" — ")
    assert dash and fix.strip(), f"no fix after ' — ': {line}"
    assert out == "", "nothing on stdout when the command fails"


# --- nothing the user recorded or logged is lost or overwritten ----------------------------------

def test_refusals_leave_existing_files_untouched(files, tmp_path, capsys):
    out_dir = tmp_path / "reports"
    before = {k: files[k].read_bytes() for k in ("existing", "existing_wav", "foreign_log", "existing_svg")}
    log_before = files["log"].read_bytes()
    for argv in (["record", "--seconds", "1", str(files["existing_wav"])],
                 ["log", "export", "--out", str(files["existing"]), "--log", str(files["log"])],
                 ["log", "stats", "frequency_hz", "--plot", str(files["existing"]), "--log", str(files["log"])],
                 ["fit", str(files["two"]), "--plot", str(files["existing_svg"])],
                 ["measure", str(files["good"]), "--log", str(files["foreign_log"])],
                 ["report", str(files["good"]), "--spec", str(files["spec"]), "--unit", "HC-01",
                  "--log", str(files["foreign_log"]), "--out", str(out_dir)]):
        code, _, err = run_cli(argv, capsys)
        assert code == 2, err
    assert not out_dir.exists() or not any(out_dir.iterdir())  # no report written for a run not logged
    assert {k: files[k].read_bytes() for k in before} == before
    assert files["log"].read_bytes() == log_before
    assert not files["existing_wav"].with_suffix(".json").exists()  # record wrote no sidecar either


def test_failed_report_input_writes_no_log(files, tmp_path, capsys):
    """A capture that cannot be read leaves the log as it was (here: not created at all)."""
    log = tmp_path / "fresh.sqlite"
    code, _, err = run_cli(["report", str(files["text_wav"]), "--spec", str(files["spec"]), "--unit", "HC-01",
                            "--log", str(log), "--out", str(tmp_path / "out")], capsys)
    assert code == 2 and "not an audio file" in err
    if log.exists():  # opened (and so created) before the capture was read: then it holds no run
        assert _log_runs(log) == 0


def _log_runs(log: Path) -> int:
    import sqlite3

    with sqlite3.connect(log) as db:
        return db.execute("SELECT COUNT(*) FROM runs").fetchone()[0]


def test_batch_errors_are_one_line_per_file(files, capsys):
    """Several bad files: one unwrapped error line per file (at 80 columns), then the summary line."""
    code, out, err = run_cli(["measure", str(files["value_csv"]), str(files["text_wav"]), "--jobs", "1"], capsys)
    lines = [ln for ln in err.splitlines() if ln.strip() and not ln.lstrip().startswith(("measuring", "━"))]
    errors = [ln for ln in lines if ln.startswith("error: ")]
    assert code == 2 and out == ""
    assert len(errors) == 3, err
    assert errors[0].startswith(f"error: {files['value_csv']}: line 12") and errors[0].endswith("fix or delete that row")
    assert errors[1].startswith(f"error: {files['text_wav']}: not an audio file")
    assert errors[2].startswith("error: 2 of 2 files could not be measured — ")


# --- warnings that precede a result -----------------------------------------------------------

def test_fit_warns_once_about_a_clipped_channel(files, capsys):
    code, out, err = run_cli(["fit", str(files["clipped"]), "--json"], capsys)
    warn = [ln for ln in err.splitlines() if ln.startswith("warning:")]
    assert len(warn) == 1 and "channel 'ch1' is clipped" in warn[0] and str(files["clipped"]) in warn[0]
    assert " — lower the input level" in warn[0]
    assert code == 0 and json.loads(out)["model"] == "lc-lowpass"


def test_truncated_wav_is_measured_with_a_warning_naming_the_file(files, capsys):
    """Half the data is missing: what is there is measured, and the result says the file is cut."""
    code, out, err = run_cli(["measure", str(files["cut_wav"]), "--json"], capsys)
    assert code == 0 and err == ""
    d = json.loads(out)
    assert d["duration_s"] == pytest.approx(0.25, abs=1 / FS)  # one sample: the length is counted in frames
    (warn,) = [w for w in d["channels"][0]["warnings"] if "truncated" in w]
    assert warn.startswith(f"{files['cut_wav']}: audio data truncated: header declares {FS // 2} frames")
    assert " — only those are used" in warn


# --- the real entry point, help and exit codes ---------------------------------------------------

def _subprocess(*args: str) -> subprocess.CompletedProcess:
    env = dict(os.environ, COLUMNS="80", BENCHFIT_LOG=os.devnull + ".none")
    return subprocess.run([sys.executable, "-m", "benchfit", *args], capture_output=True, text=True,
                          timeout=60, env=env)


def test_entry_point_usage_error_is_one_line():
    res = _subprocess("measure", "--harmonics", "abc", "x.wav")
    assert res.returncode == 2
    assert res.stderr == "error: --harmonics 'abc': not a whole number — see 'benchfit measure --help'\n"
    assert res.stdout == ""


def test_no_arguments_still_prints_help(capsys):
    """A group without a command shows its help; click's exit code for that (2) is kept."""
    for argv, words in ((["log"], "list"), (["design"], "astable"), ([], "measure")):
        code, out, err = run_cli(argv, capsys)
        assert code == 2 and "Usage: benchfit" in out + err and words in out + err
        assert "error:" not in out + err


def test_ctrl_c_exits_130_without_traceback(files, capsys, monkeypatch):
    """Ctrl-C during a command: exit 130 (128 + SIGINT, the shell convention — POSIX XCU 2.8.2
    "Exit Status for Commands"), no traceback."""
    import benchfit.cli.batch as batch

    def interrupted(*args, **kwargs):
        raise KeyboardInterrupt

    monkeypatch.setattr(batch, "measure_job", interrupted)
    code, out, err = run_cli(["measure", str(files["good"])], capsys)
    assert code == 130 and "Traceback" not in err and out == ""


def test_help_exits_zero(capsys):
    code, out, err = run_cli(["measure", "--help"], capsys)
    assert code == 0 and out.startswith("Usage: benchfit measure") and err == ""


HELP_COMMANDS = ["", "measure", "fit", "report", "log", "log list", "log show", "log export", "log stats",
                 "design", "design astable", "design filter", "design combine", "design trim", "calibrate",
                 "devices", "record", "tune", "calibrate gain", "calibrate timebase", "calibrate coupling",
                 "calibrate show", "demo", "drift"]


@pytest.mark.parametrize("command", HELP_COMMANDS, ids=[c or "top" for c in HELP_COMMANDS])
def test_help_fits_80_columns_and_keeps_examples(command, capsys):
    """Examples print one per line, as written (click rewraps a paragraph unless it is preceded by
    a line holding only ``\\b`` — click documentation, "Documenting Scripts: Preventing
    Rewrapping"); 80 columns is the terminal width to design for (common practice, no source)."""
    code, out, _ = run_cli(command.split() + ["--help"], capsys)
    assert code == 0
    lines = out.splitlines()
    assert all(len(ln) <= 80 for ln in lines), [ln for ln in lines if len(ln) > 80]
    # no word split at a hyphen by rewrapping (e.g. "--drive-" / "duty")
    assert not [ln for ln in lines if re.search(r"[A-Za-z]-$", ln)]
    examples = [ln.strip() for ln in lines if ln.strip().startswith("benchfit ")]
    for ex in examples:  # each example line is a whole command or ends in a continuation
        assert ex.count("benchfit ") == 1, ex
    if command and command not in ("log", "design", "calibrate"):
        assert examples, f"'benchfit {command} --help' shows no example"


def test_demo_help_keeps_its_default_folder_whole(capsys):
    """`demo --out`'s default is said in the help text, not split by click's wrapping."""
    code, out, _ = run_cli(["demo", "--help"], capsys)
    assert code == 0
    assert "(default: ./benchfit-demo)" in " ".join(out.split())
    assert "[default: benchfit-" not in out


# --- fit --plot keeps an existing figure unless told otherwise ------------------------------------

def test_fit_plot_overwrite_replaces_the_figure(files, tmp_path, capsys):
    fig = tmp_path / "hc03_fit.svg"
    fig.write_text("<svg>old</svg>\n", encoding="utf-8")
    code, _, err = run_cli(["fit", str(files["two"]), "--plot", str(fig), "--json"], capsys)
    assert code == 2 and "file exists" in err and fig.read_text(encoding="utf-8") == "<svg>old</svg>\n"
    code, out, err = run_cli(["fit", str(files["two"]), "--plot", str(fig), "--overwrite", "--json"], capsys)
    assert code == 0, err
    assert json.loads(out)["model"] == "lc-lowpass"
    text = fig.read_text(encoding="utf-8")
    assert text != "<svg>old</svg>\n" and "<svg" in text  # a real figure replaced the old file


def test_demo_reruns_its_figure_step_into_the_same_folder(tmp_path, monkeypatch, capsys):
    """The demo writes its fit figure with --overwrite, so a second run into the same folder
    still succeeds. Only the figure steps run for real here (the whole demo is tested elsewhere)."""
    import benchfit.cli.demo_cmd as demo

    real_run = demo._Tour.run
    plotted: list[list[str]] = []

    def figure_steps_only(self, args, *, save_stdout=None, expect=(0,)):
        if "--plot" not in args:
            if save_stdout is not None:
                save_stdout.write_text("", encoding="utf-8")
            return expect[0]
        plotted.append(list(args))
        return real_run(self, args, save_stdout=save_stdout, expect=expect)

    monkeypatch.setattr(demo._Tour, "run", figure_steps_only)
    monkeypatch.setattr(demo, "_summarise_measurements", lambda jsonl: None)
    out_dir = tmp_path / "demo"
    for _ in range(2):
        code, _, err = run_cli(["demo", "--out", str(out_dir)], capsys)
        assert code == 0, err
    assert len(plotted) == 2 and all("--overwrite" in a for a in plotted)
    (fig,) = out_dir.glob("*.svg")
    assert fig.stat().st_size > 0


# --- calibrate show and broken profile files ----------------------------------------------------

def test_calibrate_show_lists_readable_profiles_and_warns_per_broken_file(files, tmp_path, capsys):
    code, _, err = run_cli(["calibrate", "gain", str(files["good"]), "--rms", "0.35", "--profile", "desk"], capsys)
    assert code == 0, err
    folder = tmp_path / "config" / "profiles"
    (folder / "broken.toml").write_text("this is = = not toml\n", encoding="utf-8")
    (folder / "nameless.toml").write_text('name = "other"\n', encoding="utf-8")
    code, out, err = run_cli(["calibrate", "show"], capsys)
    assert code == 0
    assert "desk" in out
    warnings = err.splitlines()
    assert len(warnings) == 2 and all(w.startswith("warning: ") and " — " in w for w in warnings)
    assert "broken.toml: not valid TOML" in warnings[0] and "nameless.toml" in warnings[1]
    code, out, err = run_cli(["calibrate", "show", "--json"], capsys)
    assert code == 0 and [p["name"] for p in json.loads(out)["profiles"]] == ["desk"]
    assert len(json.loads(out)["problems"]) == 2
    (folder / "desk.toml").unlink()  # now no profile can be read
    code, out, err = run_cli(["calibrate", "show"], capsys)
    lines = err.splitlines()
    assert code == 2 and out == ""
    assert [ln.split(":")[0] for ln in lines] == ["warning", "warning", "error"]
    assert lines[-1].startswith(f"error: {folder}: none of the 2 profile file(s) can be read — ")


def test_calibrate_show_without_profiles_is_not_an_error(capsys):
    code, out, err = run_cli(["calibrate", "show"], capsys)
    assert code == 0 and err == "" and out.startswith("no calibration profiles in ")


def test_calibration_library_messages_end_in_a_fix():
    """The calibration functions give the same one-line form when called from Python."""
    from benchfit.capture.calibration import estimate_gain, estimate_timebase
    from benchfit.errors import MeasureError

    t = np.arange(FS // 2) / FS
    x = 0.5 * np.sin(2 * np.pi * 50 * t)
    with pytest.raises(MeasureError) as gain_err:
        estimate_gain(x, FS, -1.0, what="sine")
    # from Python the parameter is named (the command line says --rms: see the audit cases)
    assert str(gain_err.value) == ("rms_known_v: must be a positive voltage, got -1.0 — the meter's RMS reading "
                                   "in V, e.g. 0.775")
    with pytest.raises(MeasureError) as tb_err:
        estimate_timebase(x, FS, 30000.0, 0.0, what="sine")
    assert str(tb_err.value).startswith("reference_hz: 30000.0 Hz must be positive and below half the sample rate")
    assert str(tb_err.value).endswith(" — check reference_hz, or record at a higher sample rate (nominal_rate)")


def test_top_help_lists_the_live_commands_and_demo_on_one_line_each(capsys):
    """Their short help fits the command list at 80 columns: not wrapped, not cut with '...'."""
    code, out, _ = run_cli(["--help"], capsys)
    lines = out.splitlines()
    for name in ("devices", "record", "tune", "demo"):
        (i,) = [n for n, ln in enumerate(lines) if ln.split()[:1] == [name]]
        assert not lines[i].endswith("..."), lines[i]
        assert lines[i + 1].split()[0] not in ("", None) and not lines[i + 1].startswith(" " * 6), lines[i + 1]
