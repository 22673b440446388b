"""Library messages name Python parameters; the command line says its options (one translator).

The computing packages are called from Python: their errors and warnings say what a caller
passes (``fix={'Rload': …}``, ``fix={'L': '…±10%'}``, ``overwrite=True``, ``log_path=``).
``benchfit.cli.common.cli_words`` turns that into the options a shell user types
(``--fix Rload=…``, ``--fix L=…±10%``, ``--overwrite``, ``--log``) for error lines and the
warnings printed on the terminal; ``--json`` output and reports keep the library's words (they
are the Python API's data). Project convention, no outside source.
"""

from __future__ import annotations

import json
import re
from pathlib import Path

import numpy as np
import pytest

from benchfit.capture.capture import Capture
from benchfit.cli.common import cli_words
from benchfit.errors import BenchfitError
from benchfit.fit.lowpass import fit_lowpass
from benchfit.fit.ringdown import fit_ringdown
from benchfit.model.filter import LowpassParts, simulate

from capture_csv import write_capture_csv

FS = 20000.0
#: a command-line option: two dashes and a letter after a space, a bracket or the start
FLAG = re.compile(r"(^|[\s(])--[a-z]")


def _settled_two_channel(units: tuple[str, str] = ("V", "V")) -> Capture:
    """Drive and output of a 300 mH / 33 µF / 20 Ω / 1.5 Ω / 10 kΩ filter, started after 0.5 s of settling."""
    n_settle, n = int(0.5 * FS), int(0.5 * FS)
    t = np.arange(n_settle + n) / FS
    drive = 12.0 * (((t * 50.0) % 1.0) < 0.5)
    out = simulate(drive, FS, LowpassParts(0.3, 33e-6, 20.0, 1.5, 10e3))
    rng = np.random.default_rng(4)
    return Capture(np.vstack([drive[n_settle:] + rng.normal(0, 5e-3, n), out[n_settle:] + rng.normal(0, 2e-3, n)]),
                   FS, ("drive", "output"), units, source="synthetic.csv")


def _ringing() -> Capture:
    t = np.arange(int(1.0 * FS)) / FS
    y = simulate(5.0 * (((t * 10.0) % 1.0) < 0.5), FS, LowpassParts(0.1, 1e-6, 20.0, 0.0, float("inf")))
    return Capture((y + np.random.default_rng(5).normal(0.0, 2e-3, t.size))[None, :], FS, ("output",), ("V",),
                   source="ring.wav")


@pytest.fixture(scope="module")
def fit_warnings() -> list[str]:
    """Warnings of representative fits: L fixed without a tolerance (two-channel, uncalibrated
    inputs, and ring-down) and nothing fixed (L and C not separately determined)."""
    out: list[str] = []
    out += fit_lowpass(_settled_two_channel(("FS", "FS")), fix={"L": 0.3}).warnings
    out += fit_lowpass(_settled_two_channel()).warnings
    out += fit_ringdown(_ringing(), fix={"L": 0.1}).warnings
    return out


@pytest.mark.parametrize("library,cli", [
    ("give the tolerance, e.g. fix={'L': '…±10%'}, to include it", "give the tolerance, e.g. --fix L=…±10%, to include it"),
    ("or fix Rload (fix={'Rload': …})", "or fix Rload (--fix Rload=…)"),
    ("measure L (or C) and pass fix={'L': …} (or fix={'C': …})", "measure L (or C) and pass --fix L=… (or --fix C=…)"),
])
def test_fit_warnings_name_parameters_and_the_cli_says_flags(fit_warnings, library, cli):
    hits = [w for w in fit_warnings if library in w]
    assert hits, fit_warnings
    assert all(cli in cli_words(w) and not FLAG.search(w) for w in hits)


def test_no_fit_warning_quotes_a_flag(fit_warnings):
    assert fit_warnings and not [w for w in fit_warnings if FLAG.search(w)]


def _error(call) -> str:
    with pytest.raises(BenchfitError) as err:
        call()
    return str(err.value)


def _not_a_log(tmp_path: Path) -> Path:
    p = tmp_path / "notes.sqlite"
    import sqlite3

    con = sqlite3.connect(p)
    con.execute("CREATE TABLE notes (x)")
    con.commit()
    con.close()
    return p


def _log_errors(tmp_path: Path) -> list[tuple[str, str, str]]:
    """(message, library words, command-line words) of real calls into benchfit.log."""
    from benchfit.log.export import export_log
    from benchfit.log.sqlite import connect
    from benchfit.log.store import sync_log, use_bench

    exists = tmp_path / "out.csv"
    exists.write_text("x\n")
    missing = tmp_path / "none.sqlite"
    foreign = _not_a_log(tmp_path)
    return [
        (_error(lambda: export_log(missing, "xml")), "fmt: 'xml' is unknown", "--format: 'xml' is unknown"),
        (_error(lambda: export_log(missing, "csv", exists)), "choose another out= or add overwrite=True",
         "choose another --out or add --overwrite"),
        (_error(lambda: connect(foreign)), "give another path with log_path= or BENCHFIT_LOG",
         "give another path with --log or BENCHFIT_LOG"),
        (_error(lambda: connect(missing, create=False)), "or give the right path with log_path=",
         "(or measure/fit with --log) first, or give the right path with --log"),
        (_error(lambda: sync_log(missing)), "sync_log() is for a server log (log_path='postgresql://…' or",
         "'benchfit log sync' is for a server log (--log postgresql://… or BENCHFIT_LOG)"),
        (_error(lambda: use_bench(" ")), "bench ' ': not a bench name", "--bench ' ': not a bench name"),
    ]


def test_log_errors_name_parameters_and_the_cli_says_flags(tmp_path):
    for msg, library, cli in _log_errors(tmp_path):
        assert library in msg and not FLAG.search(msg), msg
        assert cli in cli_words(msg), cli_words(msg)


@pytest.mark.parametrize("library,cli", [
    ("no timer parts were given (timer=TimerParts(ra=…, rb=…, c1=…)): the",
     "no timer parts were given (--ra, --rb, --c1): the"),
    ("without the bank's make-up (bank=) the", "without the bank's make-up (--bank) the"),
    ("add drift='RUN.json' (or the long capture)", "add --drift RUN.json (or the long capture)"),
    ("channel_map={'output': '2'}: a.wav already has", "--channel output=2: a.wav already has"),
    ("unit: the serial is empty — give the unit's serial, e.g. unit='HC-07'",
     "--unit: the serial is empty — give the unit's serial, e.g. --unit HC-07"),
    ("model: 'x' is unknown — use model='lc-lowpass' or model='ringdown'",
     "--model: 'x' is unknown — use --model lc-lowpass or --model ringdown"),
    ("not a pulse; force_pulse=True gives them anyway", "not a pulse; --pulse gives them anyway"),
    ("so the uncertainties are wide — raise harmonics= for tighter ones",
     "so the uncertainties are wide — raise --harmonics for tighter ones"),
    ("— use interval_s=1 (or a divisor of 1 s)", "— use --interval 1 (or a divisor of 1 s)"),
    ("state the channel's calibrated figure with gain_u_rel=", "state the channel's calibrated figure with --gain-u"),
    ("999 reports named x already exist — choose another out_dir", "999 reports named x already exist — choose another --out"),
])
def test_translator_maps_each_library_spelling(library, cli):
    # the library phrases of design/, report/, measurement/ (the calls that make them are
    # tested in those packages); each maps to the options of the command that shows it
    assert cli_words(library) == cli


def test_translator_leaves_command_line_words_and_prose_alone():
    for text in ("--fix: the value is empty — give a value after --fix=", "--fix L=300m±10%",
                 "choose another --out or add --overwrite", "the output is fixed — check the wiring",
                 "fit: the optimiser did not converge", "a unit of 10 V"):
        assert cli_words(text) == text
    once = cli_words("pass fix={'L': '…±10%'} or overwrite=True")
    assert cli_words(once) == once == "pass --fix L=…±10% or --overwrite"


def _cli(capsys, monkeypatch, *args: str) -> tuple[int, str, str]:
    from benchfit.cli import main

    monkeypatch.setenv("COLUMNS", "200")
    try:
        main(list(args))
        code = 0
    except SystemExit as e:
        code = e.code if isinstance(e.code, int) else 1
    res = capsys.readouterr()
    return code, res.out, res.err


def test_fit_terminal_says_flags_and_json_keeps_the_library_words(tmp_path, capsys, monkeypatch):
    f = write_capture_csv(tmp_path / "two.csv", _settled_two_channel())
    code, out, _ = _cli(capsys, monkeypatch, "fit", str(f), "--fix", "L=300m")
    assert code == 0 and "warning: L: fixed without a tolerance" in out
    assert "e.g. --fix L=…±10%, to include it" in out and "fix={" not in out
    code, out, _ = _cli(capsys, monkeypatch, "fit", str(f), "--fix", "L=300m", "--json")
    warnings = json.loads(out)["warnings"]
    assert code == 0 and any("e.g. fix={'L': '…±10%'}, to include it" in w for w in warnings)
    assert not [w for w in warnings if FLAG.search(w)]


def test_log_error_line_says_flags(tmp_path, capsys, monkeypatch):
    dest = tmp_path / "export.csv"
    dest.write_text("x\n")
    log = tmp_path / "log.sqlite"
    code, _, err = _cli(capsys, monkeypatch, "log", "export", "--log", str(log), "--format", "csv", "--out", str(dest))
    assert code == 2 and err.count("\n") == 1
    assert err.startswith(f"error: {dest}: file exists — choose another --out or add --overwrite"), err
    code, _, err = _cli(capsys, monkeypatch, "log", "list", "--log", str(_not_a_log(tmp_path)))
    assert code == 2 and "give another path with --log or BENCHFIT_LOG" in err and "log_path" not in err
