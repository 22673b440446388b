"""Helpers shared by the command modules: consoles, one-line errors, option parsing."""

from __future__ import annotations

import json
import sys
from typing import Any, NoReturn

from benchfit.errors import BenchfitError

__all__ = ["stdout", "stderr", "fail", "print_json", "parse_assignments", "parse_value", "with_fix",
           "flag_words", "cli_words", "command_flags", "LIBRARY_FLAGS", "COMMAND_FLAGS"]


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
    A name followed by ``:`` (or by a quoted value, ``bench 'x': …``) at the start, by ``=``
    or (for names with an underscore, which cannot be ordinary words) standing alone is
    replaced: ``name='x'``, ``name=0.5`` and ``name=…`` become ``--option x``, ``--option 0.5``
    and ``--option …`` (a quoted value with a space or quote keeps its quotes, as a shell needs:
    ``device='USB Audio'`` becomes ``--device 'USB Audio'``); ``name=True`` and a bare ``name=``
    become ``--option``. A name that is already part of an option (``--fix=``) is left alone,
    so translating twice changes nothing.
    """
    import re

    if not flags:
        return message
    names = "|".join(sorted(map(re.escape, flags), key=len, reverse=True))
    at = r"(?<![-\w])"
    out = re.sub(rf"{at}({names})=True\b", lambda m: flags[m[1]], message)
    out = re.sub(rf"""{at}({names})=('[^']*'|"[^"]*")""", lambda m: f"{flags[m[1]]} {_shell_word(m[2])}", out)
    out = re.sub(rf"{at}({names})=(?=[\d.…])", lambda m: f"{flags[m[1]]} ", out)
    out = re.sub(rf"{at}({names})=", lambda m: flags[m[1]], out)
    out = re.sub(rf"^({names})(?=:| ')", lambda m: flags[m[1]], out)
    bare = "|".join(re.escape(n) for n in flags if "_" in n)
    return re.sub(rf"{at}({bare})\b", lambda m: flags[m[1]], out) if bare else out


def _shell_word(quoted: str) -> str:
    """A Python string literal (``'x'`` or ``"x"``) as a shell word: bare, or quoted when it must be."""
    value = quoted[1:-1]
    return quoted if not value or any(c.isspace() or c in "'\"" for c in value) else value


#: the library's parameter names and the option each means in every command that shows it
#: (``channels`` is the channel selection of ``load``/``measure``, ``--channel``; the commands
#: that open a sound card say ``--channels`` for the count: :data:`COMMAND_FLAGS`)
LIBRARY_FLAGS = {"fix": "--fix", "guess": "--guess", "bank": "--bank", "drift": "--drift", "log_path": "--log",
                 "out": "--out", "overwrite": "--overwrite", "fmt": "--format", "bench": "--bench",
                 "channel_map": "--channel", "unit": "--unit", "model": "--model", "harmonics": "--harmonics",
                 "force_pulse": "--pulse", "gain_u_rel": "--gain-u", "interval_s": "--interval", "out_dir": "--out",
                 "drive": "--drive", "response": "--response",
                 # capture/: files, sound-card devices and calibration profiles
                 "sample_rate": "--sample-rate", "channels": "--channel", "device": "--device", "rate": "--rate",
                 "seconds": "--seconds", "names": "--names", "profile": "--profile",
                 "sample_format": "--sample-format", "window_s": "--window"}

#: command → the names it says differently from :data:`LIBRARY_FLAGS` (the longest matching
#: command path wins: ``calibrate show`` before ``calibrate``)
COMMAND_FLAGS: dict[str, dict[str, str]] = {
    "record": {"channels": "--channels"},
    "drift": {"channels": "--channels"},
    "calibrate": {"channels": "--channels"},
    "calibrate show": {"profile": "PROFILE"},
}


def command_flags(command: str) -> dict[str, str]:
    """The :data:`COMMAND_FLAGS` entry of a command path (``"benchfit calibrate gain"`` or ``"record"``)."""
    words = command.split()
    words = words[1:] if words[:1] == ["benchfit"] else words
    for n in range(len(words), 0, -1):
        if " ".join(words[:n]) in COMMAND_FLAGS:
            return COMMAND_FLAGS[" ".join(words[:n])]
    return {}


#: whole library phrases with no one-parameter spelling, and what the command line says instead
_PHRASES = {"timer=TimerParts(ra=…, rb=…, c1=…)": "--ra, --rb, --c1", "sync_log()": "'benchfit log sync'"}


def cli_words(message: str, flags: dict[str, str] | None = None) -> str:
    """A library message (error, warning or note) in the command line's words.

    The library says what a Python caller passes: a part as ``fix={'Rload': …}`` or, with its
    tolerance, ``fix={'L': '…±10%'}``, a keyword as ``bank=``, ``drift='RUN.json'``,
    ``overwrite=True``, ``log_path=``; the command line says ``--fix Rload=…``,
    ``--fix L=…±10%``, ``--bank``, ``--drift RUN.json``, ``--overwrite``, ``--log``.
    :data:`LIBRARY_FLAGS` holds the names shared by every command; ``flags`` adds (or
    overrides) a command's own (``drive_duty`` → ``--drive-duty``).
    """
    import re

    table = {**LIBRARY_FLAGS, **(flags or {})}
    out = message
    for python, words in _PHRASES.items():
        out = out.replace(python, words)
    names = "|".join(sorted(map(re.escape, table), key=len, reverse=True))
    out = re.sub(rf"(?<![-\w])({names})=\{{'(\w+)': (?:'([^']*)'|…)\}}",
                 lambda m: f"{table[m[1]]} {m[2]}={m[3] if m[3] is not None else '…'}", out)
    return flag_words(out, table)


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


#: an example value of each part, as an option is written (the plausible ranges are
#: benchfit.design.parts.BENCH_RANGES)
_PART_EXAMPLES = {"L": "300m", "C": "33u", "Rs": "12", "Resr": "0.4", "Rload": "10k"}


def check_parts_plausible(values: dict[str, Any], option: str, flags: dict[str, str] | None = None) -> None:
    """Refuse a part value far outside any bench part (``--fix L=300M``: 300 MH), naming the prefix rule.

    A value may be a plain number or a fixed value with a tolerance (its ``value`` is checked); None is
    skipped. ``option`` is the ``NAME=VALUE`` option that gave them, or ``flags`` names each part's own
    option (``{"L": "--inductance"}``).
    """
    from benchfit.design.parts import BENCH_RANGES

    for name, item in values.items():
        if name not in _PART_EXAMPLES or item is None:
            continue
        value = float(getattr(item, "value", item))
        (low, high, unit), example = BENCH_RANGES[name], _PART_EXAMPLES[name]
        if low <= value <= high:
            continue
        given, shown = ((f"{flags[name]} {value:.4g} {unit}", f"{flags[name]} {example}") if flags else
                        (f"{option} {name}={value:.4g} {unit}", f"{option} {name}={example}"))
        fail(f"{given}: outside any bench part ({low:g}…{high:g} {unit}) — check the SI prefix (M mega, k kilo, "
             f"m milli, u or µ micro, n nano, p pico), e.g. {shown}")
