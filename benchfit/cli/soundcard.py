"""What the sound-card commands share: the safety caution, option checks, the recorder with its
progress bar, and the frequency and ppm texts of ``tune`` and ``calibrate``.

Only typer's helpers and the standard library are imported here at module level; numpy,
soundfile, sounddevice and rich load inside the functions.
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import TYPE_CHECKING, Optional, cast

from benchfit.cli.common import fail

if TYPE_CHECKING:
    from benchfit.capture.live import SampleFormat

__all__ = ["CAUTION", "live_console", "device_arg", "positive_seconds", "whole_rate", "progress_recorder",
           "freq_text", "ppm_text"]

CAUTION = (
    "Safety: a line input takes about 1-2 V peak. Feed it through a resistive divider "
    "(attenuator) and a DC-blocking capacitor; never connect mains or anything referenced "
    "to mains; mind ground loops between the unit's supply and the computer; inductors kick "
    "when their current is interrupted, so connect and disconnect with the unit switched off. "
    "Local codes and qualified practice take precedence."
)


def live_console(err: bool):
    """A rich console for live displays (progress bar on stderr, tuning panel on stdout)."""
    from rich.console import Console

    return Console(stderr=err, highlight=False, emoji=False)


def device_arg(text: Optional[str]) -> str | int | None:
    if text is None or not text.strip():
        return None
    return int(text) if text.strip().isdigit() else text.strip()


def positive_seconds(value: float) -> float:
    if not (math.isfinite(value) and value > 0):
        fail(f"--seconds: {value!r} must be a positive number of seconds — e.g. --seconds 10")
    return value


def whole_rate(value: float) -> int:
    if not (math.isfinite(value) and value > 0 and float(value).is_integer()):
        fail(f"--rate: {value!r} must be a whole positive number of Hz — e.g. --rate 48000")
    return int(value)



def progress_recorder(out: Path, seconds: float, rate: int, channels: int, device, names, profile,
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
                        console=live_console(err=True), transient=False, disable=quiet)
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
                         profile=profile, overwrite=overwrite, on_block=on_block,
                         # the user's text: record() refuses one that is not a SampleFormat, naming the option
                         sample_format=cast("SampleFormat", sample_format))
    finally:
        if started:
            progress.stop()


def print_recording_warnings(result, command: str) -> None:
    """The recorder's closing warnings (lost samples, clipping, a silent input), in the command's words."""
    from benchfit.cli.common import cli_words, command_flags, stderr

    for w in result.warnings:
        stderr.print(f"warning: {cli_words(w, command_flags(command))}", soft_wrap=True, markup=False)



def freq_text(f: float, u: float) -> str:
    """Frequency with at least mHz resolution and its standard uncertainty (2 significant digits)."""
    if not (u > 0):  # a noise-free (synthetic) signal: the fit leaves no residual
        return f"{f:.6f} ± <0.000001 Hz"
    d = max(3, 1 - math.floor(math.log10(u)))
    if d > 6:
        return f"{f:.6f} ± {u:.1e} Hz"
    return f"{f:.{d}f} ± {u:.{d}f} Hz"


def ppm_text(ppm: float, u: float) -> str:
    """A ppm value rounded to two significant digits of its uncertainty."""
    d = 3 if not (u > 0) else min(9, max(0, 1 - math.floor(math.log10(u))))
    return f"{ppm:+.{d}f} ± {u:.{d}f} ppm"

