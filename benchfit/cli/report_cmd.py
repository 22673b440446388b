"""``benchfit report``: measure (and fit) one unit's captures, judge them against a spec,
write an HTML calibration record with its JSON twin, and append the run to the log.

Exit codes: 0 the unit passes (including a conditional pass), 1 it fails (fail,
conditional fail or a quantity not measured), 2 bad input.
"""

from __future__ import annotations

from pathlib import Path
from typing import List, Optional

import typer

from benchfit.cli.app import app

_EXAMPLE = """
Example:

  benchfit report hc07_left.wav --as-found hc07_found.wav --unit HC-07 \\
      --spec sample_captures/hc_spec.toml --operator "R. Okafor" --out reports/
"""

_FIT_NAMES = ("L", "C", "Rs", "Resr", "Rload")


@app.command("report", help="Judge a built unit against its spec and write an HTML + JSON calibration record."
             + _EXAMPLE, short_help="Judge a built unit against its spec; write an HTML + JSON calibration record.")
def report_command(
    captures: List[Path] = typer.Argument(..., help="As-left capture file(s): WAV, FLAC or CSV."),
    unit: str = typer.Option(..., "--unit", help="Serial of the unit under test, e.g. HC-07."),
    spec: Path = typer.Option(..., "--spec", help="Spec TOML file (limits, conditions, decision rule)."),
    as_found: Optional[List[Path]] = typer.Option(None, "--as-found",
                                                  help="Capture made before adjustment (repeatable)."),
    operator: Optional[str] = typer.Option(None, "--operator", help="Who made the measurement."),
    out: Path = typer.Option(Path("."), "--out", help="Directory for the report files."),
    model: Optional[str] = typer.Option(None, "--model",
                                        help="Fit the captures with this model: lc-lowpass or ringdown. "
                                             "Default: lc-lowpass when the spec names a fitted quantity."),
    drive: Optional[str] = typer.Option(None, "--drive", help="Channel holding the filter's drive (fit)."),
    response: Optional[str] = typer.Option(None, "--response", help="Channel holding the filter output (fit)."),
    fix: Optional[List[str]] = typer.Option(None, "--fix",
                                            help="Hold a fit parameter fixed, e.g. --fix Rload=10k (repeatable)."),
    log: Optional[str] = typer.Option(None, "--log",
                                      help="Measurement log file (default: $BENCHFIT_LOG or the user data "
                                           "directory's benchfit/log.sqlite)."),
    no_log: bool = typer.Option(False, "--no-log", help="Do not append this run to the measurement log."),
    no_figures: bool = typer.Option(False, "--no-figures", help="Leave the figures out (faster)."),
    as_json: bool = typer.Option(False, "--json", help="Print the paths and verdict as one JSON object."),
) -> None:
    from benchfit.cli.common import parse_assignments, print_json, stderr, stdout
    from benchfit.log.store import resolve_log_path
    from benchfit.report.assemble import FitOptions, run_unit

    fix_values = parse_assignments(fix, _FIT_NAMES, "--fix", zero_ok=("Resr", "Rs"))
    fit = None
    if model is not None or drive is not None or response is not None or fix_values:
        fit = FitOptions(model=model or "lc-lowpass", drive=drive, response=response, fix=fix_values)
    log_path = None if no_log else resolve_log_path(log)
    with stderr.status("benchfit report", spinner="line") as status:
        result = run_unit(captures, unit=unit, spec=spec, as_found=as_found or (), operator=operator,
                          out_dir=out, fit=fit, log_path=log_path, with_figures=not no_figures,
                          progress=lambda text: status.update(text))
    if as_json:
        print_json({"unit": unit, "verdict": result.verdict, "exit_code": result.exit_code,
                    "html": str(result.html_path), "json": str(result.json_path),
                    "log": None if log_path is None else str(log_path), "run_id": result.run_id})
    else:
        style = {"pass": "bold green", "conditional pass": "bold yellow"}.get(result.verdict, "bold red")
        stdout.print(f"unit {unit}: [{style}]{result.verdict}[/]", markup=True)
        stdout.print(f"report  {result.html_path}", markup=False)
        stdout.print(f"json    {result.json_path}", markup=False)
        if result.run_id is not None:
            stdout.print(f"logged  run {result.run_id} in {log_path}", markup=False)
    if result.exit_code:
        raise typer.Exit(code=result.exit_code)
