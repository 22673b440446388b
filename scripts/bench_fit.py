"""Benchmarks of the fitting engine (``benchfit fit``): core time and accuracy.

``run()`` returns a list of ``{"name", "value", "unit", "goal"}`` rows; run as a script it
prints them as a table. Measured on synthetic hum-check captures (2 s at 48 kHz; benchfit's
exact simulation of the filter, seeded noise of 2 mV rms):

* ``benchfit fit`` wall time on the sample two-channel capture (a fresh process: start-up and
  imports included), goal ≤ 1.0 s;
* two-channel fit (L and Rload fixed) core time, goal ≤ 0.5 s, and its C error;
* one-channel fit (L fixed, duty fitted) core time, goal ≤ 0.5 s, and its f0 error;
* ring-down fit core time, goal ≤ 0.5 s, and its f0 and Q errors.

Core time is the fit alone (the capture is already in memory); medians of several runs. On a
shared 2-core machine the figures vary with the load.
"""

from __future__ import annotations

import math
import statistics
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

FS = 48000.0
SECONDS = 2.0


def _median_time(fn, repeats: int) -> tuple[float, object]:
    times, out = [], None
    for _ in range(repeats):
        t0 = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times), out


def _captures():
    from benchfit.capture.capture import Capture
    from benchfit.model.filter import LowpassParts, simulate

    rng = np.random.default_rng(2026)
    parts = LowpassParts(0.3, 33e-6, 20.0, 1.5, 10e3)  # hum-check filter, 12 V drive
    n, settle = int(SECONDS * FS), int(0.5 * FS)
    t = np.arange(settle + n) / FS
    drive = 12.0 * (((t * 50.0) % 1.0) < 0.5)
    out = simulate(drive, FS, parts)
    x = drive[settle:] + rng.normal(0, 2e-3, n)
    y = out[settle:] + rng.normal(0, 2e-3, n)
    two = Capture(np.vstack([x, y]), FS, ("drive", "output"), ("V", "V"), source="bench-two.wav")
    one = Capture(y[None, :], FS, ("output",), ("V",), source="bench-one.wav")
    ring_parts = LowpassParts(0.3, 33e-6, 5.0, 0.5, 10e3)
    tt = np.arange(n) / FS
    slow = 5.0 * (((tt * 2.0) % 1.0) < 0.5)
    ring = simulate(slow, FS, ring_parts) + rng.normal(0, 2e-3, n)
    rd = Capture(ring[None, :], FS, ("output",), ("V",), source="bench-ring.wav")
    return parts, ring_parts, two, one, rd


SAMPLE = Path(__file__).resolve().parents[1] / "sample_captures" / "hc03_drive_output_scope.csv"
FIT_COMMAND = ["fit", str(SAMPLE), "--fix", "L=300m", "--fix", "Rload=10k"]


def _command_wall(repeats: int = 5) -> list[dict]:
    """Wall time of ``benchfit fit`` on the sample two-channel capture (start-up and imports included)."""
    cmd = [sys.executable, "-m", "benchfit", *FIT_COMMAND]
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        subprocess.run(cmd, capture_output=True, check=True)
        times.append(time.perf_counter() - t0)
    return [{"name": "benchfit fit sample_captures/hc03_drive_output_scope.csv --fix L=300m --fix Rload=10k, wall",
             "value": statistics.median(times), "unit": "s", "goal": "≤ 1.0 s"}]


def run(repeats: int = 5) -> list[dict]:
    from benchfit.model.filter import second_order
    from benchfit.fit.lowpass import fit_lowpass
    from benchfit.fit.ringdown import fit_ringdown

    parts, ring_parts, two, one, rd = _captures()
    fit_lowpass(two, fix={"L": 0.3, "Rload": 10e3})  # warm-up (imports)
    t2, r2 = _median_time(lambda: fit_lowpass(two, fix={"L": 0.3, "Rload": 10e3}), repeats)
    t1, r1 = _median_time(lambda: fit_lowpass(one, fix={"L": 0.3}), repeats)
    tr, rr = _median_time(lambda: fit_ringdown(rd), repeats)
    f0 = second_order(parts)["resonant_frequency_hz"]
    ring_truth = second_order(ring_parts)
    rel = lambda a, b: 100.0 * (a - b) / b  # noqa: E731
    return _command_wall() + [
        {"name": "two-channel fit, L and Rload fixed (2 s, 48 kHz)", "value": t2, "unit": "s",
         "goal": "≤ 0.5 s"},
        {"name": "two-channel fit: C error", "value": rel(r2.parameters["C"].value, parts.C),
         "unit": "%", "goal": "|·| ≤ 1 %"},
        {"name": "one-channel fit, L fixed, duty fitted (2 s, 48 kHz)", "value": t1, "unit": "s",
         "goal": "≤ 0.5 s"},
        {"name": "one-channel fit: f0 error",
         "value": rel(r1.derived["resonant_frequency_hz"].value, f0), "unit": "%", "goal": "|·| ≤ 2 %"},
        {"name": "ring-down fit (2 s, 48 kHz, 8 rings)", "value": tr, "unit": "s", "goal": "≤ 0.5 s"},
        {"name": "ring-down fit: f0 error",
         "value": rel(rr.derived["resonant_frequency_hz"].value, ring_truth["resonant_frequency_hz"]),
         "unit": "%", "goal": "|·| ≤ 0.3 %"},
        {"name": "ring-down fit: Q error", "value": rel(rr.derived["q_factor"].value, ring_truth["q_factor"]),
         "unit": "%", "goal": "|·| ≤ 3 %"},
    ]


def main() -> None:
    rows = run()
    width = max(len(r["name"]) for r in rows)
    for r in rows:
        v = r["value"]
        text = f"{v:.4g}" if isinstance(v, float) and math.isfinite(v) else str(v)
        print(f"{r['name']:<{width}}  {text:>10} {r['unit']:<3}  goal {r['goal']}")


if __name__ == "__main__":
    main()
