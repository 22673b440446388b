"""``benchfit drift`` from the line-in, through the PulseAudio virtual card (see conftest.py).

The played tone is generated here (seeded, float WAV); the null sink and the recorder share
one clock, so the measured frequency must equal the played one to the fit's resolution.
"""

from __future__ import annotations

import json
import signal
import sqlite3
import subprocess
import sys
import time

import numpy as np
import pytest
import soundfile as sf

pytestmark = pytest.mark.audio

FS = 48000


def _tone(path, seconds: float, f: float, a: float = 0.3):
    rng = np.random.default_rng(1139)
    t = np.arange(int(seconds * FS)) / FS
    x = a * np.sin(2 * np.pi * f * t) + 1e-4 * rng.standard_normal(t.size)  # −80 dBFS of noise
    sf.write(str(path), x, FS, subtype="FLOAT")
    return path


def _stop(proc):
    if proc.poll() is None:
        proc.terminate()
        proc.wait(timeout=10)


def test_twenty_seconds_kept_and_logged(rig, tmp_path):
    """20 s at 1 s intervals: 20 intervals measured, logged (series table) and kept in the WAV."""
    player = rig.play(_tone(tmp_path / "play.wav", 30.0, 50.0))
    keep = tmp_path / "run.wav"
    log = tmp_path / "log.sqlite"
    try:
        r = rig.benchfit("drift", "--device", "pulse", "--seconds", "20", "--keep", str(keep), "--unit", "HC-10",
                         "--log", str(log), "--json", timeout=90)
    finally:
        _stop(player)
    assert r.returncode == 0, r.stderr
    d = json.loads(r.stdout)
    assert d["n_intervals"] == 20 and len(d["series"]) == 20
    assert d["kept"] == str(keep) and d["unit"] == "HC-10"
    # the live readout: one line per interval on stderr when it is not a terminal
    assert len([ln for ln in r.stderr.splitlines() if ln.startswith("#")]) == 20, r.stderr
    freqs = [row["frequency_hz"] for row in d["series"] if row["frequency_hz"] is not None]
    assert len(freqs) >= 15
    # one clock for player and recorder: the tone's 50 Hz to well within 1 mHz (fit noise ~µHz)
    assert abs(float(np.median(freqs)) - 50.0) < 1e-3
    info = sf.info(str(keep))
    assert info.frames == 20 * FS
    con = sqlite3.connect(log)
    try:
        assert con.execute("SELECT COUNT(*) FROM drift_series").fetchone()[0] == 20
        assert con.execute("SELECT COUNT(*) FROM results WHERE quantity = 'drift_ppm_per_h'").fetchone()[0] == 1
    finally:
        con.close()


def test_until_ctrl_c_without_keep(rig, tmp_path):
    """No --seconds: runs until Ctrl-C, then prints what it measured and exits 0."""
    player = rig.play(_tone(tmp_path / "play.wav", 20.0, 60.0))
    try:
        proc = subprocess.Popen([sys.executable, "-m", "benchfit", "drift", "--device", "pulse", "--interval",
                                 "500ms", "--json"], env=rig.env, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                                text=True)
        end = time.monotonic() + 20
        seen = ""
        while time.monotonic() < end:
            line = proc.stderr.readline()
            seen += line
            if line.startswith("#12"):
                break
        proc.send_signal(signal.SIGINT)
        out, err = proc.communicate(timeout=30)
    finally:
        _stop(player)
    assert proc.returncode == 0, seen + err
    d = json.loads(out)
    assert d["interrupted"] is True and d["n_intervals"] >= 12
    assert d["stability"] is not None
    assert any("stopped by Ctrl-C" in w for w in d["warnings"])
    good = [row["frequency_hz"] for row in d["series"] if row["frequency_hz"] is not None]
    assert abs(float(np.median(good)) - 60.0) < 1e-3
