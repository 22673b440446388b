"""Benchmarks of the measurement engine and `benchfit measure`.

``run()`` returns a list of ``{"name", "value", "unit", "goal"}`` rows; run as a script it
prints them as a table. Measured:

* ``measure`` core time per channel on 10 s and 1 s of 48 kHz stereo (a hum-check drive square
  and output sine), beside one ``numpy.fft.rfft`` of the same channel, timed in turns, and their
  ratio (goals ≤ 6× and ≤ 20×); and whether a caller's many-threaded BLAS slows it (≈ 1);
* ``benchfit --help`` wall time against ``python -c "import typer"``, in turns (goal ≤ 1.5×);
* frequency-estimator efficiency std/CRLB at SNR 20, 40 and 60 dB (Rife & Boorstyn 1974;
  goal ≤ 1.2), and reported-u / observed-std (goal within ±20 %).

Timings are medians of several runs; on a shared 2-core machine they vary with the load.
"""

from __future__ import annotations

import math
import os
import statistics
import subprocess
import sys
import time

import numpy as np

FS = 48000.0


def _median_time(fn, repeats: int) -> float:
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def _hum_check_stereo(seconds: float = 10.0):
    from benchfit.capture.capture import Capture

    rng = np.random.default_rng(2026)
    t = np.arange(int(seconds * FS)) / FS
    f = 50.04
    drive = np.where(np.mod(t * f + 0.13, 1.0) < 0.52, 0.45, -0.45) + rng.normal(0, 2e-3, t.size)
    out = 0.6 * np.cos(2 * math.pi * f * t + 0.4) + 0.02 * np.cos(6 * math.pi * f * t) + rng.normal(0, 1e-3, t.size)
    return Capture(np.vstack([drive, out]), FS, ("drive", "output"))


def _interleaved(fn_a, fn_b, repeats: int, b_per_a: int = 3) -> tuple[float, float]:
    """Medians of ``fn_a`` and ``fn_b`` timed in turns, so both see the same machine load."""
    ta, tb = [], []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn_a()
        ta.append(time.perf_counter() - t0)
        for _ in range(b_per_a):
            t0 = time.perf_counter()
            fn_b()
            tb.append(time.perf_counter() - t0)
    return statistics.median(ta), statistics.median(tb)


#: measure core time per channel over one rfft of the channel (issue 15: 9.5× and ~46× before)
RATIO_GOALS = {10.0: 6.0, 1.0: 20.0}


def _bench_core(repeats: int = 9) -> list[dict]:
    from benchfit.measurement.summary import measure

    rows = []
    for seconds, goal in RATIO_GOALS.items():
        cap = _hum_check_stereo(seconds)
        measure(cap)  # warm-up (imports, caches)
        x = np.array(cap.samples[0])
        reps = repeats if seconds >= 10 else 5 * repeats
        t_all, t_fft = _interleaved(lambda c=cap: measure(c), lambda v=x: np.fft.rfft(v), reps)
        t_measure = t_all / cap.n_channels
        rows += [
            {"name": f"measure, per channel ({seconds:g} s, 48 kHz stereo)", "value": 1e3 * t_measure,
             "unit": "ms", "goal": "—"},
            {"name": f"numpy.fft.rfft, one channel ({seconds:g} s)", "value": 1e3 * t_fft, "unit": "ms",
             "goal": "—"},
            {"name": f"measure / rfft time ratio ({seconds:g} s)", "value": t_measure / t_fft, "unit": "×",
             "goal": f"≤ {goal:g}×"},
        ]
    cap = _hum_check_stereo(10.0)
    x = np.array(cap.samples[0])
    t_one = _median_time(lambda: measure(cap), repeats) / cap.n_channels
    from threadpoolctl import threadpool_limits

    with threadpool_limits(limits=os.cpu_count() or 1, user_api="blas"):  # a caller's numpy, all cores
        t_many = _median_time(lambda: measure(cap), repeats) / cap.n_channels
    from benchfit.measurement.levels import VPP_PERCENTILE, _percentiles

    t_pct = _median_time(lambda: _percentiles(x, VPP_PERCENTILE, 100.0 - VPP_PERCENTILE), repeats * 4)
    return rows + [
        {"name": "the peak-to-peak's two percentiles (10 s, one channel)", "value": 1e3 * t_pct, "unit": "ms",
         "goal": "—"},
        {"name": "measure per channel (10 s), caller's BLAS on every core / one thread",
         "value": t_many / t_one, "unit": "×", "goal": "≈ 1 (threadpoolctl inside measure)"},
    ]


def _bench_help(repeats: int = 15) -> list[dict]:
    cmd_help = [sys.executable, "-m", "benchfit", "--help"]
    cmd_typer = [sys.executable, "-c", "import typer"]
    t_help, t_typer = _interleaved(lambda: subprocess.run(cmd_help, capture_output=True, check=True),
                                   lambda: subprocess.run(cmd_typer, capture_output=True, check=True),
                                   repeats, b_per_a=1)
    return [
        {"name": "benchfit --help wall time", "value": 1e3 * t_help, "unit": "ms", "goal": "—"},
        {"name": "python -c 'import typer' wall time", "value": 1e3 * t_typer, "unit": "ms", "goal": "—"},
        {"name": "--help / import typer", "value": t_help / t_typer, "unit": "×", "goal": "≤ 1.5×"},
    ]


def _bench_efficiency(trials: int = 300, n: int = 2000) -> list[dict]:
    from benchfit.measurement.summary import measure_channel

    rows = []
    t = np.arange(n) / FS
    for snr_db in (20.0, 40.0, 60.0):
        rng = np.random.default_rng(int(snr_db))
        sigma = 1.0 / math.sqrt(2 * 10 ** (snr_db / 10))
        err, rep = [], []
        for _ in range(trials):
            f0 = rng.uniform(1100.0, 1300.0)
            x = np.cos(2 * math.pi * f0 * t + rng.uniform(-math.pi, math.pi)) + rng.normal(0, sigma, n)
            ch = measure_channel(x, FS, unit="V")
            err.append(ch.frequency_hz - f0)
            rep.append(ch.frequency_u_hz)
        std = float(np.std(err, ddof=1))
        crlb = math.sqrt(6 * sigma ** 2 * FS ** 2 / (math.pi ** 2 * n * (n ** 2 - 1)))
        rows.append({"name": f"frequency std / CRLB at {snr_db:.0f} dB (N = {n}, {trials} trials)",
                     "value": std / crlb, "unit": "", "goal": "≤ 1.2"})
        rows.append({"name": f"mean reported u / observed std at {snr_db:.0f} dB",
                     "value": float(np.mean(rep)) / std, "unit": "", "goal": "0.8 … 1.2"})
    return rows


def run() -> list[dict]:
    """All benchmarks as rows ``{"name", "value", "unit", "goal"}``."""
    load = {"name": "1-minute load average at the start (2-core machine)", "value": os.getloadavg()[0],
            "unit": "", "goal": "—"}
    return [load] + _bench_core() + _bench_help() + _bench_efficiency()


if __name__ == "__main__":
    rows = run()
    width = max(len(r["name"]) for r in rows)
    print(f"{'benchmark':<{width}}  {'value':>12}  goal")
    for r in rows:
        print(f"{r['name']:<{width}}  {r['value']:>9.3f} {r['unit']:<2}  {r['goal']}")
