"""The calibrate commands on files, and record's argument checks, through the command line
(in-process; no audio device is opened by any of these)."""

from __future__ import annotations

import io
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


def _sine_wav(path, f=1000.0, a=0.5, seconds=1.0, ppm=0.0, seed=1, channels=1):
    rng = np.random.default_rng(seed)
    n = int(seconds * FS)
    t = np.arange(n) / (FS * (1 + ppm * 1e-6))  # a card clock fast by ppm
    x = np.stack([a / (c + 1) * np.sin(2 * np.pi * f * t) + 1e-4 * rng.standard_normal(n) for c in range(channels)],
                 axis=1)
    sf.write(str(path), x, FS, subtype="PCM_24")
    return path


def test_calibrate_gain_timebase_show(tmp_path, capsys):
    wav = _sine_wav(tmp_path / "ref.wav", ppm=-42.0, channels=2)
    code, out, err = run(["calibrate", "gain", wav, "--rms", "353.553m", "--profile", "desk", "--json"], capsys)
    assert code == 0, err
    gains = json.loads(out)["gains"]
    # 0.5 and 0.25 FS peak; 353.553 mV rms is 0.5/√2 V → 1 and 2 V/FS (noise 1e-4 FS: 1e-4 relative)
    assert [g["channel"] for g in gains] == [1, 2]
    assert gains[0]["v_per_fs"] == pytest.approx(0.353553 / (0.5 / math.sqrt(2)), rel=1e-4)
    assert gains[1]["v_per_fs"] == pytest.approx(2 * 0.353553 / (0.5 / math.sqrt(2)), rel=1e-4)

    code, out, err = run(["calibrate", "timebase", wav, "--frequency", "1k", "--profile", "desk", "--json"], capsys)
    assert code == 0, err
    tb = json.loads(out)
    assert abs(tb["ppm"] - (-42.0)) < 4 * tb["u_ppm"] + 0.01  # 4σ (seeded) plus 24-bit rounding
    assert tb["nominal_rate_hz"] == FS

    code, out, err = run(["calibrate", "show", "--json"], capsys)
    assert code == 0, err
    shown = json.loads(out)
    assert shown["folder"] == str(tmp_path / "cfg" / "profiles")
    (p,) = shown["profiles"]
    assert p["name"] == "desk" and len(p["gain"]) == 2 and p["timebase"]["ppm"] == pytest.approx(tb["ppm"])
    code, out, err = run(["calibrate", "show"], capsys)
    assert code == 0 and "desk" in out and "ppm" in out

    # a second gain run on one channel keeps the other channel's gain
    code, out, err = run(["calibrate", "gain", wav, "--rms", "1", "--channel", "2", "--profile", "desk"], capsys)
    assert code == 0, err
    assert "V/FS" in out and "channel 2" in out
    code, out, _ = run(["calibrate", "show", "desk", "--json"], capsys)
    g = {e["channel"]: e["v_per_fs"] for e in json.loads(out)["profiles"][0]["gain"]}
    assert g[1] == pytest.approx(gains[0]["v_per_fs"]) and g[2] == pytest.approx(1 / (0.25 / math.sqrt(2)), rel=1e-4)


def test_calibrate_coupling_from_a_drooping_square(tmp_path, capsys):
    rng = np.random.default_rng(2)
    tau, n = 0.05, FS
    t = np.arange(n) / FS
    x = 0.4 * np.sign(np.sin(2 * np.pi * 8.0 * t + 0.2))
    k = math.exp(-1.0 / (tau * FS))  # exact first-order RC high-pass for a stepwise input
    y = np.empty(n)
    prev_x = prev_y = 0.0
    for i in range(n):
        prev_y = k * (prev_y + x[i] - prev_x)
        prev_x = x[i]
        y[i] = prev_y
    wav = tmp_path / "sq.wav"
    sf.write(str(wav), y + 1e-4 * rng.standard_normal(n), FS, subtype="FLOAT")
    code, out, err = run(["calibrate", "coupling", wav, "--profile", "desk", "--json"], capsys)
    assert code == 0, err
    res = json.loads(out)
    assert res["coupling_tau_s"] == pytest.approx(tau, rel=0.02)  # droop fit on trimmed flats, low noise
    assert res["corner_hz"] == pytest.approx(1 / (2 * math.pi * res["coupling_tau_s"]))


@pytest.mark.parametrize("args,match", [
    (["calibrate", "gain", "{wav}", "--rms", "-1", "--profile", "p"], "--rms"),
    (["calibrate", "gain", "{wav}", "--rms", "abc", "--profile", "p"], "--rms"),
    (["calibrate", "gain", "{wav}", "--rms", "1", "--profile", "bad name"], "not a valid profile name"),
    (["calibrate", "gain", "--rms", "1", "--profile", "p"], "FILE"),
    (["calibrate", "gain", "{wav}", "--rms", "1", "--profile", "p", "--channel", "7"], "--channel"),
    (["calibrate", "timebase", "{wav}", "--frequency", "1100", "--profile", "p"], "not near the reference"),
    (["calibrate", "timebase", "{wav}", "--frequency", "0", "--profile", "p"], "--frequency"),
    (["calibrate", "timebase", "{missing}", "--frequency", "1000", "--profile", "p"], "no such file"),
    (["calibrate", "timebase", "--record", "--frequency", "1000", "--profile", "p"], "--seconds"),
    (["calibrate", "coupling", "{wav}", "--profile", "p"], "no droop"),
    (["calibrate", "show", "nosuch"], "no such calibration profile"),
    (["record", "{wav}", "--seconds", "1"], "already exists"),
    (["record", "{new}", "--seconds", "-2"], "--seconds"),
    (["record", "{new}", "--seconds", "1", "--channels", "3"], "--channels"),
    (["record", "{new}", "--seconds", "1", "--channels", "2", "--names", "drive"], "--names"),
    (["record", "{new}", "--seconds", "1", "--sample-format", "mp3"], "--sample-format"),
    (["record", "{new}", "--seconds", "1", "--rate", "44100.5"], "--rate"),
    (["record", "{flac}", "--seconds", "1"], "WAV"),
    (["record", "{new}", "--seconds", "1", "--profile", "nosuch"], "no such calibration profile"),
    (["tune", "--target", "50", "--window", "0.01"], "--window"),
    (["tune", "--target", "-5"], "--target"),
    (["tune", "--target", "50", "--updates", "0"], "--updates"),
])
def test_bad_input_exits_2_with_one_line(tmp_path, capsys, args, match):
    wav = _sine_wav(tmp_path / "ref.wav")
    subs = {"{wav}": wav, "{missing}": tmp_path / "none.wav", "{new}": tmp_path / "new.wav",
            "{flac}": tmp_path / "new.flac"}
    code, out, err = run([subs.get(a, a) for a in args], capsys)
    assert code == 2, (out, err)
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("error: ") and match in lines[0], err
    assert not (tmp_path / "new.wav").exists() and not (tmp_path / "new.json").exists()
    assert not (tmp_path / "cfg" / "profiles" / "p.toml").exists()  # nothing stored on failure


def test_tune_screen_and_plain_line_show_units_and_uncertainty():
    """The readout's text: mHz resolution with uncertainty, deviation in Hz and ppm, the hint."""
    from rich.console import Console

    from benchfit.capture.live import analyse_window
    from benchfit.cli.soundcard import freq_text as _freq_text
    from benchfit.cli.tune_cmd import _panel, _plain_line

    rng = np.random.default_rng(9)
    t = np.arange(FS) / FS
    x = 0.4 * np.sin(2 * np.pi * 49.868 * t) + 1e-3 * rng.standard_normal(FS)
    r = analyse_window(x, float(FS), 50.0, gain_v_per_fs=2.0, tolerance_hz=0.25)
    line = _plain_line(1.0, r)
    assert "running 0.132 Hz slow — raise the frequency: decrease RB or C1" in line
    assert " V peak" in line and " V rms" in line and "ppm)" in line and "dBFS" in line
    console = Console(record=True, width=120, file=io.StringIO())
    console.print(_panel(r, 1.0, 50.0, 0.25, 3, 0, 0, 1.0, 0.25, None))
    screen = console.export_text()
    for text in ("tuning to 50 Hz ± 0.25 Hz", "frequency", _freq_text(r.frequency_hz, r.frequency_u_hz), "advice", "THD", "Ctrl-C to stop",
                 "— (not a two-level wave)"):
        assert text in screen, text
    console.print(_panel(None, 0.0, 50.0, None, 0, 0, 0, 1.0, 0.25, None))
    assert "waiting for the first full window" in console.export_text()
    # at least mHz resolution, uncertainty to 2 significant digits
    assert _freq_text(50.1234567, 0.0004) == "50.12346 ± 0.00040 Hz"
    assert _freq_text(50.1234567, 0.04) == "50.123 ± 0.040 Hz"
    assert _freq_text(50.1234567, 2e-8) == "50.123457 ± 2.0e-08 Hz"
