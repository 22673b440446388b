"""``benchfit report``: measure (and fit) one unit's captures, judge them against a spec,
write an HTML calibration record with its JSON twin, and append the run to the log.

With ``--each`` every capture file is its own unit (a batch of built units, one report
each), run in worker processes (``--jobs``); the serial of each unit comes from the
capture's sidecar ``"unit"`` key when present, else from the file name stem
(``HC-07.wav`` → ``HC-07``). See :func:`benchfit.cli.batch.unit_serial`.

Exit codes: 0 the unit(s) pass (including a conditional pass), 1 a unit fails (fail,
conditional fail or a quantity not measured), 2 bad input — in a batch, 2 when any capture
could not be reported (it wins over 1).
"""

from __future__ import annotations

import contextlib
import os
import shutil
import tempfile
from dataclasses import replace
from pathlib import Path
from typing import TYPE_CHECKING, Any, List, Mapping, Optional

import typer

from benchfit.cli.app import app
from benchfit.cli.fit_cmd import ModelOption

if TYPE_CHECKING:
    from benchfit.log.postgres import LogURL

_EXAMPLE = """

Example:

\b
  benchfit report hc07_left.wav --as-found hc07_found.wav --unit HC-07 \\
      --spec sample_captures/hc_spec.toml --operator "R. Okafor" \\
      --out reports/

A batch of units, one report each (serial from each sidecar's "unit" key, else the file name):

\b
  benchfit report captures/ --each --spec sample_captures/hc_spec.toml \\
      --out reports/ --jobs 2

Exit status 1 when a unit fails its spec; 2 when a capture could not be reported (in a
batch the others are still reported, and 2 wins over 1).
"""

_FIT_NAMES = ("L", "C", "Rs", "Resr", "Rload")


@app.command("report", help="Judge a built unit against its spec and write an HTML + JSON calibration record."
             + _EXAMPLE, short_help="Judge a built unit against its spec; write an HTML + JSON calibration record.")
def report_command(
    captures: List[Path] = typer.Argument(
        ..., metavar="CAPTURES", help="As-left capture files (WAV, FLAC, OGG, AIFF or CSV) and/or folders. A folder gives its "
                  "files ending in .wav .flac .csv .tsv .txt .ogg .aiff, sorted by name."),
    unit: Optional[str] = typer.Option(None, "--unit", metavar="SERIAL", help="Serial of the unit under test, e.g. HC-07 "
                                                            "(required without --each)."),
    spec: Path = typer.Option(..., "--spec", metavar="FILE", help="Spec TOML file (limits, conditions, decision rule)."),
    each: bool = typer.Option(False, "--each",
                              help="Every capture is its own unit, with its own report. The serial is the "
                                   "sidecar's \"unit\" key when present, else the file name without its "
                                   "extension (HC-07.wav → HC-07)."),
    recursive: bool = typer.Option(False, "--recursive", "-r", help="Also take capture files from sub-folders."),
    jobs: Optional[int] = typer.Option(
        None, "--jobs", "-j", metavar="N", min=1, show_default=False,
        help="With --each: units judged at once: this process and N−1 worker processes (default and "
             "ceiling: the CPUs this process may use); --jobs 1 works in this process alone."),
    as_found: Optional[List[Path]] = typer.Option(None, "--as-found", metavar="FILE",
                                                  help="Capture made before adjustment (repeatable; "
                                                       "not with --each)."),
    operator: Optional[str] = typer.Option(None, "--operator", metavar="NAME", help="Who made the measurement."),
    out: Path = typer.Option(Path("."), "--out", metavar="DIR", help="Directory for the report files."),
    model: Optional[ModelOption] = typer.Option(None, "--model", show_default=False,
                                                help="Fit the captures with this model. Default: lc-lowpass "
                                                     "when the spec names a fitted quantity."),
    drive: Optional[str] = typer.Option(None, "--drive", metavar="CH", help="Channel holding the filter's drive (fit)."),
    response: Optional[str] = typer.Option(None, "--response", metavar="CH", help="Channel holding the filter output (fit)."),
    fix: Optional[List[str]] = typer.Option(None, "--fix", metavar="NAME=VALUE",
                                            help="Hold a fit parameter fixed, e.g. --fix Rload=10k±1% (repeatable; the "
                                                 "tolerance, rectangular, is propagated)."),
    log: Optional[str] = typer.Option(None, "--log", metavar="PATH",
                                      envvar="BENCHFIT_LOG",
                                      help="Measurement log file or postgresql:// URL (default: $BENCHFIT_LOG or the user data "
                                           "directory's benchfit/log.sqlite)."),
    bench: Optional[str] = typer.Option(
        None, "--bench", metavar="NAME",
        help="This bench's (station's) name on the logged runs (default: $BENCHFIT_BENCH or the host name)."),
    no_log: bool = typer.Option(False, "--no-log", help="Do not append this run to the measurement log."),
    channel: Optional[List[str]] = typer.Option(None, "--channel", metavar="NAME=CH",
                                                help="Take the spec's channel NAME from capture channel CH (a "
                                                     "name or 1-based number), e.g. --channel output=2 "
                                                     "(repeatable)."),
    no_figures: bool = typer.Option(False, "--no-figures", help="Leave the figures out (faster)."),
    sample_rate: Optional[str] = typer.Option(
        None, "--sample-rate", metavar="RATE", help="Sample rate for CSV captures without a time column, "
        "e.g. 48000 or 100k (Hz)."),
    drift: Optional[Path] = typer.Option(None, "--drift", metavar="RUN",
                                         help="A drift run of the unit for the Stability section: the JSON of "
                                              "'benchfit drift --json', or the long capture itself (not with --each)."),
    as_json: bool = typer.Option(False, "--json", help="Print the paths and verdict as one JSON object "
                                                       "(with --each: one line per unit as it finishes)."),
) -> None:
    from benchfit.cli.batch import collect_captures, prefer_one_blas_thread
    from benchfit.cli.common import check_parts_plausible, fail, parse_value

    prefer_one_blas_thread()  # before numpy loads: its small matrix products run faster on one thread

    from benchfit.log.store import resolve_log_path
    from benchfit.report.assemble import FitOptions

    model_name = None if model is None else ModelOption(model).value
    if log is not None and log == os.environ.get("BENCHFIT_LOG") and no_log:
        log = None  # typer filled --log from $BENCHFIT_LOG: --no-log wins over the environment
    from benchfit.cli.fit_cmd import parse_fix_options

    # NAME=VALUE[±TOL] (issue 11): a tolerance is propagated into the fitted values' uncertainties
    fix_values = {k: (v.value if v.half_width is None else v)  # a plain value stays a plain float
                  for k, v in parse_fix_options(fix, tuple(_FIT_NAMES)).items()}
    check_parts_plausible(fix_values, "--fix")
    channel_map = _channel_map(channel)
    rate = parse_value(sample_rate, "--sample-rate") if sample_rate is not None else None
    fit = None
    if model_name is not None or drive is not None or response is not None or fix_values:
        fit = FitOptions(model=model_name or "lc-lowpass", drive=drive, response=response, fix=fix_values)
    if log is not None and not log.strip():
        fail("--log: the path is empty — give the log file, leave --log out for the default log, "
             "or use --no-log")
    if log is not None and no_log:
        fail("--log and --no-log: give only one — --log PATH names the log, --no-log logs nothing")
    from benchfit.log.store import use_bench

    use_bench(bench)
    log_path = None if no_log else resolve_log_path(log)
    if each:
        if unit is not None:
            fail(f"--unit {unit!r}: not used with --each — each capture's serial comes from its sidecar's "
                 "\"unit\" key or its file name; leave --unit out")
        if as_found:
            fail("--as-found: not used with --each — report a unit with as-found captures on its own, "
                 "without --each")
        if drift is not None:
            fail("--drift: not used with --each — report the unit with its drift run on its own, without --each")
    elif unit is None:
        fail("--unit: missing — give the serial of the unit (e.g. --unit HC-07), or --each to make "
             "every capture its own unit")
    paths, notes = collect_captures(captures, recursive=recursive)
    if not paths:
        fail("; ".join(notes))
    if each:
        _report_each(paths, notes, spec=spec, out=out, fit=fit, operator=operator, log_path=log_path,
                     with_figures=not no_figures, as_json=as_json, jobs=jobs, channel_map=channel_map,
                     sample_rate=rate)
        return
    if drift is not None and not drift.is_file():
        fail(f"{drift}: no such file — give the JSON of 'benchfit drift --json' or the long capture")
    assert unit is not None  # refused above unless --each
    _report_one(paths, unit=unit, spec=spec, as_found=as_found or [], operator=operator, out=out, fit=fit,
                log_path=log_path, with_figures=not no_figures, as_json=as_json, drift=drift,
                channel_map=channel_map, sample_rate=rate)


def _channel_map(items: Optional[List[str]]) -> dict[str, str]:
    """``--channel NAME=CH`` options as ``{NAME: CH}``."""
    from benchfit.cli.common import fail

    out: dict[str, str] = {}
    for item in items or []:
        name, eq, ch = item.partition("=")
        if not eq or not name.strip() or not ch.strip():
            fail(f"--channel {item!r}: not NAME=CH — write it like --channel output=2 (the spec's channel "
                 "name = the capture's channel name or 1-based number)")
        if name.strip().lower() in {k.lower() for k in out}:
            fail(f"--channel {item!r}: {name.strip()!r} is mapped twice — give each spec channel once")
        out[name.strip()] = ch.strip()
    return out


def _report_one(paths: list[Path], *, unit: str, spec: Path, as_found: list[Path], operator: str | None,
                out: Path, fit, log_path: Path | LogURL | None, with_figures: bool, as_json: bool,
                drift: Path | None = None, channel_map: dict[str, str] | None = None,
                sample_rate: float | None = None) -> None:
    """All captures belong to one unit (in this process)."""
    from benchfit.cli.common import print_json, stderr, stdout
    from benchfit.report.assemble import run_unit

    if log_path is not None:
        from benchfit.cli.logsafe import check_log_writable
        from benchfit.log.store import open_log

        check_log_writable(log_path)  # a read-only log stops here, before any report file is written
        open_log(log_path).close()  # so does a foreign one
    with stderr.status("benchfit report", spinner="line") as status:
        result = run_unit(paths, unit=unit, spec=spec, as_found=as_found, operator=operator,
                          out_dir=out, fit=fit, log_path=None, defer_log=log_path is not None,
                          channel_map=channel_map, drift=drift, sample_rate=sample_rate,
                          with_figures=with_figures, progress=lambda text: status.update(text))
    if log_path is not None:
        assert result.log_entry is not None  # run_unit returns the entry it deferred
        result = replace(result, run_id=_log_or_roll_back(log_path, result.log_entry,
                                                          [result.html_path, result.json_path]))
    index = _update_index(out)
    if as_json:
        print_json({"unit": unit, "verdict": result.verdict, "exit_code": result.exit_code,
                    "html": str(result.html_path), "json": str(result.json_path),
                    "log": None if log_path is None else str(log_path), "run_id": result.run_id})
    else:
        stdout.print(f"unit {unit}: [{_style(result.verdict)}]{result.verdict}[/]", markup=True)
        stdout.print(f"report  {result.html_path}", markup=False)
        stdout.print(f"json    {result.json_path}", markup=False)
        if result.run_id is not None:
            stdout.print(f"logged  run {result.run_id} in {log_path}", markup=False)
        if index is not None:
            stdout.print(f"index   {index}", markup=False)
    if result.exit_code:
        raise typer.Exit(code=result.exit_code)


def _update_index(out: Path) -> Path | None:
    """Rewrite ``out/index.html`` (every report there); a failure is a warning, the reports stand."""
    from benchfit.cli.common import stderr
    from benchfit.report.index import write_index

    try:
        return write_index(out)
    except OSError as e:
        stderr.print(f"warning: {out / 'index.html'}: the report index cannot be written ({e.strerror or e}) — "
                     "the reports themselves are written; check the folder", markup=False, highlight=False)
        return None


def _log_or_roll_back(log_path: Path | LogURL, entry: Mapping[str, Any], files: list[Path]) -> int:
    """Append a unit's run; if the log refuses it, remove the report files just made for it.

    A report that is not in the log would be a record nobody can find again: the files (created
    exclusively for this run a moment ago) go, and the error says so.
    """
    from benchfit.cli.logsafe import append_run_explained
    from benchfit.errors import LogError

    try:
        return append_run_explained(log_path, **entry)
    except (LogError, KeyboardInterrupt) as e:
        for f in files:
            with contextlib.suppress(OSError):
                Path(f).unlink()
        if isinstance(e, KeyboardInterrupt):
            raise
        raise LogError(f"{e} (its report files were removed: {', '.join(Path(f).name for f in files)})") from e


def _publish(html: Path, js: Path, out: Path) -> tuple[Path, Path]:
    """Move a staged report pair into ``out`` under the first free ``<stem>[-n]`` name.

    Each file is hard-linked into place (link(2) fails if the name exists, so nothing is
    replaced) and then unlinked from the staging folder.
    """
    for n in range(1, 1000):
        name = html.stem if n == 1 else f"{html.stem}-{n}"
        targets = (out / f"{name}.html", out / f"{name}.json")
        linked: list[Path] = []
        try:
            for src, dst in zip((html, js), targets):
                try:
                    os.link(src, dst)
                except FileExistsError:
                    raise
                except OSError:  # no hard links on this file system: copy, after a check
                    if dst.exists():
                        raise FileExistsError(dst) from None
                    shutil.copyfile(src, dst)
                linked.append(dst)
        except FileExistsError:
            for dst in linked:
                dst.unlink()
            continue
        for src in (html, js):
            src.unlink()
        return targets
    from benchfit.errors import BenchfitError

    raise BenchfitError(f"{out}: 999 reports named {html.stem} already exist — choose another --out")


def _style(verdict: str) -> str:
    return {"pass": "bold green", "conditional pass": "bold yellow"}.get(verdict, "bold red")


def _report_each(paths: list[Path], notes: list[str], *, spec: Path, out: Path, fit, operator: str | None,
                 log_path: Path | LogURL | None, with_figures: bool, as_json: bool, jobs: int | None,
                 channel_map: dict[str, str] | None = None, sample_rate: float | None = None) -> None:
    """Every capture its own unit, in worker processes; a bad capture is named and skipped.

    The spec and fit options are checked here first, so a mistake in them is one error, not
    one per capture. Workers return each unit's log entry and this process appends it, as
    results arrive (one writer to the SQLite log, held open for the batch: each unit is still
    its own committed run).
    """
    from benchfit.cli.batch import REPORT_PRELOAD, default_jobs, progress_bar, report_job, worker_pool
    from benchfit.cli.common import fail, print_json, stdout
    from benchfit.report.assemble import _fit_call
    from benchfit.report.spec import load_spec

    load_spec(spec)
    if fit is not None:
        _fit_call(fit)
    from benchfit.cli.logsafe import check_log_writable, sigint_held
    from benchfit.log.store import held_open, open_log

    if log_path is not None:
        check_log_writable(log_path)  # a read-only log stops here, before any unit is judged
        open_log(log_path).close()  # so does a foreign one
    # Workers write into a hidden staging folder inside --out; a unit's files move into --out only
    # when this process logs the unit. Ctrl-C (or a killed worker) leaves no report that is not
    # in the log: the staging folder is removed on the way out.
    try:
        out.mkdir(parents=True, exist_ok=True)
        staging = Path(tempfile.mkdtemp(prefix=".benchfit-staging-", dir=out))
    except OSError as e:
        fail(f"{out}: cannot create the output directory ({e.strerror}) — check --out")
    kwargs = {"spec": str(spec), "out_dir": str(staging), "fit": fit, "operator": operator,
              "with_log_entry": log_path is not None, "with_figures": with_figures, "channel_map": channel_map,
              "sample_rate": sample_rate}
    outcomes = []
    with contextlib.ExitStack() as cleanup:
        cleanup.callback(shutil.rmtree, staging, ignore_errors=True)
        # the workers start first: forked while this process has one thread (no progress bar yet)
        pool = cleanup.enter_context(worker_pool(jobs or default_jobs(), len(paths), preload=REPORT_PRELOAD))
        cleanup.enter_context(held_open(log_path))  # after the fork: one log connection for the batch
        progress = cleanup.enter_context(progress_bar("reporting", len(paths), notes))

        def on_outcome(outcome) -> None:
            progress.advance(outcome.path.name)
            outcomes.append(outcome)
            if not outcome.ok:
                progress.say(f"error: {outcome.error}")
                return
            r = outcome.result
            entry = r.pop("log_entry", None)
            with sigint_held():  # files moved, run logged and line printed: all three or none
                html, js = _publish(Path(r["html"]), Path(r["json"]), out)
                r["html"], r["json"] = str(html), str(js)
                if entry:
                    entry["details"] = {**entry.get("details", {}), "html": str(html), "json": str(js)}
                r["run_id"] = (_log_or_roll_back(log_path, entry, [html, js])
                               if log_path is not None and entry else None)
                if as_json:
                    print_json({**r, "log": None if log_path is None else str(log_path)})

        pool.run(report_job, paths, kwargs=kwargs, on_outcome=on_outcome)
    index = _update_index(out) if any(o.ok for o in outcomes) else None
    outcomes.sort(key=lambda o: o.index)
    failed = [o for o in outcomes if not o.ok]
    if not as_json:
        from rich.markup import escape
        from rich.table import Table

        n_fail = sum(1 for o in outcomes if o.ok and o.result["exit_code"])
        table = Table(title=f"{len(outcomes)} unit(s): {len(outcomes) - n_fail - len(failed)} passed, "
                            f"{n_fail} failed, {len(failed)} not reported", title_justify="left",
                      box=None, pad_edge=False, header_style="bold")
        for col in ("unit", "decision", "report"):
            table.add_column(col, no_wrap=col != "report")
        for o in outcomes:
            if o.ok:
                r = o.result
                table.add_row(escape(r["unit"]), f"[{_style(r['verdict'])}]{escape(r['verdict'])}[/]",
                              escape(r["html"]))
            else:
                table.add_row(escape(o.path.stem), "[bold red]error[/]", escape(f"{o.path} (see the error above)"))
        stdout.print(table)
        if log_path is not None:
            stdout.print(f"logged in {log_path}", markup=False)
        if index is not None:
            stdout.print(f"index  {index}", markup=False)
    if failed:
        fail(f"{len(failed)} of {len(paths)} captures could not be reported — see the lines above; "
             "the others were")
    if any(o.result["exit_code"] for o in outcomes):
        raise typer.Exit(code=1)
