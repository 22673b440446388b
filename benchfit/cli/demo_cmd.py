"""``benchfit demo``: the whole job on the bundled sample captures, as a guided tour.

Every step is a real benchfit command, printed as you would type it and then run in this
process, so the demo doubles as a tour of the command line. The scenario and the captures are
synthetic (sample_captures/README.md).
"""

from __future__ import annotations

import contextlib
import io
import shlex
import time
from pathlib import Path
from typing import Any, Optional

import typer

from benchfit.cli.app import app

#: timer parts of the demo scenario's hum-check box (invented): RA 1 kΩ, RB 13.7 kΩ, C1 1 µF
_TIMER = ("--ra", "1k", "--rb", "13.7k", "--c1", "1u", "--supply", "12")


def _samples_dir(option: Optional[Path]) -> Path:
    from benchfit.cli.common import fail

    if option is not None:
        where = option
    else:
        import benchfit

        # package data (benchfit/sample_captures: a copy in a wheel, a link in a checkout)
        where = Path(benchfit.__file__).resolve().parent / "sample_captures"
        if not (where / "hc_spec.toml").is_file():  # a checkout whose link was not kept
            where = Path(benchfit.__file__).resolve().parent.parent / "sample_captures"
    if not (where / "hc_spec.toml").is_file():
        fail(f"{where}: the sample captures are not there — reinstall benchfit (its wheel carries "
             "them) or pass --samples DIR")
    return where


class _Tour:
    """Prints each command, runs it in-process, and keeps going when a step fails."""

    def __init__(self, out_dir: Path) -> None:
        from benchfit.cli import get_app

        self.command = typer.main.get_command(get_app())
        self.out_dir = out_dir
        self.failed: list[str] = []

    def section(self, title: str, text: str = "") -> None:
        from benchfit.cli.common import stdout

        stdout.rule(title, style="bold")
        if text:
            stdout.print(text, markup=False, highlight=False)

    def run(self, args: list[str], *, save_stdout: Path | None = None, expect: tuple[int, ...] = (0,)) -> int:
        """Run ``benchfit ARGS``; print it first; optionally keep its stdout in a file."""
        from benchfit.cli.common import stderr, stdout
        from benchfit.errors import BenchfitError

        shown = "benchfit " + " ".join(shlex.quote(a) for a in args)
        if save_stdout is not None:
            shown += f" > {shlex.quote(str(save_stdout))}"
        stdout.print(f"\n$ {shown}", style="bold cyan", markup=False, highlight=False)
        buffer = io.StringIO()
        code = 0
        try:
            with contextlib.redirect_stdout(buffer) if save_stdout is not None else contextlib.nullcontext():
                result = self.command.main(args=args, prog_name="benchfit", standalone_mode=False)
            code = int(result or 0) if isinstance(result, int) else 0
        except BenchfitError as e:
            stderr.print(f"error: {e}", markup=False, highlight=False)
            code = e.exit_code
        except SystemExit as e:  # typer.Exit inside a command
            code = int(e.code or 0)
        except Exception as exc:  # a click usage error or a bug: report it, keep touring
            from benchfit.cli import _is_a

            err: Any = exc  # click's exceptions, recognised by name (see benchfit.cli._is_a)
            if _is_a(err, "Exit"):
                code = err.exit_code
            elif _is_a(err, "ClickException"):
                stderr.print(f"error: {err.format_message()}", markup=False)
                code = err.exit_code
            else:
                raise
        if save_stdout is not None:
            save_stdout.write_text(buffer.getvalue(), encoding="utf-8")
            stdout.print(f"(saved {save_stdout})", style="dim", markup=False)
        if code not in expect:
            self.failed.append(f"{shown} (exit {code})")
        return code


#: file that marks a folder as the demo's own (so that a rerun may replace the demo's files there)
_DEMO_MARKER = ".benchfit-demo"


@app.command("demo", short_help="Run the whole job on the bundled sample captures.", help=(
    "Run the whole job on the bundled sample captures: measure, fit (two-channel, one-channel, "
    "ring-down), a calibration report per unit (one fails), the log and its batch statistics, "
    "trim advice, and one unit's stability over ten minutes. Writes everything to --out.\n\n"
    "\b\nExample:\n  benchfit demo --out benchfit-demo"))
def demo_command(
    out: Path = typer.Option(Path("benchfit-demo"), "--out", show_default=False,
                             metavar="DIR",
                             help="Folder for the reports, log and figures (default: ./benchfit-demo)."),
    samples: Optional[Path] = typer.Option(None, "--samples", help="Folder of the sample captures "
                                           "(default: the ones installed with benchfit)."),
    jobs: Optional[int] = typer.Option(None, "--jobs", help="Worker processes for the batch steps "
                                       "(default: the CPU count)."),
) -> None:
    from benchfit.cli.common import fail, stdout

    started = time.perf_counter()
    src = _samples_dir(samples)
    marker = out / _DEMO_MARKER
    if out.exists() and not out.is_dir():
        fail(f"{out}: is a file, not a folder — give --out a new folder name")
    try:
        foreign = out.is_dir() and not marker.exists() and any(out.iterdir())
    except OSError as e:
        fail(f"{out}: cannot read the folder ({e.strerror}) — choose another --out")
    if foreign:  # a rerun replaces the demo's own files; nobody else's
        fail(f"{out}: the folder holds files the demo did not make — give --out a new or empty folder")
    try:
        out.mkdir(parents=True, exist_ok=True)
        (out / "reports").mkdir(exist_ok=True)
        marker.write_text("folder made by 'benchfit demo'; a rerun replaces the demo's files here\n",
                          encoding="utf-8")
    except OSError as e:
        fail(f"{out}: cannot create the demo folder ({e.strerror}) — choose another --out")
    log = str(out / "demo-log.sqlite")
    spec = str(src / "hc_spec.toml")
    s = lambda name: str(src / name)  # noqa: E731
    job_args = [] if jobs is None else ["--jobs", str(jobs)]
    tour = _Tour(out)

    tour.section("benchfit demo", (
        "Scenario (invented): a makerspace group builds 'hum-check' boxes HC-01 … HC-12, each a "
        "555-style astable (12 V) whose square is divided down and filtered by an L-C low-pass "
        "(two 150 mH chokes in series, a 33 µF bank) into a 50 Hz sine across 10 kΩ. "
        "Spec: 50.00 Hz ± 0.25 Hz, THD ≤ 5 %, 1.0–1.6 V rms. All captures are synthetic.\n"
        "Safety: a sound card's line-in takes about 1–2 V peak — use an attenuator and a "
        "DC-blocking capacitor, never connect mains; see the README's safety cautions."))

    tour.section("1. Measure", "A scope CSV of HC-03's timer (European dialect: ';' and decimal comma), "
                 "then the sound-card recordings of the batch (WAV/FLAC with calibration sidecars), "
                 "measured in parallel as JSON lines.")
    tour.run(["measure", s("hc03_timer_scope.csv"), "--harmonics", "10"])
    batch_file = out / "batch_measurements.jsonl"
    tour.run(["measure", *sorted(str(p) for p in src.glob("hc0[1-7]_*.flac")), s("hc07_output.wav"),
              "--json", *job_args], save_stdout=batch_file)
    _summarise_measurements(batch_file)

    tour.section("2. Fit the effective parts",
                 "Two-channel (drive and output on the scope), with the chokes' inductance and the "
                 "load known; then one-channel (the sound card sees only the output); then a ring-down "
                 "of HC-05's bare tank.")
    tour.run(["fit", s("hc03_drive_output_scope.csv"), "--model", "lc-lowpass",
              "--fix", "L=300m", "--fix", "Rload=10k", "--plot", str(out / "hc03_two_channel_fit.svg"),
              "--overwrite"])  # a rerun into the same folder replaces its own figure
    tour.run(["fit", s("hc03_asleft.wav"), "--model", "lc-lowpass", "--fix", "L=300m", "--fix", "Rload=10k"])
    tour.run(["fit", s("hc05_ringdown_scope.csv"), "--model", "ringdown"])

    tour.section("3. Calibration reports",
                 "HC-03 was found running at 50.40 Hz and trimmed; HC-07 has a wrong choke and fails "
                 "on THD. The batch is also fitted (capacitor banks measured at 33 µF), so each report "
                 "shows the unit's effective parts and a suggested adjustment. Exit code 1 marks a "
                 "failing unit, so scripts can gate on it.")
    tour.run(["report", s("hc03_asleft.wav"), "--as-found", s("hc03_asfound.wav"), "--unit", "HC-03",
              "--spec", spec, "--operator", "demo", "--out", str(out / "reports"), "--log", log])
    tour.run(["report", *sorted(str(p) for p in src.glob("hc0[1-7]_*.flac")), s("hc07_output.wav"),
              "--each", "--spec", spec, "--operator", "demo", "--out", str(out / "reports"), "--log", log,
              "--model", "lc-lowpass", "--fix", "C=33u", "--fix", "Rload=10k", *job_args], expect=(1,))

    tour.section("4. The log and batch statistics")
    tour.run(["log", "list", "--log", log])
    for quantity in ("frequency_hz", "thd_pct", "vrms"):
        tour.run(["log", "stats", quantity, "--spec", spec, "--log", log])

    tour.section("5. Trim advice",
                 "Advice judged on every limit of the spec, with the probability of passing. HC-07: fit "
                 "with its capacitor bank measured (33 µF) and measure its output; the fitted inductance "
                 "(about 198 mH against 300 mH nominal) names the choke to replace. HC-04 passes with "
                 "margin: no change. HC-03 as found: a small resistor in series with RB, calibrated by "
                 "the measured frequency.")
    fit_json = out / "hc07_fit.json"
    meas_json = out / "hc07_measurement.json"
    tour.run(["fit", s("hc07_output.wav"), "--model", "lc-lowpass", "--fix", "C=33u", "--fix", "Rload=10k",
              "--json"], save_stdout=fit_json)
    tour.run(["measure", s("hc07_output.wav"), "--json"], save_stdout=meas_json)
    tour.run(["design", "trim", "--fit", str(fit_json), "--measurement", str(meas_json), "--spec", spec])
    fit04, meas04 = out / "hc04_fit.json", out / "hc04_measurement.json"
    tour.run(["fit", s("hc04_output.flac"), "--model", "lc-lowpass", "--fix", "C=33u", "--fix", "Rload=10k",
              "--json"], save_stdout=fit04)
    tour.run(["measure", s("hc04_output.flac"), "--json"], save_stdout=meas04)
    tour.run(["design", "trim", "--fit", str(fit04), "--measurement", str(meas04), "--spec", spec])
    tour.run(["design", "trim", "--spec", spec, "--timer-frequency", "50.40", "--timer-frequency-u",
              "0.001", *_TIMER])

    tour.section("6. Stability over a warm-up",
                 "HC-08 recorded for 10 minutes from switch-on (8 kHz, one channel): every 1 s interval "
                 "measured with phases chained across intervals; warm-up time, drift rate and the Allan "
                 "deviation, logged; then its calibration report with a Stability section judged against "
                 "the stability limits.")
    tour.run(["drift", s("hc08_warmup.flac"), "--log", log])
    tour.run(["report", s("hc08_output.flac"), "--unit", "HC-08", "--spec", s("hc_spec_stability.toml"),
              "--drift", s("hc08_warmup.flac"), "--operator", "demo", "--out", str(out / "reports"), "--log", log])
    tour.run(["log", "stats", "warmup_s", "--spec", s("hc_spec_stability.toml"), "--log", log])

    elapsed = time.perf_counter() - started
    index = _write_index(out / "reports")
    tour.section("Done")
    n_reports = len(list((out / "reports").glob("*.html"))) - 1
    stdout.print(f"{n_reports} calibration reports (HTML + JSON) in {out / 'reports'}, the log in {log}, "
                 f"figures and fit results in {out}; {elapsed:.1f} s.", markup=False)
    stdout.print("Open the reports with:", markup=False)
    stdout.print(f"  python3 -m webbrowser {shlex.quote(index.resolve().as_uri())}", markup=False,
                 highlight=False)
    if tour.failed:
        fail(f"demo: {len(tour.failed)} step(s) did not do what was expected: {'; '.join(tour.failed)}")


def _summarise_measurements(jsonl: Path) -> None:
    """A compact table of the batch's JSON lines (rendering only: the numbers are measure's)."""
    import json

    from rich.table import Table

    from benchfit.cli.common import stdout
    from benchfit.units import format_with_uncertainty

    table = Table(title="batch summary (output channel)", title_justify="left", box=None, pad_edge=False)
    for col in ("file", "frequency", "rms", "THD"):
        table.add_column(col, justify="left" if col == "file" else "right")
    lines = [json.loads(x) for x in jsonl.read_text(encoding="utf-8").splitlines() if x.strip()]
    for d in sorted(lines, key=lambda d: d["file"]):
        ch = d["channels"][0]
        thd = "—" if ch["thd_pct"] is None else f"{ch['thd_pct']:.2f} %"
        table.add_row(Path(d["file"]).name, format_with_uncertainty(ch["frequency_hz"], ch["frequency_u_hz"], "Hz"),
                      f"{ch['vrms']:.4f} {ch['unit']}", thd)
    stdout.print(table)


def _write_index(reports: Path) -> Path:
    """reports/index.html: every report in the folder with its unit and verdict (links only)."""
    import html
    import json

    rows = []
    for page in sorted(reports.glob("*.html")):
        if page.name == "index.html":
            continue
        twin = page.with_suffix(".json")
        unit, verdict, when = page.stem, "", ""
        if twin.is_file():
            try:
                d = json.loads(twin.read_text(encoding="utf-8"))
                unit, verdict, when = str(d.get("unit", unit)), str(d.get("verdict", "")), str(d.get("created_utc", ""))
            except (ValueError, OSError):
                pass
        rows.append(f"<tr><td><a href=\"{html.escape(page.name)}\">{html.escape(unit)}</a></td>"
                    f"<td class=\"{html.escape(verdict.replace(' ', '-'))}\">{html.escape(verdict)}</td>"
                    f"<td>{html.escape(when)}</td></tr>")
    index = reports / "index.html"
    index.write_text(
        "<!doctype html><html lang=\"en\"><head><meta charset=\"utf-8\"><title>benchfit reports</title>"
        "<style>body{font-family:system-ui,sans-serif;margin:2rem;color:#222}"
        "table{border-collapse:collapse}td,th{padding:.3rem .9rem;border-bottom:1px solid #ccc;text-align:left}"
        ".fail,.conditional-fail{color:#a00;font-weight:600}.pass{color:#064}</style></head><body>"
        "<h1>Calibration reports</h1><p>Synthetic demo data (hum-check boxes).</p>"
        "<table><tr><th>unit</th><th>decision</th><th>made (UTC)</th></tr>" + "".join(rows) +
        "</table></body></html>\n", encoding="utf-8")
    return index
