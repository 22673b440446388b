"""``benchfit calibrate gain|timebase|coupling|distortion|show``: the sound card's calibration profiles.

The options every calibration from a recording takes (``--profile``, ``--record``,
``--seconds``, ``--device``, ``--rate``) are declared once below and shared by the commands.
Only typer and the standard library are imported here at module level; numpy, soundfile,
sounddevice and rich load inside the commands.
"""

from __future__ import annotations

import math
import tempfile
from dataclasses import replace
from pathlib import Path
from typing import Any, NamedTuple, Optional

import typer

from benchfit.cli.app import calibrate_app
from benchfit.cli.common import cli_words, command_flags, fail, flag_words, parse_value, print_json, stderr, stdout
from benchfit.cli.soundcard import (CAUTION, device_arg, freq_text, positive_seconds, ppm_text, print_recording_warnings,
                                    progress_recorder, whole_rate)
from benchfit.errors import MeasureError

__all__ = ["calibrate_gain", "calibrate_timebase", "calibrate_coupling", "calibrate_distortion", "calibrate_show"]


def _calibration_source(file: Optional[Path], do_record: bool, seconds: Optional[float], device: Optional[str],
                        rate: float, channels: int, tmp: str):
    """Samples for a calibration: from FILE, or recorded live into FILE (or a scratch file)."""
    from benchfit.capture.calibration import read_raw_wav

    if do_record:
        if seconds is None:
            fail("--seconds: missing — --record needs the recording length, e.g. --seconds 5")
        positive_seconds(seconds)
        target = file if file is not None else Path(tmp) / "calibration.wav"
        if file is not None and (file.exists() or file.suffix.lower() != ".wav"):
            # refused here rather than by the recorder, so that no caution precedes the error line
            fail(f"{file}: {'already exists' if file.exists() else 'recordings are WAV files'} — give a new "
                 "name ending in .wav, or leave FILE out to record into a scratch file")
        from benchfit.capture.devices import check_input

        r, dev = whole_rate(rate), device_arg(device)
        check_input(dev, float(r), channels)  # a missing or refusing device: its one error line only
        stderr.print(CAUTION, markup=False)  # then the cautions, before anything is connected and recorded
        from benchfit.capture.live import RecordingInterrupted

        try:
            result = progress_recorder(target, seconds, r, channels, dev, None, None, overwrite=False,
                                       sample_format="float")
        except RecordingInterrupted as stop:
            kept = (f"the {stop.result.duration_s:.3f} s recorded are in {stop.result.path} and its sidecar"
                    if file is not None else "the recording is discarded")
            stderr.print(f"stopped by Ctrl-C: nothing calibrated, no profile changed; {kept}", soft_wrap=True,
                         markup=False)
            raise typer.Exit(130) from None
        print_recording_warnings(result, "calibrate")
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


class _OneChannel(NamedTuple):
    """The channel a one-channel calibration (timebase, coupling, distortion) works from."""

    samples: Any
    fs: float
    channel: int  # 1-based
    source: str  # the file, or "live recording (S s)"
    label: str  # "channel N (name)"

    @property
    def what(self) -> str:
        """What the estimators' error lines name: "<source> channel N (name)"."""
        return f"{self.source} {self.label}"


def _one_channel(file: Optional[Path], do_record: bool, seconds: Optional[float], device: Optional[str],
                 rate: float, channel: Optional[str]) -> _OneChannel:
    """The samples of the channel --channel names (default the first), from FILE or a live recording."""
    with tempfile.TemporaryDirectory(prefix="benchfit-cal-") as tmp:
        (x, fs, names), source = _calibration_source(file, do_record, seconds, device, rate, 1, tmp)
    i = _pick_channels(channel, names, default_all=False)[0]
    return _OneChannel(x[i], fs, i + 1, source, f"channel {i + 1} ({names[i]})")


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


# the options every calibration from a recording takes, declared once (typer copies an option's
# declaration for each command that uses it)
_PROFILE = typer.Option(..., "--profile", metavar="PROFILE", help="Profile to create or update.")
_RECORD = typer.Option(False, "--record",
                       help="Record live from the sound card instead of reading FILE (needs --seconds).")
_SECONDS = typer.Option(None, "--seconds", metavar="SECONDS", help="Recording length with --record (s).")
_DEVICE = typer.Option(None, "--device", metavar="DEVICE", help="Input device with --record.")
_RATE = typer.Option(48000, "--rate", metavar="HZ", help="Sample rate with --record (Hz).")


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
    profile: str = _PROFILE,
    channel: Optional[str] = typer.Option(None, "--channel", metavar="CH",
                                          help="Only this channel (name or number); default all."),
    do_record: bool = _RECORD,
    seconds: Optional[float] = _SECONDS,
    device: Optional[str] = _DEVICE,
    rate: float = _RATE,
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
    profile: str = _PROFILE,
    frequency_u: Optional[str] = typer.Option(None, "--frequency-u", metavar="HZ",
                                              help="Standard uncertainty of the reference frequency, in Hz."),
    channel: Optional[str] = typer.Option(None, "--channel", metavar="CH",
                                          help="Channel carrying the tone; default the first."),
    do_record: bool = _RECORD,
    seconds: Optional[float] = _SECONDS,
    device: Optional[str] = _DEVICE,
    rate: float = _RATE,
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
    src = _one_channel(file, do_record, seconds, device, rate, channel)
    try:
        est = estimate_timebase(src.samples, src.fs, f_ref, u_ref, what=src.what)
    except MeasureError as e:  # the library names its parameters; say the options
        raise MeasureError(flag_words(str(e), {"reference_hz": "--frequency", "reference_u_hz": "--frequency-u",
                                               "nominal_rate": "--rate"})) from None
    prof = replace(prof, timebase=TimebaseCalibration(ppm=est.ppm, u_ppm=est.u_ppm, reference_hz=f_ref,
                                                      nominal_rate_hz=src.fs, source=src.source,
                                                      measured_utc=utc_now_iso()))
    path = save_profile(prof)
    if ref_note:
        stderr.print(f"note: {ref_note}", markup=False, highlight=False, soft_wrap=True)
    if json_out:
        print_json({"profile": prof.name, "path": str(path), "ppm": est.ppm, "u_ppm": est.u_ppm,
                    "measured_hz": est.measured_hz, "measured_u_hz": est.measured_u_hz,
                    "reference_hz": f_ref, "reference_u_hz": u_ref, "nominal_rate_hz": src.fs})
        return
    speed = "fast" if est.ppm > 0 else "slow"
    stdout.print(f"tone measured {freq_text(est.measured_hz, est.measured_u_hz)} on the nominal {src.fs:g} Hz; "
                 f"sample clock error {ppm_text(est.ppm, est.u_ppm)} (runs {speed}); "
                 f"true rate {src.fs * (1 + est.ppm * 1e-6):.4f} Hz", soft_wrap=True, markup=False)
    stdout.print(f"saved to profile {prof.name!r} ({path})", soft_wrap=True, markup=False)


@calibrate_app.command("coupling", short_help="Input high-pass time constant, from a low-frequency square wave.", help=(
    "Store the time constant of the input's high-pass (AC coupling) from the droop of a "
    "low-frequency square wave (5-20 Hz works well); pulse measurements then compensate it.""\n\nExample:\n\n\b\n  benchfit calibrate coupling square_10Hz.wav --profile desk" "\n\n" + CAUTION))
def calibrate_coupling(
    file: Optional[Path] = typer.Argument(None, metavar="FILE", show_default=False,
                                          help="Recording of a low-frequency square wave (WAV/FLAC)."),
    profile: str = _PROFILE,
    channel: Optional[str] = typer.Option(None, "--channel", metavar="CH",
                                          help="Channel carrying the square; default the first."),
    do_record: bool = _RECORD,
    seconds: Optional[float] = _SECONDS,
    device: Optional[str] = _DEVICE,
    rate: float = _RATE,
    json_out: bool = typer.Option(False, "--json", help="Print the stored value as one JSON object."),
) -> None:
    from benchfit.capture.calibration import CouplingCalibration, estimate_coupling, save_profile, utc_now_iso

    prof = _load_or_new(profile)
    src = _one_channel(file, do_record, seconds, device, rate, channel)
    tau = estimate_coupling(src.samples, src.fs, what=src.what)
    prof = replace(prof, coupling=CouplingCalibration(tau_s=tau, channel=src.channel, source=src.source,
                                                      measured_utc=utc_now_iso()))
    path = save_profile(prof)
    if json_out:
        print_json({"profile": prof.name, "path": str(path), "coupling_tau_s": tau,
                    "corner_hz": 1.0 / (2 * math.pi * tau)})
        return
    stdout.print(f"input coupling time constant {tau * 1e3:.4g} ms (high-pass corner "
                 f"{1.0 / (2 * math.pi * tau):.4g} Hz) on {src.label}", soft_wrap=True, markup=False)
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
    profile: str = _PROFILE,
    channel: Optional[str] = typer.Option(None, "--channel", metavar="CH",
                                          help="Channel carrying the sine; default the first."),
    harmonics: int = typer.Option(10, "--harmonics", metavar="H", min=2, max=100,
                                  help="Highest harmonic order (THD over 2…H)."),
    do_record: bool = _RECORD,
    seconds: Optional[float] = _SECONDS,
    device: Optional[str] = _DEVICE,
    rate: float = _RATE,
    json_out: bool = typer.Option(False, "--json", help="Print the stored value as one JSON object."),
) -> None:
    from benchfit.capture.calibration import DistortionCalibration, save_profile, utc_now_iso
    from benchfit.measurement.calibration import estimate_distortion_floor

    prof = _load_or_new(profile)
    src = _one_channel(file, do_record, seconds, device, rate, channel)
    est = estimate_distortion_floor(src.samples, src.fs, harmonics, what=src.what)
    prof = replace(prof, distortion=DistortionCalibration(
        floor_pct=est.floor_pct, u_pct=est.u_pct, frequency_hz=est.frequency_hz, level_fs=est.level_fs,
        harmonics=harmonics, channel=src.channel, source=src.source, measured_utc=utc_now_iso()))
    path = save_profile(prof)
    if json_out:
        print_json({"profile": prof.name, "path": str(path), "floor_pct": est.floor_pct, "u_pct": est.u_pct,
                    "frequency_hz": est.frequency_hz, "level_fs": est.level_fs, "harmonics": harmonics})
        return
    stdout.print(f"card distortion floor THD {est.floor_pct:.3g} % ± {est.u_pct:.2g} % (harmonics 2…{harmonics}) at "
                 f"{est.frequency_hz:.5g} Hz, {est.level_fs:.3g} FS peak, {src.label}",
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
        stderr.print(f"warning: {cli_words(line, command_flags('calibrate show'))}", markup=False, highlight=False,
                     soft_wrap=True)
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
        tb = ppm_text(p.timebase.ppm, p.timebase.u_ppm) if p.timebase else "—"
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
