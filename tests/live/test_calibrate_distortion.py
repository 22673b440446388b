"""calibrate distortion: the card's own THD floor goes into the profile and every THD budget (issue 11)."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
import soundfile as sf

FS = 48000


@pytest.fixture(autouse=True)
def _config(tmp_path, monkeypatch):
    monkeypatch.setenv("BENCHFIT_CONFIG_DIR", str(tmp_path / "cfg"))


from livecli import run_cli as run  # noqa: E402  (shared in-process runner)


def test_loop_recording_sets_the_floor_and_measure_budgets_it(tmp_path, capsys):
    t = np.arange(FS) / FS
    # a loop-back with 0.05 % second and 0.03 % third harmonic: THD_F = √(0.05² + 0.03²) = 0.0583 %
    x = 0.5 * (np.sin(2 * np.pi * 50 * t) + 5e-4 * np.sin(2 * np.pi * 100 * t) + 3e-4 * np.sin(2 * np.pi * 150 * t))
    x += 1e-6 * np.random.default_rng(2).standard_normal(t.size)
    wav = tmp_path / "loop.wav"
    sf.write(str(wav), x, FS, subtype="PCM_24")
    code, out, err = run(["calibrate", "distortion", str(wav), "--profile", "desk", "--json"], capsys)
    assert code == 0, err
    d = json.loads(out)
    assert d["floor_pct"] == pytest.approx(math.hypot(0.05, 0.03), rel=0.01)  # 24-bit rounding and noise
    from benchfit.capture.calibration import load_profile
    from benchfit.capture.sidecar import validate_sidecar

    prof = load_profile("desk")
    cal = prof.input_calibration(1)
    assert cal.distortion_floor_pct == pytest.approx(d["floor_pct"])
    # the sidecar a recording with this profile gets carries it, and reads back
    sc = {"benchfit_sidecar": 1, "channels": [{"name": "output"}], "sample_rate_hz": FS,
          "calibration": cal.to_dict()}
    back = validate_sidecar(sc, "unit.json")
    assert back["calibration"]["distortion_floor_pct"] == pytest.approx(d["floor_pct"])
    code, out, err = run(["calibrate", "show"], capsys)
    assert code == 0 and "THD floor" in out
