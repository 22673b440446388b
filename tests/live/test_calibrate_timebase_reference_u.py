"""calibrate timebase: the reference tone's uncertainty is never taken as zero (issue 11)."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
import soundfile as sf

from benchfit.uncertainty import DEFAULT_REFERENCE_HALF_WIDTH_PPM

FS = 48000


@pytest.fixture(autouse=True)
def _config(tmp_path, monkeypatch):
    monkeypatch.setenv("BENCHFIT_CONFIG_DIR", str(tmp_path / "cfg"))


from livecli import run_cli as run  # noqa: E402  (shared in-process runner)


def _wav(path):
    t = np.arange(FS) / FS
    sf.write(str(path), 0.5 * np.sin(2 * np.pi * 1000.0 * t), FS, subtype="PCM_24")
    return path


def test_without_frequency_u_the_stated_default_applies(tmp_path, capsys):
    wav = _wav(tmp_path / "ref.wav")
    code, out, err = run(["calibrate", "timebase", wav, "--frequency", "1k", "--profile", "desk", "--json"], capsys)
    assert code == 0, err
    tb = json.loads(out)
    # ±100 ppm rectangular → u = 57.7 ppm of 1 kHz (GUM 4.3.7); the tone's own fit adds ≪ 1 ppm
    assert tb["reference_u_hz"] == pytest.approx(1000 * DEFAULT_REFERENCE_HALF_WIDTH_PPM * 1e-6 / math.sqrt(3))
    assert tb["u_ppm"] == pytest.approx(DEFAULT_REFERENCE_HALF_WIDTH_PPM / math.sqrt(3), rel=1e-3)
    assert "--frequency-u not given" in err


def test_a_stated_reference_u_is_used(tmp_path, capsys):
    wav = _wav(tmp_path / "ref.wav")
    code, out, err = run(["calibrate", "timebase", wav, "--frequency", "1k", "--frequency-u", "1m",
                          "--profile", "desk", "--json"], capsys)
    assert code == 0, err
    tb = json.loads(out)
    assert tb["reference_u_hz"] == 1e-3 and tb["u_ppm"] == pytest.approx(1.0, rel=1e-2)  # 1 mHz of 1 kHz
    assert "--frequency-u not given" not in err
