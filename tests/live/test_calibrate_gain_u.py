"""``calibrate gain --rms-u``: the stored gain uncertainty combines the fit and the meter, reaches
the sidecar through a profile, and old profiles without it still load.

File-based tests run the command line in-process; the last test records through the private
PulseAudio daemon of conftest.py (a real audio path, no hardware).
"""

from __future__ import annotations

import json
import math
import tomllib

import numpy as np
import pytest
import soundfile as sf

import benchfit
from benchfit.capture.calibration import (DEFAULT_METER_HALF_WIDTH_REL, CalibrationProfile, ChannelGain,
                                          combine_gain_u_rel, load_profile, profile_path, save_profile)
from benchfit.capture.sidecar import write_sidecar

FS = 48000
RMS = 0.5 / math.sqrt(2)  # the meter reading that makes channel 1 exactly 1 V/FS


@pytest.fixture(autouse=True)
def _config(tmp_path, monkeypatch):
    monkeypatch.setenv("BENCHFIT_CONFIG_DIR", str(tmp_path / "cfg"))


from livecli import run_cli as run  # noqa: E402  (shared in-process runner)


def _sine_wav(path, channels=1, seed=3):
    """1 kHz reference sine, 0.5 FS peak on channel 1 and 0.25 FS on channel 2, noise 1e-4 FS."""
    rng = np.random.default_rng(seed)
    t = np.arange(FS) / FS
    x = np.stack([0.5 / (c + 1) * np.sin(2 * np.pi * 1000.0 * t) + 1e-4 * rng.standard_normal(FS)
                  for c in range(channels)], axis=1)
    sf.write(str(path), x, FS, subtype="PCM_24")
    return path


def _calibrate(wav, capsys, *extra):
    code, out, err = run(["calibrate", "gain", wav, "--rms", f"{RMS:.12f}", "--profile", "desk", "--json",
                          *extra], capsys)
    assert code == 0, err
    return json.loads(out)


@pytest.mark.parametrize("rms_u, meter_u", [
    ("0.2%", 0.002 * RMS),
    ("1m", 1e-3),
    ("0", 0.0),
    (None, RMS * DEFAULT_METER_HALF_WIDTH_REL / math.sqrt(3)),  # ±0.5 % rectangular (GUM 4.3.7)
])
def test_stored_gain_uncertainty_is_fit_and_meter_combined(tmp_path, capsys, rms_u, meter_u):
    wav = _sine_wav(tmp_path / "sine.wav", channels=2)
    info = _calibrate(wav, capsys, *(["--rms-u", rms_u] if rms_u is not None else []))
    assert info["reference_u_v"] == pytest.approx(meter_u, rel=1e-12)  # rounding only
    prof = load_profile("desk")
    for g in info["gains"]:
        fit_rel = g["u_v_per_fs"] / g["v_per_fs"]
        # GUM (JCGM 100:2008) 5.1.2 for a quotient gain = rms / rms_fitted: relative
        # uncertainties add in quadrature; rel=1e-12: rounding only
        expected = math.hypot(fit_rel, meter_u / RMS)
        assert g["gain_u_rel"] == pytest.approx(expected, rel=1e-12)
        stored = prof.gain_of(g["channel"])
        assert stored.gain_u_rel == g["gain_u_rel"] and stored.reference_u_v == info["reference_u_v"]
    # the fit part is tiny for this clean sine (1e-4 FS noise, 48000 samples: ≈ 3e-6 relative),
    # so the meter dominates whenever it is given
    if meter_u > 0:
        assert info["gains"][0]["gain_u_rel"] == pytest.approx(meter_u / RMS, rel=1e-3)
    # the profile hands it on: input calibration → sidecar calibration object
    cal = prof.input_calibration(2)
    assert cal.gain_u_rel == tuple(g["gain_u_rel"] for g in info["gains"])
    assert prof.sidecar_calibration(2)["gain_u_rel"] == list(cal.gain_u_rel)
    # and the TOML file holds both new keys
    with open(profile_path("desk"), "rb") as fh:
        raw = tomllib.load(fh)
    assert {"gain_u_rel", "reference_u_v"} <= set(raw["gain"][0])


def test_text_output_states_the_combined_uncertainty(tmp_path, capsys):
    wav = _sine_wav(tmp_path / "sine.wav")
    code, out, err = run(["calibrate", "gain", wav, "--rms", "353.553m", "--profile", "desk"], capsys)
    assert code == 0, err
    assert "rectangular half-width" in out          # the default is said, not hidden
    assert "u = 0.289 % with the meter" in out      # 0.5 %/√3 = 0.2887 % (GUM 4.3.7)
    code, out, err = run(["calibrate", "show", "desk"], capsys)
    assert code == 0 and "u = 0.289 %" in out


def test_combine_refuses_nonsense():
    from benchfit.errors import MeasureError

    assert combine_gain_u_rel(2.0, 0.006, 1.0, 0.004) == pytest.approx(math.hypot(0.003, 0.004), rel=1e-15)
    with pytest.raises(MeasureError, match="rms_u_v"):  # the parameter's name (the CLI says --rms-u)
        combine_gain_u_rel(2.0, 0.0, 1.0, -1e-3)
    with pytest.raises(MeasureError, match="must be positive"):
        combine_gain_u_rel(0.0, 0.0, 1.0, 1e-3)


@pytest.mark.parametrize("value, match", [
    ("-1m", "--rms-u"),
    ("abc", "--rms-u"),
    ("150%", "100 % of the reading or more"),
    ("-0.2%", "--rms-u"),
    ("2", "not smaller than the reading"),
])
def test_bad_rms_u_is_one_line_exit_2(tmp_path, capsys, value, match):
    wav = _sine_wav(tmp_path / "sine.wav")
    code, out, err = run(["calibrate", "gain", wav, "--rms", "1", "--rms-u", value, "--profile", "desk"], capsys)
    assert code == 2 and out == ""
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("error: --rms-u") and match in lines[0]
    assert not profile_path("desk").exists()  # nothing stored from a refused command


def _old_profile_text() -> str:
    """A profile as benchfit wrote it before the gain uncertainty was stored."""
    return ('benchfit_profile = 1\nname = "old-card"\n\n[timebase]\nppm = 38.0\nu_ppm = 0.5\n'
            'reference_hz = 1000.0\nnominal_rate_hz = 48000.0\n\n[[gain]]\nchannel = 1\nv_per_fs = 4.0\n'
            'u_v_per_fs = 2e-05\nreference_rms_v = 1.3\nsource = "sine.wav"\n'
            'measured_utc = "2026-11-01T17:00:00Z"\n')


def test_old_profile_without_the_key_still_loads(tmp_path, capsys):
    path = profile_path("old-card")
    path.parent.mkdir(parents=True)
    path.write_text(_old_profile_text(), encoding="utf-8")
    prof = load_profile("old-card")
    g = prof.gain_of(1)
    assert g.v_per_fs == 4.0 and g.gain_u_rel is None and g.reference_u_v is None
    cal = prof.input_calibration(1)
    assert cal.gain_v_per_fs == (4.0,) and cal.gain_u_rel is None
    assert "gain_u_rel" not in prof.sidecar_calibration(1)  # the sidecar says nothing it does not know
    code, out, err = run(["calibrate", "show", "old-card"], capsys)
    assert code == 0 and "gain uncertainty not known" in out
    # saving it again (e.g. after a timebase calibration) does not invent the key
    save_profile(prof)
    with open(path, "rb") as fh:
        assert "gain_u_rel" not in tomllib.load(fh)["gain"][0]
    # a capture recorded with it reads as "not known", and measure says so
    wav = tmp_path / "hc01.wav"
    t = np.arange(FS) / FS
    sf.write(str(wav), 0.46 * np.sin(2 * np.pi * 50.02 * t), FS, subtype="PCM_16")
    write_sidecar(wav, {"benchfit_sidecar": 1, "channels": [{"name": "output"}], "sample_rate_hz": FS,
                        "calibration": prof.sidecar_calibration(1)})
    ch = benchfit.measure(wav).channels[0]
    # issue 11: measure applies the stated default (±1 % rectangular) and says so, never "exact"
    from benchfit.uncertainty import DEFAULT_GAIN_U_REL

    assert ch.unit == "V" and ch.extra["gain_u_rel"] == DEFAULT_GAIN_U_REL
    assert any("gain uncertainty not stated" in w for w in ch.warnings)
    # calibrating the gain again adds the uncertainty and keeps the timebase
    _sine = _sine_wav(tmp_path / "sine.wav")
    code, out, err = run(["calibrate", "gain", _sine, "--rms", "353.553m", "--rms-u", "0.3%",
                          "--profile", "old-card"], capsys)
    assert code == 0, err
    again = load_profile("old-card")
    assert again.gain_of(1).gain_u_rel == pytest.approx(0.003, rel=1e-3)  # meter term dominates (see above)
    assert again.timebase == prof.timebase


def test_malformed_gain_u_rel_in_a_profile_is_one_line(tmp_path):
    from benchfit.errors import CaptureError

    path = profile_path("bad")
    path.parent.mkdir(parents=True)
    path.write_text(_old_profile_text().replace('"old-card"', '"bad"') + "gain_u_rel = -0.1\n", encoding="utf-8")
    with pytest.raises(CaptureError, match=r"bad\.toml: 'gain_u_rel' must be zero or positive"):
        load_profile("bad")


@pytest.mark.audio
def test_record_writes_the_gain_uncertainty_into_the_sidecar(rig, tmp_path):
    """Through the real audio path: a profile with the new key puts it into the sidecar, and
    measure's vrms uncertainty then holds the gain's share; an old profile gives a warning."""
    import os

    played = tmp_path / "play.wav"
    t = np.arange(8 * FS) / FS
    sf.write(str(played), 0.3 * np.sin(2 * np.pi * 50.0 * t), FS, subtype="FLOAT")
    cfg = rig.env["BENCHFIT_CONFIG_DIR"]
    old = os.environ.get("BENCHFIT_CONFIG_DIR")
    os.environ["BENCHFIT_CONFIG_DIR"] = cfg
    try:
        save_profile(CalibrationProfile(name="card", gains=(
            ChannelGain(1, 4.0, 1e-5, 1.3, "sine.wav", "2026-12-01T17:00:00Z", reference_u_v=3.9e-3,
                        gain_u_rel=0.003),)))
        save_profile(CalibrationProfile(name="old", gains=(ChannelGain(1, 4.0, 1e-5, 1.3),)))
    finally:
        if old is None:
            os.environ.pop("BENCHFIT_CONFIG_DIR")
        else:
            os.environ["BENCHFIT_CONFIG_DIR"] = old
    player = rig.play(played)
    try:
        new_wav, old_wav = tmp_path / "new.wav", tmp_path / "old.wav"
        r = rig.benchfit("record", str(new_wav), "--seconds", "1", "--device", "pulse", "--profile", "card",
                         "--json")
        assert r.returncode == 0, r.stderr
        assert json.loads(r.stdout)["calibration"]["gain_u_rel"] == [0.003]
        r2 = rig.benchfit("record", str(old_wav), "--seconds", "1", "--device", "pulse", "--profile", "old",
                          "--json")
        assert r2.returncode == 0, r2.stderr
    finally:
        player.terminate()
        player.wait(timeout=10)
    side = json.loads(new_wav.with_suffix(".json").read_text())
    assert side["calibration"]["gain_u_rel"] == [0.003]
    ch = benchfit.measure(new_wav).channels[0]
    # 0.3 FS peak × 4 V/FS = 0.849 V rms; its 0.3 % (2.5 mV) dwarfs the noise-free path's noise term
    assert ch.extra["vrms_u"] == pytest.approx(0.003 * ch.vrms, rel=1e-3)
    info = json.loads(r2.stdout)
    assert "gain_u_rel" not in info["calibration"]
    assert any("gain uncertainty not known" in w for w in info["warnings"])
