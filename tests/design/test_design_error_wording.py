"""Design errors name what the caller wrote: parameters from Python, options at the command line.

Project convention, no outside source: the design package words its errors with its Python
parameters (``rs_ohm=``, ``diode=True``, ``fit_lowpass()``) and ``benchfit design`` says the
options (benchfit.cli.design_cmd._OptionNames).
"""

from __future__ import annotations

import re

import pytest

from benchfit.design.astable import design_astable
from benchfit.design.filter import design_filter
from benchfit.errors import DesignError

FLAG = re.compile(r"(^|[\s(])--[a-z]")


def test_library_names_parameters():
    with pytest.raises(DesignError) as err:
        design_filter(50.0, inductance=0.3, rs_ohm=0.0, esr_ohm=0.0, load_ohm=None)
    assert "give at least rs_ohm=" in str(err.value) and not FLAG.search(str(err.value))
    with pytest.raises(DesignError) as err:
        design_astable(50.0, 0.45)
    assert "use diode=True" in str(err.value) and not FLAG.search(str(err.value))


def _cli(capsys, *args: str) -> tuple[int, str]:
    from benchfit.cli import main

    try:
        main(list(args))
        code = 0
    except SystemExit as e:
        code = e.code if isinstance(e.code, int) else 1
    return code, capsys.readouterr().err


def test_the_command_says_options(capsys):
    code, err = _cli(capsys, "design", "filter", "--frequency", "50", "--inductance", "300m", "--rs", "0")
    assert code == 2 and err == ("error: filter: with no --rs, --esr or --load the circuit has no loss and its "
                                 "response at f0 is unbounded — give at least --rs (timer output and winding "
                                 "resistance)\n")
    code, err = _cli(capsys, "design", "astable", "--frequency", "50", "--duty", "0.45")
    assert code == 2 and err.startswith("error: --duty: 45 % is impossible") and "use --diode (diode across RB)" in err

