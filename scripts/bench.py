#!/usr/bin/env python3
"""Speed and accuracy figures of benchfit on this machine (no timed tests: figures only).

Runs every area's benchmark (scripts/bench_<area>.py, each with ``run() -> list[dict]`` of
name, value, unit, goal) and prints one table with the date and the machine. The README's
"Figures" section quotes its output.

    python3 scripts/bench.py            # all areas
    python3 scripts/bench.py measure    # one area
"""

from __future__ import annotations

import datetime as _dt
import importlib.util
import os
import platform
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
AREAS = ("measure", "fit", "live", "batch", "log")


def _load(area: str):
    path = HERE / f"bench_{area}.py"
    spec = importlib.util.spec_from_file_location(f"bench_{area}", path)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def _as_the_cli() -> None:
    """One BLAS thread, as `benchfit measure`/`report` ask for before numpy loads (see
    benchfit.cli.batch.prefer_one_blas_thread): core times then match what the commands do."""
    for name in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS", "BLIS_NUM_THREADS"):
        os.environ.setdefault(name, "1")


def main(argv: list[str]) -> int:
    areas = argv or list(AREAS)
    unknown = [a for a in areas if a not in AREAS]
    if unknown:
        print(f"error: unknown area {unknown[0]!r} — choose from {', '.join(AREAS)}", file=sys.stderr)
        return 2
    print(f"benchfit benchmark, {_dt.datetime.now(_dt.timezone.utc):%Y-%m-%d %H:%M} UTC, "
          f"{platform.machine()}, {os.cpu_count()} cores, Python {platform.python_version()}")
    width = 62
    for area in areas:
        print(f"\n[{area}]", flush=True)
        for row in _load(area).run():
            value = row["value"]
            text = f"{value:.4g}" if isinstance(value, float) else str(value)
            goal = row.get("goal") or ""
            print(f"  {row['name']:<{width}} {text:>10} {row.get('unit', ''):<6} {goal}", flush=True)
    return 0


if __name__ == "__main__":
    _as_the_cli()
    raise SystemExit(main(sys.argv[1:]))
