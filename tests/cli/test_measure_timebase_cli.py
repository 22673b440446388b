"""`benchfit measure X.wav --json` on a WAV without a sidecar: the clock's default term is in u (issue 11)."""

from __future__ import annotations

import json
import math

import numpy as np
import soundfile as sf

from benchfit.uncertainty import DEFAULT_TIMEBASE_U_PPM


def test_measure_json_on_an_uncalibrated_wav(tmp_path, run):
    fs = 48000
    t = np.arange(fs // 2) / fs
    path = tmp_path / "HC-07_output.wav"
    sf.write(path, 0.4 * np.sin(2 * math.pi * 400.0 * t), fs, subtype="PCM_24")
    r = run("measure", str(path), "--json")
    assert r.returncode == 0, r.stderr
    ch = json.loads(r.stdout)["channels"][0]
    # 400 Hz × 57.7 ppm = 23 mHz, not the noise's nHz (the value the issue found before)
    assert math.isclose(ch["frequency_u_hz"], 400.0 * DEFAULT_TIMEBASE_U_PPM * 1e-6, rel_tol=1e-3)
    assert any("timebase not calibrated" in w for w in ch["warnings"])
    names = [row["name"] for row in ch["budget"]["frequency_hz"]["contributions"]]
    assert any(n.startswith("timebase (not calibrated") for n in names)
    r2 = run("measure", str(path))
    assert r2.returncode == 0 and "timebase not calibrated" in (r2.stdout + r2.stderr)
