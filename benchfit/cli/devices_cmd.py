"""``benchfit devices``: the audio inputs a recording can be made from.

Only typer and the standard library are imported here at module level; sounddevice and rich
load inside the command.
"""

from __future__ import annotations

from typing import Literal

import typer

from benchfit.cli.app import app
from benchfit.cli.common import print_json, stdout

__all__ = ["devices"]


@app.command(short_help="List the audio inputs: index, name, channels, default rate.", help=(
    "List audio input devices: index, name, input channels, default sample rate; * marks the "
    "default. Give the index or the name to --device of record, tune and calibrate.\n\n"
    "Example:\n\n\b\n  benchfit devices"))
def devices(json_out: bool = typer.Option(False, "--json", help="Print one JSON object (machine output).")) -> None:
    """List audio input devices (see the command's help)."""
    from benchfit.capture.devices import list_input_devices

    devs = list_input_devices()
    if json_out:
        print_json({"devices": [d.to_dict() for d in devs]})
        return
    if not devs:
        stdout.print("no audio input devices found — connect a sound card or start the sound server")
        return
    from rich.markup import escape
    from rich.table import Table

    table = Table(title="audio inputs", title_justify="left", box=None, pad_edge=False)
    columns: tuple[tuple[str, Literal["left", "right"]], ...] = (
        ("", "left"), ("index", "right"), ("name", "left"), ("host API", "left"), ("inputs", "right"),
        ("default rate", "right"))
    for col, just in columns:
        table.add_column(col, justify=just)
    for d in devs:
        table.add_row("*" if d.is_default else "", str(d.index), escape(d.name), escape(d.hostapi), str(d.input_channels),
                      f"{d.default_rate_hz:g} Hz")
    stdout.print(table)
    stdout.print("* = default input. Pick one with --device INDEX or --device NAME.")

