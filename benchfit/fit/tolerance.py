"""Fixed part values with their tolerances: ``L=300m±10%``, ``C=33u±5%``, ``Rload=10k±50``.

A part held fixed in a fit is never exact. :class:`FixedValue` carries its value and, when
given, the tolerance as a half-width with a distribution (a part's tolerance band is read
as rectangular: any value inside it equally likely, GUM 4.3.7 — common practice for a
component tolerance, no source). The fit propagates it into every fitted part and derived
value (:func:`benchfit.fit.identify.input_sensitivities`); a fixed value without a tolerance
makes the results *conditional on it*, and the output says so.

Accepted text (also ``+-`` for ``±``): ``VALUE``, ``VALUE±PCT%``, ``VALUE±ABS`` (same SI
prefixes as the value, e.g. ``300m±5m``).
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from typing import Any, Mapping

from benchfit.uncertainty import Distribution, standard_from_half_width

__all__ = ["FixedValue", "parse_fixed", "as_fixed"]

_SPLIT = re.compile(r"\s*(?:±|\+-|\+/-)\s*")


@dataclass(frozen=True)
class FixedValue:
    """A part value held fixed, with an optional tolerance.

    Attributes
    ----------
    value : float
        The value in SI units.
    half_width : float or None
        Tolerance half-width in the value's unit (None: no tolerance given).
    distribution : str
        Distribution of the tolerance band (default rectangular).
    text : str
        How the tolerance was given (``"±10 %"``), for budget rows.
    source : str
        Where the value came from (``"fix"``: the caller's ``fix=``; ``"spec [conditions]"``, ``"prior"``, …).
    """

    value: float
    half_width: float | None = None
    distribution: Distribution = "rectangular"
    text: str = ""
    source: str = "fix"

    @property
    def u(self) -> float | None:
        """Standard uncertainty of the value (None without a tolerance)."""
        if self.half_width is None:
            return None
        return standard_from_half_width(self.half_width, self.distribution)

    def __float__(self) -> float:
        return float(self.value)

    def to_dict(self) -> dict[str, Any]:
        return {"value": self.value, "half_width": self.half_width, "distribution": self.distribution,
                "u": self.u, "text": self.text, "source": self.source}


def parse_fixed(text: str, name: str = "value") -> FixedValue:
    """Parse ``VALUE[±TOL]`` (TOL as ``PCT%`` or an absolute SI value); ValueError on bad text."""
    from benchfit.units import parse_quantity

    parts = _SPLIT.split(str(text).strip(), maxsplit=1)
    value = parse_quantity(parts[0], name, positive=False)
    if len(parts) == 1:
        return FixedValue(float(value))
    tol = parts[1].strip()
    if not tol:
        raise ValueError(f"{name} {text!r}: nothing after ± — give a tolerance such as ±10% or ±5m")
    if tol.endswith("%"):
        pct = parse_quantity(tol[:-1].strip(), name, positive=False)
        if not math.isfinite(pct) or pct <= 0 or pct >= 100:
            raise ValueError(f"{name} {text!r}: tolerance {tol!r} must be between 0 % and 100 % — e.g. ±10%")
        half = abs(value) * pct / 100.0
        shown = f"±{pct:g} %"
    else:
        half = parse_quantity(tol, name, positive=False)
        if not math.isfinite(half) or half <= 0:
            raise ValueError(f"{name} {text!r}: tolerance {tol!r} must be positive — e.g. ±5m")
        shown = f"±{tol}"
    if half >= abs(value) and value != 0:
        raise ValueError(f"{name} {text!r}: the tolerance is as large as the value — give a narrower band")
    return FixedValue(float(value), float(half), "rectangular", shown)


def as_fixed(v: float | FixedValue | Mapping[str, Any] | tuple) -> FixedValue:
    """A FixedValue from a float, a FixedValue, a ``(value, half_width)`` pair or a mapping."""
    if isinstance(v, FixedValue):
        return v
    if isinstance(v, str):
        return parse_fixed(v)
    if isinstance(v, tuple):
        value, half = v
        return FixedValue(float(value), None if half is None else float(half), "rectangular",
                          "" if half is None else f"±{float(half):g}")
    if isinstance(v, Mapping):
        return FixedValue(float(v["value"]), v.get("half_width"), v.get("distribution", "rectangular"),
                          str(v.get("text", "")), str(v.get("source", "fix")))
    return FixedValue(float(v))


def fixed_specs(fix: Mapping[str, Any] | None) -> dict[str, FixedValue]:
    """The ``fix=`` mapping of a fit as FixedValues; a value that is not one is a FitError naming the part."""
    from benchfit.errors import FitError

    out: dict[str, FixedValue] = {}
    for name, v in (fix or {}).items():
        try:
            out[name] = parse_fixed(v, name) if isinstance(v, str) else as_fixed(v)
        except ValueError as e:
            if isinstance(v, str):  # the parser's own words name the part and the text
                raise FitError(f"fix: {e}") from e
            raise FitError(f"fix: {name}: {v!r} is not a value — give a number in SI units, a (value, "
                           "half_width) pair or text such as '300m±10%'") from e
        except (TypeError, KeyError) as e:
            raise FitError(f"fix: {name}: {v!r} is not a value — give a number in SI units, a (value, "
                           "half_width) pair or text such as '300m±10%'") from e
    return out
