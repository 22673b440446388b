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
