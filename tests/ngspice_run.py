"""Running ngspice (an independent circuit simulator) for the tests: one place for both helpers.

:mod:`fitspice` (tests/fit) and :mod:`unitspice` (tests/model) write their own decks; this module
runs a deck with ``ngspice -b`` in the test's temporary folder and reads back the ``wrdata``
file (success is judged by that file: ``ngspice -b`` may exit 1 after a ``.control`` run).
"""

from __future__ import annotations

import os
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest

NGSPICE = shutil.which("ngspice")


def no_ngspice() -> None:
    """Skip on a developer's machine without ngspice; fail under CI, which installs it."""
    if os.environ.get("CI"):
        pytest.fail("ngspice is not installed — scripts/test.sh installs Debian's ngspice")
    pytest.skip("ngspice is not installed")


def run_deck(tmp_path: Path, name: str, deck: str, out: Path, *, timeout: float = 120.0) -> np.ndarray:
    """Write ``deck`` to ``name``.cir, run it in batch mode and return the ``wrdata`` table ``out``."""
    if NGSPICE is None:
        no_ngspice()
    path = tmp_path / f"{name}.cir"
    path.write_text(deck)
    proc = subprocess.run([str(NGSPICE), "-b", str(path)], capture_output=True, text=True, timeout=timeout,
                          cwd=tmp_path)
    if not out.exists():
        raise AssertionError(f"ngspice wrote no output:\n{proc.stdout[-2000:]}\n{proc.stderr[-2000:]}")
    return np.loadtxt(out)
