"""``benchfit measure``: frequency, levels, pulse parameters and distortion of capture files.

Many files or folders are measured in worker processes (``--jobs``); the per-file job is
:func:`benchfit.cli.batch.measure_job` (:func:`measure_file` here is its one-file form).
``--log PATH`` / ``--log-default`` append each measured file to the measurement log, from
this process only, as results arrive. Only typer and the standard library are imported at
module level.
"""

from __future__ import annotations

import math
import sys
from pathlib import Path
from typing import TYPE_CHECKING, Any, List, Optional

import typer

from benchfit.cli.app import app

if TYPE_CHECKING:
    from benchfit.log.store import LogTarget

__all__ = ["measure_file", "measure_command", "render_channel_rows"]

_EXAMPLE = """

Examples:

\b
  benchfit measure HC-03_as-left.wav
  benchfit measure HC-*.wav --channel output --json > batch.jsonl
  benchfit measure captures/ --recursive --jobs 2 --log-default
  benchfit measure scope_export.csv --sample-rate 100k --harmonics 20

Several files or a folder: files are measured at the same time, in this process and workers (--jobs)
and each result is printed as soon as its file is done, so the order can differ from the
input (each JSON object names its "file"). A file that cannot be measured gives one
"error: <file>: …" line on stderr and the others go on; the exit status is then 2.

Logging is off unless asked for: --log-default appends to $BENCHFIT_LOG or, when that is
unset, to benchfit/log.sqlite in the user data directory; --log PATH appends to that file.
See the runs with "benchfit log list".

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
    from benchfit.cli.batch import measure_job

    out = measure_job(path, channels=channels, harmonics=harmonics, sample_rate=sample_rate)
    return out["measurement"]


def _contract(d: dict[str, Any]) -> dict[str, Any]:
    """The JSON contract only: drop each channel's ``extra``."""
    out = dict(d)
    out["channels"] = [{k: v for k, v in c.items() if k != "extra"} for c in d["channels"]]
    return out


# --- human output ------------------------------------------------------------------------

def _num(value: float | None, unit: str, u: float | None = None) -> str:
    """A value with its unit and, when given, its standard uncertainty."""
    from benchfit.units import format_quantity, format_with_uncertainty

    if value is None or not math.isfinite(value):
        return "—"
    if u is not None and math.isfinite(u) and u > 0:
        return format_with_uncertainty(value, u, unit)
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
        ("peak-to-peak", _num(ch["vpp"], unit, ex.get("vpp_u") if ch["frequency_hz"] else None),
         "0.1–99.9 % percentiles"),
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
    elif ex.get("pulse_not_given"):
        from benchfit.cli.common import cli_words

        rows.append(("duty cycle, edges", "—", cli_words(ex["pulse_not_given"])))
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
        from benchfit.cli.common import cli_words

        for w in ch["warnings"]:
            console.print(f"[yellow]warning:[/] {escape(cli_words(w))}", markup=True, highlight=False, soft_wrap=True)
        console.print()


@app.command("measure", help="Measure frequency, levels, duty cycle, edges and distortion of capture files."
             + _EXAMPLE, short_help="Frequency, levels, duty cycle, edges and THD of capture files.")
def measure_command(
    files: List[Path] = typer.Argument(
        ..., metavar="FILES", show_default=False,
        help="Capture files (WAV, FLAC, OGG, AIFF or CSV) and/or folders. A folder gives its files ending in "
             ".wav .flac .csv .tsv .txt .ogg .aiff, sorted by name (sidecar .json files are not captures)."),
    channel: Optional[List[str]] = typer.Option(
        None, "--channel", "-c", metavar="CH", help="Channel name or 1-based number to measure (repeatable; default all)."),
    as_json: bool = typer.Option(False, "--json",
                                 help="Print one JSON object per file (one line each, in the order the files "
                                      "finish) instead of tables."),
    harmonics: int = typer.Option(10, "--harmonics", metavar="H", min=1, max=1000,
                                  help="Highest harmonic order H (1 to 1000): THD over harmonics 2…H "
                                       "(default 10), limited to orders below Nyquist."),
    sample_rate: Optional[str] = typer.Option(
        None, "--sample-rate", metavar="RATE", help="Sample rate for a CSV without a time column, e.g. 48000 or 100k (Hz)."),
    recursive: bool = typer.Option(False, "--recursive", "-r", help="Also take capture files from sub-folders."),
    jobs: Optional[int] = typer.Option(
        None, "--jobs", "-j", metavar="N", min=1, show_default=False,
        help="Files measured at once: this process and N−1 worker processes (default and ceiling: the "
             "CPUs this process may use); --jobs 1 measures one after the other in this process."),
    log: Optional[str] = typer.Option(
        None, "--log", metavar="PATH", show_default=False,
        help="Append each measured file as a run (command \"measure\") to this measurement log file (or postgresql:// URL); "
             "created when missing. Without --log or --log-default nothing is logged."),
    bench: Optional[str] = typer.Option(
        None, "--bench", metavar="NAME",
        help="This bench's (station's) name on the logged runs (default: $BENCHFIT_BENCH or the host name)."),
    log_default: bool = typer.Option(
        False, "--log-default",
        help="Append each measured file to the default measurement log: $BENCHFIT_LOG when set, else "
             "benchfit/log.sqlite in the user data directory."),
    pulse: bool = typer.Option(False, "--pulse", help="Give duty cycle and edge times even when the wave is "
                               "not two-level (slow edges), as indications."),
    plot: Optional[Path] = typer.Option(None, "--plot", metavar="FILE",
                                        help="One file only: write its waveform and harmonics to FILE.svg or "
                                             "FILE.png (an existing file is kept)."),
    gain_u: Optional[str] = typer.Option(
        None, "--gain-u", metavar="U",
        help="Standard uncertainty (k = 1) of the gain of levels in V whose calibration states none, e.g. 1% or "
             "0.01: a scope channel's vertical gain (default ±3 % rectangular, not calibrated) or a sound-card "
             "profile without one (default ±1 %)."),
) -> None:
    from benchfit.cli.batch import collect_captures, default_jobs, prefer_one_blas_thread
    from benchfit.cli.common import fail, parse_value

    prefer_one_blas_thread()  # before numpy loads: its small matrix products run faster on one thread

    if log is not None and log_default:
        fail("--log and --log-default: give only one — --log PATH names the log, --log-default uses "
             "$BENCHFIT_LOG or the user data directory")
    from benchfit.log.store import use_bench

    use_bench(bench)
    log_path = None
    if log is not None or log_default:
        from benchfit.log.store import resolve_log_path

        if log is not None and not log.strip():
            fail("--log: the path is empty — give the log file, or use --log-default")
        log_path = resolve_log_path(log)
        from benchfit.cli.logsafe import check_log_writable
        from benchfit.log.store import open_log

        check_log_writable(log_path)  # a read-only log stops here too
        open_log(log_path).close()  # a foreign or unwritable log stops here, before any file is measured
    rate = parse_value(sample_rate, "--sample-rate") if sample_rate is not None else None
    opts = {"channels": list(channel) if channel else None, "harmonics": harmonics, "sample_rate": rate,
            "with_capture": log_path is not None, "force_pulse": pulse}
    if gain_u is not None:
        opts["gain_u_rel"] = _relative_u(gain_u, "--gain-u")
    paths, notes = collect_captures(files, recursive=recursive)
    if not paths:
        fail(notes[0] if len(notes) == 1 else "; ".join(notes))
    single = len(files) == 1 and not files[0].is_dir()
    if plot is not None:
        if not single:
            fail(f"--plot {str(plot)!r}: draws one capture — give one file, or leave --plot out")
        if plot.suffix.lower() not in (".svg", ".png"):
            fail(f"--plot {str(plot)!r}: unknown figure type — use a file name ending in .svg or .png")
        if plot.exists():
            fail(f"{plot}: file exists — choose another --plot")
    if single:
        _measure_single(paths[0], opts, as_json, log_path)
        if plot is not None:
            _plot(paths[0], opts, plot, as_json)
        return
    _measure_batch(paths, notes, opts, as_json, log_path, jobs or default_jobs())


def _relative_u(text: str, option: str) -> float:
    """A relative standard uncertainty from ``"1.5%"`` or ``"0.015"`` (a bare number must be below 1)."""
    from benchfit.cli.common import fail, parse_value

    t = text.strip()
    value = (parse_value(t[:-1].strip(), option, allow_zero=True) / 100.0 if t.endswith("%")
             else parse_value(t, option, allow_zero=True))
    if not value < 1.0:
        fail(f"{option} {text!r}: a relative uncertainty of 100 % or more — give it as a percentage (1.5%) "
             "or a fraction below 1 (0.015)")
    return value


def _plot(path: Path, opts: dict[str, Any], plot: Path, as_json: bool) -> None:
    """Draw the waveform and harmonics of one capture (measured again here: the figure needs the objects)."""
    from benchfit.capture.load import load
    from benchfit.cli.common import stderr, stdout
    from benchfit.measurement.summary import measure
    from benchfit.report.figures import measurement_svg, save_figure

    from benchfit.measurement.long_record import is_long_file, measure_long_file

    if is_long_file(path):  # in blocks; the figure's waveform is the first block's start
        from benchfit.capture.blocks import BlockReader, block_frames

        m = measure_long_file(path, harmonics=opts["harmonics"], channels=opts.get("channels"),
                              force_pulse=opts.get("force_pulse", False), sample_rate=opts.get("sample_rate"),
                              gain_u_rel=opts.get("gain_u_rel"))
        with BlockReader(path, sample_rate=opts.get("sample_rate")) as reader:
            cap = next(iter(reader.blocks(block_frames(len(reader.channel_names)))))
    else:
        cap = load(path, sample_rate=opts.get("sample_rate"))
        m = measure(cap, harmonics=opts["harmonics"], channels=opts.get("channels"),
                    force_pulse=opts.get("force_pulse", False), gain_u_rel=opts.get("gain_u_rel"))
    if opts.get("channels"):
        cap = cap.select(list(opts["channels"]))
    save_figure(measurement_svg(cap, m), plot, overwrite=False)
    (stderr if as_json else stdout).print(f"figure written to {plot}", markup=False, highlight=False, soft_wrap=True)


def _log_measurement(log_path: LogTarget, out: dict[str, Any]) -> int:
    """Append one measured file to the log as a ``measure`` run; returns the run id."""
    from benchfit.cli.logsafe import append_run_explained

    cap, d = out["capture"], out["measurement"]
    return append_run_explained(
        log_path, command="measure", unit=cap.get("unit"),
        captures=[{"path": cap["path"], "sha256": cap["sha256"], "metadata": cap["metadata"]}],
        measurements=[d], details={"file": d["file"]})


def _show(out: dict[str, Any], as_json: bool, run_id: int | None, log_path: LogTarget | None) -> None:
    from benchfit.cli.common import print_json, stdout

    if as_json:
        print_json(_contract(out["measurement"]))
        return
    _render(out["measurement"], stdout)
    if run_id is not None:
        stdout.print(f"logged as run {run_id} in {log_path}", markup=False, highlight=False)
        stdout.print()


def _show_then_log(out: dict[str, Any], as_json: bool, log_path: LogTarget | None) -> int | None:
    """Print a result, then log it: the log holds only what was shown (a broken pipe or a failed
    rendering logs nothing). Ctrl-C is held from the first printed line until the run is logged."""
    from benchfit.cli.common import stdout
    from benchfit.cli.logsafe import sigint_held

    if log_path is None:
        _show(out, as_json, None, None)
        return None
    with sigint_held():
        _show(out, as_json, None, log_path)
        sys.stdout.flush()  # a closed pipe fails here, before the run is logged
        run_id = _log_measurement(log_path, out)
    if not as_json:
        stdout.print(f"logged as run {run_id} in {log_path}", markup=False, highlight=False)
        stdout.print()
    return run_id


def _measure_single(path: Path, opts: dict[str, Any], as_json: bool, log_path: LogTarget | None) -> None:
    """One file, in this process: a failure is the command's one-line error (exit 2)."""
    from benchfit.cli.batch import block_progress, measure_job
    from benchfit.cli.common import stderr

    with block_progress(path) as on_block:  # a long file is read in blocks, with a progress bar
        out = measure_job(path, on_block=on_block, **opts)
    run_id = _show_then_log(out, as_json, log_path)
    if as_json and run_id is not None:
        stderr.print(f"logged as run {run_id} in {log_path}", markup=False, highlight=False)


def _measure_batch(paths: list[Path], notes: list[str], opts: dict[str, Any], as_json: bool,
                   log_path: LogTarget | None, jobs: int) -> None:
    """Many files in worker processes; results and error lines stream out as files finish."""
    from benchfit.cli.batch import measure_job, progress_bar, worker_pool
    from benchfit.cli.common import fail

    failed: list[str] = []
    run_ids: list[int] = []
    from benchfit.log.store import held_open

    # the workers start first: forked while this process has one thread (no progress bar yet)
    # and no log connection; the log is then held open for the batch, one transaction per run
    with worker_pool(jobs, len(paths)) as pool, held_open(log_path), \
            progress_bar("measuring", len(paths), notes) as progress:

        def on_outcome(outcome) -> None:
            progress.advance(outcome.path.name)
            if not outcome.ok:
                failed.append(outcome.error)
                progress.say(f"error: {outcome.error}")
                return
            run_id = _show_then_log(outcome.result, as_json, log_path)
            if run_id is not None:
                run_ids.append(run_id)

        pool.run(measure_job, paths, kwargs=opts, on_outcome=on_outcome)
    if log_path is not None and as_json and run_ids:
        from benchfit.cli.common import stderr

        stderr.print(f"logged {len(run_ids)} run(s) (ids {min(run_ids)}–{max(run_ids)}) in {log_path}",
                     markup=False, highlight=False)
    if failed:
        fail(f"{len(failed)} of {len(paths)} files could not be measured — see the lines above; "
             "the others were measured")
