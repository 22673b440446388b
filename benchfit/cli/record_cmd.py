"""``benchfit record``: a sound-card input into a WAV file and its sidecar JSON.

Only typer and the standard library are imported here at module level; numpy, soundfile,
sounddevice and rich load inside the command.
"""

from __future__ import annotations

from pathlib import Path
from typing import Optional

import typer

from benchfit.cli.app import app
from benchfit.cli.common import print_json, stderr, stdout
from benchfit.cli.soundcard import CAUTION, device_arg, positive_seconds, print_recording_warnings, progress_recorder, whole_rate

__all__ = ["record"]


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

    positive_seconds(seconds)
    r = whole_rate(rate)
    try:
        result = progress_recorder(out, seconds, r, channels, device_arg(device), names, profile, overwrite,
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
    print_recording_warnings(result, "record")
    peaks = ", ".join(f"{n} {p:.1f} dBFS" for n, p in zip(result.channel_names, result.peak_dbfs))
    stdout.print(f"saved {result.path}: {result.duration_s:.3f} s, {len(result.channel_names)} ch at "
                 f"{result.sample_rate:g} Hz from {result.device!r}; peak {peaks}; "
                 f"{result.clip_count} clipped sample(s), {result.overflow_count} overflow(s); "
                 f"sidecar {result.sidecar_path}", soft_wrap=True, markup=False)

