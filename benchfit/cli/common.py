"""Helpers shared by the command modules: consoles, one-line errors, option parsing."""

from __future__ import annotations

import json
import sys
from typing import Any, NoReturn

from benchfit.errors import BenchfitError

__all__ = ["stdout", "stderr", "fail", "print_json", "parse_assignments", "parse_value", "with_fix",
           "flag_words"]


def _console(err: bool):
    from rich.console import Console

    # emoji=False: a ":name:" in a file name or label is text, not an emoji code
    return Console(stderr=err, highlight=False, soft_wrap=False, emoji=False)


class _LazyConsole:
    """A rich Console created on first use (rich is imported only when something is printed)."""

    def __init__(self, err: bool) -> None:
        self._err = err
        self._c = None

    def __getattr__(self, name: str) -> Any:
        if self._c is None:
            self._c = _console(self._err)
        return getattr(self._c, name)


stdout = _LazyConsole(err=False)
stderr = _LazyConsole(err=True)


def fail(message: str, code: int = 2) -> NoReturn:
    """Raise a BenchfitError that the entry point prints as ``error: message`` with ``code``."""
    err = BenchfitError(message)
    err.exit_code = code
    raise err


def print_json(obj: Any) -> None:
    """Print one JSON object on one line to stdout (machine output)."""
    sys.stdout.write(json.dumps(obj, allow_nan=False) + "\n")
    sys.stdout.flush()


def parse_value(text: str, option: str, *, positive: bool = True, allow_zero: bool = False) -> float:
    """Parse an SI-prefixed option value or fail with a one-line message."""
    from benchfit.units import parse_quantity

    try:
        return parse_quantity(text, option, positive=positive, allow_zero=allow_zero)
    except ValueError as e:
        need = " above zero" if positive and not allow_zero else " of zero or more" if positive else ""
        fail(with_fix(str(e), f"give a number{need} after {option}"))


def flag_words(message: str, flags: dict[str, str]) -> str:
    """A library message with its Python parameter names said as the command's options.

    The computing packages name their parameters (``interval_s: 0 must be …``, ``pass
    drive_duty=0.5``, ``use method='one-channel'``); ``flags`` maps each name to its option.
    A name followed by ``:`` at the start, by ``=`` or (for names with an underscore, which
    cannot be ordinary words) standing alone is replaced: ``name='x'`` and ``name=0.5`` become
    ``--option x`` and ``--option 0.5``, ``name=True`` and a bare ``name=`` become ``--option``.
    """
    import re

    if not flags:
        return message
    names = "|".join(sorted(map(re.escape, flags), key=len, reverse=True))
    out = re.sub(rf"\b({names})=True\b", lambda m: flags[m[1]], message)
    out = re.sub(rf"\b({names})='([^']*)'", lambda m: f"{flags[m[1]]} {m[2]}", out)
    out = re.sub(rf"\b({names})=(?=[\d.])", lambda m: f"{flags[m[1]]} ", out)
    out = re.sub(rf"\b({names})=", lambda m: flags[m[1]], out)
    out = re.sub(rf"^({names}):", lambda m: f"{flags[m[1]]}:", out)
    bare = "|".join(re.escape(n) for n in flags if "_" in n)
    return re.sub(rf"\b({bare})\b", lambda m: flags[m[1]], out) if bare else out


def with_fix(message: str, fix: str) -> str:
    """``message`` as it is when it already says what to do (``… — …``), else with `` — fix``."""
    return message if " — " in message else f"{message} — {fix}"


def parse_assignments(items: list[str] | None, allowed: tuple[str, ...], option: str,
                      zero_ok: tuple[str, ...] = ()) -> dict[str, float]:
    """Parse repeated ``NAME=VALUE`` options; values must be positive (zero only for ``zero_ok``)."""
    from benchfit.units import parse_assignment

    out: dict[str, float] = {}
    for item in items or []:
        try:
            name, value = parse_assignment(item, allowed, option)
        except ValueError as e:
            text = str(e)
            if "expected NAME=VALUE" in text:
                text = f"{option} {item!r}: not NAME=VALUE"
            fail(with_fix(text, f"write it like {option} {allowed[0]}=1.5, NAME one of {', '.join(allowed)}"))
        if value < 0 or (value == 0 and name not in zero_ok):
            need = "zero or positive" if name in zero_ok else "positive"
            fail(f"{option} {item!r}: {name} must be {need} — give the part's value, e.g. {name}=1.5")
        out[name] = value
    return out


#: part values no bench filter of this kind comes near (common practice, no source): outside them the
#: number is a prefix mistake (M for mega where m, milli, was meant; a missing u for micro) rather than a
#: part; each with an example value as the option is written
_PLAUSIBLE_PARTS = {"L": (1e-9, 100.0, "H", "300m"), "C": (1e-13, 1.0, "F", "33u"), "Rs": (0.0, 1e7, "Ω", "12"),
                    "Resr": (0.0, 1e7, "Ω", "0.4"), "Rload": (1e-3, 1e10, "Ω", "10k")}


def check_parts_plausible(values: dict[str, Any], option: str) -> None:
    """Refuse a part value far outside any bench part (``--fix L=300M``: 300 MH), naming the prefix rule.

    A value may be a plain number or a fixed value with a tolerance (its ``value`` is checked).
    """
    for name, item in values.items():
        if name not in _PLAUSIBLE_PARTS:
            continue
        value = float(getattr(item, "value", item))
        low, high, unit, example = _PLAUSIBLE_PARTS[name]
        if low <= value <= high:
            continue
        fail(f"{option} {name}={value:.4g} {unit}: outside any bench part ({low:g}…{high:g} {unit}) — check the "
             f"SI prefix (M mega, k kilo, m milli, u or µ micro, n nano, p pico), e.g. {option} {name}={example}")
