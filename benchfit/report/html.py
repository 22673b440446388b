"""Render the report model to a self-contained HTML page and write it with its JSON twin.

The page is rendered by Jinja2 with autoescaping on, from the packaged templates in
``benchfit/report/templates`` (``report.html`` and its stylesheet ``report.css``, inlined).
Every user-supplied string (serial, operator, file names, notes) is escaped by Jinja2; the
only markup inserted as-is is the SVG text of benchfit's own figures, after its XML
prolog, DOCTYPE and metadata block are removed. No external assets: no links, fonts or
scripts are loaded.

Numbers are formatted here for display only (SI prefix, value rounded to the decimal
place of its uncertainty, JCGM 100:2008 7.2.6); the JSON twin keeps the full values.
"""

from __future__ import annotations

import hashlib
import json
import math
import re
from pathlib import Path
from typing import Any, Mapping, Sequence

from benchfit.errors import BenchfitError

__all__ = ["render_html", "write_report", "format_value", "format_limits", "format_condition", "clean_svg", "report_stem"]

_PREFIXES = {-15: "f", -12: "p", -9: "n", -6: "µ", -3: "m", 0: "", 3: "k", 6: "M", 9: "G"}
_PREFIXABLE = {"V", "FS", "Hz", "s", "H", "F", "ohm", "A"}
_DISPLAY_UNIT = {"ohm": "Ω", "1/s": "s⁻¹"}


def _unit_text(prefix: str, unit: str) -> str:
    shown = _DISPLAY_UNIT.get(unit, unit)
    if unit == "1/s" and prefix:
        return f"{prefix}s⁻¹"
    return f"{prefix}{shown}"


def _significant(v: float, digits: int) -> str:
    """``v`` to ``digits`` significant digits, in positional notation (no exponent)."""
    if v == 0:
        return "0"
    exponent = math.floor(math.log10(abs(v)))
    decimals = digits - 1 - exponent
    if decimals >= 0:
        return f"{v:.{decimals}f}"
    return f"{round(v, decimals):.0f}"


def format_value(value: float | None, unit: str = "", ref: float | None = None, digits: int = 5,
                 strip: bool = True) -> str:
    """Display text of a value: SI prefix for SI units, rounded to the decimal place of ``ref``.

    Parameters
    ----------
    value : float or None
        Value in SI units; None gives "—".
    unit : str
        "Hz", "V", "%", "dB", "ohm", ... (empty for dimensionless).
    ref : float, optional
        Uncertainty whose second significant digit sets the last digit shown.
    digits : int
        Significant digits when no ``ref`` is given.
    strip : bool
        Drop trailing zeros when no ``ref`` is given (kept for uncertainties).
    """
    if value is None or not isinstance(value, (int, float)) or not math.isfinite(value):
        return "—"
    exp3 = 0
    if unit in _PREFIXABLE and value != 0:
        exp3 = min(max(3 * math.floor(math.log10(abs(value)) / 3), -15), 9)
    scale = 10.0 ** exp3
    v = value / scale
    if ref is not None and math.isfinite(ref) and ref > 0:
        decimals = max(0, 1 - int(math.floor(math.log10(ref / scale))))
        text = f"{v:.{decimals}f}"
    else:
        text = _significant(v, digits)
        if "." in text and strip:
            text = text.rstrip("0").rstrip(".")
    u = _unit_text(_PREFIXES[exp3], unit)
    sep = "" if unit == "%" else " "
    return f"{text}{sep}{u}".strip() if u else text


def format_u(u: float | None, unit: str = "") -> str:
    """An uncertainty to two significant digits with its unit."""
    if u is None or not isinstance(u, (int, float)) or not math.isfinite(u):
        return "—"
    return format_value(u, unit, digits=2, strip=False)


def format_pm(value: float | None, u: float | None, unit: str = "") -> str:
    """``value ± u unit`` as everywhere in benchfit (:func:`benchfit.units.format_with_uncertainty`),
    with the page's unit symbols (Ω, s⁻¹)."""
    from benchfit.units import format_with_uncertainty

    text = format_with_uncertainty(value, u, unit)
    shown = _DISPLAY_UNIT.get(unit)
    if shown is not None and text.endswith(unit):
        text = text[: len(text) - len(unit)] + shown
    return text


def format_limits(lower: float | None, upper: float | None, unit: str) -> str:
    """"a … b unit", "≤ b unit" or "≥ a unit"."""
    # a limit is shown exactly as the spec gives it (up to 12 digits): 2.00001 must not read as 2
    if lower is not None and upper is not None:
        return f"{format_value(lower, unit, digits=12)} … {format_value(upper, unit, digits=12)}"
    if upper is not None:
        return f"≤ {format_value(upper, unit, digits=12)}"
    if lower is not None:
        return f"≥ {format_value(lower, unit, digits=12)}"
    return "—"


_CONDITION_UNITS = (("_ohm", "ohm", "resistance"), ("_v", "V", "voltage"), ("_a", "A", "current"),
                    ("_hz", "Hz", "frequency"), ("_s", "s", "time"), ("_f", "F", "capacitance"),
                    ("_h", "H", "inductance"), ("_pct", "%", "percentage"), ("_c", "°C", "temperature"))


def format_condition(key: str, value: Any) -> tuple[str, str]:
    """(label, text) of a test condition; a number whose key ends in a unit (``load_ohm``) gets it,
    and its label names the quantity instead of the unit ("load resistance", not "load ohm")."""
    label = key.replace("_", " ")
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        for suffix, unit, quantity in _CONDITION_UNITS:
            if key.lower().endswith(suffix) and len(key) > len(suffix):
                label = f"{key[:-len(suffix)].replace('_', ' ')} {quantity}"
                if unit == "°C":
                    return label, f"{value:g} °C"
                return label, format_value(float(value), unit, digits=12)
    return label, str(value)


def format_change(row: Mapping[str, Any]) -> str:
    """As-found → as-left change of a results row: the difference, signed, and its expanded uncertainty
    (the two U combined in quadrature: separate measurements, taken as uncorrelated — GUM 5.1.2)."""
    found, left = row.get("as_found") or {}, row.get("as_left") or {}
    a, b = found.get("value"), left.get("value")
    if not (isinstance(a, (int, float)) and isinstance(b, (int, float)) and math.isfinite(a) and math.isfinite(b)):
        return "—"
    unit = row.get("unit") or ""
    d = float(b) - float(a)
    ua, ub = found.get("expanded_u"), left.get("expanded_u")
    u = math.hypot(ua, ub) if isinstance(ua, (int, float)) and isinstance(ub, (int, float)) else None
    sign = "+" if d > 0 else ("−" if d < 0 else "±")
    text = f"{sign}{format_value(abs(d), unit, u)}"
    return f"{text} (U {format_u(u, unit)})" if u is not None else text


def css_string(text: Any) -> Any:
    """Text for the inside of a double-quoted CSS string in a <style> element (CSS Syntax 3, 4.3.5).

    Every character outside letters, digits, space and a few safe marks becomes a CSS escape
    (``\\3C `` for ``<``), so a serial can neither end the string nor the style element.
    """
    from markupsafe import Markup

    out = []
    for ch in str(text):
        if ch.isalnum() or ch in " -_.:·,+()":
            out.append(ch)
        else:
            out.append(f"\\{ord(ch):X} ")
    return Markup("".join(out))


def path_breaks(path: Any) -> Any:
    """A file path as HTML that may wrap only after a separator (``/``, ``\\``, ``_``, ``-``, ``.``).

    The text is escaped, then a ``<wbr>`` follows each separator, so a long path breaks between its
    parts instead of in the middle of a word (with ``overflow-wrap: break-word`` as the last resort).
    """
    import html as _html

    from markupsafe import Markup

    text = _html.escape(str(path))
    return Markup(re.sub(r"([/\\_\-.])", r"\1<wbr>", text))


#: names a technician reads in the parts table, for the fit's parameter and derived-value keys
_PART_LABELS = {
    "L": "L, inductance", "C": "C, capacitance", "Rs": "Rs, series resistance (source and choke)",
    "Resr": "ESR of the capacitor", "Rload": "Rload, load resistance",
    "resonant_frequency_hz": "resonant frequency f₀", "q_factor": "Q factor",
    "damped_frequency_hz": "damped (ringing) frequency", "decay_rate_per_s": "decay rate α",
    "natural_frequency_hz": "natural frequency (loaded circuit)",
    "series_loss_ohm": "series loss, Rs + ESR (not split by the data)", "Rp": "Rp, core loss across L",
    "total_loss_ohm": "total loss, 2·L·α: Rs + ESR + L/(C·Rload) (+ core loss) (not split by the data)",
    "drive_asymmetry_ohm": "drive source resistance, high minus low (r_high − r_low)",
}


def part_label(key: str) -> str:
    """The parts table's name for a fit key (``q_factor`` → "Q factor"); unknown keys keep their name."""
    return _PART_LABELS.get(key, str(key).replace("_", " "))


_PROLOG = re.compile(r"<\?xml[^>]*\?>\s*", re.S)
_DOCTYPE = re.compile(r"<!DOCTYPE[^>]*>\s*", re.S)
_METADATA = re.compile(r"<metadata>.*?</metadata>\s*", re.S)


def clean_svg(svg: str) -> str:
    """SVG text ready to inline in HTML: without XML prolog, DOCTYPE and metadata."""
    out = _METADATA.sub("", _DOCTYPE.sub("", _PROLOG.sub("", svg)))
    return out.strip()


def _environment():
    from jinja2 import Environment, PackageLoader, StrictUndefined, select_autoescape

    env = Environment(loader=PackageLoader("benchfit.report", "templates"),
                      autoescape=select_autoescape(["html", "htm", "xml"], default=True),
                      undefined=StrictUndefined, trim_blocks=True, lstrip_blocks=True)
    env.filters["value"] = format_value
    env.filters["u"] = format_u
    env.filters["pm"] = format_pm
    env.filters["limits"] = format_limits
    env.globals["condition"] = format_condition
    env.filters["unit"] = lambda unit: _unit_text("", unit)
    env.filters["part_label"] = part_label
    env.filters["path"] = path_breaks
    env.filters["css_string"] = css_string
    env.filters["change"] = format_change
    env.filters["slug"] = lambda text: re.sub(r"[^a-z]+", "-", str(text).lower()).strip("-")
    return env


def render_html(report: Mapping[str, Any], figures: Sequence[Mapping[str, str]] = ()) -> str:
    """The report page (HTML text) for a report model from :func:`~benchfit.report.assemble.build_report`.

    ``figures`` are ``{"title": str, "svg": str}`` items from :mod:`benchfit.report.figures`.
    """
    from markupsafe import Markup

    env = _environment()
    template = env.get_template("report.html")
    figs = [{"title": f["title"], "svg": Markup(clean_svg(f["svg"])), "section": f.get("section", "")}
            for f in figures]
    return template.render(r=report, figures=figs)


#: longest serial kept whole in a report's file name (the report itself always shows the whole serial)
_MAX_SERIAL_IN_NAME = 80


def report_stem(unit: str, created_utc: str) -> str:
    """File stem ``<serial>_<YYYYmmddTHHMMSSZ>`` with characters unsafe in file names replaced."""
    safe = re.sub(r"[^A-Za-z0-9._-]+", "_", unit).strip("._") or "unit"
    if len(safe) > _MAX_SERIAL_IN_NAME:  # file systems allow 255 bytes a name: cut, keep it unique by a hash
        digest = hashlib.sha256(unit.encode("utf-8")).hexdigest()[:10]
        safe = f"{safe[:_MAX_SERIAL_IN_NAME]}-{digest}"
    stamp = re.sub(r"[^0-9TZ]", "", created_utc)
    return f"{safe}_{stamp}"


def write_report(report: Mapping[str, Any], html_text: str, out_dir: str | Path) -> tuple[Path, Path]:
    """Write ``<stem>.html`` and ``<stem>.json`` in ``out_dir``; never overwrite (adds -2, -3, …)."""
    out = Path(out_dir)
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as e:
        raise BenchfitError(f"{out}: cannot create the output directory ({e.strerror}) — check out_dir") from e
    stem = report_stem(str(report["unit"]), str(report["created_utc"]))
    json_text = json.dumps(report, indent=1, ensure_ascii=False, allow_nan=False)
    for n in range(1, 1000):
        name = stem if n == 1 else f"{stem}-{n}"
        html_path, json_path = out / f"{name}.html", out / f"{name}.json"
        if html_path.exists() or json_path.exists():
            continue
        created = False
        try:
            with html_path.open("x", encoding="utf-8") as f:
                created = True
                f.write(html_text)
        except FileExistsError:
            continue
        except OSError as e:
            if created:  # made by the open above (then the disk filled): no half page stays behind
                try:
                    html_path.unlink()
                except OSError:
                    pass
            raise BenchfitError(f"{html_path}: cannot write the report ({e.strerror}) — check out_dir and its "
                                "free space") from e
        try:
            with json_path.open("x", encoding="utf-8") as f:
                f.write(json_text + "\n")
        except OSError as e:
            # a report without its twin is half a record: the HTML made a moment ago goes too
            for half in (json_path, html_path):
                try:
                    half.unlink()
                except OSError:
                    pass
            raise BenchfitError(f"{json_path}: cannot write the JSON twin ({e.strerror or e}; the HTML was "
                                "removed too) — check out_dir and its free space") from e
        return html_path, json_path
    raise BenchfitError(f"{out}: 999 reports named {stem} already exist — choose another out_dir")
