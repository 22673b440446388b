"""Peak memory and time of ``benchfit measure`` on long files (the block path), and its result.

A seeded hum-check stereo recording (drive square and output sine at 50.04 Hz, 48 kHz, 16-bit
WAV) of the asked length is written to a temporary folder in blocks (constant memory), measured
by ``python -m benchfit measure FILE --json`` in a fresh process, and deleted. The child's peak
resident memory comes from ``os.wait4`` (ru_maxrss, KiB on Linux), the time from the wall clock.

Usage::

    PYTHONPATH=$PWD python3 scripts/bench_measure_long.py              # 1 hour
    PYTHONPATH=$PWD python3 scripts/bench_measure_long.py --hours 1 10 # 1 hour and 10 hours
    PYTHONPATH=$PWD python3 scripts/bench_measure_long.py --hours 0.25 --whole  # the whole-file path too

``--whole`` also measures the same file with the block threshold raised above its length
(``BENCHFIT_BLOCK_SAMPLES``), i.e. loaded whole as before the block path existed: it needs
about 24 bytes a sample (7.8 GiB for one hour of stereo), so keep it to short lengths.
Goal: peak RSS ≤ 1 GiB for any length; the frequency within 3 u of the generated one.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

FS = 48000
F0 = 50.04
GOAL_GIB = 1.0


def write_hum_check(path: Path, seconds: float, seed: int = 2026, chunk: int = 1 << 20) -> None:
    """A seeded drive square (±0.45 FS, 52 % duty) and output sine (0.6 FS, 2 % third harmonic) with
    white noise, written chunk by chunk so the writer's memory stays flat."""
    import soundfile as sf

    rng = np.random.default_rng(seed)
    n = int(round(seconds * FS))
    # a plain WAV's header counts at most 4 GiB of data (libsndfile then reads only 2^30 frames of a
    # 10-hour file): RF64, the WAV with 64-bit sizes, beyond that
    fmt = "RF64" if n * 2 * 2 >= 2 ** 32 else "WAV"
    with sf.SoundFile(str(path), "w", samplerate=FS, channels=2, format=fmt, subtype="PCM_16") as fh:
        for start in range(0, n, chunk):
            m = min(chunk, n - start)
            k = np.arange(start, start + m, dtype=np.float64)
            cycles = np.mod(k * (F0 / FS) + 0.13, 1.0)
            drive = np.where(cycles < 0.52, 0.45, -0.45) + rng.normal(0, 2e-3, m)
            ph = 2 * math.pi * np.mod(k * (F0 / FS), 1.0)
            out = 0.6 * np.cos(ph + 0.4) + 0.02 * np.cos(3 * ph) + rng.normal(0, 1e-3, m)
            fh.write(np.column_stack([drive, out]))
    # the generated clock is exact by construction: a timebase u of 10⁻⁶ ppm keeps the stated
    # frequency u the fit's own (the default 57.7 ppm of an uncalibrated clock would hide it)
    side = {"benchfit_sidecar": 1, "channels": [{"name": "drive"}, {"name": "output"}], "sample_rate_hz": FS,
            "calibration": {"profile": "generated", "gain_v_per_fs": None, "timebase_ppm": 0.0,
                            "timebase_u_ppm": 1e-6, "coupling_tau_s": None}, "unit": "HC-01"}
    path.with_suffix(".json").write_text(json.dumps(side))


def run_measure(path: Path, env_extra: dict[str, str] | None = None) -> dict:
    env = dict(os.environ)
    env.update(env_extra or {})
    t0 = time.perf_counter()
    proc = subprocess.Popen([sys.executable, "-m", "benchfit", "measure", str(path), "--json"],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, env=env)
    out = proc.stdout.read() if proc.stdout else b""
    err = proc.stderr.read() if proc.stderr else b""
    _, status, usage = os.wait4(proc.pid, 0)
    proc.returncode = os.waitstatus_to_exitcode(status)
    seconds = time.perf_counter() - t0
    if proc.returncode != 0:
        raise SystemExit(f"measure failed ({proc.returncode}): {err.decode(errors='replace')[-2000:]}")
    return {"seconds": seconds, "peak_gib": usage.ru_maxrss * 1024 / 2 ** 30, "result": json.loads(out)}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--hours", type=float, nargs="+", default=[1.0])
    ap.add_argument("--whole", action="store_true", help="also measure each file loaded whole (old path)")
    args = ap.parse_args()
    rows = []
    for hours in args.hours:
        folder = Path(tempfile.mkdtemp(prefix="benchfit_long_"))
        try:
            path = folder / f"hc01_{hours:g}h.wav"
            t0 = time.perf_counter()
            write_hum_check(path, hours * 3600.0)
            t_gen = time.perf_counter() - t0
            size = path.stat().st_size + path.with_suffix(".json").stat().st_size
            runs = [("blocks", None)]
            if args.whole:
                runs.append(("whole", {"BENCHFIT_BLOCK_SAMPLES": str(10 ** 15)}))
            for label, env in runs:
                r = run_measure(path, env)
                chans = r["result"]["channels"]
                duration = r["result"]["duration_s"]
                if abs(duration - hours * 3600.0) > 1.0:
                    raise SystemExit(f"{path}: measured {duration:.1f} s of {hours * 3600:.0f} s — the file was not "
                                     "read whole")
                line = {"hours": hours, "path": label, "file_mib": size / 2 ** 20, "generate_s": t_gen,
                        "seconds": r["seconds"], "peak_gib": r["peak_gib"]}
                for ch in chans:
                    z = (ch["frequency_hz"] - F0) / ch["frequency_u_hz"]
                    line[f"{ch['name']}_f"] = f"{ch['frequency_hz']:.9f} ± {ch['frequency_u_hz']:.2g} Hz (z {z:+.2f})"
                    line[f"{ch['name']}_vrms"] = ch["vrms"]
                    line[f"{ch['name']}_thd_pct"] = ch["thd_pct"]
                note = [w for w in chans[0]["warnings"] if w.startswith("measured in")]
                line["note"] = note[0][:60] if note else "(whole file)"
                rows.append(line)
                print(json.dumps(line), flush=True)
        finally:
            shutil.rmtree(folder, ignore_errors=True)
    print()
    print(f"{'length':>7} {'path':>6} {'file':>9} {'time':>8} {'peak RSS':>9}  goal ≤ {GOAL_GIB:g} GiB (block path)")
    for r in rows:
        ok = "ok" if r["path"] == "whole" or r["peak_gib"] <= GOAL_GIB else "OVER"
        print(f"{r['hours']:>6g}h {r['path']:>6} {r['file_mib']:>6.0f} MiB {r['seconds']:>7.1f}s "
              f"{r['peak_gib']:>6.2f} GiB  {ok}")


if __name__ == "__main__":
    main()
