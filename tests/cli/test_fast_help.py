"""`benchfit --help` from the table in benchfit/cli/fasthelp.py: the same text as the full app's.

The fast path lists the top-level commands from a table instead of importing every command
module; these tests fail when a command is added, renamed or re-worded without the table.
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]


def test_table_matches_the_registered_commands():
    import typer

    from benchfit.cli import get_app
    from benchfit.cli.fasthelp import TOP_COMMANDS

    group = typer.main.get_command(get_app())
    registered = [(name, cmd.short_help) for name, cmd in group.commands.items()  # type: ignore[attr-defined]
                  if not hasattr(cmd, "commands")]  # the groups' help comes from app.py itself
    # as a mapping: in this process another test may have imported a command module first, which
    # registers it earlier; the order is checked in a fresh process by the byte-identity test below
    assert dict(registered) == dict(TOP_COMMANDS)
    assert len(registered) == len(TOP_COMMANDS)


def _help(code: str) -> str:
    env = {**os.environ, "PYTHONPATH": str(ROOT), "COLUMNS": "100"}
    res = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env, check=False,
                         timeout=120)
    assert res.returncode == 0, res.stderr
    return res.stdout


def test_fast_help_is_the_full_help_and_loads_no_command_module():
    fast = _help("import sys\nfrom benchfit.cli import main\ntry:\n    main(['--help'])\nexcept SystemExit as e:\n"
                 "    assert e.code == 0\n"
                 "assert 'benchfit.cli.measure_cmd' not in sys.modules, 'a command module was loaded'\n")
    full = _help("from benchfit.cli import get_app, main\nget_app()\ntry:\n    main(['--help'])\n"
                 "except SystemExit as e:\n    assert e.code == 0\n")
    assert "Commands:" in full and "measure" in full
    assert fast == full
