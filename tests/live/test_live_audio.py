"""Live capture through a real audio path: paplay → PulseAudio null sink → monitor → ALSA →
PortAudio → sounddevice → benchfit (no hardware, no mocks).

Every test plays a WAV generated here (see tests/data/README_live.md) and runs the benchfit
command line in a subprocess with the private daemon's environment.
"""

from __future__ import annotations

import json
import math
import re
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
import soundfile as sf

import benchfit
from benchfit.measurement.tone import fit_tone

pytestmark = pytest.mark.audio

FS = 48000


def write_tone(path: Path, seconds: float, tones: list[tuple[float, float]], fs: int = FS) -> Path:
    """A float WAV with one channel per (frequency Hz, peak FS) pair."""
    rng = np.random.default_rng(1241)
    t = np.arange(int(seconds * fs)) / fs
    # a little seeded noise (−80 dBFS rms) so fits report a finite uncertainty, as on a real card
    data = np.stack([a * np.sin(2 * np.pi * f * t) + 1e-4 * rng.standard_normal(t.size) for f, a in tones],
                    axis=1)
    sf.write(str(path), data, fs, subtype="FLOAT")
    return path


def stop(proc: subprocess.Popen) -> None:
    if proc.poll() is None:
        proc.terminate()
        proc.wait(timeout=10)


def _error_lines(stderr: str) -> list[str]:
    return [ln for ln in stderr.splitlines() if ln.strip()]


def test_recorded_tone_frequency_and_timebase_profile(rig, tmp_path):
    """Frequency through the whole chain within 1 ppm; a timebase profile corrects it at load."""
    played = write_tone(tmp_path / "play.wav", 16.0, [(997.0, 0.5), (440.0, 0.25)])
    player = rig.play(played)
    try:
        a = tmp_path / "a.wav"
        r = rig.benchfit("record", str(a), "--seconds", "2", "--channels", "2", "--device", "pulse",
                         "--names", "ref,unit", "--json")
        assert r.returncode == 0, r.stderr
        info = json.loads(r.stdout)
        assert info["frames"] == 2 * FS and info["channels"] == ["ref", "unit"]
        assert info["clip_count"] == 0 and info["overflow_count"] == 0
        side = json.loads(a.with_suffix(".json").read_text())
        assert side["benchfit_sidecar"] == 1 and side["sample_rate_hz"] == FS and side["device"] == "pulse"
        assert re.match(r"\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d(\.\d+)?Z$", side["start_utc"])

        cap = benchfit.load(a)
        assert cap.channel_names == ("ref", "unit") and cap.units == ("FS", "FS")
        for name, f_played in (("ref", 997.0), ("unit", 440.0)):
            fit = fit_tone(cap.channel(name), cap.sample_rate, 1)
            # the null sink's clock is the CPU clock and the path has no resampling, so the
            # played frequency must come back exactly; 1 ppm is the bound
            assert abs(fit.frequency_hz / f_played - 1) < 1e-6, (name, fit.frequency_hz)

        # pretend a counter says the ref tone is 997.1495 Hz: the card then runs +149.95 ppm fast
        f_ref = 997.1495
        ppm_expected = (f_ref / 997.0 - 1) * 1e6
        # the counter's stated u (1 µHz here, so the fit's own u shows); without it a stated default applies
        r = rig.benchfit("calibrate", "timebase", str(a), "--frequency", str(f_ref), "--frequency-u", "1u",
                         "--channel", "ref", "--profile", "card", "--json")
        assert r.returncode == 0, r.stderr
        tb = json.loads(r.stdout)
        assert abs(tb["ppm"] - ppm_expected) < 0.5  # 1 ppm path bound, halved for margin
        assert tb["u_ppm"] < 0.1  # noise-free tone: fit uncertainty far below 1 ppm
        # gain, all channels from one sine RMS: ref is 0.5 FS peak and unit 0.25 FS peak; calling
        # the RMS 0.5/√2 V must give 1 V/FS on ref and 2 V/FS on unit
        r = rig.benchfit("calibrate", "gain", str(a), "--rms", f"{0.5 / math.sqrt(2):.12f}",
                         "--profile", "card", "--json")
        assert r.returncode == 0, r.stderr
        gains = {g["channel"]: g for g in json.loads(r.stdout)["gains"]}
        # 24-bit file: rounding 6e-8 FS; the seeded noise gives u ≈ 3e-6 relative
        assert gains[1]["v_per_fs"] == pytest.approx(1.0, rel=1e-4)
        assert gains[2]["v_per_fs"] == pytest.approx(2.0, rel=1e-4)
        assert 0 < gains[1]["u_v_per_fs"] < 1e-4

        b = tmp_path / "b.wav"
        r = rig.benchfit("record", str(b), "--seconds", "2", "--channels", "2", "--device", "pulse",
                         "--profile", "card")
        assert r.returncode == 0, r.stderr
        cal = json.loads(b.with_suffix(".json").read_text())["calibration"]
        assert cal["profile"] == "card"
        assert cal["gain_v_per_fs"] == [gains[1]["v_per_fs"], gains[2]["v_per_fs"]]
        assert cal["timebase_ppm"] == pytest.approx(tb["ppm"], abs=1e-9)
        capb = benchfit.load(b)
        assert capb.units == ("V", "V")
        assert capb.sample_rate == pytest.approx(FS * (1 + tb["ppm"] * 1e-6), rel=1e-12)
        for k, f_true in ((0, f_ref), (1, 440.0 * (1 + tb["ppm"] * 1e-6))):
            fit = fit_tone(capb.samples[k], capb.sample_rate, 1)
            # corrected frequency = reference-scaled frequency, within the 1 ppm
            assert abs(fit.frequency_hz / f_true - 1) < 1e-6
            assert fit.amplitudes[0] == pytest.approx(0.5, rel=1e-4)  # volts via the stored gains
    finally:
        stop(player)


def _interrupted(rig, tmp_path: Path, tone_hz: float, out: Path, min_bytes: int, args: list[str]):
    """Run ``benchfit ARGS`` recording into ``out`` while a tone plays; Ctrl-C it once ``out`` holds
    ``min_bytes``. Returns (process, stdout, stderr)."""
    player = rig.play(write_tone(tmp_path / "play.wav", 10.0, [(tone_hz, 0.4)]))
    try:
        proc = subprocess.Popen([sys.executable, "-m", "benchfit", *args], env=rig.env, stdout=subprocess.PIPE,
                                stderr=subprocess.PIPE, text=True)
        end = time.monotonic() + 15
        while time.monotonic() < end and not (out.exists() and out.stat().st_size > min_bytes):
            time.sleep(0.05)
        assert out.exists(), "recording never started"
        proc.send_signal(signal.SIGINT)
        stdout, stderr = proc.communicate(timeout=20)
    finally:
        stop(player)
    return proc, stdout, stderr


def test_sigint_keeps_a_valid_file_and_sidecar(rig, tmp_path):
    """Ctrl-C mid-recording: exit 130, a readable WAV and a sidecar describing what was saved."""
    out = tmp_path / "long.wav"
    # about 1 s of 24-bit mono audio on disk, then Ctrl-C
    proc, stdout, stderr = _interrupted(rig, tmp_path, 250.0, out, 3 * FS, ["record", str(out), "--seconds", "30",
                                                                           "--device", "pulse"])
    assert proc.returncode == 130, stderr
    assert "stopped by Ctrl-C: saved" in stderr
    info = sf.info(str(out))
    side = json.loads(out.with_suffix(".json").read_text())
    assert side["interrupted"] is True
    assert info.frames == side["frames"] > FS // 2  # at least the second we waited for
    assert info.frames < 30 * FS
    x, fs = sf.read(str(out))
    fit = fit_tone(x[-FS // 2:], fs, 1)  # the end of the file holds the playing tone
    assert abs(fit.frequency_hz - 250.0) < 1e-3  # noise-free tone, 0.5 s: far below 1 mHz
    cap = benchfit.load(out)  # the reader accepts it without truncation warnings
    assert cap.n_samples == info.frames
    assert not any("truncat" in w.lower() for w in cap.warnings)


def test_sigint_during_a_calibration_recording_stores_nothing(rig, tmp_path):
    """Ctrl-C while `calibrate timebase --record FILE` records: exit 130, one line saying nothing was
    calibrated and where the samples went, no profile, and the partial recording kept with its sidecar."""
    out = tmp_path / "cal.wav"
    proc, stdout, stderr = _interrupted(rig, tmp_path, 1000.0, out, 4 * FS, [
        "calibrate", "timebase", str(out), "--record", "--seconds", "30", "--device", "pulse", "--frequency",
        "1000", "--frequency-u", "1m", "--profile", "halted"])
    assert proc.returncode == 130, stderr
    said = [ln for ln in _error_lines(stderr) if ln.startswith("stopped by Ctrl-C")]
    assert len(said) == 1 and "nothing calibrated" in said[0] and str(out) in said[0], stderr
    assert "Traceback" not in stderr and stdout == ""
    assert json.loads(out.with_suffix(".json").read_text())["interrupted"] is True
    assert not list(tmp_path.rglob("halted.toml"))


def test_clip_warning_when_input_hits_full_scale(rig, tmp_path):
    """A full-scale tone is flagged live on stderr and counted in the sidecar."""
    t = np.arange(6 * FS) / FS
    x = np.clip(1.3 * np.sin(2 * np.pi * 100.0 * t), -1.0, 1.0)  # flat tops at exactly 0 dBFS
    path = tmp_path / "loud.wav"
    sf.write(str(path), x, FS, subtype="FLOAT")
    player = rig.play(path)
    out = tmp_path / "clipped.wav"
    try:
        r = rig.benchfit("record", str(out), "--seconds", "1.5", "--device", "pulse", "--sample-format", "float")
    finally:
        stop(player)
    assert r.returncode == 0, r.stderr
    assert "warning: input clipping" in r.stderr
    side = json.loads(out.with_suffix(".json").read_text())
    # about half of each cycle sits at full scale (|1.3 sin| ≥ 1 for 2·acos(1/1.3)/π ≈ 44 %)
    assert side["clip_count"] > 0.3 * 1.5 * FS
    assert side["peak_dbfs"][0] > -0.1


def test_tune_plain_reports_the_played_frequency(rig, tmp_path):
    """`tune --plain --updates 5` prints five lines with the played frequency and the right hint."""
    player = rig.play(write_tone(tmp_path / "play.wav", 10.0, [(50.13, 0.3)]))
    try:
        r = rig.benchfit("tune", "--target", "50", "--plain", "--updates", "5", "--device", "pulse",
                         "--tolerance", "0.25")
    finally:
        stop(player)
    assert r.returncode == 0, r.stderr
    lines = [ln for ln in r.stdout.splitlines() if ln.strip()]
    assert len(lines) == 5
    for ln in lines:
        m = re.search(r"f = ([0-9.]+) ± ([0-9.e-]+) Hz", ln)
        assert m, ln
        # noise-free tone in a 1 s window: the fit is good to well under 1 mHz
        assert abs(float(m.group(1)) - 50.13) < 1e-3
        assert "running 0.130 Hz fast — lower the frequency: increase RB or C1" in ln
        assert "within ±0.25 Hz" in ln
    times = [float(re.match(r"t=\s*([0-9.]+) s", ln).group(1)) for ln in lines]
    # overlapping windows start every 0.25 s (≥ 4 readings a second); a loaded machine may skip
    # stale windows, so a gap is a whole number of hops
    steps = np.diff(times) / 0.25
    assert np.all(steps >= 1 - 1e-9) and np.allclose(steps, np.round(steps), atol=1e-9)
    # (the update rate itself is a speed figure: scripts/bench_live.py measures it)


def test_device_errors_exit_3_with_one_line(rig, tmp_path):
    """No such device, or a rate the device refuses: exit 3 and exactly one error line."""
    cases = [
        ("record", str(tmp_path / "x.wav"), "--seconds", "1", "--device", "no-such-card"),
        ("record", str(tmp_path / "y.wav"), "--seconds", "1", "--device", "pulse", "--rate", "768000"),
        ("tune", "--target", "50", "--device", "no-such-card", "--plain", "--updates", "1"),
        ("record", str(tmp_path / "z.wav"), "--seconds", "1", "--device", "99"),
    ]
    for args in cases:
        r = rig.benchfit(*args)
        assert r.returncode == 3, (args, r.stderr)
        lines = _error_lines(r.stderr)
        assert len(lines) == 1 and lines[0].startswith("error: --device"), (args, r.stderr)
        assert "Traceback" not in r.stderr
    assert not list(tmp_path.glob("*.wav")) and not list(tmp_path.glob("*.json"))  # nothing left behind


def test_calibrate_gain_recording_live(rig, tmp_path):
    """`calibrate gain --record` captures from the card itself and stores the gain."""
    player = rig.play(write_tone(tmp_path / "play.wav", 8.0, [(1000.0, 0.5), (1000.0, 0.5)]))
    try:
        r = rig.benchfit("calibrate", "gain", "--record", "--seconds", "1", "--device", "pulse",
                         "--rms", "353.5534m", "--profile", "live", "--json")
    finally:
        stop(player)
    assert r.returncode == 0, r.stderr
    (g,) = json.loads(r.stdout)["gains"]
    assert g["channel"] == 1 and g["v_per_fs"] == pytest.approx(1.0, rel=1e-4)  # 0.5 FS peak = 0.35355 V rms
    assert "Safety" in r.stderr  # the caution is shown before a live capture
    assert (tmp_path / "config" / "profiles" / "live.toml").is_file()


def test_calibrate_from_a_silent_recording_says_it_was_silent(rig, tmp_path):
    """`calibrate timebase --record` with nothing playing: the recorder's closing warning (the input stayed
    silent) is shown before the calibration's own refusal, and no profile is stored."""
    r = rig.benchfit("calibrate", "timebase", "--record", "--seconds", "1", "--device", "pulse",
                     "--frequency", "1000", "--frequency-u", "1m", "--profile", "quiet")
    assert r.returncode == 2, r.stderr
    lines = _error_lines(r.stderr)
    warned = [ln for ln in lines if ln.startswith("warning: ") and "the recording is silent" in ln]
    assert len(warned) == 1 and lines[-1].startswith("error: "), r.stderr
    assert lines.index(warned[0]) < len(lines) - 1 and "Traceback" not in r.stderr
    assert not (tmp_path / "config" / "profiles" / "quiet.toml").exists()


_API_SNIPPET = """
import json, sys
import benchfit
statuses = []
res = benchfit.record(sys.argv[1], 1.0, rate=48000, channels=2, device="pulse", names="left,right",
                      on_block=lambda st: statuses.append(st))
print(json.dumps({"frames": res.frames, "names": list(res.channel_names), "peaks": list(res.peak_dbfs),
                  "done": [st.frames_done for st in statuses], "total": statuses[-1].frames_total,
                  "levels": [list(st.peak_dbfs) for st in statuses], "interrupted": res.interrupted,
                  "duration": res.duration_s, "sidecar": str(res.sidecar_path)}))
"""


def test_python_api_record_reports_progress(rig, tmp_path):
    """benchfit.record(..., on_block=...) from a script: progress about ten times a second."""
    player = rig.play(write_tone(tmp_path / "play.wav", 8.0, [(300.0, 0.5), (600.0, 0.1)]))
    out = tmp_path / "api.wav"
    try:
        r = subprocess.run([sys.executable, "-c", _API_SNIPPET, str(out)], env=rig.env, capture_output=True,
                           text=True, timeout=60)
    finally:
        stop(player)
    assert r.returncode == 0, r.stderr
    res = json.loads(r.stdout)
    assert res["frames"] == FS and res["total"] == FS and res["duration"] == 1.0
    assert res["names"] == ["left", "right"] and not res["interrupted"]
    done = res["done"]
    assert done == sorted(done) and done[-1] == FS and len(done) >= 5  # ~10 calls/s over ≥ 1 s
    # peaks: 0.5 FS → −6.02 dBFS and 0.1 FS → −20 dBFS (20·log10), noise adds < 0.01 dB
    assert res["peaks"] == [pytest.approx(-6.02, abs=0.05), pytest.approx(-20.0, abs=0.05)]
    assert json.loads((tmp_path / "api.json").read_text())["channels"] == [{"name": "left"}, {"name": "right"}]


def test_devices_lists_the_virtual_card(rig):
    r = rig.benchfit("devices", "--json")
    assert r.returncode == 0, r.stderr
    devs = json.loads(r.stdout)["devices"]
    pulse = [d for d in devs if d["name"] == "pulse"]
    assert pulse and pulse[0]["input_channels"] >= 2 and pulse[0]["default_rate_hz"] > 0
    assert sum(d["is_default"] for d in devs) <= 1
    r = rig.benchfit("devices")
    assert r.returncode == 0 and "pulse" in r.stdout and "default" in r.stdout
