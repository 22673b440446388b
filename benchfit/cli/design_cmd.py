"""``benchfit design``: timer parts, filter parts, part combinations and trim advice.

Commands on :data:`benchfit.cli.app.design_app`: ``astable``, ``filter``, ``combine`` and
``trim``. Each calls a pure function of :mod:`benchfit.design` and renders its frozen result
as a rich table (or one JSON object with ``--json``). Only typer and the standard library
are imported at module level.
"""

from __future__ import annotations

import csv
import json
import math
import re
from pathlib import Path
from typing import Literal, Optional, overload

import typer

from benchfit.cli.app import design_app

__all__ = ["parse_fraction", "parse_part_value", "read_stock"]

_CAUTION = ("Caution: timer and filter run from the supply and a tuned filter can swing well above it; "
            "block DC and attenuate before a sound-card input, and follow local codes and qualified "
            "practice.")


# --- option parsing -------------------------------------------------------------------------

def parse_fraction(text: str, option: str, *, allow_zero: bool = True, below_one: bool = True) -> float:
    """``"1%"`` → 0.01, ``"0.01"`` → 0.01. A bare number of 1 or more is refused (ambiguous)."""
    from benchfit.cli.common import fail

    s = str(text).strip()
    try:
        value = float(s[:-1]) / 100.0 if s.endswith("%") else float(s)
    except ValueError:
        fail(f"{option}: {text!r} is not a fraction — write it like 5% or 0.05")
    if not math.isfinite(value) or value < 0 or (value == 0 and not allow_zero):
        fail(f"{option}: {text!r} must be {'zero or ' if allow_zero else ''}positive — write it like 5% or 0.05")
    if below_one and value >= 1:
        fail(f"{option}: {text!r} must be below 100 % — write it like 5% or 0.05")
    return value


_RKM = re.compile(r"^(\d+)([pnuµmRkKMG])(\d+)$")


def parse_part_value(text: str, where: str, kind: str = "R") -> float:
    """Parse a part value: SI prefixes (``"4.7k"``, ``"33u"``, ``"150mH"``), the code form
    ``"4k7"`` / ``"2R2"`` / ``"4u7"``, and an optional unit (Ω, ohm, F, H)."""
    from benchfit.cli.common import fail
    from benchfit.units import parse_quantity

    s = str(text).strip().replace(" ", "")
    for unit in ("ohms", "ohm", "Ω", "F", "H"):
        if s.endswith(unit) and len(s) > len(unit):
            s = s[: -len(unit)]
            break
    m = _RKM.match(s)
    if m:
        prefix = "" if m.group(2) == "R" else m.group(2)
        s = f"{m.group(1)}.{m.group(3)}{prefix}"
    try:
        return parse_quantity(s, where, positive=True, allow_zero=False)
    except ValueError as e:
        fail(_with_fix(str(e)))


def _with_fix(message: str) -> str:
    return message if "—" in message else f"{message} — give a value above zero, e.g. 4.7k or 33u"


@overload
def _opt_value(text: str, option: str, *, allow_zero: bool = False) -> float: ...
@overload
def _opt_value(text: None, option: str, *, allow_zero: bool = False) -> None: ...
@overload
def _opt_value(text: Optional[str], option: str, *, allow_zero: bool = False) -> Optional[float]: ...
def _opt_value(text: Optional[str], option: str, *, allow_zero: bool = False) -> Optional[float]:
    """The number an option gives (SI prefixes allowed), None for an option not given."""
    from benchfit.cli.common import fail
    from benchfit.units import parse_quantity

    if text is None:
        return None
    try:
        return parse_quantity(text, option, positive=True, allow_zero=allow_zero)
    except ValueError as e:
        fail(_with_fix(str(e)))


def _series(text: str, option: str) -> str:
    """A resistor/capacitor series name, checked with the option named in the error."""
    from benchfit.cli.common import fail
    from benchfit.design.parts import check_series
    from benchfit.errors import DesignError

    try:
        return check_series(text)
    except DesignError as e:
        fail(f"{option} {text!r}: unknown series — {str(e).partition(' — ')[2] or 'use E6, E12, E24, E48, E96 or E192'}")


class _OptionNames:
    """Re-raise a design error whose message starts ``name:`` with the command-line option instead.

    The design functions name their Python parameters (``trials: …``, ``give rs_ohm=``,
    ``use diode=True``, ``fit_lowpass()``); at the command line the user typed ``--trials``,
    ``--rs`` and ``--diode`` and fits with ``benchfit fit``, so the message should say that.
    """

    def __init__(self, **names: str) -> None:
        self._flags = dict(names)
        self._names = {k.replace("_", "-"): v for k, v in names.items()}

    def __enter__(self) -> None:
        return None

    def __exit__(self, exc_type, exc, tb) -> Literal[False]:  # never swallows: re-raises renamed
        from benchfit.errors import DesignError

        if exc is None or not isinstance(exc, DesignError):
            return False
        import re

        from benchfit.cli.common import flag_words

        text = str(exc)
        head, sep, rest = text.partition(":")
        if sep and head in self._names:
            text = f"{self._names[head]}:{rest}"
        text = re.sub(r"\bfit_(lowpass|ringdown)\(\)",
                      lambda m: f"benchfit fit CAPTURE --model {'lc-lowpass' if m[1] == 'lowpass' else 'ringdown'}", text)
        if "bank" in self._flags:
            text = text.replace("bank=[22e-6, 10e-6, 1e-6]", f"{self._flags['bank']} 22u,10u,1u")
        text = flag_words(text, self._flags)
        if text != str(exc):
            raise DesignError(text) from exc
        return False


def read_stock(path: Path, kind: str) -> tuple[list[float], list[int] | None]:
    """Read a stock list: a CSV with a ``value`` column (SI prefixes allowed) and an optional
    ``qty``/``quantity``/``count`` column; a file with a single column needs no header."""
    from benchfit.cli.common import fail

    if path.is_dir():
        fail(f"{path}: is a folder, not a stock list — give the path of a CSV with a 'value' column")
    if not path.is_file():
        fail(f"{path}: stock file not found — give the path of a CSV with a 'value' column")
    try:
        with path.open(newline="", encoding="utf-8-sig") as fh:
            rows = [r for r in csv.reader(fh) if any(c.strip() for c in r)]
    except UnicodeDecodeError as e:
        fail(f"{path}: not a text CSV file (byte {e.start} is not UTF-8) — save the stock list as UTF-8 CSV")
    except (OSError, csv.Error) as e:
        fail(f"{path}: cannot read the stock list ({e}) — save it as UTF-8 CSV")
    if not rows:
        fail(f"{path}: the stock list is empty — add a 'value' column with one part per row")
    header = [c.strip().lower() for c in rows[0]]
    if "value" in header:
        vcol = header.index("value")
        qcol = next((header.index(n) for n in ("qty", "quantity", "count") if n in header), None)
        body, first_row = rows[1:], 2
    elif len(header) == 1:
        vcol, qcol, body, first_row = 0, None, rows, 1
    else:
        fail(f"{path}: no 'value' column in the header {rows[0]!r} — name the column of part values 'value'")
    values: list[float] = []
    counts: list[int] = []
    for i, row in enumerate(body, start=first_row):
        if vcol >= len(row) or not row[vcol].strip():
            fail(f"{path} row {i}: no value — fill the 'value' column or delete the row")
        values.append(parse_part_value(row[vcol], f"{path} row {i}", kind))
        if qcol is not None:
            raw = row[qcol].strip() if qcol < len(row) else ""
            try:
                n = int(raw) if raw else 1
            except ValueError:
                fail(f"{path} row {i}: quantity {raw!r} is not a whole number — write e.g. 3")
            if n < 0:
                fail(f"{path} row {i}: quantity {n} is negative — write 0 or more")
            counts.append(n)
    if not values:
        fail(f"{path}: the stock list has a header but no parts — add one value per row")
    return values, (counts if qcol is not None else None)


def _table(title: str, columns: tuple[str, ...], header: bool = True):
    from rich.table import Table

    t = Table(title=title, title_justify="left", show_lines=False, header_style="bold",
              show_header=header)
    for c in columns:
        t.add_column(c, justify="left")
    return t


def _print_lines(lines, style: str = "") -> None:
    """Print lines (the design library's notes and warnings among them) in the command line's words."""
    from benchfit.cli.common import cli_words, stdout

    for line in lines:
        stdout.print(cli_words(line), markup=False, style=style or None)


# --- astable --------------------------------------------------------------------------------

_ASTABLE_EXAMPLE = """

Example:

\b
  benchfit design astable --frequency 50 --cap 1u --trim-pot 5k \\
      --tolerance-c 10%
"""


@design_app.command("astable", short_help="555-style astable parts, spread and trim range.", help="Choose 555-style astable parts for a frequency and duty, with the "
                    "tolerance spread and trim range." + _ASTABLE_EXAMPLE)
def astable_command(
    frequency: str = typer.Option(..., "--frequency", metavar="HZ", help="Wanted frequency, e.g. 50 or 1.2k (Hz)."),
    duty: Optional[str] = typer.Option(None, "--duty", metavar="DUTY", help="High time / period, e.g. 55% or 0.55. "
                                       "Default: as near 50 % as the circuit allows."),
    cap: Optional[str] = typer.Option(None, "--cap", metavar="F", help="Timing capacitor C1, e.g. 1u (F). Default: chosen."),
    series: str = typer.Option("E24", "--series", metavar="SERIES", help="Resistor series: E6, E12, E24, E48, E96 or E192."),
    cap_series: str = typer.Option("E6", "--cap-series", metavar="SERIES", help="Series for C1 when it is chosen."),
    supply: str = typer.Option("12", "--supply", metavar="V", help="Supply voltage (V)."),
    control_voltage: Optional[str] = typer.Option(None, "--control-voltage", metavar="V",
                                                  help="Voltage held on the control pin (V)."),
    diode: bool = typer.Option(False, "--diode", help="Diode across RB: allows duty below 50 %."),
    diode_drop: str = typer.Option("0.65", "--diode-drop", metavar="V", help="The diode's forward drop (V)."),
    ideal_timer: bool = typer.Option(False, "--ideal-timer", help="Leave the timer's own initial error, "
                                     "temperature and supply drift (TI SLFS022) out of the spread."),
    tolerance_r: str = typer.Option("1%", "--tolerance-r", metavar="TOL", help="Resistor tolerance."),
    tolerance_c: str = typer.Option("10%", "--tolerance-c", metavar="TOL", help="Capacitor tolerance."),
    yield_within: str = typer.Option("1%", "--yield-within", metavar="TOL", help="Frequency band for the yield figure."),
    distribution: str = typer.Option("uniform", "--distribution", metavar="NAME",
                                     help="Part spread: uniform over ±tolerance, or normal with tolerance = 3σ."),
    trials: int = typer.Option(20000, "--trials", metavar="N", min=100, max=1_000_000,
                               help="Number of simulated units (100 to 1,000,000)."),
    seed: int = typer.Option(0, "--seed", metavar="N", help="Seed of the random generator."),
    trim_pot: Optional[str] = typer.Option(None, "--trim-pot", metavar="OHM", help="Trimmer in series with RB, e.g. 10k (Ω)."),
    control_range: Optional[str] = typer.Option(None, "--control-range", metavar="LOW:HIGH",
                                                help="Control-pin trim range LOW:HIGH in volts, e.g. 6:9."),
    as_json: bool = typer.Option(False, "--json", help="Print one JSON object."),
) -> None:
    from benchfit.cli.common import fail

    f = _opt_value(frequency, "--frequency")
    d = None if duty is None else parse_fraction(duty, "--duty", allow_zero=False)
    c1 = _opt_value(cap, "--cap")
    cr = None
    if control_range is not None:
        lo, sep, hi = control_range.partition(":")
        if not sep:
            fail(f"--control-range {control_range!r}: not LOW:HIGH — write the range in volts like 6:9")
        cr = (_opt_value(lo, "--control-range low"), _opt_value(hi, "--control-range high"))
    series = _series(series, "--series")
    cap_series = _series(cap_series, "--cap-series")
    with _OptionNames(duty="--duty", distribution="--distribution", trials="--trials",
                      control_voltage="--control-voltage", frequency="--frequency",
                      tolerance_r="--tolerance-r", range="--control-range", trim="--trim-pot / --control-range",
                      supply_v="--supply", diode="--diode", c1_farad="--cap"):
        result = _astable(f, d, c1, series, cap_series, supply, control_voltage, diode, tolerance_r,
                          tolerance_c, yield_within, distribution, trials, seed, trim_pot, cr,
                          _opt_value(diode_drop, "--diode-drop", allow_zero=True), not ideal_timer)
    _show_astable(result, as_json)


def _astable(f, d, c1, series, cap_series, supply, control_voltage, diode, tolerance_r, tolerance_c,
             yield_within, distribution, trials, seed, trim_pot, cr, diode_drop=0.65, timer_variation=True):
    from benchfit.design.astable import design_astable

    return design_astable(
        f, d, c1_farad=c1, series=series, c_series=cap_series, supply_v=_opt_value(supply, "--supply"),
        control_voltage_v=_opt_value(control_voltage, "--control-voltage"), diode=diode,
        tolerance_r=parse_fraction(tolerance_r, "--tolerance-r"),
        tolerance_c=parse_fraction(tolerance_c, "--tolerance-c"),
        yield_within=parse_fraction(yield_within, "--yield-within", allow_zero=False),
        distribution=distribution, n_trials=trials, seed=seed,
        trim_pot_ohm=_opt_value(trim_pot, "--trim-pot"), control_range_v=cr, diode_drop_v=diode_drop,
        timer_variation=timer_variation)


def _show_astable(result, as_json: bool) -> None:
    from benchfit.cli.common import print_json, stdout
    from benchfit.units import format_quantity as fq

    if as_json:
        print_json(result.to_dict())
        return
    t = _table(f"555 astable for {result.target_frequency_hz:g} Hz", ("quantity", "value"), header=False)
    t.add_row("RA", fq(result.ra_ohm, "Ω"))
    t.add_row("RB", fq(result.rb_ohm, "Ω") + ("" if result.trim is None or result.trim.kind != "pot"
                                                else f" + {fq(result.trim.high, 'Ω')} trimmer"))
    t.add_row("C1", fq(result.c_farad, "F") + (" (given)" if result.c_given else ""))
    tm = result.timing
    t.add_row("high time", fq(tm.t_high_s, "s", 5))
    t.add_row("low time", fq(tm.t_low_s, "s", 5))
    t.add_row("frequency", f"{tm.frequency_hz:.5g} Hz ({result.frequency_error * 100:+.2f} %)")
    t.add_row("duty (high / period)", f"{tm.duty * 100:.2f} %")
    s = result.spread
    t.add_row("frequency, 95 % of units", f"{s.frequency_low_hz:.5g} Hz to {s.frequency_high_hz:.5g} Hz")
    t.add_row("frequency, std. deviation", f"{s.frequency_std_hz:.3g} Hz")
    t.add_row("duty, 95 % of units", f"{s.duty_low * 100:.2f} % to {s.duty_high * 100:.2f} %")
    t.add_row(f"yield within ±{s.yield_within * 100:g} %", f"{s.yield_fraction * 100:.1f} % ± {s.yield_u * 100:.1f} %")
    if result.trim is not None:
        tr = result.trim
        t.add_row("trim range", f"{tr.frequency_low_hz:.5g} Hz to {tr.frequency_high_hz:.5g} Hz")
        t.add_row("trim setting for target", "—" if tr.setting_for_target is None
                  else fq(tr.setting_for_target, tr.unit))
        t.add_row("units that can be trimmed", f"{tr.trimmable_fraction * 100:.1f} %")
    stdout.print(t)
    spread_text = (f"Spread: {s.n_trials} simulated units, seed {s.seed}, parts {s.distribution} "
                   + ("(tolerance = 3σ)" if s.distribution == "normal" else "over ±tolerance")
                   + f", RA/RB ±{s.tolerance_r * 100:g} %, C1 ±{s.tolerance_c * 100:g} %.")
    _print_lines([spread_text] + list(result.notes))
    _print_lines([f"Caution: {c}" for c in result.cautions], "yellow")


# --- filter ---------------------------------------------------------------------------------

_FILTER_EXAMPLE = """

Example:

\b
  benchfit design filter --frequency 50 --inductance 300m --rs 400 \\
      --load 10k --duty 52%
"""


@design_app.command("filter", short_help="Tuned L-C low-pass parts and expected output.", help="Parts of a tuned L-C low-pass for a rectangular drive, with the "
                    "expected output level and THD." + _FILTER_EXAMPLE)
def filter_command(
    frequency: str = typer.Option(..., "--frequency", metavar="HZ", help="Drive frequency; the resonance is put there (Hz)."),
    inductance: Optional[str] = typer.Option(None, "--inductance", metavar="H", help="Known inductance, e.g. 300m (H)."),
    capacitance: Optional[str] = typer.Option(None, "--capacitance", metavar="F", help="Known capacitance, e.g. 33u (F)."),
    load: Optional[str] = typer.Option(None, "--load", metavar="OHM", help="Load across the output, e.g. 10k (Ω). Default: open."),
    rs: str = typer.Option("0", "--rs", metavar="OHM", help="Series resistance: timer output + winding (Ω)."),
    esr: str = typer.Option("0", "--esr", metavar="OHM", help="Capacitor ESR (Ω)."),
    duty: str = typer.Option("50%", "--duty", metavar="DUTY", help="Drive duty (high time / period)."),
    series: str = typer.Option("E12", "--series", metavar="SERIES", help="Series for the solved part."),
    amplitude: str = typer.Option("12", "--amplitude", metavar="V", help="Drive swing, 0 V to this (V)."),
    harmonics: int = typer.Option(40, "--harmonics", metavar="N", min=2, max=10_000,
                                  help="Highest harmonic in the THD sum (2 to 10,000)."),
    thd_max: Optional[str] = typer.Option(None, "--thd-max", metavar="PCT", help="THD target, e.g. 5%: choose "
                                          "f0 and Q (damping) for it with --inductance."),
    level_tolerance: str = typer.Option("10%", "--level-tolerance", metavar="TOL",
                                        help="With --thd-max: allowed level change over part tolerances."),
    tolerance_l: str = typer.Option("10%", "--tolerance-l", metavar="TOL", help="With --thd-max: choke tolerance."),
    trials: int = typer.Option(400, "--trials", metavar="N", min=100, max=20_000,
                               help="With --thd-max: draws per point (100 to 20,000; about 2 ms each)."),
    as_json: bool = typer.Option(False, "--json", help="Print one JSON object."),
) -> None:
    from benchfit.cli.common import check_parts_plausible, fail, print_json, stdout
    from benchfit.design.filter import design_filter
    from benchfit.units import format_quantity as fq

    given = {"L": (inductance, "--inductance"), "C": (capacitance, "--capacitance"), "Rs": (rs, "--rs"),
             "Resr": (esr, "--esr"), "Rload": (load, "--load")}
    check_parts_plausible({k: _opt_value(v, flag, allow_zero=k in ("Rs", "Resr")) for k, (v, flag) in given.items()},
                          "", flags={k: flag for k, (_, flag) in given.items()})
    if inductance is not None and capacitance is not None:
        _evaluate_filter(frequency, inductance, capacitance, load, rs, esr, duty, amplitude, as_json)
        return
    if thd_max is not None:
        if inductance is None:
            fail("--thd-max: give --inductance (the choke) — the capacitor and damping are chosen")
        _damped_filter(frequency, inductance, load, rs, duty, amplitude, thd_max, level_tolerance, tolerance_l,
                       series, trials, as_json)
        return
    if (inductance is None) == (capacitance is None):
        fail("--inductance/--capacitance: neither given — give one of them (the other is solved for), or both "
             "to evaluate that filter")
    series = _series(series, "--series")
    with _OptionNames(duty="--duty", harmonics="--harmonics", frequency="--frequency",
                      inductance="--inductance", capacitance="--capacitance", rs_ohm="--rs", esr_ohm="--esr", load_ohm="--load"):
        result = design_filter(
            _opt_value(frequency, "--frequency"), inductance=_opt_value(inductance, "--inductance"),
            capacitance=_opt_value(capacitance, "--capacitance"), load_ohm=_opt_value(load, "--load"),
            rs_ohm=_opt_value(rs, "--rs", allow_zero=True), esr_ohm=_opt_value(esr, "--esr", allow_zero=True),
            duty=parse_fraction(duty, "--duty", allow_zero=False), series=series,
            amplitude_v=_opt_value(amplitude, "--amplitude"), n_harmonics=harmonics)
    if as_json:
        print_json(result.to_dict())
        return
    unit = "F" if result.solved_for == "C" else "H"
    t = _table(f"L-C low-pass tuned to {result.frequency_hz:g} Hz ({result.solved_for} for "
               f"f0 = {result.frequency_hz:g} Hz: {fq(result.nominal_value, unit, 5)})",
               ("option", result.solved_for, "f0", "Q", "fund. rms", "AC rms", "DC", "THD"))
    for o in result.options:
        r = o.response
        t.add_row(o.label, o.description, f"{o.resonant_frequency_hz:.4g} Hz", f"{o.q_factor:.3g}",
                  f"{r.fundamental_rms_v:.3g} V", f"{r.ac_rms_v:.3g} V", f"{r.dc_v:.3g} V",
                  f"{r.thd * 100:.2f} %")
    stdout.print(t)
    load_text = "open" if result.load_ohm is None else fq(result.load_ohm, "Ω")
    for o in result.options:
        _print_lines([f"FLAGGED ({o.label}, not recommended): {s.text}" for s in o.flagged], "yellow")
    if result.recommended is None:
        _print_lines(["No option is recommended: every one exceeds a rating — add damping (series resistance) "
                      "or drive the filter through a divider; see --thd-max for a damped design"], "yellow")
    _print_lines([f"Circuit: drive 0 V…{result.amplitude_v:g} V, duty {result.duty * 100:g} % → Rs "
                  f"{fq(result.rs_ohm, 'Ω')} → L → out; C with ESR {fq(result.esr_ohm, 'Ω')} to ground; "
                  f"load {load_text}."] + list(result.notes))
    _print_lines([f"Caution: {c}" for c in result.cautions], "yellow")


def _evaluate_filter(frequency, inductance, capacitance, load, rs, esr, duty, amplitude, as_json) -> None:
    from benchfit.cli.common import print_json, stdout
    from benchfit.design.damped import evaluate_filter

    with _OptionNames(duty="--duty", frequency="--frequency", amplitude="--amplitude",
                      inductance="--inductance", capacitance="--capacitance", rs_ohm="--rs", esr_ohm="--esr", load_ohm="--load"):
        pred, stress = evaluate_filter(
            _opt_value(inductance, "--inductance"), _opt_value(capacitance, "--capacitance"),
            _opt_value(frequency, "--frequency"), rs_ohm=_opt_value(rs, "--rs", allow_zero=True),
            esr_ohm=_opt_value(esr, "--esr", allow_zero=True), load_ohm=_opt_value(load, "--load"),
            duty=parse_fraction(duty, "--duty", allow_zero=False), amplitude_v=_opt_value(amplitude, "--amplitude"))
    if as_json:
        print_json({"prediction": pred.to_dict(), "stress": [s.to_dict() for s in stress],
                    "flagged": [s.text for s in stress if s.flagged]})
        return
    t = _table(f"L = {inductance}, C = {capacitance} driven at {frequency} Hz", ("quantity", "value"), header=False)
    t.add_row("THD (harmonics 2–10)", f"{pred.thd_pct:.3f} %")
    t.add_row("fundamental", f"{pred.amplitude:.4g} V peak")
    t.add_row("output RMS (with DC)", f"{pred.vrms:.4g} V")
    t.add_row("output peak to peak", f"{pred.vpp:.4g} V")
    t.add_row("inductor current peak / RMS", f"{pred.inductor_peak_a:.4g} A / {pred.inductor_rms_a:.4g} A")
    t.add_row("capacitor max / min", f"{pred.capacitor_max_v:.4g} V / {pred.capacitor_min_v:.4g} V")
    t.add_row("capacitor ripple current RMS", f"{pred.capacitor_rms_a:.4g} A")
    stdout.print(t)
    _print_lines([("FLAGGED: " if s.flagged else "") + s.text for s in stress])
    _print_lines([_CAUTION], "yellow")


def _damped_filter(frequency, inductance, load, rs, duty, amplitude, thd_max, level_tolerance, tolerance_l,
                   series, trials, as_json) -> None:
    from benchfit.cli.common import print_json, stderr, stdout
    from benchfit.design.damped import design_damped

    with stderr.status(f"choosing f0 and Q: {trials} draws per point", spinner="line"), \
            _OptionNames(duty="--duty", frequency="--frequency", trials="--trials", rs="--rs", frequency_hz="--frequency",
                         inductance="--inductance", capacitance="--capacitance", rs_ohm="--rs", esr_ohm="--esr",
                         load_ohm="--load"):
        d = design_damped(
            _opt_value(frequency, "--frequency"), _opt_value(inductance, "--inductance"),
            rs_ohm=_opt_value(rs, "--rs", allow_zero=True), load_ohm=_opt_value(load, "--load"),
            duty=parse_fraction(duty, "--duty", allow_zero=False), amplitude_v=_opt_value(amplitude, "--amplitude"),
            thd_max_pct=100 * parse_fraction(thd_max, "--thd-max", allow_zero=False),
            level_tolerance=parse_fraction(level_tolerance, "--level-tolerance", allow_zero=False),
            tolerance_l=parse_fraction(tolerance_l, "--tolerance-l"), series=_series(series, "--series"),
            n_trials=trials)
    if as_json:
        print_json(d.to_dict())
        return
    t = _table(f"Trade-off for {frequency} Hz (THD ≤ {thd_max}, level ±{level_tolerance})",
               ("f0/F", "Q", "C", "R damp", "THD", "level", "level spread", "peaking", "yield", "stress"))
    from benchfit.units import format_quantity as fq

    for r in d.table:
        t.add_row(f"{r.ratio:g}", f"{r.q:g}", fq(r.capacitance_f, "F", 3), fq(max(r.r_damp_ohm, 0.0), "Ω", 3),
                  f"{r.thd_pct:.2f} %", f"{r.vrms:.3g} V", f"±{r.level_spread * 100:.1f} %", f"{r.peaking:.2f}",
                  f"{r.yield_fraction * 100:.0f} %", "flagged" if r.flagged else "")
    stdout.print(t)
    p = d.prediction
    _print_lines([f"Chosen: C = {d.capacitor.describe()}" + ("" if d.damping is None else
                  f", damping resistor {d.damping.describe()} in series with the choke")
                  + f" → THD {p.thd_pct:.2f} %, {p.vrms:.3g} V rms (AC), yield {d.yield_fraction * 100:.1f} %"]
                 + list(d.notes) + [("FLAGGED: " if s.flagged else "") + s.text for s in d.stress])
    _print_lines([f"Caution: {c}" for c in d.cautions], "yellow")


# --- combine --------------------------------------------------------------------------------

_COMBINE_EXAMPLE = """

Example:

\b
  benchfit design combine 29.7u --kind C --series E12 --max-parts 3
  benchfit design combine 9.2k --kind R --stock drawer.csv
"""


@design_app.command("combine", short_help="Series/parallel part combinations for a value.", help="Best series/parallel combinations of parts for a value, from a "
                    "series or your stock list." + _COMBINE_EXAMPLE)
def combine_command(
    value: str = typer.Argument(..., metavar="VALUE", help="Wanted value, e.g. 29.7u, 9.2k, 300m."),
    kind: str = typer.Option(..., "--kind", metavar="KIND", help="R, C or L."),
    series: str = typer.Option("E12", "--series", metavar="SERIES", help="Series to draw from: E6, E12, E24, E48, E96 or E192."),
    max_parts: int = typer.Option(3, "--max-parts", metavar="N", min=1, max=3, help="At most this many parts (1 to 3)."),
    stock: Optional[Path] = typer.Option(None, "--stock", metavar="FILE",
                                         help="CSV of parts on hand: a 'value' column, optional 'qty'."),
    top: int = typer.Option(5, "--top", metavar="N", min=1, help="How many combinations to list (1 or more)."),
    as_json: bool = typer.Option(False, "--json", help="Print one JSON object."),
) -> None:
    from benchfit.cli.common import print_json, stdout
    from benchfit.design.parts import PART_UNITS, check_kind, combine
    from benchfit.units import format_quantity as fq

    with _OptionNames(kind="--kind"):
        k = check_kind(kind)
    target = parse_part_value(value, "VALUE", k)
    series = _series(series, "--series")
    values, counts = (None, None) if stock is None else read_stock(stock, k)
    with _OptionNames(max_parts="--max-parts", top="--top", value="VALUE", stock="--stock"):
        result = combine(target, k, series=series, stock=values, stock_counts=counts, max_parts=max_parts,
                         top=top, source=None if stock is None else str(stock))
    if as_json:
        print_json(result.to_dict())
        return
    unit = PART_UNITS[k]
    t = _table(f"Combinations for {fq(target, unit, 5)} from {result.source}",
               ("#", "parts", "value", "error"))
    for i, c in enumerate(result.combinations, start=1):
        err = 0.0 if abs(c.error) < 5e-6 else c.error * 100
        t.add_row(str(i), c.describe(), fq(c.value, unit, 6), f"{err:+.3f} %")
    stdout.print(t)
    _print_lines([f"Caution: {c}" for c in result.cautions], "yellow")


# --- trim -----------------------------------------------------------------------------------

_TRIM_EXAMPLE = """

Examples:

\b
  benchfit fit hc07.wav --model lc-lowpass --fix C=33u \\
      --fix Rload=10k --json > hc07_fit.json
  benchfit measure hc07.wav --json > hc07.json
  benchfit design trim --fit hc07_fit.json --measurement hc07.json \\
      --spec hc_spec.toml --nominal L=300m --json
  benchfit design trim --spec hc_spec.toml --timer-frequency 50.40 \\
      --timer-frequency-u 0.001 --ra 1k --rb 13.7k --c1 1u --supply 12
  benchfit design trim --fit hc07_fit.json --target 50 --bank 22u,10u,1u
"""


def _read_fit(path: Path):
    from benchfit.cli.common import fail
    from benchfit.fit.result import FitResult

    if path.is_dir():
        fail(f"{path}: is a folder, not a fit result — give the JSON saved with 'benchfit fit CAPTURE --json > FILE'")
    if not path.is_file():
        fail(f"{path}: fit file not found — save one with 'benchfit fit CAPTURE --json > FILE'")
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError, RecursionError) as e:
        fail(f"{path}: not a JSON file ({_why(e)}) — save one with 'benchfit fit CAPTURE --json > FILE'")
    try:
        return FitResult.from_dict(data)
    except (KeyError, TypeError, AttributeError, ValueError) as e:
        fail(f"{path}: not a benchfit fit result (missing or bad {e}) — use the output of 'benchfit fit --json'")


@design_app.command("trim", short_help="What to change so a unit meets its spec.", help="From a unit's fit and "
                    "measurement, the changes that bring it inside every limit of its spec (or 'no change'), "
                    "each predicted on every limit with its uncertainty and probability of passing. "
                    "Without --spec: the older capacitor advice that only moves the resonance to --target." + _TRIM_EXAMPLE)
def trim_command(
    fit: Optional[Path] = typer.Option(None, "--fit", metavar="FILE", help="JSON from 'benchfit fit --model lc-lowpass "
                                       "--json' (filter advice). Leave out for timer advice only."),
    spec: Optional[Path] = typer.Option(None, "--spec", metavar="FILE", help="Spec TOML: the advice is judged on "
                                        "every limit (recommended)."),
    measurement: Optional[Path] = typer.Option(None, "--measurement", metavar="FILE",
                                               help="JSON from 'benchfit measure --json' of the output (calibrates "
                                               "the drive, the level and the frequency)."),
    nominal: list[str] = typer.Option([], "--nominal", metavar="PART=VALUE", help="Nominal part value, e.g. "
                                      "L=300m or C=33u (repeatable); a fitted part far from it is replaced."),
    target: Optional[str] = typer.Option(None, "--target", metavar="HZ", help="Without --spec: wanted resonance (Hz)."),
    series: str = typer.Option("E12", "--series", metavar="SERIES", help="Series for capacitors to add."),
    max_parts: int = typer.Option(2, "--max-parts", metavar="N", min=1, max=3,
                                  help="Without --spec: at most this many capacitors to add (1 to 3)."),
    part_tolerance: Optional[str] = typer.Option(None, "--part-tolerance", metavar="TOL",
                                                 help="Tolerance of added capacitors (default: the series')."),
    bank: Optional[str] = typer.Option(None, "--bank", metavar="VALUES", help="Without --spec: nominal values of the "
                                       "present capacitor bank, comma-separated, e.g. 22u,10u,1u."),
    duty: Optional[str] = typer.Option(None, "--duty", metavar="DUTY", help="Drive duty when no measurement is given."),
    drive_swing: Optional[str] = typer.Option(None, "--drive-swing", metavar="V",
                                              help="Drive swing at the filter (V) when no measurement is given."),
    trials: int = typer.Option(1000, "--trials", metavar="N", min=200, max=100_000,
                               help="Monte Carlo draws (200 to 100,000; about 1 ms each)."),
    seed: int = typer.Option(0, "--seed", metavar="N", help="Seed of the random generator."),
    timer_frequency: Optional[str] = typer.Option(None, "--timer-frequency", metavar="HZ", help="Measured timer frequency (Hz)."),
    timer_frequency_u: Optional[str] = typer.Option(None, "--timer-frequency-u", metavar="HZ",
                                                    help="Its standard uncertainty (Hz)."),
    ra: Optional[str] = typer.Option(None, "--ra", metavar="OHM", help="Timer RA (Ω)."),
    rb: Optional[str] = typer.Option(None, "--rb", metavar="OHM", help="Timer RB (Ω)."),
    c1: Optional[str] = typer.Option(None, "--c1", metavar="F", help="Timer C1 (F)."),
    supply: Optional[str] = typer.Option(None, "--supply", metavar="V", help="Supply voltage (V)."),
    control_voltage: Optional[str] = typer.Option(None, "--control-voltage", metavar="V",
                                                  help="Without --spec: present control-pin voltage (V), if held."),
    diode: bool = typer.Option(False, "--diode", help="The timer has a diode across RB."),
    resistor_series: str = typer.Option("E24", "--resistor-series", metavar="SERIES", help="Series for a new resistor."),
    tolerance_r: str = typer.Option("1%", "--tolerance-r", metavar="TOL", help="Tolerance of a new resistor."),
    as_json: bool = typer.Option(False, "--json", help="Print one JSON object."),
) -> None:
    from benchfit.cli.common import fail

    if spec is None:
        if target is None:
            fail("--spec / --target: neither given — give --spec SPEC.toml (advice judged on every limit) "
                 "or --target HZ (resonance-only capacitor advice)")
        _legacy_trim(fit, target, series, max_parts, part_tolerance, bank, timer_frequency, timer_frequency_u,
                     ra, rb, c1, supply, control_voltage, diode, resistor_series, tolerance_r, as_json)
        return
    _spec_trim(fit, spec, measurement, nominal, series, part_tolerance, duty, drive_swing, trials, seed,
               timer_frequency, timer_frequency_u, ra, rb, c1, supply, diode, resistor_series, tolerance_r,
               as_json)


def _read_json(path: Path, what: str, how: str):
    from benchfit.cli.common import fail

    if path.is_dir() or not path.is_file():
        fail(f"{path}: {'is a folder, not' if path.is_dir() else 'not found:'} {what} — {how}")
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError, RecursionError) as e:
        fail(f"{path}: not a JSON file ({_why(e)}) — {how}")


def _why(e: BaseException) -> str:
    """What was wrong with a JSON file, in a few words (a RecursionError's own text names Python's limit)."""
    return "nested too deeply" if isinstance(e, RecursionError) else str(e)


def _spec_trim(fit, spec, measurement, nominal, series, part_tolerance, duty, drive_swing, trials, seed,
               timer_frequency, timer_frequency_u, ra, rb, c1, supply, diode, resistor_series, tolerance_r,
               as_json) -> None:
    from benchfit.cli.common import fail, print_json, stderr, stdout
    from benchfit.design.advice import TimerParts, advise
    from benchfit.report.spec import load_spec

    sp = load_spec(spec)
    fit_result = None if fit is None else _read_fit(fit)
    meas = None
    if measurement is not None:
        meas = _read_json(measurement, "a measurement", "save one with 'benchfit measure CAPTURE --json > FILE'")
        if not isinstance(meas, dict) or not isinstance(meas.get("channels"), list):
            fail(f"{measurement}: not a benchfit measurement (no 'channels') — use the output of "
                 "'benchfit measure --json'")
    if fit_result is None and meas is None and timer_frequency is None:
        fail("--fit / --measurement / --timer-frequency: none given — give the unit's fit and measurement, "
             "or the measured timer frequency with --ra, --rb, --c1")
    timer = None
    timer_args = {"--ra": ra, "--rb": rb, "--c1": c1}
    if any(v is not None for v in timer_args.values()):
        missing = ", ".join(k for k, v in timer_args.items() if v is None)
        if missing:
            fail(f"--ra/--rb/--c1: also give {missing} — the timer's nominal parts")
        vcc = _opt_value(supply, "--supply")
        if vcc is None:
            vcc = sp.conditions.get("supply_v") if isinstance(sp.conditions.get("supply_v"), (int, float)) else 12.0
        timer = TimerParts(_opt_value(ra, "--ra"), _opt_value(rb, "--rb"), _opt_value(c1, "--c1"), float(vcc), diode)
    nom = {}
    for key, unit in (("L", "h"), ("C", "f")):
        v = sp.conditions.get(f"nominal_{key}_{unit}")
        if isinstance(v, (int, float)) and not isinstance(v, bool):
            nom[key] = float(v)
    for item in nominal:
        part, sep, value = item.partition("=")
        part = part.strip()
        if not sep or part not in ("L", "C"):
            fail(f"--nominal {item!r}: not PART=VALUE with PART L or C — write e.g. --nominal L=300m")
        nom[part] = parse_part_value(value, f"--nominal {part}", "L" if part == "L" else "C")
    with stderr.status(f"judging the plans on every limit: {trials} Monte Carlo draws each", spinner="line"), \
            _OptionNames(trials="--trials", duty="--duty", measurement="--measurement",
                      timer_frequency_hz="--timer-frequency", supply_v="--supply", diode="--diode"):
        advice = advise(
            sp, fit=fit_result, measurement=meas, timer=timer,
            timer_frequency_hz=_opt_value(timer_frequency, "--timer-frequency"),
            timer_frequency_u_hz=_opt_value(timer_frequency_u, "--timer-frequency-u"), nominal=nom,
            duty=None if duty is None else parse_fraction(duty, "--duty", allow_zero=False),
            drive_swing_v=_opt_value(drive_swing, "--drive-swing"), cap_series=_series(series, "--series"),
            resistor_series=_series(resistor_series, "--resistor-series"),
            part_tolerance=None if part_tolerance is None else parse_fraction(part_tolerance, "--part-tolerance"),
            resistor_tolerance=parse_fraction(tolerance_r, "--tolerance-r"), n_trials=trials, seed=seed)
    if as_json:
        print_json(advice.to_dict())
        return
    t = _table(f"Trim advice for {advice.source or 'the unit'} against {sp.name or spec}", ("", ""), header=False)
    t.add_row("verdict", advice.verdict)
    for i, c in enumerate(advice.plan.changes, start=1):
        t.add_row(f"change {i}", c.text)
    from benchfit.design.advice import _fmt_pred

    for q, (v, u) in advice.plan.predicted.items():
        t.add_row(f"predicted {q} (k = 1)", _fmt_pred(q, v, u).partition(" ")[2])
    t.add_row("probability of meeting the spec", f"{advice.plan.p_pass * 100:.1f} % ({len(advice.plan.p_limits)} of {len(sp.limits)} limits, "
              f"{trials} Monte Carlo draws, seed {seed})")
    stdout.print(t)
    lines = advice.summary_lines()
    _print_lines([x for x in lines if x.startswith(("no change:", "alternative", "no action"))])
    _print_lines(list(advice.warnings) + list(advice.plan.warnings) + list(advice.notes))
    _print_lines([f"stress: {s.text}" for s in advice.plan.stress], "")
    _print_lines([f"Caution: {c}" for c in advice.cautions], "yellow")


def _legacy_trim(fit, target, series, max_parts, part_tolerance, bank, timer_frequency, timer_frequency_u,
                 ra, rb, c1, supply, control_voltage, diode, resistor_series, tolerance_r, as_json) -> None:
    from benchfit.cli.common import fail, print_json, stdout
    from benchfit.design.trim import suggest_trim
    from benchfit.units import format_quantity as fq
    from benchfit.units import format_with_uncertainty as fu

    if fit is None and timer_frequency is None:
        fail("--fit / --timer-frequency: neither given — give --fit FIT.json (filter advice) and/or "
             "--timer-frequency with --ra, --rb, --c1 (timer advice)")
    fit_result = None if fit is None else _read_fit(fit)
    timer_args = {"--ra": ra, "--rb": rb, "--c1": c1}
    if timer_frequency is not None and any(v is None for v in timer_args.values()):
        missing = ", ".join(k for k, v in timer_args.items() if v is None)
        fail(f"--timer-frequency: also give {missing} — the timer's nominal parts")
    bank_values = None
    if bank is not None:
        bank_values = [parse_part_value(x, "--bank", "C") for x in bank.split(",") if x.strip()]
        if not bank_values:
            fail("--bank: no values — list the bank's capacitors, e.g. 22u,10u,1u")
    series = _series(series, "--series")
    resistor_series = _series(resistor_series, "--resistor-series")
    with _OptionNames(part_tolerance="--part-tolerance", tolerance_r="--tolerance-r", duty="--duty",
                      control_voltage="--control-voltage", max_parts="--max-parts", frequency="--target",
                      bank="--bank", supply_v="--supply", c1_farad="--c1", diode="--diode",
                      timer_frequency_hz="--timer-frequency"):
        advice = suggest_trim(
            fit_result, _opt_value(target, "--target"), series=series, max_parts=max_parts,
            part_tolerance=None if part_tolerance is None else parse_fraction(part_tolerance, "--part-tolerance"),
            bank=bank_values, timer_frequency_hz=_opt_value(timer_frequency, "--timer-frequency"),
            timer_frequency_u_hz=_opt_value(timer_frequency_u, "--timer-frequency-u"),
            ra_ohm=_opt_value(ra, "--ra"), rb_ohm=_opt_value(rb, "--rb"), c1_farad=_opt_value(c1, "--c1"),
            supply_v=_opt_value(supply, "--supply"),
            control_voltage_v=_opt_value(control_voltage, "--control-voltage"), diode=diode,
            resistor_series=resistor_series, resistor_tolerance=parse_fraction(tolerance_r, "--tolerance-r"))
    if as_json:
        print_json(advice.to_dict())
        return
    for c in advice.changes:
        what = "filter resonance" if c.kind == "capacitor" else "timer frequency"
        t = _table(f"Trim advice for {advice.source or 'the unit'} → {advice.target_hz:g} Hz", ("", ""),
                   header=False)
        iv = c.interval(2.0)
        need = fu(c.needed, c.needed_u, c.unit) if c.needed_u else fq(c.needed, c.unit, 5)
        t.add_row("change", c.action)
        t.add_row(f"{c.part} now", fq(c.present, c.unit, 5))
        t.add_row(f"{c.part} for {advice.target_hz:g} Hz", need)
        t.add_row(f"{what} now", f"{c.before_hz:.4f} Hz")
        t.add_row(f"{what} after (k = 1)", fu(c.predicted_hz, c.predicted_u_hz, "Hz"))
        t.add_row("95 % interval (k = 2)", "—" if iv is None else f"{iv[0]:.3f} Hz to {iv[1]:.3f} Hz")
        stdout.print(t)
    _print_lines(["resonance-only advice (the filter's f0 moved to --target): it does not check THD or level — "
                  "give --spec for advice judged on every limit"] + list(advice.notes))
    _print_lines([f"Caution: {c}" for c in advice.cautions] + [_CAUTION], "yellow")
