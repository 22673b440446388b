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
    """Format with an SI prefix: ``format_quantity(0.0221, "F") == "22.1 mF"``; ``None`` → ``"—"``.

    ``digits`` significant digits in positional notation (trailing zeros dropped); a mantissa
    that rounds up to 1000 takes the next prefix (0.99999 to 4 digits is "1", not "1e+03 m").
    """
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return "—"
    if value == 0 or not math.isfinite(value):
        return f"{value:g} {unit}".strip()
    if not _PREFIX_RANGE[0] <= abs(_round_sig(value, digits)) < _PREFIX_RANGE[1]:
        # beyond femto … tera (a "no load" conductance's inverse, a bound at 1e30): a prefix
        # would need a mantissa of many digits, so the decade is written out ("2.26e25 Ω")
        mantissa, exponent = f"{_round_sig(value, digits):.{digits - 1}e}".split("e")
        if "." in mantissa:
            mantissa = mantissa.rstrip("0").rstrip(".")
        return f"{mantissa}e{int(exponent)} {unit}".strip()
    exp3 = min(max(3 * math.floor(math.log10(abs(value)) / 3), -15), 12)
    mant = _round_sig(value / 10.0 ** exp3, digits)
    if abs(mant) >= 1000 and exp3 < 12:
        exp3 += 3
        mant = _round_sig(value / 10.0 ** exp3, digits)
    decimals = max(0, digits - 1 - int(math.floor(math.log10(abs(mant)))))
    text = f"{mant:.{decimals}f}"
    if "." in text:
        text = text.rstrip("0").rstrip(".")
    return f"{text} {_PREFIXES[exp3]}{unit}".strip()


#: the magnitudes an SI prefix covers here, femto … tera (below 1000 T)
_PREFIX_RANGE = (1e-15, 1e15)


def _round_sig(x: float, digits: int) -> float:
    """``x`` rounded to ``digits`` significant digits (0.0996 → 0.10 at two)."""
    return float(f"{x:.{digits - 1}e}")


#: units shown without an SI prefix in "value ± u": not SI units, or ratios a prefix would obscure
_UNPREFIXED = frozenset({"", "%", "FS", "dB", "dBFS", "dBV", "ppm", "ppm/h", "%/h", "1/s", "°C"})

#: below this u/|value| the value would need more digits than any bench instrument resolves:
#: it is shown to 8 significant digits and u apart (common practice, no source)
_TINY_RELATIVE_U = 1e-7


def format_with_uncertainty(value: float | None, u: float | None, unit: str = "",
                            digits: int = 2) -> str:
    """``value ± u unit``: the one way benchfit writes a value with its standard uncertainty.

    The uncertainty is rounded to ``digits`` (2) significant digits and the value to the
    same decimal place, with one SI prefix chosen for both from the larger of |value| and u,
    as in JCGM 100:2008 (GUM) 7.2.2 and 7.2.6: ``"50.0123 ± 0.0012 Hz"``,
    ``"33.20 ± 0.41 µF"``. Units that take no SI prefix (``%``, ``FS``, ``dB``, ``ppm``, ``1/s``,
    none) keep their value unscaled. ``u`` None, zero or not finite gives the value alone to 5
    significant digits; a u below 1e-7 of the value gives the value to 8 significant digits
    and u with its own prefix (``"1.0000000 kHz ± 12 pHz"``). None or a non-finite value is "—".
    """
    if value is None or not math.isfinite(value):
        return "—"
    prefixed = unit not in _UNPREFIXED
    if u is None or not math.isfinite(u) or u <= 0:
        return format_quantity(value, unit, 5) if prefixed else f"{value:.5g} {unit}".strip()
    if u < _TINY_RELATIVE_U * abs(value):
        if not prefixed:
            return f"{value:.8g} {unit} ± {u:.2g} {unit}".strip()
        return f"{format_quantity(value, unit, 8)} ± {format_quantity(u, unit, 2)}"
    exp3 = 0
    if prefixed and not _PREFIX_RANGE[0] <= max(abs(value), u) < _PREFIX_RANGE[1]:
        # beyond the prefixes: the pair in one decade, "(2.26 ± 0.10)e25 Ω" (GUM 7.2.2)
        decade = math.floor(math.log10(max(abs(value), u)))
        pair = format_with_uncertainty(value / 10.0 ** decade, u / 10.0 ** decade, "", digits)
        return f"({pair})e{decade} {unit}".strip()
    if prefixed:
        exp3 = min(max(3 * math.floor(math.log10(max(abs(value), u)) / 3), -15), 12)
    scale = 10.0 ** exp3
    du = _round_sig(u / scale, digits)
    place = int(math.floor(math.log10(du))) - (digits - 1)  # the decade of u's last digit shown
    v = round(value / scale, -place)
    decimals = max(0, -place)
    v_text = f"{v:.{decimals}f}"
    if v_text.lstrip("-").strip("0.") == "":  # a value that rounds to zero is shown unsigned
        v_text = v_text.lstrip("-")
    prefix = _PREFIXES[exp3] if prefixed else ""
    return f"{v_text} ± {du:.{decimals}f} {prefix}{unit}".strip()
