"""A recording never replaces a file that appears under its names while it records.

Real audio path (the private PulseAudio daemon of conftest.py); the race is made on purpose by
the progress callback, which creates the sidecar (and, in the second test, the WAV) mid-recording.
"""

from __future__ import annotations

import json
import subprocess
import sys

from test_live_audio import stop, write_tone

_SNIPPET = """
import json, sys
from pathlib import Path
import benchfit
out = Path(sys.argv[1])
made = []
def on_block(st):
    if not made and st.frames_done > 0:
        out.with_suffix(".json").write_text("a sidecar another program wrote\\n", encoding="utf-8")
        made.append(1)
res = benchfit.record(out, 0.5, rate=48000, channels=2, device="pulse", on_block=on_block)
print(json.dumps({"sidecar": str(res.sidecar_path), "warnings": list(res.warnings)}))
"""


def test_a_sidecar_that_appears_during_recording_is_kept(rig, tmp_path):
    player = rig.play(write_tone(tmp_path / "play.wav", 6.0, [(300.0, 0.5), (300.0, 0.5)]))
    out = tmp_path / "HC-04_take1.wav"
    try:
        r = subprocess.run([sys.executable, "-c", _SNIPPET, str(out)], env=rig.env, capture_output=True,
                           text=True, timeout=60)
    finally:
        stop(player)
    assert r.returncode == 0, r.stderr
    res = json.loads(r.stdout)
    assert (tmp_path / "HC-04_take1.json").read_text(encoding="utf-8") == "a sidecar another program wrote\n"
    assert res["sidecar"] == str(tmp_path / "HC-04_take1.recorded.json")
    assert json.loads((tmp_path / "HC-04_take1.recorded.json").read_text())["sample_rate_hz"] == 48000
    (warn,) = [w for w in res["warnings"] if "appeared there during the recording" in w]
    assert " — this recording's sidecar is " in warn


def test_record_claims_the_wav_name_before_recording(tmp_path):
    """The WAV is created with O_EXCL before the stream opens (POSIX open(2)): a name taken in
    between is refused, never truncated."""
    from benchfit.capture.fileio import create_new

    p = tmp_path / "HC-04_take2.wav"
    create_new(p)
    p.write_bytes(b"earlier take")
    try:
        create_new(p)
    except FileExistsError:
        pass
    else:
        raise AssertionError("create_new replaced an existing file")
    assert p.read_bytes() == b"earlier take"


_SILENT_SNIPPET = """
import json, sys
import benchfit
res = benchfit.record(sys.argv[1], 0.5, rate=48000, channels=2, device="pulse")
print(json.dumps({"warnings": list(res.warnings), "peaks": list(res.peak_dbfs)}))
"""


def test_a_silent_recording_says_so(rig, tmp_path):
    """Nothing plays into the null sink: its monitor delivers digital silence, and the recording
    says it is silent instead of passing without a word."""
    r = subprocess.run([sys.executable, "-c", _SILENT_SNIPPET, str(tmp_path / "HC-06_silent.wav")], env=rig.env,
                       capture_output=True, text=True, timeout=60)
    assert r.returncode == 0, r.stderr
    res = json.loads(r.stdout)
    assert max(res["peaks"]) < -60
    (warn,) = [w for w in res["warnings"] if "the recording is silent" in w]
    assert warn.startswith("every channel stayed below -60 dBFS") and " — check the input selection" in warn


def test_tune_channel_1_hears_only_channel_1(rig, tmp_path):
    """Left 50.13 Hz, right a louder 61 Hz: a one-channel stream (the sound server's mix of both)
    would read 61 Hz; tune opens both inputs and analyses the one asked for."""
    import re

    player = rig.play(write_tone(tmp_path / "play.wav", 10.0, [(50.13, 0.3), (61.0, 0.6)]))
    try:
        reads = {}
        for ch in ("1", "2"):
            r = rig.benchfit("tune", "--target", "50", "--plain", "--updates", "2", "--device", "pulse",
                             "--channel", ch)
            assert r.returncode == 0, r.stderr
            reads[ch] = [float(m.group(1)) for m in re.finditer(r"f = ([0-9.]+) ±", r.stdout)]
    finally:
        stop(player)
    # a noise-free tone in a 1 s window: the fit is good to well under 1 mHz (as in test_live_audio)
    assert reads["1"] and all(abs(f - 50.13) < 1e-3 for f in reads["1"])
    assert reads["2"] and all(abs(f - 61.0) < 1e-3 for f in reads["2"])
