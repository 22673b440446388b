"""benchfit's command line. ``main()`` is the console-script entry point.

Errors: every :class:`~benchfit.errors.BenchfitError` becomes one line ``error: …`` on
stderr and its exit code (2 bad input, 3 audio device unavailable); usage errors exit 2;
Ctrl-C exits 130. Exit code 1 is reserved for "a unit failed its spec".
"""

from __future__ import annotations

import sys

__all__ = ["main"]

_COMMAND_MODULES = ("measure_cmd", "fit_cmd", "live_cmd", "report_cmd", "log_cmd",
                    "design_cmd", "demo_cmd")


def get_app():
    """The typer app with every command registered."""
    import importlib

    from benchfit.cli.app import app

    for name in _COMMAND_MODULES:
        importlib.import_module(f"benchfit.cli.{name}")
    return app


def main(argv: list[str] | None = None) -> None:
    from benchfit.errors import BenchfitError

    app = get_app()
    try:
        app(args=argv, prog_name="benchfit")
    except BenchfitError as e:
        sys.stderr.write(f"error: {e}\n")
        sys.stderr.flush()
        raise SystemExit(getattr(e, "exit_code", 2)) from None
    except KeyboardInterrupt:
        sys.stderr.write("interrupted\n")
        raise SystemExit(130) from None
