"""benchfit's command line. ``main()`` is the console-script entry point.

Errors: every :class:`~benchfit.errors.BenchfitError` becomes one line ``error: …`` on
stderr and its exit code (2 bad input, 3 audio device unavailable); usage errors (unknown
option, bad option value, missing argument) are one line too, naming the option, exit 2;
Ctrl-C exits 130. Exit code 1 is reserved for "a unit failed its spec".
"""

from __future__ import annotations

import re
import sys
from typing import Any, NoReturn

__all__ = ["main", "usage_message"]

_COMMAND_MODULES = ("measure_cmd", "fit_cmd",
                    "devices_cmd", "record_cmd", "tune_cmd", "calibrate_cmd",
                    "report_cmd", "log_cmd",
                    "design_cmd", "demo_cmd", "drift_cmd")


def get_app():
    """The typer app with every command registered."""
    import importlib

    from benchfit.cli.app import app

    for name in _COMMAND_MODULES:
        importlib.import_module(f"benchfit.cli.{name}")
    return app


def _hint(e) -> str:
    """The option or argument a click error is about, as the user types it (``--jobs``, ``FILES``)."""
    hint = getattr(e, "param_hint", None)
    param = getattr(e, "param", None)
    if hint is None and param is not None:
        opts = list(getattr(param, "opts", None) or [])
        if getattr(param, "param_type_name", "") == "argument" or not opts:
            hint = str(param.name or "").upper()
        else:
            longs = [o for o in opts if o.startswith("--")]
            hint = max(longs or opts, key=len)
    if isinstance(hint, (list, tuple)):
        hint = " / ".join(str(h) for h in hint)
    return str(hint or "").strip("'\"")


def _is_argument(e) -> bool:
    param = getattr(e, "param", None)
    return getattr(e, "param_type", None) == "argument" or (
        param is not None and getattr(param, "param_type_name", "") == "argument")


def _is_a(e: BaseException, name: str) -> bool:
    """Whether ``e`` is one of click's exception classes called ``name`` (or a subclass of it).

    typer ≥ 0.26 carries its own copy of click and exposes only ``BadParameter``, ``Exit`` and
    ``Abort`` publicly; matching the class by name along the MRO recognises that copy and click
    itself alike, without importing a private module (typer's own error display does the same).
    """
    return any(c.__name__ == name for c in type(e).__mro__)


def _option_takes_value(param) -> bool:
    return not (getattr(param, "is_flag", False) or getattr(param, "count", False))


def _typed_value(e, argv: list[str]) -> str | None:
    """The value the user typed for the option or argument a usage error is about, or None."""
    param = getattr(e, "param", None)
    if param is None:
        return None
    if getattr(param, "param_type_name", "") == "option":
        names = [*getattr(param, "opts", ()), *getattr(param, "secondary_opts", ())]
        for i, token in enumerate(argv):
            if token == "--":
                break
            if token in names and i + 1 < len(argv):
                return argv[i + 1]
            for name in names:
                if name.startswith("--") and token.startswith(name + "="):
                    return token[len(name) + 1:]
        return None
    # an argument: the n-th positional word after the command path (one value per argument)
    ctx = getattr(e, "ctx", None)
    command = getattr(ctx, "command", None)
    if command is None:
        return None
    params = list(getattr(command, "params", ()))
    arguments = [p for p in params if getattr(p, "param_type_name", "") == "argument"]
    if param not in arguments or any(getattr(p, "nargs", 1) != 1 for p in arguments):
        return None
    takes_value = {o for p in params if getattr(p, "param_type_name", "") == "option"
                   and _option_takes_value(p) for o in getattr(p, "opts", ())}
    words = str(getattr(ctx, "command_path", "")).split()[1:]
    rest = list(argv)
    for w in words:  # skip the (sub)command names
        if w in rest:
            rest = rest[rest.index(w) + 1:]
    positional: list[str] = []
    skip = False
    for i, token in enumerate(rest):
        if skip:
            skip = False
            continue
        if token == "--":
            positional.extend(rest[i + 1:])
            break
        if token.startswith("-") and len(token) > 1:
            skip = token in takes_value
            continue
        positional.append(token)
    index = arguments.index(param)
    return positional[index] if index < len(positional) else None


def _rule(text: str, param, value: str) -> str | None:
    """The rule a rejected value breaks, in benchfit's words, from the message and the option's limits."""
    low = text.lower()
    if "valid integer" in low:
        return "not a whole number"
    if "valid number" in low or "valid float" in low:
        return "not a number"
    if "valid boolean" in low:
        return "not true or false"
    if "is not one of" in low:  # a choice: "'x' is not one of 'csv', 'json'"
        choices = re.findall(r"'([^']*)'", text[low.index("is not one of"):])
        return f"not one of {', '.join(choices)}" if choices else None
    # the limits: on the option (typer 0.29) or on its click range type (typer 0.26-0.28)
    limits = param if getattr(param, "min", None) is not None or getattr(param, "max", None) is not None \
        else getattr(param, "type", None)
    lo, hi = getattr(limits, "min", None), getattr(limits, "max", None)
    lo_open, hi_open = getattr(limits, "min_open", False), getattr(limits, "max_open", False)
    if "greater than" in low or "less than" in low:  # e.g. "Input should be greater than or equal to 1"
        below = "greater than" in low
        strict = "or equal" not in low
    elif "not in the range" in low:  # e.g. "0 is not in the range x>=1."
        try:
            number = float(value)
        except ValueError:
            return None
        below = lo is not None and (number < lo or (bool(lo_open) and number == lo))
        strict = bool(lo_open) if below else bool(hi_open)
    else:
        return None
    if below and lo is not None:
        return f"must be more than {lo}" if strict else f"must be {lo} or more"
    if not below and hi is not None:
        return f"must be less than {hi}" if strict else f"must be {hi} or less"
    return None


def _bad_value_text(e, argv: list[str]) -> str:
    """What is wrong with a value typer could not convert: the value as typed and the rule it breaks."""
    text = " ".join(str(e.message).split()).rstrip(".")
    value = _typed_value(e, argv)
    if value is None:
        return text
    rule = _rule(text, getattr(e, "param", None), value)
    if rule is None:
        if repr(value) in text or value in text:
            return text
        rule = text[:1].lower() + text[1:]
    return f"{value!r}: {rule}"


def _command_path(app, argv: list[str] | None) -> str:
    """``benchfit`` and the (sub)command names at the start of ``argv`` (for errors that carry no context)."""
    import typer.main

    words = ["benchfit"]
    try:
        cmd = typer.main.get_command(app)
    except Exception:  # noqa: BLE001 - only a nicer hint is lost
        return "benchfit"
    for token in sys.argv[1:] if argv is None else argv:
        sub = getattr(cmd, "commands", {}).get(token)
        if sub is None:
            break
        words.append(token)
        cmd = sub
    return " ".join(words)


def usage_message(e, fallback_path: str = "benchfit", argv: list[str] | None = None) -> str:
    """One line for a click usage error: ``<option>: <what is wrong> — see 'benchfit … --help'``.

    ``argv`` is the command line (default ``sys.argv[1:]``); the value a bad-value error quotes
    is read from it.
    """
    ctx = getattr(e, "ctx", None)
    where = ctx.command_path if ctx is not None and ctx.command_path else fallback_path
    fix = f"see '{where} --help'"
    if _is_a(e, "MissingParameter"):
        hint = _hint(e)
        return f"{hint}: missing {'argument' if _is_argument(e) else 'option'} — give it; {fix}"
    if _is_a(e, "BadParameter"):
        text = _bad_value_text(e, sys.argv[1:] if argv is None else list(argv))
        sep = " " if text.startswith("'") else ": "
        return f"{_hint(e)}{sep}{text} — {fix}"
    if _is_a(e, "NoSuchOption"):
        text = f"{e.option_name}: no such option for '{where}'"
        if e.possibilities:
            text += f" (did you mean {', '.join(e.possibilities)}?)"
        return f"{text} — {fix}"
    if _is_a(e, "BadOptionUsage"):
        text = " ".join(str(e.message).split()).rstrip(".")
        name = getattr(e, "option_name", "")
        if "requires an argument" in text:
            n = getattr(e, "nargs", 1) or 1
            return f"{name}: needs {'a value' if n == 1 else f'{n} values'} — {fix}"
        return f"{name}: {text} — {fix}" if name and name not in text else f"{text} — {fix}"
    if "No such command" in str(e.message):
        text = " ".join(str(e.message).split()).rstrip(".")
        return f"{where}: {text[0].lower()}{text[1:]} — {fix}"
    if "unexpected extra argument" in str(e.message):
        extra = str(e.message).rpartition("(")[2].rstrip(").")
        return f"{where}: unexpected extra argument(s) {extra} — quote a value that has spaces; {fix}"
    text = " ".join(str(e.format_message()).split()).rstrip(".")
    return f"{where}: {text} — {fix}"


def _error(message: str, code: int) -> NoReturn:
    sys.stdout.flush()
    sys.stderr.write(f"error: {message}\n")
    sys.stderr.flush()
    raise SystemExit(code) from None


#: options whose value is a file or folder (an empty one is "the path is empty")
_PATH_OPTIONS = frozenset({"--log", "--out", "--spec", "--plot", "--fit", "--stock", "--as-found"})


def _empty_argument(argv: list[str]) -> str | None:
    """A one-line error for the first empty argument, or None.

    An empty string is never a valid benchfit value, and an empty path would silently
    become the current folder (``Path("") == Path(".")``), so it is refused up front.
    """
    for i, token in enumerate(argv):
        if token == "--":
            return None
        if token.startswith("--") and token.endswith("=") and len(token) > 3:
            what = "path" if token[:-1] in _PATH_OPTIONS else "value"
            return f"{token[:-1]}: the {what} is empty — give a {what} after {token[:-1]}="
        if token.strip():
            continue
        prev = argv[i - 1] if i > 0 else ""
        if prev in _PATH_OPTIONS:
            return f"{prev}: the path is empty — give the file or folder it names"
        if prev.startswith("-") and "=" not in prev and len(prev) > 1:
            return f"{prev}: the value is empty — give the value it needs"
        return f"argument {i + 1}: an empty argument — remove it or give a file name or value"
    return None


def main(argv: list[str] | None = None) -> None:
    import typer

    from benchfit.errors import BenchfitError

    empty = _empty_argument(sys.argv[1:] if argv is None else list(argv))
    if empty is not None:
        _error(empty, 2)
    args = sys.argv[1:] if argv is None else list(argv)
    from benchfit.cli.fasthelp import is_top_help, run_top_help

    fast = run_top_help(args) if is_top_help(args) else None  # (see fasthelp: no command module loads)
    if fast is not None:
        raise SystemExit(fast if isinstance(fast, int) and not isinstance(fast, bool) else 0)
    app = get_app()
    try:
        code = app(args=argv, prog_name="benchfit", standalone_mode=False)
    except BenchfitError as e:
        from benchfit.cli.common import cli_words, command_flags

        _error(cli_words(str(e), command_flags(_command_path(app, argv))), getattr(e, "exit_code", 2))
    except typer.Abort:
        sys.stderr.write("aborted\n")
        raise SystemExit(1) from None
    except KeyboardInterrupt:
        sys.stderr.write("interrupted\n")
        raise SystemExit(130) from None
    except Exception as exc:  # click's exceptions, recognised by name (see _is_a)
        err: Any = exc
        if _is_a(err, "NoArgsIsHelpError"):
            err.show()  # a group or command given no arguments prints its help (exit 2, as click does)
            raise SystemExit(err.exit_code) from None
        if _is_a(err, "UsageError"):
            _error(usage_message(err, _command_path(app, argv), argv), err.exit_code)
        if _is_a(err, "ClickException"):  # e.g. a file option typer opens itself
            _error(" ".join(err.format_message().split()), err.exit_code)
        raise
    # standalone_mode=False returns the code of click/typer Exit (0 for --help, 130 for Ctrl-C)
    # and always ends with SystemExit, as click's standalone mode does
    # (typer turns Ctrl-C into exit 130; a command that stops on Ctrl-C prints its own line)
    raise SystemExit(code if isinstance(code, int) and not isinstance(code, bool) else 0)
