"""Compare two ``benchfit fit --json`` results: do the values and uncertainties agree within a fraction of u?

A change to the fitting engine that is meant to be faster, not different (an analytic Jacobian, warm
starts), may move each reported value only by the refits' own tolerance. This script checks that: for every
part and derived value of the first result it reports the change of the value and of its standard
uncertainty u, both relative to the first result's u, and fails (exit 1) when either exceeds the limit
(default 1 % of u). A value without u (not determined) is compared through its budget's u where it has one,
else relative to its own size.

    python3 scripts/compare_fits.py before.json after.json [--limit 0.01]
"""

from __future__ import annotations

import argparse
import json
import math
import sys
from pathlib import Path


def _entries(result: dict) -> dict[str, dict]:
    """Every part and derived value of a fit's JSON, keyed by name (fixed parts left out)."""
    out = {f"parameter {n}": e for n, e in result.get("parameters", {}).items() if not e.get("fixed")}
    out.update({f"derived {n}": e for n, e in result.get("derived", {}).items()})
    return out


def _scale(entry: dict) -> tuple[float, str]:
    """The yardstick of an entry's changes: its u, else its budget's u, else |value| (with what it is)."""
    if entry.get("stderr"):
        return float(entry["stderr"]), "u"
    budget = entry.get("budget") or {}
    if budget.get("u"):
        return float(budget["u"]), "budget u"
    value = entry.get("value")
    return (abs(float(value)), "|value|") if value else (math.nan, "—")


def _relative(a, b, scale: float) -> float:
    if a is None and b is None:
        return 0.0
    if a is None or b is None or not math.isfinite(scale) or scale <= 0:
        return math.inf
    return abs(float(b) - float(a)) / scale


def differences(before: dict, after: dict) -> list[tuple[str, str, float, float]]:
    """(name, yardstick, |Δvalue|/yardstick, |Δu|/yardstick) for every entry of ``before``."""
    new = _entries(after)
    rows = []
    for name, old in _entries(before).items():
        now = new.get(name, {})
        scale, what = _scale(old)
        rows.append((name, what, _relative(old.get("value"), now.get("value"), scale),
                     _relative(old.get("stderr"), now.get("stderr"), scale)))
    return rows


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("before", type=Path)
    ap.add_argument("after", type=Path)
    ap.add_argument("--limit", type=float, default=0.01, help="largest change allowed, as a fraction of u")
    args = ap.parse_args(argv)
    results = []
    for path in (args.before, args.after):
        try:
            results.append(json.loads(path.read_text(encoding="utf-8")))
        except (OSError, ValueError) as e:
            print(f"{path}: not a readable fit result ({e}) — give the output of benchfit fit --json", file=sys.stderr)
            return 2
    rows = differences(*results)
    worst = 0.0
    for name, what, dv, du in rows:
        worst = max(worst, dv, du)
        print(f"{name:<36} Δvalue {100 * dv:9.4f} % of {what:<9} Δu {100 * du:9.4f} % of {what}")
    print(f"largest change {100 * worst:.4f} % of u (limit {100 * args.limit:g} %)")
    return 0 if worst <= args.limit else 1


if __name__ == "__main__":
    sys.exit(main())
