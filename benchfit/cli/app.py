"""The typer application object and its command groups.

Command modules (``benchfit/cli/*_cmd.py``) register their commands on these objects.
They import only typer and the standard library at module level; numpy, scipy,
matplotlib and sounddevice are imported inside the command functions so that
``benchfit --help`` stays fast and works without PortAudio.
"""

from __future__ import annotations

import typer

app = typer.Typer(
    name="benchfit",
    help=("Bench tool for low-frequency signal sources and L-C filters: capture a waveform, "
          "measure it, back-solve the effective parts, and report and log a built unit."),
    no_args_is_help=True,
    add_completion=True,  # --install-completion / --show-completion for bash, zsh, fish, PowerShell
    pretty_exceptions_enable=False,
    rich_markup_mode=None,
    context_settings={"help_option_names": ["-h", "--help"]},
)

calibrate_app = typer.Typer(help="Sound-card calibration profiles (gain, timebase, input coupling).",
                            short_help="Sound-card calibration: gain, timebase, input coupling.",
                            no_args_is_help=True, rich_markup_mode=None)
log_app = typer.Typer(help="The measurement log: list, show, export runs and batch statistics.",
                      short_help="The measurement log: list, show, export, batch statistics.",
                      no_args_is_help=True, rich_markup_mode=None)
design_app = typer.Typer(help="Design and trim advice: timer parts, filter parts, combinations, trims.",
                         short_help="Timer and filter parts, part combinations, trim advice.",
                         no_args_is_help=True, rich_markup_mode=None)



def _print_version(value: bool) -> None:
    if value:
        from benchfit import __version__

        typer.echo(f"benchfit {__version__}")
        raise typer.Exit()


@app.callback()
def _root(version: bool = typer.Option(False, "--version", callback=_print_version, is_eager=True,
                                       help="Print benchfit's version and exit.")) -> None:
    pass


app.add_typer(calibrate_app, name="calibrate")
app.add_typer(log_app, name="log")
app.add_typer(design_app, name="design")
