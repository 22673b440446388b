"""``benchfit fit``: back-solve the effective L, C and losses of an L-C low-pass.

Only typer and the standard library are imported at module level; numpy, scipy and
matplotlib load inside the command.
"""

from __future__ import annotations

import enum
import math
from pathlib import Path
from typing import Any, List, Literal, Optional, cast

import typer

from benchfit.cli.app import app

__all__ = ["fit_command", "render_fit", "flag_wording"]

Model = Literal["lc-lowpass", "ringdown"]
#: the same options as benchfit.fit.lowpass.MethodOption (not imported: it would load numpy)
MethodChoice = Literal["auto", "two-channel", "one-channel"]

#: the choices as enums, so typer checks them and the help lists them
class ModelOption(str, enum.Enum):
    """``--model`` choices (the values of :data:`Model`)."""

    lc_lowpass = "lc-lowpass"
    ringdown = "ringdown"


class MethodOption(str, enum.Enum):
    """``--method`` choices (the values of :data:`MethodChoice`)."""

    auto = "auto"
    two_channel = "two-channel"
    one_channel = "one-channel"


class DriveEdgesOption(str, enum.Enum):
    """``--drive-edges`` choices (the values of benchfit.fit.edges.DriveEdges, not imported: numpy)."""

    auto = "auto"
    sharp = "sharp"
    band_limited = "band-limited"

#: the fit functions' parameters and the options that carry them
#: (beside fix=, guess=, drive= and response=, which every command says alike:
#: benchfit.cli.common.LIBRARY_FLAGS)
_FLAGS = {"drive_duty": "--drive-duty", "method": "--method", "drive_edges": "--drive-edges"}


def flag_wording(message: str) -> str:
    """A fit library message in the command line's words.

    The library names its parameters as Python spells them (``fix: unknown part 'l'``,
    ``pass fix={'L': …}``, ``fix={'L': '…±10%'}``, ``use method='one-channel'``,
    ``time_domain=True``, ``fit_ringdown()``); the command line says ``--fix``, ``--fix L=…``,
    ``--fix L=…±10%``, ``--method one-channel``, ``--time-domain`` and ``--model ringdown``.
    Errors and the warnings printed on the terminal go through it; ``--json`` keeps the
    library's words (it is the Python API's data).
    """
    import re

    from benchfit.cli.common import cli_words

    out = re.sub(r"\btime_domain=True\b", "--time-domain", message)
    out = re.sub(r"\bfit_ringdown\(\)", "--model ringdown", out)
    return cli_words(out, _FLAGS)


_HELP = """Back-solve effective L, C, Rs, ESR and load of an L-C low-pass from a capture.

Examples:

\b
  benchfit fit HC-03_drive_output.csv --fix L=300m±10% --fix Rload=10k±1%
  benchfit fit HC-05_output.wav --method one-channel --fix L=300m \\
      --drive-duty 0.5
  benchfit fit HC-05_ringdown.csv --model ringdown --json

lc-lowpass: drive → Rs → L → output; C in series with its ESR (Resr) to ground; Rload across
the output. Two-channel (drive and output captured together) fits H(jkω) = Y_k/X_k at the
drive's harmonics; one-channel fits the output's harmonics against a rectangular drive of
unknown level and timing, which fixes only the shape of H (f0, Q): pass one known part,
usually --fix L=…. ringdown fits the free ringing after the edges of a slow square drive.
Parts the data cannot determine are shown as "not determined" with the part to measure.
Values are SI with prefixes (300m = 0.3, 33u = 33e-6, 10k = 10 000). A fixed part may carry its
tolerance (L=300m±10%, read as rectangular); without one, every result is conditional on it.
± values in the output are combined standard uncertainties (k = 1) of the budget shown with --json.

Safety: a sound-card input takes about 1 V at most. Bring the drive and output to it through
a resistive divider and a series capacitor; an inductor that is switched off kicks back a
high voltage, so never connect a choke's ends directly to the input. Keep mains-connected
circuits away from the computer and follow local codes and qualified practice.
"""


def _fmt(value: float | None, stderr: float | None, unit: str) -> str:
    from benchfit.units import format_quantity, format_with_uncertainty

    if value is None or not math.isfinite(value):
        return "—"
    if stderr is not None and math.isfinite(stderr) and stderr > 0:
        return format_with_uncertainty(value, stderr, unit)
    return format_quantity(value, unit, 5)


def render_fit(d: dict[str, Any], console, note: str | None = None) -> None:
    """Print a fit result (its JSON dict) as tables, with an optional note line."""
    from rich.table import Table

    from rich.markup import escape as _esc

    console.print(f"[bold]{_esc(d['file'])}[/]  model {d['model']}, method {d['method']}", markup=True,
                  highlight=False)
    units = {"ohm": "Ω"}
    if d["parameters"]:
        t = Table(title="effective parts", title_justify="left", box=None, pad_edge=False,
                  header_style="bold")
        columns: tuple[tuple[str, Literal["left", "right"]], ...] = (("part", "left"), ("value", "right"),
                                                                      ("status", "left"))
        for col, just in columns:
            t.add_column(col, justify=just, no_wrap=True)
        for name, p in d["parameters"].items():
            unit = units.get(p["unit"], p["unit"])
            if p["fixed"] and p.get("stderr") is not None:
                t.add_row(name, _fmt(p["value"], p["stderr"], unit), "fixed (given, with its tolerance)")
            elif p["fixed"]:
                t.add_row(name, _fmt(p["value"], None, unit), "fixed (given, no tolerance)")
            elif p["stderr"] is None:
                shown = "—" if p["value"] is None else f"({_fmt(p['value'], None, unit)})"
                t.add_row(name, shown, "[yellow]not determined[/]")
            else:
                t.add_row(name, _fmt(p["value"], p["stderr"], unit), "fitted")
        console.print(t)
    labels = {"resonant_frequency_hz": ("resonant frequency f0 = 1/(2π√(LC))", "Hz"),
              "natural_frequency_hz": ("natural frequency (loaded)", "Hz"),
              "series_loss_ohm": ("series loss Rs + ESR", "Ω"),
              "total_loss_ohm": ("total loss 2·L·α: Rs + ESR + L/(C·Rload) (+ core loss)", "Ω"),
              "drive_asymmetry_ohm": ("drive source r_high − r_low", "Ω"),
              "q_factor": ("Q", ""), "damped_frequency_hz": ("damped frequency", "Hz"),
              "decay_rate_per_s": ("decay rate α", "1/s")}
    t = Table(title="resonance", title_justify="left", box=None, pad_edge=False, header_style="bold")
    t.add_column("quantity", no_wrap=True)
    t.add_column("value", justify="right", no_wrap=True)
    for key, (label, unit) in labels.items():
        dv = d["derived"].get(key)
        if dv is None:
            continue
        if dv["value"] is None:
            text = "—"
        elif dv["stderr"] is None:
            text = f"{_fmt(dv['value'], None, unit)} (not determined)"
        else:
            text = _fmt(dv["value"], dv["stderr"], unit)
        t.add_row(label, text)
    console.print(t)
    rows = []
    for group in ("parameters", "derived"):
        for name, v in d[group].items():
            b = v.get("budget")
            if not b or len(b["contributions"]) < 2 or not b.get("value"):
                continue
            parts = ", ".join(f"{c['name']} {100 * c['contribution'] / abs(b['value']):.2g} %"
                              for c in sorted(b["contributions"], key=lambda c: -(c["contribution"] or 0))
                              if c["contribution"])
            rows.append(f"  {name}: {parts}")
    if rows:
        console.print("uncertainty budget (contributions relative to the value, k = 1):", markup=False,
                      highlight=False)
        for line in rows:
            console.print(line, markup=False, highlight=False, soft_wrap=True)
    if d["correlations"]:
        pairs = ", ".join(f"{k}: {v:+.3f}" for k, v in d["correlations"].items() if v is not None)
        console.print(f"correlations  {pairs}", markup=False, highlight=False)
    q = d["quality"]
    nrmse = "—" if q["nrmse"] is None else f"{100 * q['nrmse']:.3g} %"
    r2 = "—" if q["r_squared"] is None else f"{q['r_squared']:.6f}"
    console.print(f"fit quality   NRMSE {nrmse}, R² {r2}, {q['n_points']} points", markup=False,
                  highlight=False)
    adq = d.get("adequacy") or {}
    if adq.get("chi2_red") is not None:
        line = (f"model check   χ²ᵣ = {adq['chi2_red']:.3g} on {adq.get('dof')} degrees of freedom "
                f"(fit uncertainties scaled by √χ²ᵣ; above {adq.get('chi2_red_limit', 0):.3g} the residuals show "
                "structure beyond noise)")
        mc = adq.get("model_comparison")
        if mc:
            line += (f"; core loss Rp: F-test p = {mc['p_value']:.2g}, ΔAIC = {mc['aic'][1] - mc['aic'][0]:.3g} "
                     f"→ {mc['chosen']}")
        da = adq.get("drive_asymmetry")
        if da:
            line += f"; drive r_high ≠ r_low: F-test p = {da['p_value']:.2g} → {da['chosen']}"
        de = adq.get("drive_edges")
        if de:
            model = "H(j2πkf)" if de["drive_edges"] == "band-limited" else "first-order hold"
            if de.get("time_domain"):  # the time-domain refinement's simulation, as the record names it
                model = ("time-domain simulation of the band-limited drive (1/sinc² pre-filter, images removed)"
                         if de["drive_edges"] == "band-limited" else "time-domain simulation, first-order hold")
            how = "given" if de.get("choice") not in (None, "auto") else (
                "from the drive's lines below Nyquist" if de.get("decided") else "assumed: the drive cannot tell")
            line += f"; drive edges {de['drive_edges']} ({how}) → {model}"
            et = de.get("edge_timing")
            if et:  # where within their samples the edges lie is unknown: a budget row of every part
                from benchfit.units import format_quantity

                line += (f"; the edges fall within one sample, their timing u = {et['u_samples']:.2g} sample "
                         f"({format_quantity(et['u_s'], 's', 2)}) is in the budget")
        nz = adq.get("noise")
        if nz:  # the time-domain residual's noise, estimated from the channels apart from the fit
            from benchfit.units import format_with_uncertainty

            sigma = format_with_uncertainty(nz["sigma"], 0.5 * nz["u_rel_var"] * nz["sigma"], nz["unit"])
            line += f"; χ²ᵣ against the channels' noise σ = {sigma} per sample"
        console.print(line, markup=False, highlight=False, soft_wrap=True)
    console.print("± values are combined standard uncertainties (k = 1); budget rows in --json",
                  markup=False, highlight=False)
    if note:
        console.print(f"note: {note}", markup=False, highlight=False, soft_wrap=True)
    from rich.markup import escape

    for w in d["warnings"]:
        console.print(f"[yellow]warning:[/] {escape(flag_wording(w))}", markup=True, highlight=False, soft_wrap=True)


def parse_fix_options(items: list[str] | None, names: tuple[str, ...]) -> dict[str, Any]:
    """``--fix NAME=VALUE[±TOL]`` options (TOL as ``10%`` or an absolute value; ``+-`` also works).

    Returns name → :class:`benchfit.fit.tolerance.FixedValue`; fails with one line on bad text.
    """
    from benchfit.cli.common import fail, with_fix
    from benchfit.fit.tolerance import parse_fixed

    out: dict[str, Any] = {}
    for item in items or []:
        name, sep, text = item.partition("=")
        name = name.strip()
        if not sep or not name or not text.strip():
            fail(f"--fix {item!r}: not NAME=VALUE — write it like --fix L=300m or --fix L=300m±10%, NAME one "
                 f"of {', '.join(names)}")
        if name not in names:
            fail(f"--fix {item!r}: unknown name {name!r} — use one of {', '.join(names)}")
        try:
            fv = parse_fixed(text, f"--fix {name}")
        except ValueError as e:
            fail(with_fix(str(e), "write it like --fix L=300m±10% or --fix L=300m±5m"))
        if not math.isfinite(fv.value) or fv.value < 0 or (fv.value == 0 and name != "Resr"):
            need = "zero or positive" if name == "Resr" else "positive"
            fail(f"--fix {item!r}: {name} must be {need} — give the part's value, e.g. {name}=1.5")
        out[name] = fv
    return out


def _clip_warnings(cap) -> list[str]:
    """One line per channel that is clipped at full scale (a clipped waveform gives wrong parts)."""
    from benchfit.measurement.levels import find_clipping

    gains = cap.calibration.gain_v_per_fs
    lines = []
    for i, name in enumerate(cap.channel_names):
        unit = cap.units[i]
        full_scale = gains[i] if gains and unit == "V" else None
        clip = find_clipping(cap.samples[i], unit, full_scale, rails=False)
        if clip.clipped:
            lines.append(f"{cap.source or 'capture'}: channel {name!r} is clipped ({clip.n_samples} samples at full "
                         "scale), so the fitted parts are wrong — lower the input level and record again")
    return lines


@app.command("fit", help=_HELP, short_help="Back-solve effective L, C, Rs, ESR and load of an L-C low-pass.")
def fit_command(
    file: Path = typer.Argument(..., metavar="FILE", help="Capture file: WAV, FLAC or CSV.", show_default=False),
    model: ModelOption = typer.Option(ModelOption("lc-lowpass"), "--model", "-m", show_default=False,
                                      help="The circuit model; the default is the L-C low-pass."),
    method: MethodOption = typer.Option(MethodOption("auto"), "--method", help="What an lc-lowpass fit uses: "
                                        "both channels, the output only, or auto (what the capture has)."),
    drive: Optional[str] = typer.Option(None, "--drive", metavar="CH", help="Drive channel: name or 1-based number."),
    response: Optional[str] = typer.Option(None, "--response", metavar="CH",
                                           help="Output channel: name or 1-based number."),
    fix: Optional[List[str]] = typer.Option(None, "--fix", metavar="NAME=VALUE", help="Known part NAME=VALUE[±TOL] "
                                            "(repeatable): L, C, Rs, Resr, Rload; e.g. --fix L=300m±10% (or ±5m); "
                                            "the tolerance (rectangular) is propagated into every result."),
    guess: Optional[List[str]] = typer.Option(None, "--guess", metavar="NAME=VALUE", help="Start value NAME=VALUE (repeatable)."),
    drive_duty: Optional[str] = typer.Option(None, "--drive-duty", metavar="DUTY", help="One-channel: the drive's duty "
                                             "cycle, high time / period, as 0.5, 50 or 50%; fitted if omitted."),
    time_domain: bool = typer.Option(False, "--time-domain", help="Two-channel: refine by simulating "
                                     "the output from the drive samples (for non-periodic drives)."),
    drive_edges: DriveEdgesOption = typer.Option(
        DriveEdgesOption.auto, "--drive-edges", help="Two-channel: how the drive was sampled — sharp (edges "
        "within a sample, a scope), band-limited (behind an anti-alias filter, a sound card's line input), "
        "or auto (decided from the drive's harmonics just below Nyquist)."),
    as_json: bool = typer.Option(False, "--json", help="Print the result as one JSON object."),
    plot: Optional[Path] = typer.Option(None, "--plot", metavar="FILE", help="Write a figure: FILE.svg or FILE.png."),
    overwrite: bool = typer.Option(False, "--overwrite", help="Replace an existing --plot file."),
    sample_rate: Optional[str] = typer.Option(
        None, "--sample-rate", metavar="RATE", help="Sample rate for a CSV without a time column, e.g. 100k (Hz)."),
) -> None:
    from benchfit.cli.batch import prefer_one_blas_thread
    from benchfit.cli.common import (check_parts_plausible, fail, parse_assignments, parse_value, print_json,
                                     stderr, stdout)

    # before numpy loads: the fits' tall, narrow matrix products run faster on one thread, several
    # times faster on a loaded machine (scripts/bench_fit.py)
    prefer_one_blas_thread()
    model_name = ModelOption(model).value
    method_name = cast(MethodChoice, MethodOption(method).value)
    if plot is not None and plot.suffix.lower() not in (".svg", ".png"):
        fail(f"--plot {str(plot)!r}: unknown figure type — use a file name ending in .svg or .png")
    if plot is not None and plot.is_dir():
        fail(f"{plot}: is a folder — give --plot a file name ending in .svg or .png")
    if plot is not None and plot.exists() and not overwrite:  # checked before the (slow) fit
        fail(f"{plot}: file exists — choose another --plot or add --overwrite")
    names = ("L", "C", "Rs", "Resr", "Rload", "Rp")
    fixed = parse_fix_options(fix, names)
    guessed = parse_assignments(guess, names, "--guess")
    check_parts_plausible(fixed, "--fix")
    check_parts_plausible(guessed, "--guess")
    duty = None
    if drive_duty is not None:
        text = drive_duty.strip()
        pct = text.endswith("%")
        duty = parse_value(text.rstrip("%").strip(), "--drive-duty")
        # a bare number from 1 to 99 is a percentage ("--drive-duty 50"): a fraction is below 1, and
        # 1 itself (100 %) is no pulse; exactly 1.0 stays refused below
        duty = duty / 100.0 if pct or 1.0 < duty < 100.0 else duty
        if not 0.0 < duty < 1.0:
            fail(f"--drive-duty {drive_duty!r}: the duty cycle must lie between 0 and 1 (or 0 % and "
                 "100 %) — e.g. --drive-duty 0.5")
    rate = parse_value(sample_rate, "--sample-rate") if sample_rate is not None else None

    from benchfit.capture.load import load

    import contextlib

    import numpy as np

    # the spinner only where someone sees it: elsewhere it is a refresh thread and rich's live
    # display modules for nothing
    spinner = stderr.status("fitting…", spinner="line") if stderr.is_terminal else contextlib.nullcontext()
    with spinner, np.errstate(all="ignore"):
        cap = load(file, sample_rate=rate)
        for line in _clip_warnings(cap):
            stderr.print(f"warning: {line}", markup=False, highlight=False, soft_wrap=True)
        if model_name == "ringdown":
            from benchfit.fit.ringdown import fit_ringdown

            if guessed or duty is not None or time_domain or drive is not None:
                fail("--guess, --drive, --drive-duty and --time-domain apply to --model lc-lowpass only "
                     "— remove them for a ring-down fit")
            from benchfit.errors import FitError

            try:
                result = fit_ringdown(cap, channel=response, fix=fixed or None)
            except FitError as e:
                raise FitError(flag_wording(str(e))) from None
        else:
            from benchfit.errors import FitError
            from benchfit.fit.lowpass import fit_lowpass

            try:
                result = fit_lowpass(cap, method=method_name, drive=drive, response=response, fix=fixed,
                                     guess=guessed, drive_duty=duty, time_domain=time_domain,
                                     drive_edges=drive_edges.value)
            except FitError as e:
                raise FitError(flag_wording(str(e))) from None
    if plot is not None:
        from benchfit.report.figures import fit_svg, save_figure

        units = set(cap.units)
        save_figure(fit_svg(result, unit=units.pop() if len(units) == 1 else None), plot, overwrite=overwrite)
    d = result.to_dict()
    if as_json:
        print_json(d)
    else:
        note = None
        if result.method == "one-channel":
            note = ("the drive level is unknown, so the data fix the shape of H (resonant frequency, "
                    "Q, ESR zero); the parts follow only from a known one")
        render_fit(d, stdout, note)
        if plot is not None:
            stdout.print(f"figure written to {plot}", markup=False, highlight=False, soft_wrap=True)
