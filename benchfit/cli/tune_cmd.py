"""``benchfit tune``: a live frequency, duty and THD readout for adjusting a unit.

Only typer and the standard library are imported here at module level; numpy, sounddevice
and rich load inside the command.
"""

from __future__ import annotations

import math
from typing import Any, Optional

import typer

from benchfit.cli.app import app
from benchfit.cli.common import cli_words, fail, parse_value, print_json, stderr, stdout
from benchfit.cli.soundcard import CAUTION, device_arg, freq_text, live_console, whole_rate

__all__ = ["tune"]


def _duty_text(r) -> str | None:
    if r.duty_cycle_pct is None:
        return None
    u = r.duty_cycle_u_pct
    if u is None or not u > 0:
        return f"{r.duty_cycle_pct:.2f} %"
    d = min(4, max(1, 1 - math.floor(math.log10(u))))
    return f"{r.duty_cycle_pct:.{d}f} ± {u:.{d}f} %"


def _plain_line(t: float, r) -> str:
    duty = _duty_text(r) or "—"
    thd = f"{r.thd_pct:.2f} %" if r.thd_pct is not None else "—"
    return (f"t={t:8.2f} s  f = {freq_text(r.frequency_hz, r.frequency_u_hz)}  "
            f"Δ = {r.deviation_hz:+.4f} Hz ({r.deviation_ppm:+.0f} ppm)  duty {duty}  THD {thd}  "
            f"amplitude {r.amplitude:.4g} {r.unit} peak ({r.rms:.4g} {r.unit} rms)  level {r.peak_dbfs:.1f} dBFS  "
            f"| {r.hint}")


def _gauge(dev_hz: float, scale_hz: float, width: int = 41) -> str:
    """A text bar: the marker moves right when the unit runs fast, left when slow."""
    half = width // 2
    pos = half + int(round(max(-1.0, min(1.0, dev_hz / scale_hz)) * half))
    cells = ["─"] * width
    cells[half] = "┼"
    cells[pos] = "●"
    return "slow " + "".join(cells) + " fast"


def _panel(r, t: float, target: float, tolerance: float | None, n: int, dropped: int, overflows: int,
           window_s: float, hop_s: float, error: str | None):
    from rich.panel import Panel
    from rich.table import Table
    from rich.text import Text

    grid = Table.grid(padding=(0, 2))
    grid.add_column(justify="right", style="bold")
    grid.add_column()
    if r is None:
        grid.add_row("reading", Text(error or "waiting for the first full window …", style="yellow"))
    else:
        colour = {"on-target": "green", "within-tolerance": "yellow"}.get(r.status, "red")
        grid.add_row("frequency", Text(freq_text(r.frequency_hz, r.frequency_u_hz), style="bold"))
        grid.add_row("deviation", f"{r.deviation_hz:+.4f} Hz   {r.deviation_ppm:+.0f} ppm")
        scale = tolerance if tolerance else max(abs(r.deviation_hz), 0.01 * target)
        grid.add_row("", _gauge(r.deviation_hz, scale))
        grid.add_row("advice", Text(r.hint, style=colour))
        grid.add_row("duty cycle", _duty_text(r) or "— (not a two-level wave)")
        grid.add_row("THD", f"{r.thd_pct:.2f} %" if r.thd_pct is not None else "—")
        grid.add_row("amplitude", f"{r.amplitude:.4g} {r.unit} peak   {r.rms:.4g} {r.unit} rms")
        grid.add_row("input level", Text(f"{r.peak_dbfs:.1f} dBFS" + ("  CLIPPING" if r.clipped else ""),
                                         style="red" if r.clipped else ""))
        for w in r.warnings:
            grid.add_row("note", Text(cli_words(w), style="yellow"))
        if error:
            grid.add_row("note", Text(error, style="yellow"))
    grid.add_row("", "")
    grid.add_row("window", f"{window_s:g} s, new reading every {hop_s * 1000:.0f} ms; update {n}, "
                           f"{dropped} skipped, {overflows} overflow(s); t = {t:.2f} s")
    tol = f" ± {tolerance:g} Hz" if tolerance else ""
    return Panel(grid, title=f"tuning to {target:g} Hz{tol}", subtitle="Ctrl-C to stop", expand=False)


def _tune_channels(channel: int, device) -> int:
    """Channels ``tune`` opens: all of the device's inputs up to two, and at least ``channel``."""
    from benchfit.capture.devices import resolve_input_device

    return max(channel, min(2, resolve_input_device(device).input_channels))


@app.command(short_help="Live frequency, duty and THD readout for tuning a unit.",
             help=("Live readout for adjusting a unit: frequency (mHz resolution, with uncertainty), "
                   "deviation from the target in Hz and ppm with a plain-words hint, duty cycle, THD "
                   "and amplitude; several readings a second from overlapping windows. Ctrl-C stops."
                   "\n\nExample:\n\n\b\n  benchfit tune --target 50 --tolerance 0.25 --profile desk\n\n"
                   + CAUTION))
def tune(
    target: str = typer.Option(..., "--target", metavar="HZ", help="Frequency to tune to, in Hz (e.g. 50)."),
    window: float = typer.Option(1.0, "--window", metavar="SECONDS",
                                 help="Analysis window in s; longer is finer."),
    device: Optional[str] = typer.Option(None, "--device", metavar="DEVICE", help="Input device index or name."),
    profile: Optional[str] = typer.Option(None, "--profile", metavar="PROFILE",
                                          help="Calibration profile (gain, timebase)."),
    channel: int = typer.Option(1, "--channel", metavar="CH", min=1, help="Input channel, numbered from 1."),
    rate: float = typer.Option(48000, "--rate", metavar="HZ", help="Sample rate in Hz."),
    tolerance: Optional[str] = typer.Option(None, "--tolerance", metavar="HZ",
                                            help="Allowed deviation in Hz, e.g. 0.25."),
    harmonics: int = typer.Option(10, "--harmonics", metavar="N", min=1, max=100,
                                  help="Harmonics fitted; THD covers orders 2…N."),
    plain: bool = typer.Option(False, "--plain", help="One text line per reading instead of the live panel."),
    json_out: bool = typer.Option(False, "--json", help="One JSON object per reading (implies --plain)."),
    updates: Optional[int] = typer.Option(None, "--updates", metavar="N", min=1,
                                          help="Stop after N readings (default: run until Ctrl-C)."),
) -> None:
    from benchfit.capture.calibration import load_profile
    from benchfit.capture.live import LiveWindows
    from benchfit.errors import MeasureError
    from benchfit.measurement.tuning import analyse_window

    target_hz = parse_value(target, "--target")  # positive: parse_value refuses zero and below
    tol = parse_value(tolerance, "--tolerance") if tolerance is not None else None
    if not (math.isfinite(window) and window > 0):
        fail(f"--window: {window!r} must be a positive number of seconds — e.g. --window 1")
    if window * target_hz < 2:
        fail(f"--window: {window:g} s holds fewer than 2 cycles of {target_hz:g} Hz — use at least "
             f"{2 / target_hz:.3g} s")
    r = whole_rate(rate)
    if target_hz >= r / 2:
        fail(f"--target: {target_hz:g} Hz is not below half the sample rate ({r / 2:g} Hz) — raise --rate "
             "or check --target")
    prof = load_profile(profile) if profile else None
    gain = tau = None
    ppm = u_ppm = 0.0
    if prof is not None:
        g = prof.gain_of(channel)
        gain = g.v_per_fs if g else None
        if prof.timebase is not None:
            ppm, u_ppm = prof.timebase.ppm, prof.timebase.u_ppm
        if prof.coupling is not None:
            tau = prof.coupling.tau_s
    tb_note = None
    if u_ppm <= 0:  # no timebase calibration: the stated default, and say so (issue 11)
        from benchfit.uncertainty import DEFAULT_TIMEBASE_NOTE, DEFAULT_TIMEBASE_U_PPM

        u_ppm = DEFAULT_TIMEBASE_U_PPM
        tb_note = DEFAULT_TIMEBASE_NOTE
    fs_true = r * (1.0 + ppm * 1e-6)
    hop = min(window / 4.0, 0.25)
    plain = plain or json_out
    count = 0
    previous = None
    live_display = None
    try:
        # open every input (up to stereo) and analyse the one asked for: a one-channel stream would
        # have the sound server mix both inputs into it, and --channel 1 would hear channel 2 as well
        n_open = _tune_channels(channel, device_arg(device))
        with LiveWindows(rate=r, channels=n_open, window_s=window, hop_s=hop, device=device_arg(device)) as src:
            if tb_note:  # once the device is open, so a device error stays one line
                stderr.print(f"note: {tb_note}", markup=False, highlight=False, soft_wrap=True)
            if not plain:
                from rich.live import Live

                live_display = Live(_panel(None, 0.0, target_hz, tol, 0, 0, 0, window, hop, None),
                                    console=live_console(err=False),
                                    refresh_per_second=8, transient=False)
                live_display.start()
            for win in src:
                count += 1
                t = win.end_s
                reading, error = None, None
                try:
                    reading = analyse_window(win.samples[channel - 1], fs_true, target_hz, gain_v_per_fs=gain,
                                             timebase_u_ppm=u_ppm, coupling_tau_s=tau, n_harmonics=harmonics,
                                             tolerance_hz=tol, seed_hz=previous)
                    previous = reading.frequency_hz
                except MeasureError as e:
                    error = str(e)
                    previous = None
                if json_out:
                    rec: dict[str, Any] = {"update": count, "time_s": t, "overflow_count": win.overflow_count,
                                           "skipped": win.dropped}
                    rec.update(reading.to_dict() if reading else {"error": error})
                    print_json(rec)
                elif plain:
                    line = _plain_line(t, reading) if reading else f"t={t:8.2f} s  {error}"
                    stdout.print(line, markup=False, highlight=False, soft_wrap=True)
                else:
                    assert live_display is not None  # started above unless --plain
                    live_display.update(_panel(reading, t, target_hz, tol, count, win.dropped,
                                               win.overflow_count, window, hop, error))
                if updates is not None and count >= updates:
                    break
    except KeyboardInterrupt:
        pass  # Ctrl-C is the normal way to stop tuning
    finally:
        if live_display is not None:
            live_display.stop()

