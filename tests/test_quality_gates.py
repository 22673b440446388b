"""The quality gates run with the suite: ruff's rule set (pyproject [tool.ruff]) over the code and
the tests, and mypy over the whole package (pyproject [tool.mypy] files)."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def test_ruff_finds_nothing():
    res = subprocess.run([sys.executable, "-m", "ruff", "check", "--no-cache", "benchfit", "tests", "scripts"],
                         cwd=ROOT, capture_output=True, text=True, timeout=120)
    assert res.returncode == 0, res.stdout[-4000:] + res.stderr[-2000:]


def test_mypy_finds_no_type_error_in_the_checked_modules(tmp_path):
    res = subprocess.run([sys.executable, "-m", "mypy", "--cache-dir", str(tmp_path / "mypy"),
                          "--config-file", str(ROOT / "pyproject.toml")],
                         cwd=ROOT, capture_output=True, text=True, timeout=300)
    assert res.returncode == 0, res.stdout[-4000:] + res.stderr[-2000:]
