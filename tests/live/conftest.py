"""Fixtures for the live-capture tests: a private, user-space PulseAudio daemon with a null sink.

The audio path under test is real: ``paplay`` plays a generated WAV into the null sink
``benchfit_test``; benchfit records the sink's monitor through sounddevice → PortAudio →
ALSA (the ``pulse`` plugin of libasound2-plugins) → PulseAudio. The daemon gets its own
XDG_RUNTIME_DIR and HOME in a temporary folder, so it never touches a desktop's sound
server, and is killed at the end of the session. It also exits by itself after 120 s without
clients, so a test run that is killed before its teardown leaves no daemon behind. The null
sink runs at 48 kHz float so a played file reaches the recorder without resampling or 16-bit
rounding.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

SINK = "benchfit_test"


def _pa_env(base: Path) -> dict[str, str]:
    run, home = base / "run", base / "home"
    run.mkdir(mode=0o700, parents=True, exist_ok=True)
    home.mkdir(parents=True, exist_ok=True)
    env = dict(os.environ)
    env.update({
        "XDG_RUNTIME_DIR": str(run),
        "HOME": str(home),
        "PULSE_SOURCE": f"{SINK}.monitor",
        "PULSE_SINK": SINK,
        "BENCHFIT_CONFIG_DIR": str(base / "config"),
        "PYTHONUNBUFFERED": "1",
    })
    env.pop("PULSE_SERVER", None)
    return env


class PulseRig:
    """A running PulseAudio daemon plus helpers to play files and run the benchfit CLI."""

    def __init__(self, env: dict[str, str], base: Path) -> None:
        self.env = env
        self.base = base

    def play(self, wav: Path) -> subprocess.Popen:
        """Start playing ``wav`` into the null sink; returns the paplay process."""
        proc = subprocess.Popen(["paplay", f"--device={SINK}", str(wav)], env=self.env,
                                stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
        self.wait_playing(proc)
        return proc

    def wait_playing(self, proc: subprocess.Popen, timeout: float = 5.0) -> None:
        """Wait until the sink has a playing stream (pactl lists a sink input)."""
        end = time.monotonic() + timeout
        while time.monotonic() < end:
            out = subprocess.run(["pactl", "list", "short", "sink-inputs"], env=self.env,
                                 capture_output=True, text=True).stdout
            if out.strip():
                return
            if proc.poll() is not None:
                raise RuntimeError(f"paplay ended early: {proc.stderr.read().decode(errors='replace')}")
            time.sleep(0.05)
        raise RuntimeError("paplay did not start a stream within 5 s")

    def benchfit(self, *args: str, timeout: float = 60.0, env: dict[str, str] | None = None
                 ) -> subprocess.CompletedProcess:
        """Run the benchfit command line in a subprocess with the daemon's environment."""
        return subprocess.run([sys.executable, "-m", "benchfit", *args], env=env or self.env,
                              capture_output=True, text=True, timeout=timeout)


def write_wav(path: Path, samples: np.ndarray, fs: int = 48000) -> Path:
    """Write float samples (n,) or (n, ch) as a 32-bit float WAV."""
    import soundfile as sf

    sf.write(str(path), samples, fs, subtype="FLOAT")
    return path


@pytest.fixture(scope="session")
def pulse(tmp_path_factory) -> PulseRig:
    """A private PulseAudio daemon with the null sink ``benchfit_test`` (skipped only without pulseaudio)."""
    for tool in ("pulseaudio", "paplay", "pactl"):
        if shutil.which(tool) is None:
            pytest.skip(f"{tool} is not installed (Debian: pulseaudio, pulseaudio-utils) — "
                        "the live-capture tests need a virtual sound card")
    base = tmp_path_factory.mktemp("pulse")
    env = _pa_env(base)
    cmd = ["pulseaudio", "-D", "--system=false", "--exit-idle-time=120", "--disallow-exit", "-n",
           "--disable-shm=true", "--load=module-native-protocol-unix",
           f"--load=module-null-sink sink_name={SINK} rate=48000 format=float32le channels=2"]
    started = subprocess.run(cmd, env=env, capture_output=True, text=True, timeout=30)
    ok = False
    end = time.monotonic() + 10.0
    while time.monotonic() < end:
        info = subprocess.run(["pactl", "info"], env=env, capture_output=True, text=True)
        if info.returncode == 0 and f"Default Sink: {SINK}" in info.stdout:
            ok = True
            break
        time.sleep(0.1)
    if not ok:
        pytest.fail(f"PulseAudio did not start (rc {started.returncode}): {started.stderr.strip()}")
    try:
        yield PulseRig(env, base)
    finally:
        subprocess.run(["pulseaudio", "--kill"], env=env, capture_output=True, timeout=30)


@pytest.fixture()
def rig(pulse: PulseRig, tmp_path: Path) -> PulseRig:
    """The session daemon with a fresh calibration folder for this test."""
    env = dict(pulse.env)
    env["BENCHFIT_CONFIG_DIR"] = str(tmp_path / "config")
    return PulseRig(env, tmp_path)

