"""The README's Python examples run as written (from the repository root)."""

import os
import re
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def _python_blocks() -> list[str]:
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    return re.findall(r"```python\n(.*?)```", text, flags=re.S)


def test_readme_has_python_examples():
    assert _python_blocks(), "README.md should show a Python example"


def test_readme_python_blocks_run(tmp_path):
    env = dict(os.environ, BENCHFIT_LOG=str(tmp_path / "log.sqlite"), MPLBACKEND="Agg")
    for i, block in enumerate(_python_blocks()):
        out = subprocess.run([sys.executable, "-c", block], cwd=ROOT, env=env, capture_output=True,
                             text=True, timeout=120)
        assert out.returncode == 0, f"README python block {i + 1} failed:\n{block}\n{out.stderr}"


def _walkthrough_1_commands() -> list[list[str]]:
    import shlex

    text = (ROOT / "README.md").read_text(encoding="utf-8")
    section = text.split("## Walkthrough 1", 1)[1].split("\n## ", 1)[0]
    lines = []
    for block in re.findall(r"```sh\n(.*?)```", section, flags=re.S):
        for line in block.splitlines():
            words = shlex.split(line, comments=True)
            if words and words[0] == "benchfit":
                lines.append(words[1:])
    return lines


def test_walkthrough_1_can_be_followed_literally():
    """Every file a calibrate command reads was recorded by an earlier line, with as many channels as
    the unit's recording (a one-channel gain profile leaves a stereo recording in FS), and every
    option each line uses exists in that command's --help."""
    cmds = _walkthrough_1_commands()
    recorded: dict[str, int] = {}
    unit_channels = None
    for words in cmds:
        if words[0] == "record":
            name = next(w for w in words[1:] if w.endswith(".wav"))
            channels = int(words[words.index("--channels") + 1]) if "--channels" in words else 1
            recorded[name] = channels
            if "--profile" in words:
                unit_channels = channels
        if words[0] == "calibrate":
            wav = next((w for w in words[2:] if w.endswith(".wav")), None)
            assert wav in recorded, f"'benchfit {' '.join(words)}' reads {wav}, which no earlier line records"
    assert unit_channels is not None
    gain_files = [next(w for w in c[2:] if w.endswith(".wav")) for c in cmds if c[:2] == ["calibrate", "gain"]]
    assert gain_files and all(recorded[f] == unit_channels for f in gain_files)
    env = dict(os.environ, COLUMNS="200")
    for words in cmds:
        sub = words[:2] if words[0] == "calibrate" else words[:1]
        helptext = subprocess.run([sys.executable, "-m", "benchfit", *sub, "--help"], cwd=ROOT, env=env,
                                  capture_output=True, text=True, timeout=60).stdout
        for opt in (w for w in words if w.startswith("--")):
            assert opt in helptext, f"'benchfit {' '.join(sub)}' has no option {opt}"
