"""Benchmark of ``benchfit drift`` on long files: peak memory and time per hour of audio.

``run()`` returns a list of ``{"name", "value", "unit", "goal"}`` dicts; ``python
scripts/bench_drift.py`` prints them as a table (``--json`` for one JSON object,
``--hours 1,10`` for the lengths).

For each length a synthetic capture is written on the fly into a temporary folder (8 kHz,
16-bit mono FLAC, as the bundled warm-up sample; written in blocks so the generator itself
stays small): a 50 Hz tone with a +20 ppm/h drift, white frequency noise and additive noise.
``benchfit drift FILE --quiet`` then runs in a child process; its peak resident memory comes
from ``getrusage(RUSAGE_CHILDREN).ru_maxrss`` of a fresh helper process per file, and its
time from the wall clock. The files are deleted afterwards.

Goals (issue 14): peak memory ≤ 1 GiB for a 1-hour and a 10-hour capture alike (the audio is
read in one-interval blocks; what grows is the list of interval readings, about a kilobyte
per interval).
"""

from __future__ import annotations

import json
import math
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
FS = 8000
F0 = 50.0
DRIFT = 20e-6 / 3600.0


def write_capture(path: Path, hours: float, seed: int = 1139) -> Path:
    """A long synthetic FLAC, generated and written one minute at a time."""
    import soundfile as sf

    rng = np.random.default_rng(seed)
    n_total = int(hours * 3600 * FS)
    block = 60 * FS
    cycles0 = 0.0
    with sf.SoundFile(str(path), "w", samplerate=FS, channels=1, subtype="PCM_16", format="FLAC") as fh:
        for start in range(0, n_total, block):
            n = min(block, n_total - start)
            t = (start + np.arange(n)) / FS
            # frequency: drift plus white FM (σ_y = 1e-6 at 1 s), integrated to cycles sample by sample
            y = DRIFT * t + 1e-6 * math.sqrt(FS) * rng.normal(size=n)
            cycles = cycles0 + np.cumsum(F0 * (1.0 + y)) / FS
            cycles0 = float(cycles[-1])
            x = 0.4 * np.cos(2 * math.pi * cycles) + 0.01 * np.cos(6 * math.pi * cycles) + 2e-4 * rng.normal(size=n)
            fh.write(x)
    return path


_CHILD = """
import resource, subprocess, sys, time
t0 = time.perf_counter()
r = subprocess.run([sys.executable, "-m", "benchfit", "drift", sys.argv[1], "--quiet"], capture_output=True, text=True)
dt = time.perf_counter() - t0
peak_kib = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
print(r.returncode, dt, peak_kib)
sys.stderr.write(r.stderr[-2000:])
"""


def measure_file(path: Path) -> tuple[float, float]:
    """(wall time in s, peak RSS in MiB) of ``benchfit drift FILE`` in a child process."""
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    out = subprocess.run([sys.executable, "-c", _CHILD, str(path)], capture_output=True, text=True, env=env)
    code, wall, peak = out.stdout.split()
    if int(code) != 0:
        raise RuntimeError(f"benchfit drift failed on {path}: {out.stderr}")
    return float(wall), int(peak) / 1024.0


def run(hours_list=(1.0, 10.0)) -> list[dict]:
    results = []
    with tempfile.TemporaryDirectory(prefix="benchfit-drift-") as tmp:
        for hours in hours_list:
            path = Path(tmp) / f"run_{hours:g}h.flac"
            t0 = time.perf_counter()
            write_capture(path, hours)
            gen = time.perf_counter() - t0
            wall, peak = measure_file(path)
            results += [
                {"name": f"drift_{hours:g}h_peak_rss", "value": round(peak, 1), "unit": "MiB", "goal": "≤ 1024"},
                {"name": f"drift_{hours:g}h_time_per_hour", "value": round(wall / hours, 1), "unit": "s/h",
                 "goal": "(report)"},
                {"name": f"drift_{hours:g}h_file", "value": round(path.stat().st_size / 2 ** 20, 1), "unit": "MiB",
                 "goal": f"(generated in {gen:.0f} s)"},
            ]
            path.unlink()
    return results


def main() -> None:
    hours = (1.0, 10.0)
    for i, a in enumerate(sys.argv):
        if a == "--hours" and i + 1 < len(sys.argv):
            hours = tuple(float(h) for h in sys.argv[i + 1].split(","))
    res = run(hours)
    if "--json" in sys.argv:
        print(json.dumps({"benchmarks": res}))
        return
    for r in res:
        print(f"{r['name']:28s} {r['value']:>10} {r['unit']:5s} goal {r['goal']}")


if __name__ == "__main__":
    main()
