"""Errors name what the caller wrote: the fit library its parameters, the command line its flags.

A Python caller passed ``fix={...}`` and must read ``fix: …``; a shell user typed ``--fix`` and
must read ``--fix``. The library words its messages in Python terms and ``benchfit fit``
translates them (benchfit.cli.fit_cmd.flag_wording). Project convention, no outside source.
"""

from __future__ import annotations

import math
import re

import numpy as np
import pytest

from benchfit.capture.capture import Capture
from benchfit.cli.fit_cmd import flag_wording
from benchfit.errors import FitError
from benchfit.fit.lowpass import fit_lowpass
from benchfit.fit.ringdown import fit_ringdown
from benchfit.model.filter import LowpassParts, simulate

from capture_csv import write_capture_csv

FS = 20000.0
FLAG = re.compile(r"(^|[\s(])--[a-z]")


def _two_channel() -> Capture:
    t = np.arange(int(0.5 * FS)) / FS
    drive = 12.0 * (((t * 50.0) % 1.0) < 0.5)
    out = simulate(drive, FS, LowpassParts(0.3, 33e-6, 20.0, 1.5, 10e3))
    rng = np.random.default_rng(3)
    return Capture(np.vstack([drive + rng.normal(0, 5e-3, t.size), out + rng.normal(0, 2e-3, t.size)]), FS,
                   ("drive", "output"), ("V", "V"), source="hc03.csv")


def _ringing() -> Capture:
    t = np.arange(int(1.0 * FS)) / FS
    y = simulate(5.0 * (((t * 10.0) % 1.0) < 0.5), FS, LowpassParts(0.1, 1e-6, 20.0, 0.0, math.inf))
    y = y + np.random.default_rng(5).normal(0.0, 2e-3, t.size)
    return Capture(y[None, :], FS, ("output",), ("V",), source="ring.wav")


@pytest.mark.parametrize("call,library,cli", [
    (lambda: fit_lowpass(_two_channel(), fix={"l": 0.3}),
     "fix: unknown part 'l'", "--fix: unknown part 'l'"),
    (lambda: fit_lowpass(_two_channel(), guess={"C": -1.0}),
     "guess: C must be a finite, positive value in F, not -1.0", "--guess: C must be"),
    (lambda: fit_lowpass(_two_channel(), drive_duty=1.5),
     "pass e.g. drive_duty=0.5", "pass e.g. --drive-duty 0.5"),
    (lambda: fit_lowpass(_two_channel(), drive="output", response="output"),
     "pass different channels as drive= and response=", "pass different channels as --drive and --response"),
    (lambda: fit_lowpass(Capture(np.zeros((1, 100)) + 1.0, FS, ("output",), ("V",), source="one.wav"),
                         method="two-channel"),
     "use method='one-channel'", "use --method one-channel"),
    (lambda: fit_ringdown(_ringing(), fix={"Rs": 20.0}),
     "pass only fix={'L': …} or fix={'C': …}", "pass only --fix L=… or --fix C=…"),
    # a fixed value the parser cannot read was a bare ValueError; now a FitError naming the part
    (lambda: fit_lowpass(_two_channel(), fix={"L": "abc"}),
     "fix: L: 'abc' is not a number", "--fix: L: 'abc' is not a number"),
    (lambda: fit_ringdown(_ringing(), fix={"L": {"val": 0.1}}),
     "fix: L: {'val': 0.1} is not a value", "--fix: L: {'val': 0.1} is not a value"),
])
def test_library_names_parameters_and_the_cli_says_flags(call, library, cli):
    with pytest.raises(FitError) as err:
        call()
    msg = str(err.value)
    assert library in msg and not FLAG.search(msg), msg
    assert cli in flag_wording(msg)


def test_flag_wording_leaves_other_text_alone():
    msg = "hc03.csv: the drive has fewer than two harmonics above the noise — check the drive channel"
    assert flag_wording(msg) == msg
    assert flag_wording("fix: unknown part 'x'") == "--fix: unknown part 'x'"
    assert flag_wording("x: use time_domain=True, or use fit_ringdown()") == "x: use --time-domain, or use --model ringdown"


def _cli(capsys, monkeypatch, *args: str) -> tuple[int, str]:
    from benchfit.cli import main

    monkeypatch.setenv("COLUMNS", "120")
    try:
        main(list(args))
        code = 0
    except SystemExit as e:
        code = e.code if isinstance(e.code, int) else 1
    return code, capsys.readouterr().err


def test_cli_says_flags_for_library_errors(tmp_path, capsys, monkeypatch):
    ring = write_capture_csv(tmp_path / "ring.csv", _ringing())
    code, err = _cli(capsys, monkeypatch, "fit", str(ring), "--model", "ringdown", "--fix", "Rs=20")
    assert code == 2 and err.count("\n") == 1 and err.startswith("error: ")
    assert "--fix: a ring-down fit can use one known part" in err and "--fix L=… or --fix C=…" in err
    two = write_capture_csv(tmp_path / "two.csv", _two_channel())
    code, err = _cli(capsys, monkeypatch, "fit", str(two), "--drive", "output", "--response", "output")
    assert code == 2 and "pass different channels as --drive and --response" in err and "drive=" not in err
