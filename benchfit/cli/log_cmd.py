"""``benchfit log list|show|export|stats|merge|sync``: read the measurement log, bring logs together."""

from __future__ import annotations

import enum
import math
from pathlib import Path
from typing import Optional

import typer

from benchfit.cli.app import log_app

#: the formats of ``log export`` (those of benchfit.log.export, named here so that help lists them)
FormatOption = enum.Enum("FormatOption", {"csv": "csv", "json": "json"}, type=str)

_LOG_HELP = ("Measurement log: a file, or postgresql://user@host:port/dbname for a shared server log "
             "(default: $BENCHFIT_LOG or the user data directory's benchfit/log.sqlite).")


def _log_path(option: Optional[str]):
    from benchfit.log.store import resolve_log_path

    return resolve_log_path(option)


def _read_log(option: Optional[str], fn, *args, **kwargs):
    """``fn(log, ...)`` on the log, or on a snapshot copy when it cannot be written (read-only);
    an error names the log, not the copy."""
    from benchfit.cli.logsafe import readable_log_path
    from benchfit.errors import BenchfitError

    path = _log_path(option)
    readable = readable_log_path(path)
    try:
        return fn(readable, *args, **kwargs)
    except BenchfitError as e:
        if readable == path:
            raise
        raise type(e)(str(e).replace(str(readable), str(path))) from e


def _check_since(since: Optional[str]) -> Optional[str]:
    if since is None:
        return None
    import datetime as dt

    from benchfit.cli.common import fail

    try:
        parsed = dt.datetime.fromisoformat(since.replace("Z", "+00:00"))
    except ValueError:
        fail(f"--since {since!r}: not a date — write it like 2026-12-01 or 2026-12-01T17:00:00Z")
    if parsed.tzinfo is not None:
        parsed = parsed.astimezone(dt.timezone.utc).replace(tzinfo=None)
    return parsed.strftime("%Y-%m-%dT%H:%M:%S")


@log_app.command("list", help="List logged runs.\n\nExample:\n\n\b\n  benchfit log list --unit HC-07 --since 2026-12-01")
def list_command(
    unit: Optional[str] = typer.Option(None, "--unit", metavar="SERIAL", help="Only runs of this unit serial."),
    since: Optional[str] = typer.Option(None, "--since", metavar="DATE", help="Only runs at or after this UTC date/time."),
    bench: Optional[str] = typer.Option(None, "--bench", metavar="NAME", help="Only runs taken at this bench."),
    last: Optional[int] = typer.Option(None, "--last", metavar="N", min=1, help="Only the latest N runs."),
    log: Optional[str] = typer.Option(None, "--log", metavar="PATH", help=_LOG_HELP, envvar="BENCHFIT_LOG"),
    as_json: bool = typer.Option(False, "--json", help="Print the runs as one JSON object."),
) -> None:
    from benchfit.cli.common import print_json, stdout
    from benchfit.log.store import list_runs

    runs = _read_log(log, list_runs, unit=unit, since=_check_since(since), bench=bench, last=last)
    if as_json:
        print_json({"runs": runs})
        return
    from rich.table import Table

    table = Table(title=f"{len(runs)} run(s) in {_log_path(log)}", title_justify="left")
    for col in ("run", "time (UTC)", "bench", "command", "unit", "operator", "verdict", "captures"):
        table.add_column(col)
    for r in runs:
        table.add_row(str(r["id"]), r["time_utc"][:19], r["bench"] or "—", r["command"], r["unit"] or "—",
                      r["operator"] or "—", r["verdict"] or "—", str(r["n_captures"]))
    stdout.print(table)


def _resolve_run(log: Optional[str], run: str) -> tuple[int, Optional[str]]:
    """(run id, note) for ``log show RUN``: a whole number is a run id; any other text is a unit
    serial, whose latest run is shown (the note says so and how to see the others)."""
    from benchfit.cli.common import fail
    from benchfit.log.store import list_runs

    text = run.strip()
    if not text:
        fail("log show: RUN is empty — give a run id (e.g. 12) or a unit serial (e.g. HC-03); "
             "see `benchfit log list`")
    if text.isascii() and text.isdigit():  # "²" is a digit to str.isdigit, not to int()
        return int(text), None
    runs = _read_log(log, list_runs, unit=text)
    if not runs:
        serials = sorted({r["unit"] for r in _read_log(log, list_runs) if r["unit"]})
        near = [s for s in serials if s.lower() == text.lower()]
        hint = (f"did you mean {near[0]!r}?" if near else
                f"logged serials: {', '.join(serials[:8])}{' …' if len(serials) > 8 else ''}" if serials
                else "the log holds no runs with a unit serial")
        fail(f"log show {text}: no run id and no logged unit with this serial — {hint} "
             "(see `benchfit log list`)")
    latest = runs[-1]  # list_runs is in time order
    note = (f"{text} has {len(runs)} logged run(s); showing the latest, run {latest['id']} "
            f"({latest['time_utc'][:19]} UTC) — `benchfit log list --unit {text}` lists them all")
    return int(latest["id"]), note


@log_app.command("show", help="Show everything logged about one run: by run id, or the latest run of a unit "
                 "serial.\n\nExample:\n\n\b\n  benchfit log show 12\n  benchfit log show HC-03")
def show_command(
    run: str = typer.Argument(..., metavar="RUN", help="Run id (see `benchfit log list`), or a unit serial "
                              "for its latest run."),
    log: Optional[str] = typer.Option(None, "--log", metavar="PATH", help=_LOG_HELP, envvar="BENCHFIT_LOG"),
    as_json: bool = typer.Option(False, "--json", help="Print the run as one JSON object."),
) -> None:
    from benchfit.cli.common import print_json, stderr, stdout
    from benchfit.log.store import get_run
    from benchfit.report.html import format_limits, format_u, format_value

    run_id, note = _resolve_run(log, run)
    data = _read_log(log, get_run, run_id)
    if note:  # on stderr, so --json stays one object on stdout
        stderr.print(f"note: {note}", markup=False, highlight=False, soft_wrap=True)
    if as_json:
        print_json(data)
        return
    from rich.table import Table

    stdout.print(f"run {data['id']} · {data['command']} · {data['time_utc']} · unit {data['unit'] or '—'} · "
                 f"operator {data['operator'] or '—'} · bench {data['bench'] or '—'} · "
                 f"benchfit {data['benchfit_version']}"
                 + (f" · verdict {data['verdict']}" if data["verdict"] else ""), markup=False)
    stdout.print(f"  uuid {data['uuid']}", markup=False)
    for c in data["captures"]:
        stdout.print(f"  capture {c['role'] or ''} {c['path']}  sha256 {c['sha256'] or '—'}", markup=False)
    table = Table(title="results (quantities with a value)", title_justify="left")
    for col in ("role", "source", "channel", "quantity", "value", "u (k=1)"):
        table.add_column(col)
    shown = [r for r in data["results"] if r["value"] is not None]
    for r in shown:
        table.add_row(r["role"] or "—", r["source"], r["channel"] or "—", r["quantity"],
                      format_value(r["value"], r["unit"], r["uncertainty"]), format_u(r["uncertainty"], r["unit"]))
    stdout.print(table)
    if data["decisions"]:
        dt = Table(title="decisions", title_justify="left")
        for col in ("quantity", "value", "U (k=2)", "limits", "rule", "decision"):
            dt.add_column(col)
        for d in data["decisions"]:
            dt.add_row(d["label"] or d["quantity"], format_value(d["value"], d["unit"], d["expanded_u"]),
                       format_u(d["expanded_u"], d["unit"]), format_limits(d["lower"], d["upper"], d["unit"]),
                       d["rule"], d["decision"])
        stdout.print(dt)


@log_app.command("export", help="Export the logged results as CSV or JSON (one row per result).\n\n"
                 "Example:\n\n\b\n  benchfit log export --format csv --out batch.csv")
def export_command(
    fmt: FormatOption = typer.Option(FormatOption("csv"), "--format", help="CSV (one row per result) or JSON records."),
    out: Optional[Path] = typer.Option(None, "--out", metavar="FILE", help="Output file (default: print to stdout)."),
    overwrite: bool = typer.Option(False, "--overwrite", help="Replace an existing --out file."),
    unit: Optional[str] = typer.Option(None, "--unit", metavar="SERIAL", help="Only results of this unit serial."),
    since: Optional[str] = typer.Option(None, "--since", metavar="DATE", help="Only runs at or after this UTC date/time."),
    log: Optional[str] = typer.Option(None, "--log", metavar="PATH", help=_LOG_HELP, envvar="BENCHFIT_LOG"),
) -> None:
    import sys

    from benchfit.cli.common import stderr
    from benchfit.log.export import export_log

    text = _read_log(log, export_log, FormatOption(fmt).value, out, overwrite=overwrite, unit=unit,
                     since=_check_since(since))
    if text is not None:
        sys.stdout.write(text if text.endswith("\n") else text + "\n")
    else:
        stderr.print(f"wrote {out}", markup=False)


#: below this many units a capability figure is a rough indication only (common practice, no source)
_SMALL_N = 30


def _small_n_caution(n: int) -> str | None:
    """What a small batch means for the spread: the relative standard uncertainty of a sample standard
    deviation from n normal values is about 1/√(2(n − 1)) (JCGM 100:2008 (GUM), E.4.3, from memory)."""
    if n >= _SMALL_N:
        return None
    if n < 2:
        return f"n = {n}: one unit gives no spread — log more units before judging the process"
    rel = 1.0 / math.sqrt(2.0 * (n - 1))
    return (f"n = {n} is a small batch: the standard deviation (and so Cp, Cpk) is uncertain by about "
            f"±{100 * rel:.0f} % (1/√(2(n−1))) — read it as an indication; {_SMALL_N} or more units give "
            "a firmer figure")


def _no_values(quantity: str, log: Optional[str]) -> str:
    """'no logged values', with the nearest quantity names the log or benchfit knows."""
    import difflib

    from benchfit.log.store import results_rows
    from benchfit.report.spec import QUANTITY_UNITS

    logged = sorted({r["quantity"] for r in _read_log(log, results_rows)})
    close = difflib.get_close_matches(quantity, logged + [q for q in QUANTITY_UNITS if q not in logged], n=2,
                                      cutoff=0.5)
    hint = f" (did you mean {' or '.join(close)}?)" if close else ""
    known = ", ".join(logged[:12]) + (" …" if len(logged) > 12 else "")
    return (f"{quantity}: no logged values{hint} — the log holds {known or 'no results yet'}; "
            "see 'benchfit log export'")


@log_app.command("stats", help="Batch statistics of one quantity: n, mean, std, min, max, Cp and Cpk.\n\n"
                 "One value per unit (its latest as-left result); runs without a serial count singly.\n\n"
                 "Example:\n\n\b\n  benchfit log stats frequency_hz --spec sample_captures/hc_spec.toml \\\n      --plot f.svg")
def stats_command(
    quantity: str = typer.Argument(..., metavar="QUANTITY", help="Quantity name, e.g. frequency_hz, thd_pct, vrms, C."),
    spec: Optional[Path] = typer.Option(None, "--spec", metavar="FILE", help="Spec TOML file giving the limits (for Cp, Cpk)."),
    channel: Optional[str] = typer.Option(None, "--channel", metavar="CH", help="Only results of this channel name."),
    plot: Optional[Path] = typer.Option(None, "--plot", metavar="FILE", help="Write a histogram with the limits (SVG)."),
    overwrite: bool = typer.Option(False, "--overwrite", help="Replace an existing --plot file."),
    all_runs: bool = typer.Option(False, "--all-runs", help="Use every logged value, not one per unit."),
    since: Optional[str] = typer.Option(None, "--since", metavar="DATE", help="Only runs at or after this UTC date/time."),
    by: Optional[str] = typer.Option(None, "--by", metavar="FIELD",
                                     help="bench: one line per bench (station), with its mean's offset from "
                                          "the mean of all."),
    log: Optional[str] = typer.Option(None, "--log", metavar="PATH", help=_LOG_HELP, envvar="BENCHFIT_LOG"),
    as_json: bool = typer.Option(False, "--json", help="Print the statistics as one JSON object."),
) -> None:
    from benchfit.cli.common import fail, print_json, stderr, stdout
    from benchfit.log.stats import capability, histogram_svg
    from benchfit.log.store import results_rows
    from benchfit.report.html import format_value

    if by is not None and by != "bench":
        fail(f"--by {by!r}: unknown — use --by bench")
    lower = upper = None
    if spec is not None:
        from benchfit.report.spec import load_spec

        sp = load_spec(spec)
        lim = sp.limit_for(quantity)
        if lim is None:
            fail(f"{spec}: no limit on {quantity!r} — the spec limits "
                 f"{', '.join(x.quantity for x in sp.limits)}")
        lower, upper = lim.lower, lim.upper
        if channel is None and isinstance(lim.channel, str):
            channel = lim.channel
    if plot is not None and plot.exists() and not overwrite:
        fail(f"{plot}: file exists — choose another --plot or add --overwrite")
    rows = [r for r in _read_log(log, results_rows, quantity=quantity, since=_check_since(since))
            if r["role"] in ("as-left", "") and r["value"] is not None
            and (channel is None or (r["channel"] or "").lower() == channel.lower())]
    if not all_runs:
        latest: dict[object, dict] = {}
        for i, r in enumerate(rows):
            key = r["unit"] if r["unit"] else ("run", r["run_id"], i)
            latest[(r["bench"], key) if by else key] = r
        rows = list(latest.values())
    if not rows and channel is not None:
        fail(f"--channel {channel!r}: no logged as-left values of {quantity} on a channel of that name — "
             "check the channel name with 'benchfit log export', or leave --channel out")
    units = {r["value_unit"] for r in rows}
    if len(units) > 1:
        fail(f"{quantity}: logged in several units ({', '.join(sorted(units))}) — choose one with --channel")
    unit = units.pop() if units else ""
    values = [r["value"] for r in rows]
    if not values:
        fail(_no_values(quantity, log))
    cap = capability(values, lower, upper, quantity)
    caution = _small_n_caution(cap.n)
    if by:
        _stats_by_bench(rows, cap, quantity, channel, unit, lower, upper, as_json)
        return
    if plot is not None:
        svg = histogram_svg(values, cap, quantity, unit)
        try:
            with plot.open("w" if overwrite else "x", encoding="utf-8") as f:
                f.write(svg)
        except OSError as e:
            fail(f"{plot}: cannot write the plot ({e.strerror}) — check the path")
        stderr.print(f"wrote {plot}", markup=False)
    if as_json:
        print_json({"quantity": quantity, "channel": channel, "unit": unit, **cap.to_dict(), "caution": caution})
        return
    ratio = lambda v: "—" if v is None else f"{v:.3f}"  # noqa: E731
    stdout.print(f"{quantity}{f' ({channel})' if channel else ''}: n = {cap.n}", markup=False)
    stdout.print(f"  mean {format_value(cap.mean, unit)}   std {format_value(cap.std, unit, digits=3)}", markup=False)
    stdout.print(f"  min {format_value(cap.min, unit)}   max {format_value(cap.max, unit)}", markup=False)
    if spec is not None:
        from benchfit.report.html import format_limits

        stdout.print(f"  limits {format_limits(lower, upper, unit)}   Cp {ratio(cap.cp)}   Cpk {ratio(cap.cpk)}",
                     markup=False)
    if caution:
        stdout.print(f"  caution: {caution}", markup=False)


def _stats_by_bench(rows: list, cap, quantity: str, channel: Optional[str], unit: str,
                    lower: Optional[float], upper: Optional[float], as_json: bool) -> None:
    """One line per bench: n, mean, std, u(mean) = s/√n, offset of its mean from the mean of all."""
    from benchfit.cli.common import print_json, stdout
    from benchfit.log.stats import by_group
    from benchfit.report.html import format_value

    groups = by_group(rows, "bench", lower, upper, quantity)
    if as_json:
        print_json({"quantity": quantity, "channel": channel, "unit": unit, "by": "bench", "all": cap.to_dict(),
                    "groups": [{"bench": g.name, **g.capability.to_dict(), "u_mean": g.u_mean,
                                "offset": g.offset} for g in groups]})
        return
    from rich.table import Table

    ratio = lambda v: "—" if v is None else f"{v:.3f}"  # noqa: E731
    table = Table(title=f"{quantity}{f' ({channel})' if channel else ''} by bench: n = {cap.n}, "
                        f"mean of all {format_value(cap.mean, unit)}", title_justify="left")
    for col in ("bench", "n", "mean", "std", "u(mean) (k=1)", "offset from all", "Cpk"):
        table.add_column(col)
    for g in groups:
        c = g.capability
        table.add_row(g.name or "—", str(c.n), format_value(c.mean, unit),
                      "—" if c.std is None else format_value(c.std, unit, digits=3),
                      "—" if g.u_mean is None else format_value(g.u_mean, unit, digits=2),
                      format_value(g.offset, unit, digits=3), ratio(c.cpk))
    stdout.print(table)


@log_app.command("merge", help="Copy every run of another bench's SQLite log into this log.\n\n"
                 "Runs are recognised by their UUID: merging the same file again copies nothing. The other "
                 "file is brought to the current log schema first.\n\nExample:\n\n\b\n"
                 "  benchfit log merge bench2.sqlite --log postgresql://lab@logserver/benchfit")
def merge_command(
    other: Path = typer.Argument(..., metavar="OTHER", help="The SQLite log file to copy from."),
    bench: Optional[str] = typer.Option(None, "--bench", metavar="NAME",
                                        help="Bench name for OTHER's runs that have none (logged before "
                                             "bench names existed)."),
    log: Optional[str] = typer.Option(None, "--log", metavar="PATH", help=_LOG_HELP, envvar="BENCHFIT_LOG"),
    as_json: bool = typer.Option(False, "--json", help="Print the counts as one JSON object."),
) -> None:
    from benchfit.cli.common import print_json, stdout
    from benchfit.log.store import merge_log

    target = _log_path(log)
    summary = merge_log(other, target, bench=bench)
    if as_json:
        print_json({"from": str(other), "log": str(target), **summary.to_dict()})
        return
    stdout.print(f"merged {other} into {target}: {summary.new} new run(s), {summary.present} already there",
                 markup=False)


@log_app.command("sync", help="Push the runs spooled while the log server was away.\n\n"
                 "Idempotent: a run the server already has (same UUID) is not written twice.\n\n"
                 "Example:\n\n\b\n  benchfit log sync --log postgresql://lab@logserver/benchfit")
def sync_command(
    log: Optional[str] = typer.Option(None, "--log", metavar="URL", help=_LOG_HELP, envvar="BENCHFIT_LOG"),
    as_json: bool = typer.Option(False, "--json", help="Print the counts as one JSON object."),
) -> None:
    from benchfit.cli.common import print_json, stdout
    from benchfit.log.spool import spool_path
    from benchfit.log.store import sync_log

    target = _log_path(log)
    new, present = sync_log(target)
    if as_json:
        print_json({"log": str(target), "spool": str(spool_path(target)), "new": new, "present": present})
        return
    stdout.print(f"pushed {new + present} spooled run(s) to {target}: {new} new, {present} already there",
                 markup=False)
