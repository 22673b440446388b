"""Shared fixture of the command-line tests: run benchfit's entry point in this process."""

from __future__ import annotations

import pytest


from clirun import CliResult


@pytest.fixture
def run(capsys, monkeypatch):
    """benchfit.cli.main in this process (faster than a subprocess), wide terminal."""
    from benchfit.cli import main

    monkeypatch.setenv("COLUMNS", "200")

    def _run(*args: str) -> CliResult:
        code = 0
        try:
            main(list(args))
        except SystemExit as e:
            code = e.code if isinstance(e.code, int) else (0 if e.code is None else 1)
        out, err = capsys.readouterr()
        return CliResult(code, out, err)

    return _run
