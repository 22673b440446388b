"""Helpers for the fit tests: an L-C low-pass simulated by ngspice (an independent tool).

The decks are written here, run with ``ngspice -b`` in a temporary folder and read back
from the ``wrdata`` output file (success is judged by that file: ``ngspice -b`` may exit 1
after a ``.control`` run). Nothing is cached between test runs.
"""

from __future__ import annotations

import shutil
import subprocess
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pytest

NGSPICE = shutil.which("ngspice")


@dataclass(frozen=True)
class Circuit:
    """Parts of the lc-lowpass test circuit (SI units)."""

    L: float
    C: float
    Rs: float
    Resr: float
    Rload: float


def _deck(c: Circuit, *, freq: float, duty: float, high: float, edge: float, fs: float,
          tstop: float, out: Path) -> str:
    period = 1.0 / freq
    width = duty * period - edge  # PULSE's PW is the flat top; 50 % points are PW + edge apart
    tmax = min(25e-6, 0.5 / fs)
    return f"""* benchfit test deck: square drive into Rs-L-(C+ESR)||Rload
Vd drive 0 PULSE(0 {high:.9g} 0 {edge:.9g} {edge:.9g} {width:.9g} {period:.9g})
Rs drive n1 {c.Rs:.9g}
L1 n1 out {c.L:.9g}
C1 out nc {c.C:.9g}
Rc nc 0 {c.Resr:.9g}
Rl out 0 {c.Rload:.9g}
.options interp reltol=1e-6 abstol=1e-12 vntol=1e-9
.control
tran {1.0 / fs:.9g} {tstop:.9g} 0 {tmax:.9g}
wrdata {out} v(drive) v(out)
quit
.endc
.end
"""


def simulate_square(tmp_path: Path, c: Circuit, *, freq: float, duty: float, high: float = 12.0,
                    edge: float = 50e-6, fs: float = 20000.0, settle: float = 0.4,
                    keep: float = 0.6) -> tuple[np.ndarray, np.ndarray]:
    """Drive and output (V) on a uniform grid at ``fs`` over the last ``keep`` seconds."""
    if NGSPICE is None:
        pytest.skip("ngspice is not installed")
    out = tmp_path / f"sim_{freq:g}_{duty:g}.txt"
    deck = tmp_path / f"deck_{freq:g}_{duty:g}.cir"
    deck.write_text(_deck(c, freq=freq, duty=duty, high=high, edge=edge, fs=fs,
                          tstop=settle + keep, out=out))
    proc = subprocess.run([NGSPICE, "-b", str(deck)], capture_output=True, text=True, timeout=60,
                          cwd=tmp_path)
    if not out.exists():
        raise AssertionError(f"ngspice wrote no output:\n{proc.stdout[-2000:]}\n{proc.stderr[-2000:]}")
    data = np.loadtxt(out)
    t, drive, vout = data[:, 0], data[:, 1], data[:, 3]
    n = int(round(keep * fs))
    grid = settle + np.arange(n) / fs
    # the output is on the tstep grid already ('interp'); np.interp only guards against rounding
    return np.interp(grid, t, drive), np.interp(grid, t, vout)
