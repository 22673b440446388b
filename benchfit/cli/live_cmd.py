"""Sound-card commands: ``devices``, ``record``, ``tune`` and ``calibrate gain|timebase|coupling|show``.

Only typer and the standard library are imported here at module level; numpy, soundfile,
sounddevice and rich load inside the command functions.
"""

from __future__ import annotations

import math
import tempfile
from dataclasses import replace
from pathlib import Path
from typing import Optional

import typer

from benchfit.cli.app import app, calibrate_app
from benchfit.cli.common import fail, flag_words, parse_value, print_json, stderr, stdout
from benchfit.errors import MeasureError

__all__ = ["devices", "record", "tune", "calibrate_gain", "calibrate_timebase", "calibrate_coupling",
           "calibrate_distortion",
           "calibrate_show"]

CAUTION = (
    "Safety: a line input takes about 1-2 V peak. Feed it through a resistive divider "
    "(attenuator) and a DC-blocking capacitor; never connect mains or anything referenced "
    "to mains; mind ground loops between the unit's supply and the computer; inductors kick "
    "when their current is interrupted, so connect and disconnect with the unit switched off. "
    "Local codes and qualified practice take precedence."
)


def _console(err: bool):
    """A rich console for live displays (progress bar on stderr, tuning panel on stdout)."""
    from rich.console import Console

    return Console(stderr=err, highlight=False)


def _device(text: Optional[str]) -> str | int | None:
    if text is None or not text.strip():
        return None
    return int(text) if text.strip().isdigit() else text.strip()


def _seconds(value: float) -> float:
    if not (math.isfinite(value) and value > 0):
        fail(f"--seconds: {value!r} must be a positive number of seconds — e.g. --seconds 10")
    return value


def _rate(value: float) -> int:
    if not (math.isfinite(value) and value > 0 and float(value).is_integer()):
        fail(f"--rate: {value!r} must be a whole positive number of Hz — e.g. --rate 48000")
    return int(value)


# --------------------------------------------------------------------------------------
# devices
# --------------------------------------------------------------------------------------
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
    for col, just in (("", "left"), ("index", "right"), ("name", "left"), ("host API", "left"),
                      ("inputs", "right"), ("default rate", "right")):
        table.add_column(col, justify=just)
    for d in devs:
        table.add_row("*" if d.is_default else "", str(d.index), escape(d.name), escape(d.hostapi), str(d.input_channels),
                      f"{d.default_rate_hz:g} Hz")
    stdout.print(table)
    stdout.print("* = default input. Pick one with --device INDEX or --device NAME.")


# --------------------------------------------------------------------------------------
# record
# --------------------------------------------------------------------------------------
def _progress_recorder(out: Path, seconds: float, rate: int, channels: int, device, names, profile,
                       overwrite: bool, sample_format: str, quiet: bool = False):
    """Run benchfit.capture.live.record with a progress bar and live warnings on stderr."""
    import time

    from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn

    from benchfit.capture.live import record as do_record

    last_warn = {"clip": 0.0, "overflow": 0.0}

    def levels(peaks) -> str:
        return "  ".join(f"ch{i + 1} {p:6.1f} dBFS" if p > -150 else f"ch{i + 1}   -inf dBFS"
                         for i, p in enumerate(peaks))

    # the bar starts with the first block, so a refused device or file gives only its one error line
    progress = Progress(TextColumn("recording"), BarColumn(), TextColumn("{task.fields[secs]}"),
                        TimeElapsedColumn(), TextColumn("peak {task.fields[levels]}"),
                        console=_console(err=True), transient=False, disable=quiet)
    task = progress.add_task("rec", total=max(1, int(round(seconds * rate))), secs="",
                             levels=levels([-150.0] * channels))
    started: list[bool] = []

    def on_block(st) -> None:
        if not started:
            progress.start()
            started.append(True)
        progress.update(task, completed=st.frames_done, levels=levels(st.peak_dbfs),
                        secs=f"{st.elapsed_s:6.2f} / {seconds:g} s")
        now = time.monotonic()
        if st.new_clips and now - last_warn["clip"] >= 1.0:
            progress.console.print(f"warning: input clipping (≥ −0.1 dBFS): {st.clip_count} sample(s) "
                                   "so far — lower the input level", soft_wrap=True, markup=False)
            last_warn["clip"] = now
        if st.new_overflows and now - last_warn["overflow"] >= 1.0:
            progress.console.print(f"warning: input overflow reported by PortAudio: {st.overflow_count} "
                                   "so far — samples were lost; close other audio programs", soft_wrap=True, markup=False)
            last_warn["overflow"] = now

    try:
        return do_record(out, seconds, rate=rate, channels=channels, device=device, names=names,
                         profile=profile, overwrite=overwrite, on_block=on_block, sample_format=sample_format)
    finally:
        if started:
            progress.stop()


@app.command(short_help="Record a sound-card input to WAV + sidecar JSON.", help=(
    "Record a sound-card input into a WAV file and write its sidecar JSON (channel names, rate, "
    "device, start time, clip and overflow counts, calibration profile). Ctrl-C stops early and "
    "keeps everything captured so far (exit 130).\n\n"
    "Example:\n\n\b\n  benchfit record hc03.wav --seconds 10 --channels 2 \\\n"
    "      --names drive,output --profile desk\n\n" + CAUTION))
def record(
    out: Path = typer.Argument(..., metavar="FILE", show_default=False,
                               help="WAV file to write (its sidecar gets the same name with .json)."),
    seconds: float = typer.Option(..., "--seconds", metavar="SECONDS", help="How long to record, in seconds."),
    rate: float = typer.Option(48000, "--rate", metavar="HZ", help="Sample rate in Hz."),
    channels: int = typer.Option(1, "--channels", metavar="N", min=1, max=2, help="Input channels to record."),
    device: Optional[str] = typer.Option(None, "--device", metavar="DEVICE",
                                         help="Input device index or name (see 'benchfit devices')."),
    names: Optional[str] = typer.Option(None, "--names", metavar="NAMES",
                                        help="Channel names, comma-separated, e.g. drive,output."),
    profile: Optional[str] = typer.Option(None, "--profile", metavar="PROFILE",
                                          help="Calibration profile to note in the sidecar."),
    overwrite: bool = typer.Option(False, "--overwrite", help="Replace an existing WAV and sidecar."),
    sample_format: str = typer.Option("pcm24", "--sample-format", metavar="FORMAT",
                                      help="WAV samples: pcm24 or float."),
    json_out: bool = typer.Option(False, "--json", help="Print the result as one JSON object."),
) -> None:
    from benchfit.capture.live import RecordingInterrupted

    _seconds(seconds)
    r = _rate(rate)
    try:
        result = _progress_recorder(out, seconds, r, channels, _device(device), names, profile, overwrite,
                                    sample_format, quiet=json_out)
    except RecordingInterrupted as stop:
        res = stop.result
        stderr.print(f"stopped by Ctrl-C: saved {res.duration_s:.3f} s ({res.frames} frames) to {res.path} "
                     f"and {res.sidecar_path}", soft_wrap=True, markup=False)
        raise typer.Exit(130) from None
    _report_recording(result, json_out)


def _report_recording(result, json_out: bool) -> None:
    if json_out:
        print_json({"file": str(result.path), "sidecar": str(result.sidecar_path), "frames": result.frames,
                    "duration_s": result.duration_s, "sample_rate_hz": result.sample_rate,
                    "channels": list(result.channel_names), "device": result.device,
                    "start_utc": result.start_utc, "overflow_count": result.overflow_count,
                    "clip_count": result.clip_count, "peak_dbfs": list(result.peak_dbfs),
                    "calibration": result.calibration.to_dict(), "warnings": list(result.warnings)})
        return
    for w in result.warnings:
        stderr.print(f"warning: {w}", soft_wrap=True, markup=False)
    peaks = ", ".join(f"{n} {p:.1f} dBFS" for n, p in zip(result.channel_names, result.peak_dbfs))
    stdout.print(f"saved {result.path}: {result.duration_s:.3f} s, {len(result.channel_names)} ch at "
                 f"{result.sample_rate:g} Hz from {result.device!r}; peak {peaks}; "
                 f"{result.clip_count} clipped sample(s), {result.overflow_count} overflow(s); "
                 f"sidecar {result.sidecar_path}", soft_wrap=True, markup=False)


# --------------------------------------------------------------------------------------
# tune
# --------------------------------------------------------------------------------------
def _freq_text(f: float, u: float) -> str:
    """Frequency with at least mHz resolution and its standard uncertainty (2 significant digits)."""
    if not (u > 0):  # a noise-free (synthetic) signal: the fit leaves no residual
        return f"{f:.6f} ± <0.000001 Hz"
    d = max(3, 1 - math.floor(math.log10(u)))
    if d > 6:
        return f"{f:.6f} ± {u:.1e} Hz"
    return f"{f:.{d}f} ± {u:.{d}f} Hz"


def _ppm_text(ppm: float, u: float) -> str:
    """A ppm value rounded to two significant digits of its uncertainty."""
    d = 3 if not (u > 0) else min(9, max(0, 1 - math.floor(math.log10(u))))
    return f"{ppm:+.{d}f} ± {u:.{d}f} ppm"


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
    return (f"t={t:8.2f} s  f = {_freq_text(r.frequency_hz, r.frequency_u_hz)}  "
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
        grid.add_row("frequency", Text(_freq_text(r.frequency_hz, r.frequency_u_hz), style="bold"))
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
            grid.add_row("note", Text(w, style="yellow"))
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
    r = _rate(rate)
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
        n_open = _tune_channels(channel, _device(device))
        with LiveWindows(rate=r, channels=n_open, window_s=window, hop_s=hop, device=_device(device)) as src:
            if tb_note:  # once the device is open, so a device error stays one line
                stderr.print(f"note: {tb_note}", markup=False, highlight=False, soft_wrap=True)
            if not plain:
                from rich.live import Live

                live_display = Live(_panel(None, 0.0, target_hz, tol, 0, 0, 0, window, hop, None),
                                    console=_console(err=False),
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
                    rec = {"update": count, "time_s": t, "overflow_count": win.overflow_count,
                           "skipped": win.dropped}
                    rec.update(reading.to_dict() if reading else {"error": error})
                    print_json(rec)
                elif plain:
                    line = _plain_line(t, reading) if reading else f"t={t:8.2f} s  {error}"
                    stdout.print(line, markup=False, highlight=False, soft_wrap=True)
                else:
                    live_display.update(_panel(reading, t, target_hz, tol, count, win.dropped,
                                               win.overflow_count, window, hop, error))
                if updates is not None and count >= updates:
                    break
    except KeyboardInterrupt:
        pass  # Ctrl-C is the normal way to stop tuning
    finally:
        if live_display is not None:
            live_display.stop()


# --------------------------------------------------------------------------------------
# calibrate
# --------------------------------------------------------------------------------------
def _calibration_source(file: Optional[Path], do_record: bool, seconds: Optional[float], device: Optional[str],
                        rate: float, channels: int, tmp: str):
    """Samples for a calibration: from FILE, or recorded live into FILE (or a scratch file)."""
    from benchfit.capture.calibration import read_raw_wav

    if do_record:
        if seconds is None:
            fail("--seconds: missing — --record needs the recording length, e.g. --seconds 5")
        _seconds(seconds)
        target = file if file is not None else Path(tmp) / "calibration.wav"
        if file is not None and (file.exists() or file.suffix.lower() != ".wav"):
            # refused here rather than by the recorder, so that no caution precedes the error line
            fail(f"{file}: {'already exists' if file.exists() else 'recordings are WAV files'} — give a new "
                 "name ending in .wav, or leave FILE out to record into a scratch file")
        from benchfit.capture.devices import check_input

        r, dev = _rate(rate), _device(device)
        check_input(dev, float(r), channels)  # a missing or refusing device: its one error line only
        stderr.print(CAUTION, markup=False)  # then the cautions, before anything is connected and recorded
        _progress_recorder(target, seconds, r, channels, dev, None, None, overwrite=False, sample_format="float")
        return read_raw_wav(target), str(target) if file is not None else f"live recording ({seconds:g} s)"
    if file is None:
        fail("FILE: missing — give a recording to calibrate from, or use --record --seconds S")
    return read_raw_wav(file), str(file)


def _pick_channels(channel: Optional[str], names: tuple[str, ...], default_all: bool) -> list[int]:
    """0-based channel indices from --channel (name or 1-based number)."""
    if channel is None:
        return list(range(len(names))) if default_all else [0]
    lowered = [n.lower() for n in names]
    if channel.lower() in lowered:
        return [lowered.index(channel.lower())]
    if channel.strip().isdigit() and 1 <= int(channel) <= len(names):
        return [int(channel) - 1]
    fail(f"--channel {channel!r}: no such channel — choose one of {', '.join(names)} or 1…{len(names)}")


def _meter_u(text: Optional[str], rms_v: float) -> tuple[float, str]:
    """Standard uncertainty (V) of the meter reading from --rms-u, and how it was obtained.

    ``"0.3%"`` is a percentage of the reading, anything else a voltage with SI prefixes
    ("2m" = 2 mV). Without the option the documented default applies
    (:data:`benchfit.capture.calibration.DEFAULT_METER_HALF_WIDTH_REL`).
    """
    from benchfit.capture.calibration import DEFAULT_METER_HALF_WIDTH_REL, default_meter_u

    if text is None:
        return default_meter_u(rms_v), (f"not given: ±{100 * DEFAULT_METER_HALF_WIDTH_REL:g} % of the reading "
                                        "taken as a rectangular half-width (÷√3)")
    t = text.strip()
    if t.endswith("%"):
        pct = parse_value(t[:-1].strip(), "--rms-u", positive=True, allow_zero=True)
        if pct >= 100:
            fail(f"--rms-u: {text!r} is 100 % of the reading or more — give the meter's standard uncertainty, "
                 "e.g. 0.3%")
        return rms_v * pct / 100.0, f"{pct:g} % of the reading"
    u = parse_value(t, "--rms-u", positive=True, allow_zero=True)
    if u >= rms_v:
        fail(f"--rms-u: {text!r} V is not smaller than the reading {rms_v:g} V — give the meter's standard "
             "uncertainty in V (e.g. 2m) or in % of the reading (e.g. 0.3%)")
    return u, f"{u:g} V"


def _load_or_new(profile: str):
    from benchfit.capture.calibration import CalibrationProfile, check_profile_name, load_profile

    check_profile_name(profile)
    return load_profile(profile, missing_ok=True) or CalibrationProfile(name=profile)


_REC_HELP = "Record live from the sound card instead of reading FILE (needs --seconds)."


@calibrate_app.command("gain", short_help="Volts per full-scale unit per channel, from a sine of known RMS.", help=(
    "Store volts per full-scale unit for each channel: feed a sine whose RMS voltage you read on a "
    "meter, record it, and give that RMS. The stored relative standard uncertainty of the gain "
    "combines the sine fit with the meter reading's standard uncertainty (--rms-u) in quadrature; "
    "every level measured in volts then carries it.\n\n"
    "--rms-u is a standard uncertainty (k = 1): for a meter specified as ±a, give a/√3 "
    "(rectangular distribution); read a, including its digits term, from the meter's manual for "
    "the range and frequency used. Without --rms-u, ±0.5 % of the reading is assumed as such a "
    "half-width (0.29 % standard), about a 3½-digit handheld meter at 50–400 Hz; many handheld "
    "meters are not specified above a few hundred hertz.\n\n"
    "Example:\n\n\b\n  benchfit calibrate gain sine_775mV.wav --rms 0.775 --rms-u 0.3% \\\n"
    "      --profile desk\n\n" + CAUTION))
def calibrate_gain(
    file: Optional[Path] = typer.Argument(None, metavar="FILE", show_default=False,
                                          help="Recording of the reference sine (WAV/FLAC)."),
    rms: str = typer.Option(..., "--rms", metavar="V", help="RMS voltage of the sine from your meter, in V "
                            "(e.g. 775m)."),
    rms_u: Optional[str] = typer.Option(
        None, "--rms-u", metavar="V|PCT", help="Standard uncertainty of the meter reading: V (e.g. 2m) or % of the reading "
                              "(e.g. 0.3%); default ±0.5 % of the reading as a rectangular half-width."),
    profile: str = typer.Option(..., "--profile", metavar="PROFILE", help="Profile to create or update."),
    channel: Optional[str] = typer.Option(None, "--channel", metavar="CH",
                                          help="Only this channel (name or number); default all."),
    do_record: bool = typer.Option(False, "--record", help=_REC_HELP),
    seconds: Optional[float] = typer.Option(None, "--seconds", metavar="SECONDS",
                                            help="Recording length with --record (s)."),
    device: Optional[str] = typer.Option(None, "--device", metavar="DEVICE", help="Input device with --record."),
    rate: float = typer.Option(48000, "--rate", metavar="HZ", help="Sample rate with --record (Hz)."),
    channels: int = typer.Option(1, "--channels", metavar="N", min=1, max=2, help="Channels to record with --record."),
    json_out: bool = typer.Option(False, "--json", help="Print the stored values as one JSON object."),
) -> None:
    from benchfit.capture.calibration import (ChannelGain, combine_gain_u_rel, estimate_gain, save_profile,
                                              utc_now_iso)

    rms_v = parse_value(rms, "--rms")
    meter_u, meter_note = _meter_u(rms_u, rms_v)
    prof = _load_or_new(profile)
    with tempfile.TemporaryDirectory(prefix="benchfit-cal-") as tmp:
        (x, fs, names), source = _calibration_source(file, do_record, seconds, device, rate, channels, tmp)
    out = []
    when = utc_now_iso()
    for i in _pick_channels(channel, names, default_all=True):
        try:
            est = estimate_gain(x[i], fs, rms_v, what=f"{source} channel {i + 1} ({names[i]})")
            u_rel = combine_gain_u_rel(est.v_per_fs, est.u_v_per_fs, rms_v, meter_u)
        except MeasureError as err:  # the library names its parameters; say the options
            raise MeasureError(flag_words(str(err), {"rms_known_v": "--rms", "rms_u_v": "--rms-u"})) from None
        prof = prof.with_gain(ChannelGain(channel=i + 1, v_per_fs=est.v_per_fs, u_v_per_fs=est.u_v_per_fs,
                                          reference_rms_v=rms_v, source=source, measured_utc=when,
                                          reference_u_v=meter_u, gain_u_rel=u_rel))
        out.append((i, est, u_rel))
    path = save_profile(prof)
    if json_out:
        print_json({"profile": prof.name, "path": str(path), "reference_rms_v": rms_v, "reference_u_v": meter_u,
                    "reference_u_note": meter_note, "gains": [
            {"channel": i + 1, "name": names[i], "v_per_fs": e.v_per_fs, "u_v_per_fs": e.u_v_per_fs,
             "gain_u_rel": u, "rms_fs": e.rms_fs, "frequency_hz": e.frequency_hz,
             "residual_pct": e.residual_pct} for i, e, u in out]})
        return
    from benchfit.units import format_with_uncertainty

    stdout.print(f"meter reading {format_with_uncertainty(rms_v, meter_u, 'V')} rms (standard uncertainty "
                 f"{meter_note})", soft_wrap=True, markup=False)
    for i, e, u in out:
        stdout.print(f"channel {i + 1} ({names[i]}): {format_with_uncertainty(e.v_per_fs, u * e.v_per_fs, 'V/FS')} "
                     f"(u = {100 * u:.3g} % with the meter; fit alone {100 * e.u_v_per_fs / e.v_per_fs:.2g} %; "
                     f"sine {e.rms_fs:.5f} FS rms at {e.frequency_hz:.3f} Hz, {e.residual_pct:.2f} % not sine)",
                     soft_wrap=True, markup=False)
    stdout.print(f"saved to profile {prof.name!r} ({path})", soft_wrap=True, markup=False)


@calibrate_app.command("timebase", short_help="Sample-clock error in ppm, from a tone of trusted frequency.", help=(
    "Store the sample-clock error in ppm: feed a tone whose frequency you trust (counter or "
    "disciplined generator). Positive ppm = the card's clock runs fast; every capture made with "
    "the profile gets its sample rate and frequency uncertainty corrected at load time.""\n\nExample:\n\n\b\n  benchfit calibrate timebase ref_1kHz.wav --frequency 1000 --profile desk"
    "\n\n" + CAUTION))
def calibrate_timebase(
    file: Optional[Path] = typer.Argument(None, metavar="FILE", show_default=False,
                                          help="Recording of the reference tone (WAV/FLAC)."),
    frequency: str = typer.Option(..., "--frequency", metavar="HZ", help="True frequency of the tone in Hz (e.g. 1k)."),
    profile: str = typer.Option(..., "--profile", metavar="PROFILE", help="Profile to create or update."),
    frequency_u: Optional[str] = typer.Option(None, "--frequency-u", metavar="HZ",
                                              help="Standard uncertainty of the reference frequency, in Hz."),
    channel: Optional[str] = typer.Option(None, "--channel", metavar="CH",
                                          help="Channel carrying the tone; default the first."),
    do_record: bool = typer.Option(False, "--record", help=_REC_HELP),
    seconds: Optional[float] = typer.Option(None, "--seconds", metavar="SECONDS",
                                            help="Recording length with --record (s)."),
    device: Optional[str] = typer.Option(None, "--device", metavar="DEVICE", help="Input device with --record."),
    rate: float = typer.Option(48000, "--rate", metavar="HZ", help="Sample rate with --record (Hz)."),
    json_out: bool = typer.Option(False, "--json", help="Print the stored values as one JSON object."),
) -> None:
    from benchfit.capture.calibration import TimebaseCalibration, estimate_timebase, save_profile, utc_now_iso

    f_ref = parse_value(frequency, "--frequency")
    ref_note = None
    if frequency_u is not None:
        u_ref = parse_value(frequency_u, "--frequency-u")
    else:  # a reference is never perfect: without its stated u, the same crystal default applies
        from benchfit.uncertainty import DEFAULT_REFERENCE_HALF_WIDTH_PPM, standard_from_half_width

        u_ref = f_ref * 1e-6 * standard_from_half_width(DEFAULT_REFERENCE_HALF_WIDTH_PPM, "rectangular")
        ref_note = (f"--frequency-u not given: the reference is taken as ± {DEFAULT_REFERENCE_HALF_WIDTH_PPM:g} ppm "
                    f"(rectangular, u = {u_ref:.3g} Hz; an unspecified crystal, common practice, no source) — "
                    "give the counter's or generator's stated standard uncertainty with --frequency-u")
    prof = _load_or_new(profile)
    with tempfile.TemporaryDirectory(prefix="benchfit-cal-") as tmp:
        (x, fs, names), source = _calibration_source(file, do_record, seconds, device, rate, 1, tmp)
    i = _pick_channels(channel, names, default_all=False)[0]
    try:
        est = estimate_timebase(x[i], fs, f_ref, u_ref, what=f"{source} channel {i + 1} ({names[i]})")
    except MeasureError as e:  # the library names its parameters; say the options
        raise MeasureError(flag_words(str(e), {"reference_hz": "--frequency", "reference_u_hz": "--frequency-u", "nominal_rate": "--rate"})) from None
    prof = replace(prof, timebase=TimebaseCalibration(ppm=est.ppm, u_ppm=est.u_ppm, reference_hz=f_ref,
                                                      nominal_rate_hz=fs, source=source,
                                                      measured_utc=utc_now_iso()))
    path = save_profile(prof)
    if ref_note:
        stderr.print(f"note: {ref_note}", markup=False, highlight=False, soft_wrap=True)
    if json_out:
        print_json({"profile": prof.name, "path": str(path), "ppm": est.ppm, "u_ppm": est.u_ppm,
                    "measured_hz": est.measured_hz, "measured_u_hz": est.measured_u_hz,
                    "reference_hz": f_ref, "reference_u_hz": u_ref, "nominal_rate_hz": fs})
        return
    speed = "fast" if est.ppm > 0 else "slow"
    stdout.print(f"tone measured {_freq_text(est.measured_hz, est.measured_u_hz)} on the nominal {fs:g} Hz; "
                 f"sample clock error {_ppm_text(est.ppm, est.u_ppm)} (runs {speed}); "
                 f"true rate {fs * (1 + est.ppm * 1e-6):.4f} Hz", soft_wrap=True, markup=False)
    stdout.print(f"saved to profile {prof.name!r} ({path})", soft_wrap=True, markup=False)


@calibrate_app.command("coupling", short_help="Input high-pass time constant, from a low-frequency square wave.", help=(
    "Store the time constant of the input's high-pass (AC coupling) from the droop of a "
    "low-frequency square wave (5-20 Hz works well); pulse measurements then compensate it.""\n\nExample:\n\n\b\n  benchfit calibrate coupling square_10Hz.wav --profile desk" "\n\n" + CAUTION))
def calibrate_coupling(
    file: Optional[Path] = typer.Argument(None, metavar="FILE", show_default=False,
                                          help="Recording of a low-frequency square wave (WAV/FLAC)."),
    profile: str = typer.Option(..., "--profile", metavar="PROFILE", help="Profile to create or update."),
    channel: Optional[str] = typer.Option(None, "--channel", metavar="CH",
                                          help="Channel carrying the square; default the first."),
    do_record: bool = typer.Option(False, "--record", help=_REC_HELP),
    seconds: Optional[float] = typer.Option(None, "--seconds", metavar="SECONDS",
                                            help="Recording length with --record (s)."),
    device: Optional[str] = typer.Option(None, "--device", metavar="DEVICE", help="Input device with --record."),
    rate: float = typer.Option(48000, "--rate", metavar="HZ", help="Sample rate with --record (Hz)."),
    json_out: bool = typer.Option(False, "--json", help="Print the stored value as one JSON object."),
) -> None:
    from benchfit.capture.calibration import CouplingCalibration, estimate_coupling, save_profile, utc_now_iso

    prof = _load_or_new(profile)
    with tempfile.TemporaryDirectory(prefix="benchfit-cal-") as tmp:
        (x, fs, names), source = _calibration_source(file, do_record, seconds, device, rate, 1, tmp)
    i = _pick_channels(channel, names, default_all=False)[0]
    tau = estimate_coupling(x[i], fs, what=f"{source} channel {i + 1} ({names[i]})")
    prof = replace(prof, coupling=CouplingCalibration(tau_s=tau, channel=i + 1, source=source,
                                                      measured_utc=utc_now_iso()))
    path = save_profile(prof)
    if json_out:
        print_json({"profile": prof.name, "path": str(path), "coupling_tau_s": tau,
                    "corner_hz": 1.0 / (2 * math.pi * tau)})
        return
    stdout.print(f"input coupling time constant {tau * 1e3:.4g} ms (high-pass corner "
                 f"{1.0 / (2 * math.pi * tau):.4g} Hz) on channel {i + 1} ({names[i]})", soft_wrap=True, markup=False)
    stdout.print(f"saved to profile {prof.name!r} ({path})", soft_wrap=True, markup=False)


@calibrate_app.command("distortion", short_help="The card's own THD floor, from a loop or a clean sine.", help=(
    "Store the card's own distortion floor: loop the card's output to its input (or record a "
    "reference sine known to be much cleaner than the units) at about the level and frequency "
    "the units produce. Every THD measured with the profile then carries the floor as a "
    "budget row (± floor, rectangular) instead of treating the card as perfect."
    "\n\nExample:\n\n\b\n  benchfit calibrate distortion loop_50Hz.wav --profile desk" "\n\n" + CAUTION))
def calibrate_distortion(
    file: Optional[Path] = typer.Argument(None, metavar="FILE", show_default=False,
                                          help="Recording of the loop or reference sine (WAV/FLAC)."),
    profile: str = typer.Option(..., "--profile", metavar="PROFILE", help="Profile to create or update."),
    channel: Optional[str] = typer.Option(None, "--channel", metavar="CH",
                                          help="Channel carrying the sine; default the first."),
    harmonics: int = typer.Option(10, "--harmonics", metavar="H", min=2, max=100,
                                  help="Highest harmonic order (THD over 2…H)."),
    do_record: bool = typer.Option(False, "--record", help=_REC_HELP),
    seconds: Optional[float] = typer.Option(None, "--seconds", metavar="SECONDS",
                                            help="Recording length with --record (s)."),
    device: Optional[str] = typer.Option(None, "--device", metavar="DEVICE", help="Input device with --record."),
    rate: float = typer.Option(48000, "--rate", metavar="HZ", help="Sample rate with --record (Hz)."),
    json_out: bool = typer.Option(False, "--json", help="Print the stored value as one JSON object."),
) -> None:
    from benchfit.capture.calibration import DistortionCalibration, save_profile, utc_now_iso
    from benchfit.measurement.calibration import estimate_distortion_floor

    prof = _load_or_new(profile)
    with tempfile.TemporaryDirectory(prefix="benchfit-cal-") as tmp:
        (x, fs, names), source = _calibration_source(file, do_record, seconds, device, rate, 1, tmp)
    i = _pick_channels(channel, names, default_all=False)[0]
    est = estimate_distortion_floor(x[i], fs, harmonics, what=f"{source} channel {i + 1} ({names[i]})")
    prof = replace(prof, distortion=DistortionCalibration(
        floor_pct=est.floor_pct, u_pct=est.u_pct, frequency_hz=est.frequency_hz, level_fs=est.level_fs,
        harmonics=harmonics, channel=i + 1, source=source, measured_utc=utc_now_iso()))
    path = save_profile(prof)
    if json_out:
        print_json({"profile": prof.name, "path": str(path), "floor_pct": est.floor_pct, "u_pct": est.u_pct,
                    "frequency_hz": est.frequency_hz, "level_fs": est.level_fs, "harmonics": harmonics})
        return
    stdout.print(f"card distortion floor THD {est.floor_pct:.3g} % ± {est.u_pct:.2g} % (harmonics 2…{harmonics}) at "
                 f"{est.frequency_hz:.5g} Hz, {est.level_fs:.3g} FS peak, channel {i + 1} ({names[i]})",
                 soft_wrap=True, markup=False)
    stdout.print(f"saved to profile {prof.name!r} ({path})", soft_wrap=True, markup=False)


@calibrate_app.command("show", short_help="List calibration profiles and what each holds.", help=(
    "List calibration profiles and what each holds (gain per channel, clock error, coupling). "
    "A profile file that cannot be read gets one warning line; the others are still listed."
    "\n\nExamples:\n\n\b\n  benchfit calibrate show\n  benchfit calibrate show desk"))
def calibrate_show(
    name: Optional[str] = typer.Argument(None, metavar="PROFILE", show_default=False,
                                         help="Show only this profile."),
    json_out: bool = typer.Option(False, "--json", help="Print one JSON object."),
) -> None:
    """List calibration profiles (see the command's help)."""
    from benchfit.capture.calibration import config_dir, load_profile, scan_profiles

    profiles, problems = ([load_profile(name)], []) if name else scan_profiles()
    folder = config_dir() / "profiles"
    for line in problems:  # a broken file does not hide the readable profiles
        stderr.print(f"warning: {line}", markup=False, highlight=False, soft_wrap=True)
    if problems and not profiles:
        fail(f"{folder}: none of the {len(problems)} profile file(s) can be read — fix or delete them "
             "(see the warnings above), or create a profile with 'benchfit calibrate gain|timebase|"
             "coupling FILE --profile NAME'")
    if json_out:
        print_json({"folder": str(folder), "profiles": [p.to_toml_dict() for p in profiles],
                    "problems": problems})
        return
    if not profiles:
        stdout.print(f"no calibration profiles in {folder} — create one with 'benchfit calibrate gain|timebase|"
                     "coupling FILE --profile NAME'", markup=False)
        return
    from rich.markup import escape
    from rich.table import Table

    from benchfit.units import format_with_uncertainty

    table = Table(title=escape(f"calibration profiles ({folder})"), title_justify="left", box=None, pad_edge=False)
    with_dist = any(p.distortion for p in profiles)  # the column only when some profile has it
    for col in ("profile", "gain (V/FS)", "sample clock", "input coupling τ") + (("THD floor",) if with_dist else ()):
        table.add_column(col)
    for p in profiles:
        gains = "\n".join(_gain_text(g, format_with_uncertainty) for g in p.gains) or "—"
        tb = _ppm_text(p.timebase.ppm, p.timebase.u_ppm) if p.timebase else "—"
        cp = (f"{p.coupling.tau_s * 1e3:.4g} ms" if p.coupling else "—")
        dist = (f"{p.distortion.floor_pct:.3g} %" if p.distortion else "—",) if with_dist else ()
        table.add_row(escape(p.name), gains, tb, cp, *dist)
    stdout.print(table)


def _gain_text(g, format_with_uncertainty) -> str:
    """One profile gain for ``calibrate show``: with the combined uncertainty when it is known."""
    if g.gain_u_rel is None:
        return (f"ch{g.channel}: {format_with_uncertainty(g.v_per_fs, g.u_v_per_fs)} (fit only; "
                "gain uncertainty not known — calibrate again with --rms-u)")
    return (f"ch{g.channel}: {format_with_uncertainty(g.v_per_fs, g.gain_u_rel * g.v_per_fs)} "
            f"(u = {100 * g.gain_u_rel:.3g} %)")
