"""``benchfit measure``: frequency, levels, pulse parameters and distortion of capture files.

The per-file work is the top-level function :func:`measure_file` (path and options in, a
plain dict out) so that it can be sent to a process pool. Only typer and the standard
library are imported at module level.
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import Any, List, Optional

import typer

from benchfit.cli.app import app

__all__ = ["measure_file", "measure_command", "render_channel_rows"]

_EXAMPLE = """

Examples:

benchfit measure HC-03_as-left.wav

benchfit measure HC-*.wav --channel output --json > batch.jsonl

benchfit measure scope_export.csv --sample-rate 100k --harmonics 20

Uncertainties are standard uncertainties (k = 1). THD is relative to the fundamental over
harmonics 2…H (H = --harmonics, default 10, or the highest order below Nyquist); THD+N
takes everything except DC and the fundamental, over the full bandwidth up to Nyquist;
SINAD = −20·log10(THD+N).

Safety: a sound-card input takes only small signals (about 1 V). Bring a 12 V source to it
through a resistive divider and a series capacitor, share ground with the computer only
where that is safe, and keep mains-connected circuits away from it. Follow local codes and
qualified practice for anything connected to mains.
"""


def measure_file(path: str | Path, *, channels: list[str] | None = None, harmonics: int = 10,
                 sample_rate: float | None = None) -> dict[str, Any]:
    """Load one capture file and measure it.

    Parameters
    ----------
    path : str or Path
        Capture file (WAV, FLAC or CSV; an audio file's sidecar JSON is applied).
    channels : list of str, optional
        Channel names or 1-based numbers to measure (default: all).
    harmonics : int
        Highest harmonic order H (THD over 2…H).
    sample_rate : float, optional
        Sample rate (Hz) for a CSV without a time column.

    Returns
    -------
    dict
        ``Measurement.to_dict(full=True)``: the JSON contract plus each channel's ``extra``.
    """
    from benchfit.capture.load import load
    from benchfit.measurement.summary import measure

    cap = load(path, sample_rate=sample_rate)
    result = measure(cap, harmonics=harmonics, channels=list(channels) if channels else None)
    return result.to_dict(full=True)


def _contract(d: dict[str, Any]) -> dict[str, Any]:
    """The JSON contract only: drop each channel's ``extra``."""
    out = dict(d)
    out["channels"] = [{k: v for k, v in c.items() if k != "extra"} for c in d["channels"]]
    return out


# --- human output ------------------------------------------------------------------------

def _with_u(value: float, u: float, unit: str) -> str:
    """``value ± u unit`` rounded to u's second significant digit, or compact when u is tiny."""
    from benchfit.units import format_quantity, format_with_uncertainty

    dec = 1 - int(math.floor(math.log10(u)))
    if u < 1e-7 * abs(value) or (unit in ("FS", "%") and dec > 6):
        # more digits than anyone can use: the value to 8 digits, the uncertainty apart
        if unit in ("FS", "%"):
            return f"{value:.8g} {unit} ± {u:.2g} {unit}"
        return f"{format_quantity(value, unit, 8)} ± {format_quantity(u, unit, 2)}"
    if unit in ("FS", "%"):
        dec = max(0, dec)
        return f"{value:.{dec}f} ± {u:.{dec}f} {unit}"
    return format_with_uncertainty(value, u, unit)


def _num(value: float | None, unit: str, u: float | None = None) -> str:
    """A value with its unit and, when given, its standard uncertainty."""
    from benchfit.units import format_quantity

    if value is None or not math.isfinite(value):
        return "—"
    if u is not None and math.isfinite(u) and u > 0:
        return _with_u(value, u, unit)
    if unit in ("FS", "%"):  # full-scale units and percentages read best without SI prefixes
        return f"{value:.5g} {unit}"
    return format_quantity(value, unit, 5)


def _pct(value: float | None, u: float | None = None) -> str:
    return _num(value, "%", u)


def render_channel_rows(ch: dict[str, Any]) -> list[tuple[str, str, str]]:
    """(quantity, value, how) rows for one channel of a ``to_dict(full=True)`` result."""
    ex = ch.get("extra") or {}
    unit = ch["unit"]
    h = ex.get("harmonics_h")
    rows = [
        ("frequency", _num(ch["frequency_hz"], "Hz", ch["frequency_u_hz"]),
         "edges (IEEE 181 period)" if str(ex.get("frequency_method", "")).startswith("edge")
         else "fit of harmonics 1…H"),
        ("fundamental amplitude", _num(ch["amplitude"], unit, ex.get("amplitude_u")), "peak"),
        ("DC level", _num(ch["vdc"], unit, ex.get("vdc_u") if ch["frequency_hz"] else None),
         "mean over whole periods"),
        ("rms level", _num(ch["vrms"], unit, ex.get("vrms_u") if ch["frequency_hz"] else None),
         "incl. DC"),
        ("peak-to-peak", _num(ch["vpp"], unit), "0.1–99.9 % percentiles"),
    ]
    if ex.get("two_level"):
        rows += [
            ("low / high state", f"{_num(ex.get('state_low'), unit)} / {_num(ex.get('state_high'), unit)}",
             "histogram modes"),
            ("duty cycle", _pct(ch["duty_cycle_pct"], ex.get("duty_cycle_u_pct")),
             f"high/period, {ex.get('pulse_periods', 0)} periods"),
            ("rise time 10–90 %", _num(ch["rise_time_s"], "s", ex.get("rise_time_u_s")), "mean of edges"),
            ("fall time 90–10 %", _num(ch["fall_time_s"], "s", ex.get("fall_time_u_s")), "mean of edges"),
            ("overshoot / undershoot",
             f"{_pct(ex.get('overshoot_pct'))} / {_pct(ex.get('undershoot_pct'))}", "of amplitude"),
        ]
        if ex.get("coupling_tau_s"):
            droop = ex.get("droop_pct")
            note = f"droop {droop:.2g} % compensated" if droop else "droop compensated"
            rows.append(("input coupling τ", _num(ex["coupling_tau_s"], "s"),
                         f"{ex.get('coupling_source')}; {note}"))
    if ch["frequency_hz"] is not None:
        rows += [
            ("THD", _pct(ch["thd_pct"], ex.get("thd_u_pct")), f"harmonics 2…{h}"),
            ("THD+N", _pct(ch["thd_n_pct"]), "to Nyquist"),
            ("SINAD", "—" if ch["sinad_db"] is None else f"{ch['sinad_db']:.2f} dB", "−20·log10(THD+N)"),
        ]
    return rows


def _render(d: dict[str, Any], console) -> None:
    from rich.markup import escape
    from rich.table import Table

    console.print(f"[bold]{escape(d['file'])}[/]  {d['sample_rate_hz']:g} Hz sample rate, "
                  f"{d['duration_s']:.4g} s", markup=True, highlight=False)
    for ch in d["channels"]:
        table = Table(title=escape(f"channel {ch['name']} ({ch['unit']})"), title_justify="left",
                      caption="± values are standard uncertainties (k = 1)", caption_justify="left",
                      show_header=True, header_style="bold", box=None, pad_edge=False)
        table.add_column("quantity", no_wrap=True)
        table.add_column("value", justify="right", no_wrap=True)
        table.add_column("how")
        for q, v, how in render_channel_rows(ch):
            table.add_row(q, v, how)
        console.print(table)
        if len(ch["harmonics"]) > 1:
            a1 = ch["harmonics"][0]["amplitude"]
            ht = Table(title="harmonics", title_justify="left", box=None, pad_edge=False,
                       header_style="bold")
            for col in ("order", "frequency", "amplitude (peak)", "rel. fundamental", "phase"):
                ht.add_column(col, justify="right")
            for hm in ch["harmonics"]:
                rel = hm["amplitude"] / a1 if a1 else float("nan")
                rel_txt = f"{20 * math.log10(rel):.1f} dB" if rel > 0 else "—"
                ht.add_row(str(hm["order"]), _num(hm["frequency_hz"], "Hz"),
                           _num(hm["amplitude"], ch["unit"]), rel_txt, f"{hm['phase_deg']:.1f}°")
            console.print(ht)
        for w in ch["warnings"]:
            console.print(f"[yellow]warning:[/] {escape(w)}", markup=True, highlight=False)
        console.print()


@app.command("measure", help="Measure frequency, levels, duty cycle, edges and distortion of capture files."
             + _EXAMPLE)
def measure_command(
    files: List[Path] = typer.Argument(..., help="Capture file(s): WAV, FLAC or CSV.", show_default=False),
    channel: Optional[List[str]] = typer.Option(
        None, "--channel", "-c", help="Channel name or 1-based number to measure (repeatable; default all)."),
    as_json: bool = typer.Option(False, "--json",
                                 help="Print one JSON object per file (one line each) instead of tables."),
    harmonics: int = typer.Option(10, "--harmonics", min=1,
                                  help="Highest harmonic order H: THD over harmonics 2…H (default 10), "
                                       "limited to orders below Nyquist."),
    sample_rate: Optional[str] = typer.Option(
        None, "--sample-rate", help="Sample rate for a CSV without a time column, e.g. 48000 or 100k (Hz)."),
) -> None:
    from benchfit.cli.common import fail, parse_value, print_json, stdout
    from benchfit.errors import BenchfitError

    rate = parse_value(sample_rate, "--sample-rate") if sample_rate is not None else None
    opts = {"channels": channel or None, "harmonics": harmonics, "sample_rate": rate}
    if len(files) == 1:
        d = measure_file(files[0], **opts)
        if as_json:
            print_json(_contract(d))
        else:
            _render(d, stdout)
        return

    from rich.console import Console
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn

    err_console = Console(stderr=True, highlight=False)
    errors: list[str] = []
    with Progress(TextColumn("measuring"), BarColumn(), MofNCompleteColumn(), TimeElapsedColumn(),
                  TextColumn("{task.description}"), console=err_console, transient=True) as progress:
        task = progress.add_task("", total=len(files))
        for path in files:
            progress.update(task, description=str(path.name))
            try:
                d = measure_file(path, **opts)
            except BenchfitError as e:
                errors.append(str(e))
                err_console.print(f"error: {e}", markup=False)
                progress.advance(task)
                continue
            if as_json:
                print_json(_contract(d))
            else:
                _render(d, stdout)
            progress.advance(task)
    if errors:
        fail(f"{len(errors)} of {len(files)} files could not be measured — see the messages above")
