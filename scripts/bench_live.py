"""Benchmarks for live capture: tuning readout cost and recorder CPU load.

``run()`` returns a list of ``{"name", "value", "unit", "goal"}`` dicts; ``python
scripts/bench_live.py`` prints them as a table (``--json`` for one JSON object).

* ``tune_update_ms`` — processing time of one ``benchfit tune`` update: a 1 s window of a
  48 kHz stereo stream cut by the sliding windower from 20 ms blocks, then the readout
  (harmonic fit, THD, IEEE 181 duty cycle) of one channel. Must leave headroom for ≥ 4
  updates a second (the hop is 250 ms).
* ``record_cpu_pct`` — process CPU time / wall time of ``benchfit.record`` at 96 kHz stereo
  for a few seconds (steady streaming; ``record_cpu_total_pct`` includes opening and closing),
  recording the monitor of a PulseAudio null sink while ``paplay`` plays a tone into it. The script starts its own private PulseAudio daemon (as the tests do) and
  stops it afterwards; it is skipped, with a note, when pulseaudio is not installed.
"""

from __future__ import annotations

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
SINK = "benchfit_bench"


def _signal(seconds: float, fs: int, seed: int = 555) -> np.ndarray:
    """Stereo test signal (channels, n): a 555-like 50.13 Hz pulse train (band-limited) and a sine."""
    rng = np.random.default_rng(seed)
    n = int(seconds * fs)
    t = np.arange(n) / fs
    duty = 0.47
    pulse = np.full(n, duty)
    for k in range(1, 200):
        pulse += 2 / (k * math.pi) * math.sin(k * math.pi * duty) * np.cos(k * (2 * math.pi * 50.13 * t - math.pi * duty))
    sine = 0.3 * np.sin(2 * np.pi * 50.13 * t)
    return np.stack([0.4 * pulse - 0.2, sine]) + 1e-4 * rng.standard_normal((2, n))


def bench_tune(updates: int = 20) -> list[dict]:
    from benchfit.measurement.tuning import Windower, analyse_window

    x = _signal(1.0 + 0.25 * (updates + 1), FS)
    block = FS // 50
    w = Windower(2, FS, FS // 4)
    analyse_window(x[0, :FS], FS, 50.0)  # warm-up: imports and caches
    wall, cpu = [], []
    pos = 0
    previous = None  # as in tune: the last reading seeds the next fit
    while pos < x.shape[1] and len(wall) < updates:
        t_wall, t_cpu = time.perf_counter(), time.process_time()
        ready = w.push(x[:, pos:pos + block].T)
        for _, win in ready:
            previous = analyse_window(win[0], FS, 50.0, tolerance_hz=0.25, seed_hz=previous).frequency_hz
        if ready:
            wall.append(time.perf_counter() - t_wall)
            cpu.append(time.process_time() - t_cpu)
        pos += block
    return [
        {"name": "tune_update_ms", "value": round(1e3 * float(np.median(wall)), 2), "unit": "ms",
         "goal": "≤ 125 ms (half the 250 ms hop, so ≥ 4 updates/s with headroom)"},
        {"name": "tune_update_max_ms", "value": round(1e3 * float(np.max(wall)), 2), "unit": "ms",
         "goal": "< 250 ms (one hop)"},
        {"name": "tune_update_cpu_ms", "value": round(1e3 * float(np.median(cpu)), 2), "unit": "ms",
         "goal": "≤ 125 ms"},
    ]


def _start_pulse(base: Path) -> dict[str, str] | None:
    """Start a private PulseAudio daemon with a 48 kHz float null sink; return its environment."""
    run, home = base / "run", base / "home"
    run.mkdir(mode=0o700, parents=True)
    home.mkdir(parents=True)
    env = dict(os.environ)
    env.update({"XDG_RUNTIME_DIR": str(run), "HOME": str(home), "PULSE_SOURCE": f"{SINK}.monitor",
                "PULSE_SINK": SINK})
    env.pop("PULSE_SERVER", None)
    subprocess.run(["pulseaudio", "-D", "--system=false", "--exit-idle-time=120", "--disallow-exit", "-n",
                    "--disable-shm=true", "--load=module-native-protocol-unix",
                    f"--load=module-null-sink sink_name={SINK} rate=48000 format=float32le channels=2"],
                   env=env, capture_output=True, timeout=30)
    end = time.monotonic() + 10
    while time.monotonic() < end:
        r = subprocess.run(["pactl", "info"], env=env, capture_output=True, text=True)
        if r.returncode == 0 and f"Default Sink: {SINK}" in r.stdout:
            return env
        time.sleep(0.1)
    return None


def bench_record(seconds: float = 4.0, rate: int = 96000) -> list[dict]:
    import soundfile as sf

    if shutil.which("pulseaudio") is None or shutil.which("paplay") is None:
        return [{"name": "record_cpu_pct", "value": None, "unit": "%",
                 "goal": "not measured: pulseaudio/paplay not installed"}]
    with tempfile.TemporaryDirectory(prefix="benchfit-bench-") as tmp:
        base = Path(tmp)
        env = _start_pulse(base)
        if env is None:
            return [{"name": "record_cpu_pct", "value": None, "unit": "%",
                     "goal": "not measured: PulseAudio did not start"}]
        player = None
        try:
            # the ALSA pulse plugin and PortAudio read these when the stream opens
            saved = {k: os.environ.get(k) for k in ("XDG_RUNTIME_DIR", "HOME", "PULSE_SOURCE", "PULSE_SINK")}
            os.environ.update({k: env[k] for k in saved})
            tone = base / "tone.wav"
            sf.write(str(tone), _signal(seconds + 6, FS).T * 0.9, FS, subtype="FLOAT")
            player = subprocess.Popen(["paplay", f"--device={SINK}", str(tone)], env=env,
                                      stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
            time.sleep(0.5)
            from benchfit.capture.live import record

            marks: list[tuple[int, float, float]] = []  # (frames, wall, cpu) at each progress call

            def on_block(st) -> None:
                marks.append((st.frames_done, time.perf_counter(), time.process_time()))

            t_wall, t_cpu = time.perf_counter(), time.process_time()
            res = record(base / "bench.wav", seconds, rate=rate, channels=2, device="pulse", on_block=on_block)
            wall = time.perf_counter() - t_wall
            cpu = time.process_time() - t_cpu
            # steady state: from 0.5 s of audio on disk to the last progress call
            steady = [m for m in marks if m[0] >= rate // 2]
            s_wall = steady[-1][1] - steady[0][1]
            s_cpu = steady[-1][2] - steady[0][2]
        finally:
            if player is not None and player.poll() is None:
                player.terminate()
                player.wait(timeout=10)
            subprocess.run(["pulseaudio", "--kill"], env=env, capture_output=True, timeout=30)
            for k, v in saved.items():
                if v is None:
                    os.environ.pop(k, None)
                else:
                    os.environ[k] = v
    return [
        {"name": "record_cpu_pct", "value": round(100 * s_cpu / s_wall, 1), "unit": "%",
         "goal": f"≤ 25 % of one core while streaming {rate} Hz stereo to a PCM_24 WAV"},
        {"name": "record_cpu_total_pct", "value": round(100 * cpu / wall, 1), "unit": "%",
         "goal": "≤ 40 % (includes device enumeration, open and close)"},
        {"name": "record_wall_overhead_s", "value": round(wall - res.duration_s, 3), "unit": "s",
         "goal": "≤ 1 s (device open, drain, file close, sidecar)"},
        {"name": "record_overflows", "value": res.overflow_count, "unit": "count", "goal": "0"},
    ]


def run() -> list[dict]:
    """All live-capture benchmarks as ``{"name", "value", "unit", "goal"}`` dicts."""
    return bench_tune() + bench_record()


if __name__ == "__main__":
    rows = run()
    if "--json" in sys.argv[1:]:
        print(json.dumps({"benchmarks": rows}))
    else:
        width = max(len(r["name"]) for r in rows)
        for r in rows:
            value = "—" if r["value"] is None else f"{r['value']}"
            print(f"{r['name']:<{width}}  {value:>10} {r['unit']:<6} goal: {r['goal']}")
