"""``benchfit drift``: warm-up, drift and stability of a unit over a long run (file or line-in).

Only typer and the standard library at module level; numpy, soundfile, sounddevice and
allantools load inside the command.
"""

from __future__ import annotations

import io
import math
import os
import sys
import time
from pathlib import Path
from typing import TYPE_CHECKING, Any, Optional

import typer

from benchfit.cli.app import app
from benchfit.cli.common import cli_words, command_flags, fail, flag_words, print_json, stderr, stdout

if TYPE_CHECKING:
    from benchfit.log.store import LogTarget

__all__ = ["drift_command", "render_summary"]

_HELP = (
    "Measure every interval of a long run — frequency ± u, level, THD, duty cycle where the wave is "
    "two-level — and the run's stability: overlapping Allan deviation of the fractional frequency "
    "(τ = 1 interval … 1/4 of the run), drift rate in ppm/h, warm-up time, level drift in %/h and "
    "THD range. Frequencies come from phase-continuous fits (phases chained across intervals), and "
    "the estimator's own white-noise floor is stated beside the Allan deviation.\n\n"
    "From a file (WAV, FLAC or CSV, read in blocks: constant memory for any length), or from the "
    "line-in without FILE (--seconds, or until Ctrl-C, which stops cleanly and keeps everything).\n\n"
    "Examples:\n\n\b\n"
    "  benchfit drift sample_captures/hc08_warmup.flac\n"
    "  benchfit drift --device 2 --profile desk --seconds 3600 \\\n"
    "      --keep hc08_run.wav --unit HC-08 --log-default\n"
    "  benchfit drift hc08_run.wav --json > hc08_drift.json\n\n"
    "Safety: a line input takes about 1-2 V peak. Feed it through a resistive divider and a "
    "DC-blocking capacitor; never connect mains or anything referenced to mains; a unit left "
    "running for hours belongs on a supply with a current limit. Local codes and qualified practice "
    "take precedence."
)


def _interval(text: str) -> float:
    from benchfit.units import parse_quantity

    try:
        value = parse_quantity(text, "--interval", unit="s", positive=True, allow_zero=False)
    except ValueError as e:
        fail(f"--interval {text!r}: not a duration ({e}) — give seconds, e.g. --interval 1s or 500ms")
    if not (math.isfinite(value) and value > 0):
        fail(f"--interval {text!r}: must be a positive duration — e.g. --interval 1s")
    return value


def _fmt_f(f: float | None, u: float | None) -> str:
    from benchfit.units import format_quantity

    if f is None:
        return "no tone"
    if u is None or not (u > 0):
        return f"{f:.6f} Hz"
    dec = max(0, min(9, 1 - int(math.floor(math.log10(u)))))
    return f"{f:.{dec}f} Hz ± {format_quantity(u, 'Hz', 2)}"


def _readout(r, unit: str, done_s: float, total_s: float | None) -> str:
    amp = "—" if r.amplitude is None else f"{r.amplitude:.5g} {unit}"
    thd = "—" if r.thd_pct is None else f"{r.thd_pct:.3g} %"
    duty = "" if r.duty_cycle_pct is None else f"  duty {r.duty_cycle_pct:.2f} %"
    prog = f"{done_s:.0f}/{total_s:.0f} s" if total_s else f"{done_s:.0f} s"
    return f"#{r.index + 1:<5d} t={r.t_mid_s:8.1f} s  {_fmt_f(r.frequency_hz, r.frequency_u_hz)}  amp {amp}  THD {thd}{duty}  [{prog}]"


class _Readout:
    """The live one-line readout on stderr: rewritten in place on a terminal, one line per interval
    when live input goes to a pipe or file, and only a final count for a file run off a terminal."""

    def __init__(self, enabled: bool, live: bool, total_s: float | None, interval_s: float) -> None:
        self.tty = sys.stderr.isatty()
        self.enabled = enabled and (self.tty or live)
        self.total_s = total_s
        self.interval_s = interval_s
        self.last = 0.0
        self.wrote = False
        # the readout's own handle on stderr: while the recorder opens or closes the sound device
        # it points file descriptor 2 at a scratch file (to hide the C libraries' chatter), and a
        # line the analysis thread wrote through sys.stderr in that moment went there instead
        self.out: Any = sys.stderr
        self._own = False
        if self.enabled:
            try:
                fd = os.dup(sys.stderr.fileno())
            except (AttributeError, OSError, ValueError, io.UnsupportedOperation):
                pass  # no real file behind sys.stderr (a test runner's buffer): write to it directly
            else:
                self.out = os.fdopen(fd, "w", buffering=1, encoding=getattr(sys.stderr, "encoding", None) or "utf-8",
                                     errors="replace")
                self._own = True

    def __call__(self, reading) -> None:
        if not self.enabled:
            return
        line = _readout(reading, reading.unit, (reading.index + 1) * self.interval_s, self.total_s)
        if self.tty:
            now = time.monotonic()
            if now - self.last < 0.2 and (self.total_s is None or
                                         (reading.index + 1) * self.interval_s < self.total_s - 1e-9):
                return
            self.last = now
            self.out.write("\r\x1b[2K" + line)
            self.wrote = True
        else:
            self.out.write(line + "\n")
        self.out.flush()

    def close(self) -> None:
        if self.wrote:
            self.out.write("\n")
            self.out.flush()
        if self._own:
            self._own = False
            self.out.close()
            self.out = sys.stderr


def _value(v: float | None, u: float | None, unit: str, digits: int = 4) -> str:
    """``v ± u unit`` with u to two significant digits and v to the same decimal place (GUM 7.2.6),
    without SI prefixes: ppm/h, %/h and s read best as plain numbers."""
    if v is None:
        return "—"
    if u is None or not (u > 0) or not math.isfinite(u):
        return f"{v:.{digits}g} {unit}".strip()
    dec = max(0, 1 - int(math.floor(math.log10(u))))
    return f"{v:.{dec}f} ± {u:.{dec}f} {unit}".strip()


#: how this command says the library's parameters (``channels`` is its ``--channels`` count)
_DRIFT_FLAGS = command_flags("drift")


def render_summary(run: dict[str, Any], console) -> None:
    """The stability summary of a drift run (the JSON contract) as text."""
    st = run.get("stability")
    src = run.get("file") or run.get("device") or "input"
    console.print(f"drift run of {src}, channel {run['channel']} ({run['channel_unit']}): "
                  f"{run['n_intervals']} intervals of {run['interval_s']:g} s = {run['duration_s']:.4g} s",
                  markup=False, highlight=False, soft_wrap=True)
    if st is None:
        for w in run["warnings"]:
            console.print(f"warning: {cli_words(w, _DRIFT_FLAGS)}", markup=False, highlight=False, soft_wrap=True)
        return
    band = st["warmup_band_ppm"]
    warm = ("not settled by the end" if st["warmup_s"] is None else
            "0 s (no warm-up transient found: a straight line fits)" if st["model"] == "linear" else
            _value(st["warmup_s"], st["warmup_u_s"], "s"))
    lines = [
        ("mean frequency", f"{st['mean_frequency_hz']:.6f} Hz (min {st['frequency_min_hz']:.6f}, "
                           f"max {st['frequency_max_hz']:.6f})"),
        ("final frequency", _value(st["final_frequency_hz"], st["final_frequency_u_hz"], "Hz", 9)
         + " (u includes the timebase)"),
        ("drift rate", _value(st["drift_ppm_per_h"], st["drift_u_ppm_per_h"], "ppm/h")
         + f" ({st['model']} model)"),
        (f"warm-up (±{band:g} ppm)", warm + ("" if st["warmup_tau_s"] is None else
                                           f"; τ = {_value(st['warmup_tau_s'], st['warmup_tau_u_s'], 's')}, "
                                           f"step {_value(st['warmup_step_ppm'], st['warmup_step_u_ppm'], 'ppm')}")),
        ("level drift", _value(st["level_drift_pct_per_h"], st["level_drift_u_pct_per_h"], "%/h")
         + f" of {st['level_mean']:.5g} {st['level_unit']} (fundamental, peak)"),
        ("THD range", "—" if st["thd_min_pct"] is None else f"{st['thd_min_pct']:.3g} … {st['thd_max_pct']:.3g} %"),
        ("Allan deviation σ_y(1 s)", "—" if st["adev_1s"] is None else
         f"{st['adev_1s']:.3g} (estimator floor {st['adev_1s_floor']:.2g}; {st['adev_span']})"),
    ]
    width = max(len(k) for k, _ in lines)
    for k, v in lines:
        console.print(f"  {k:<{width}}  {v}", markup=False, highlight=False, soft_wrap=True)
    if st["adev"]:
        console.print("  overlapping Allan deviation (68 % interval; floor = estimator's white-PM floor):",
                      markup=False, highlight=False, soft_wrap=True)
        for p in st["adev"]:
            console.print(f"    τ = {p['tau_s']:>8g} s   σ_y = {p['adev']:.3g}  [{p['ci_low']:.3g} … {p['ci_high']:.3g}]"
                          f"   floor {p['floor']:.2g}   {p['noise']}", markup=False, highlight=False, soft_wrap=True)
    console.print("  uncertainties are standard (k = 1): fit noise, with the lag-1 correlation of the "
                  "residuals taken into account", markup=False, highlight=False, soft_wrap=True)
    for w in list(run["warnings"]) + list(st["warnings"]):
        console.print(f"warning: {cli_words(w, _DRIFT_FLAGS)}", markup=False, highlight=False, soft_wrap=True)


@app.command("drift", help=_HELP, short_help="Warm-up, drift and Allan deviation of a unit over a long run.")
def drift_command(
    file: Optional[Path] = typer.Argument(None, metavar="FILE", show_default=False,
                                          help="Long capture (WAV, FLAC, CSV). Without it: the line-in."),
    interval: str = typer.Option("1s", "--interval", metavar="DURATION", help="Interval length, e.g. 1s or 500ms."),
    channel: Optional[str] = typer.Option(None, "--channel", "-c", metavar="CH",
                                          help="Channel to follow (name or 1-based number; default: the only one, "
                                               "else the one named output, else the last)."),
    harmonics: int = typer.Option(10, "--harmonics", metavar="H", min=1, max=1000,
                                  help="THD over harmonics 2…H (H from 1 to 1000)."),
    band: float = typer.Option(100.0, "--band", metavar="PPM",
                               help="Warm-up band: settled when within ±PPM of the final value (ppm)."),
    unit: Optional[str] = typer.Option(None, "--unit", metavar="SERIAL",
                                       help="Serial of the unit (default: the sidecar's \"unit\" key)."),
    sample_rate: Optional[str] = typer.Option(None, "--sample-rate", metavar="RATE",
                                              help="Sample rate for a CSV without a time column (Hz)."),
    device: Optional[str] = typer.Option(None, "--device", metavar="DEVICE", help="Input device index or name (live)."),
    channels: int = typer.Option(1, "--channels", metavar="N", min=1, max=2, help="Input channels to open (live)."),
    names: Optional[str] = typer.Option(None, "--names", metavar="NAMES", help="Channel names, comma-separated (live)."),
    rate: float = typer.Option(48000, "--rate", metavar="HZ", help="Sample rate in Hz (live)."),
    profile: Optional[str] = typer.Option(None, "--profile", metavar="PROFILE",
                                          help="Calibration profile: gain, timebase, coupling (live)."),
    seconds: Optional[float] = typer.Option(None, "--seconds", metavar="SECONDS",
                                            help="How long to run (live; default: until Ctrl-C)."),
    keep: Optional[Path] = typer.Option(None, "--keep", metavar="FILE.wav",
                                        help="Also keep the raw audio in this WAV + sidecar (live; the recorder "
                                             "of 'benchfit record'). A WAV stops at 4 GiB: about 8 h at 48 kHz, "
                                             "24-bit, one channel."),
    overwrite: bool = typer.Option(False, "--overwrite", help="Replace an existing --keep file."),
    as_json: bool = typer.Option(False, "--json", help="Print the run (summary and series) as one JSON object."),
    quiet: bool = typer.Option(False, "--quiet", "-q", help="No live readout."),
    log: Optional[str] = typer.Option(None, "--log", metavar="PATH", help="Append the run to this measurement log."),
    log_default: bool = typer.Option(False, "--log-default", help="Append the run to the default measurement log."),
    operator: Optional[str] = typer.Option(None, "--operator", metavar="NAME", help="Who made the measurement (log)."),
) -> None:
    from benchfit.cli.batch import prefer_one_blas_thread

    prefer_one_blas_thread()
    tau0 = _interval(interval)
    if not (math.isfinite(band) and band > 0):
        fail(f"--band: {band!r} must be a positive number of ppm — e.g. --band 100")
    log_path = _log_path(log, log_default)
    ch_key: str | int | None = None
    if channel is not None:
        ch_key = int(channel) - 1 if channel.strip().isdigit() else channel.strip()
    if file is not None:
        live_only = [n for n, v in (("--device", device), ("--profile", profile), ("--seconds", seconds),
                                    ("--keep", keep), ("--names", names)) if v is not None]
        if live_only:
            fail(f"{live_only[0]}: only for a live run — leave FILE out to measure the line-in, or leave "
                 f"{live_only[0]} out to measure {file}")
    from benchfit.errors import MeasureError

    try:
        if file is not None:
            run, code = _from_file(file, tau0, ch_key, harmonics, band, sample_rate, quiet or as_json), 0
        else:
            if sample_rate is not None:
                fail("--sample-rate: only for a CSV file — the live rate is --rate")
            run, code = _from_line_in(tau0, ch_key, harmonics, band, device, channels, names, rate, profile,
                                      seconds, keep, overwrite, quiet)
    except MeasureError as e:  # the library names its parameters; say the options
        raise MeasureError(flag_words(str(e), {"interval_s": "--interval", "band_ppm": "--band"})) from None
    d = run.to_dict()
    if unit is not None:
        d["unit"] = unit
    run_id = None
    if log_path is not None:
        from benchfit.log.drift import log_drift_run

        if d.get("file"):
            from benchfit.capture.load import file_sha256

            d["sha256"] = file_sha256(d["file"])
        elif d.get("kept"):
            from benchfit.capture.load import file_sha256

            d["sha256"] = file_sha256(d["kept"])
        run_id = log_drift_run(log_path, d, operator=operator)
    if as_json:
        print_json(d)
    else:
        render_summary(d, stdout)
    if run_id is not None:
        (stderr if as_json else stdout).print(f"logged as run {run_id} in {log_path}", markup=False, highlight=False, soft_wrap=True)
    if code:
        raise typer.Exit(code)


def _log_path(log: str | None, log_default: bool) -> "LogTarget | None":
    if log is not None and log_default:
        fail("--log and --log-default: give only one — --log PATH names the log, --log-default uses "
             "$BENCHFIT_LOG or the user data directory")
    if log is None and not log_default:
        return None
    from benchfit.log.store import open_log, resolve_log_path

    if log is not None and not log.strip():
        fail("--log: the path is empty — give the log file, or use --log-default")
    path = resolve_log_path(log)
    open_log(path).close()  # a foreign or unwritable log stops here, before hours of measuring
    return path


def _from_file(file: Path, tau0: float, ch_key, harmonics: int, band: float, sample_rate: str | None,
               quiet: bool):
    from benchfit.cli.common import parse_value
    from benchfit.capture.blocks import BlockReader
    from benchfit.measurement.drift_run import run_drift

    rate = parse_value(sample_rate, "--sample-rate") if sample_rate is not None else None
    with BlockReader(file, sample_rate=rate) as reader:
        total = reader.n_frames / reader.sample_rate if reader.n_frames else None
        readout = _Readout(not quiet, False, total, tau0)
        try:
            run = run_drift(reader.blocks(reader.frames_for(tau0)), interval_s=tau0, channel=ch_key,
                            n_harmonics=harmonics, band_ppm=band, on_reading=readout, file=str(file),
                            unit=reader.metadata.get("unit"), start_utc=reader.metadata.get("start_utc"))
        finally:
            readout.close()
        if reader.warnings:
            from dataclasses import replace

            run = replace(run, warnings=tuple(reader.warnings) + run.warnings)
    return run


def _from_line_in(tau0: float, ch_key, harmonics: int, band: float, device: str | None, channels: int,
                  names: str | None, rate: float, profile: str | None, seconds: float | None, keep: Path | None,
                  overwrite: bool, quiet: bool):
    from dataclasses import replace

    from benchfit.capture.live_blocks import record_blocks, stream_blocks
    from benchfit.measurement.drift_run import MIN_INTERVAL_SAMPLES, run_drift

    if not (math.isfinite(rate) and rate > 0 and float(rate).is_integer()):
        fail(f"--rate: {rate!r} must be a whole positive number of Hz — e.g. --rate 48000")
    if round(tau0 * rate) < MIN_INTERVAL_SAMPLES:  # refused before the card opens, as run_drift would
        fail(f"--interval: {tau0:g} s holds {round(tau0 * rate)} sample(s) at {rate:g} Hz — an interval needs at "
             f"least {MIN_INTERVAL_SAMPLES} samples and a few periods of the tone; give "
             f"{MIN_INTERVAL_SAMPLES / rate:.3g} s or more, e.g. --interval 1s")
    if seconds is not None and not (math.isfinite(seconds) and seconds > 0):
        fail(f"--seconds: {seconds!r} must be a positive number of seconds — e.g. --seconds 600")
    if seconds is not None and seconds < 8 * tau0:
        fail(f"--seconds: {seconds:g} s is fewer than 8 intervals of {tau0:g} s — run longer or shorten --interval")
    chan_names = None
    if names is not None:
        from benchfit.capture.live import _channel_names

        chan_names = _channel_names(names, channels)
    dev: str | int | None = None
    if device is not None and device.strip():
        dev = int(device) if device.strip().isdigit() else device.strip()
    readout = _Readout(not quiet, True, seconds, tau0)
    from benchfit.capture.live import _utc_now

    start = _utc_now()
    interrupted = False
    try:
        if keep is None:
            state: dict[str, Any] = {}
            run = run_drift(stream_blocks(rate=int(rate), channels=channels, interval_s=tau0, device=dev,
                                          profile=profile, names=chan_names, seconds=seconds, state=state),
                            interval_s=tau0, channel=ch_key, n_harmonics=harmonics, band_ppm=band,
                            on_reading=readout, start_utc=start)
            interrupted = bool(state.get("interrupted")) or run.interrupted
            run = replace(run, device=state.get("device"))
            if state.get("dropped"):
                run = replace(run, warnings=run.warnings + (
                    f"{state['dropped']} interval(s) skipped because the analysis fell behind — the phase chain "
                    "restarted there; use --keep and measure the file for a gap-free run",))
        else:
            def consume(blocks):
                return run_drift(blocks, interval_s=tau0, channel=ch_key, n_harmonics=harmonics, band_ppm=band,
                                 on_reading=readout, start_utc=start)

            result, kept_run, interrupted = record_blocks(consume, path=str(keep), rate=int(rate), channels=channels,
                                                          interval_s=tau0, device=dev, profile=profile,
                                                          names=chan_names, seconds=seconds, overwrite=overwrite)
            if kept_run is None:
                fail(f"{keep}: nothing was measured — the recording ended before the first interval")
            run = replace(kept_run, device=result.device, kept=str(result.path), start_utc=result.start_utc,
                          warnings=tuple(result.warnings) + kept_run.warnings)
    finally:
        readout.close()
    if interrupted:
        run = replace(run, interrupted=True,
                      warnings=run.warnings + (f"stopped by Ctrl-C after {len(run.readings)} interval(s)",))
    # until Ctrl-C is the normal way to end an open run; an early stop of a timed run exits 130
    return run, (130 if interrupted and seconds is not None else 0)
