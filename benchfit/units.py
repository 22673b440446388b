"""SI-prefixed quantities: parsing ``"2.2k"``, ``"288m"``, ``"10u"`` and formatting values.

Parsing and formatting are delegated to :mod:`quantiphy`; this module only adds
benchfit's rules (positive/finite checks, one-line errors naming the parameter).
"""

from __future__ import annotations

import math

from quantiphy import QuantiPhyError, Quantity

__all__ = ["parse_quantity", "parse_assignment", "format_quantity", "format_with_uncertainty"]


def parse_quantity(text: str | float, name: str = "value", *, unit: str = "",
                   positive: bool = False, allow_zero: bool = True) -> float:
    """Parse a number with an optional SI prefix and unit (``"33u"``, ``"33uF"``, ``"1.5e-3"``).

    Parameters
    ----------
    text : str or float
        The text to parse. ``"m"`` is milli and ``"M"`` mega; ``"u"`` and ``"µ"`` are micro.
    name : str
        Name of the parameter, used in the error message.
    unit : str
        Expected unit; a trailing unit in ``text`` is accepted when it matches.
    positive : bool
        Reject negative values.
    allow_zero : bool
        With ``positive``, also accept exactly zero.

    Raises
    ------
    ValueError
        With a one-line message naming ``name`` and the bad text.
    """
    if isinstance(text, (int, float)):
        value = float(text)
    else:
        s = str(text).strip()
        if unit and s.endswith(unit) and len(s) > len(unit):
            s = s[: -len(unit)].strip()
        s = s.replace("µ", "u").replace("μ", "u")
        try:
            value = float(Quantity(s))
        except (QuantiPhyError, ValueError, TypeError) as e:
            raise ValueError(
                f"{name}: {text!r} is not a number — write it like 2.2k, 288m, 10u or 1.5e-3"
            ) from e
    if not math.isfinite(value):
        raise ValueError(f"{name}: {text!r} is not a finite number")
    if positive and (value < 0 or (value == 0 and not allow_zero)):
        need = "zero or positive" if allow_zero else "positive"
        raise ValueError(f"{name}: {text!r} must be {need}")
    return value


def parse_assignment(text: str, allowed: tuple[str, ...], option: str) -> tuple[str, float]:
    """Parse ``NAME=VALUE`` (``"C=22u"``) where NAME is one of ``allowed``.

    Raises ``ValueError`` with a one-line message that lists the allowed names.
    """
    if "=" not in text:
        raise ValueError(f"{option} {text!r}: expected NAME=VALUE, e.g. {allowed[0]}=1.5")
    key, _, raw = text.partition("=")
    key = key.strip()
    match = {a.lower(): a for a in allowed}.get(key.lower())
    if match is None:
        raise ValueError(f"{option} {text!r}: unknown name {key!r} — use one of {', '.join(allowed)}")
    return match, parse_quantity(raw, f"{option} {match}")


_PREFIXES = {-15: "f", -12: "p", -9: "n", -6: "µ", -3: "m", 0: "", 3: "k", 6: "M", 9: "G", 12: "T"}


def format_quantity(value: float | None, unit: str = "", digits: int = 4) -> str:
    """Format with an SI prefix: ``format_quantity(0.0221, "F") == "22.1 mF"``; ``None`` → ``"—"``."""
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return "—"
    if value == 0 or not math.isfinite(value):
        return f"{value:g} {unit}".strip()
    exp3 = min(max(3 * math.floor(math.log10(abs(value)) / 3), -15), 12)
    mant = value / 10.0 ** exp3
    text = f"{mant:.{digits}g}"
    return f"{text} {_PREFIXES[exp3]}{unit}".strip()


def format_with_uncertainty(value: float | None, u: float | None, unit: str = "",
                            digits: int = 2) -> str:
    """Format ``value ± u unit`` with the uncertainty to ``digits`` significant digits.

    The value is rounded to the same decimal place as the uncertainty, as the GUM
    (JCGM 100:2008, 7.2.6) recommends. ``u=None`` gives the value alone to 5 digits.
    """
    if value is None or not math.isfinite(value):
        return "—"
    if u is None or not math.isfinite(u) or u <= 0:
        return format_quantity(value, unit, 5)
    exp3 = 3 * math.floor(math.log10(abs(value)) / 3) if value != 0 else 0
    exp3 = min(max(exp3, -15), 12)
    prefix = _PREFIXES[exp3]
    scale = 10.0 ** exp3
    v, du = value / scale, u / scale
    decimals = max(0, digits - 1 - int(math.floor(math.log10(abs(du)))))
    return f"{v:.{decimals}f} ± {du:.{decimals}f} {prefix}{unit}".strip()
