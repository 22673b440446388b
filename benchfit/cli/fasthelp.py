"""``benchfit --help`` without importing the command modules.

The top-level help lists each command's name and short help only, yet building it the usual way
imports (and, without cached bytecode, compiles) every command module and has typer inspect
every command's signature. For ``benchfit --help`` and ``benchfit -h`` the root group is built
from :mod:`benchfit.cli.app` alone (its options, the command groups and their short helps) and the
commands are listed from :data:`TOP_COMMANDS`, which ``tests/cli/test_fast_help.py`` checks against
the commands the modules register, so the two cannot drift apart. Every other invocation, and
any process that has the command modules imported already, takes the full path.
"""

from __future__ import annotations

from typing import Any

__all__ = ["TOP_COMMANDS", "is_top_help", "run_top_help"]

#: the top-level commands in registration order, with their short help (groups come from app.py)
TOP_COMMANDS: tuple[tuple[str, str], ...] = (
    ("measure", "Frequency, levels, duty cycle, edges and THD of capture files."),
    ("fit", "Back-solve effective L, C, Rs, ESR and load of an L-C low-pass."),
    ("devices", "List the audio inputs: index, name, channels, default rate."),
    ("record", "Record a sound-card input to WAV + sidecar JSON."),
    ("tune", "Live frequency, duty and THD readout for tuning a unit."),
    ("report", "Judge a built unit against its spec; write an HTML + JSON calibration record."),
    ("demo", "Run the whole job on the bundled sample captures."),
    ("drift", "Warm-up, drift and Allan deviation of a unit over a long run."),
)


def is_top_help(argv: list[str]) -> bool:
    """Whether ``argv`` asks for the top-level help and nothing else."""
    return len(argv) == 1 and argv[0] in ("--help", "-h")


def run_top_help(argv: list[str]) -> Any | None:
    """Print the top-level help from the table; the group's return code, or None when the
    commands are registered already (then the caller builds the full app as usual)."""
    import typer
    from typer.core import TyperCommand

    from benchfit.cli.app import app

    if app.registered_commands:
        return None
    group = typer.main.get_command(app)
    listed = {name: TyperCommand(name, short_help=short, rich_markup_mode=None) for name, short in TOP_COMMANDS}
    group.commands = {**listed, **group.commands}  # type: ignore[attr-defined]
    return group.main(args=argv, prog_name="benchfit", standalone_mode=False)
