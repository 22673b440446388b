"""ngspice (an independent circuit simulator) runs of a whole unit for the model and design tests.

Two decks, both written here and run with ``ngspice -b`` in the test's temporary folder; the
result is read back from the ``wrdata`` file (``ngspice -b`` may exit 1 after a ``.control``
run, so success is judged by that file).

* :func:`simulate_unit`: a rectangular source (PULSE, levels ``v_low``/``v_high``, 1 µs edges)
  behind a source resistance, an optional divider, then Rs → L → out, C + ESR to ground, load.
* :func:`simulate_astable`: a 555-style astable built from the charging law: RA from the
  supply to the discharge node, RB to the threshold node, C1 to ground, and a discharge switch
  with hysteresis that closes at ⅔·Vcc and opens at ⅓·Vcc (ngspice ``SW`` model, VT = Vcc/2,
  VH = Vcc/6; the two comparators and latch of the NE555 block diagram).

Nothing is cached between test runs.
"""

from __future__ import annotations

import math
import os
import shutil
import subprocess
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pytest

NGSPICE = shutil.which("ngspice")


def _no_ngspice() -> None:
    """Skip on a developer's machine without ngspice; fail under CI, which installs it."""
    if os.environ.get("CI"):
        pytest.fail("ngspice is not installed — scripts/test.sh installs Debian's ngspice")
    pytest.skip("ngspice is not installed")


@dataclass(frozen=True)
class SpiceUnit:
    """The simulated unit (SI units). ``r_src`` is the timer's output resistance."""

    f: float
    duty: float
    v_high: float
    v_low: float
    r_src: float
    L: float
    Rs: float
    C: float
    Resr: float
    Rload: float
    divider: tuple[float, float] | None = None


def _run(tmp_path: Path, name: str, deck: str, out: Path) -> np.ndarray:
    if NGSPICE is None:
        _no_ngspice()
    path = tmp_path / f"{name}.cir"
    path.write_text(deck)
    proc = subprocess.run([NGSPICE, "-b", str(path)], capture_output=True, text=True, timeout=120,
                          cwd=tmp_path)
    if not out.exists():
        raise AssertionError(f"ngspice wrote no output:\n{proc.stdout[-2000:]}\n{proc.stderr[-2000:]}")
    return np.loadtxt(out)


def simulate_unit(tmp_path: Path, u: SpiceUnit, *, fs: float = 48000.0, settle: float = 1.0,
                  keep: float = 1.0, name: str = "unit") -> dict[str, np.ndarray]:
    """Time grid, timer output, filter output, inductor current and capacitor voltage over ``keep`` s."""
    period = 1.0 / u.f
    edge = 1e-6
    width = u.duty * period - edge
    out = tmp_path / f"{name}.txt"
    if u.divider is None:
        div = f"Rsrc timer drive {u.r_src:.9g}\n"
    else:
        top, bottom = u.divider
        div = f"Rsrc timer t1 {u.r_src:.9g}\nRtop t1 drive {top:.9g}\nRbot drive 0 {bottom:.9g}\n"
    deck = f"""* benchfit design test: rectangular drive into source R, divider, Rs-L-(C+ESR)||Rload
Vt timer 0 PULSE({u.v_low:.9g} {u.v_high:.9g} 0 {edge:.9g} {edge:.9g} {width:.9g} {period:.9g})
{div}Rs drive n1 {u.Rs:.9g}
L1 n1 out {u.L:.9g}
C1 out nc {u.C:.9g}
Rc nc 0 {max(u.Resr, 1e-6):.9g}
Rl out 0 {u.Rload:.9g}
.options interp reltol=1e-6 abstol=1e-12 vntol=1e-9
.control
tran {1.0 / fs:.9g} {settle + keep:.9g} 0 {min(10e-6, 0.5 / fs):.9g}
wrdata {out} v(timer) v(out) i(L1) v(nc)
quit
.endc
.end
"""
    data = _run(tmp_path, name, deck, out)
    t = data[:, 0]
    n = int(round(keep * fs))
    grid = settle + np.arange(n) / fs
    col = lambda j: np.interp(grid, t, data[:, j])  # noqa: E731
    out_v = col(3)
    return {"t": grid - settle, "timer": col(1), "out": out_v, "il": col(5),
            "vc": out_v - col(7)}


def simulate_astable(tmp_path: Path, *, ra: float, rb: float, c1: float, vcc: float = 12.0,
                     r_discharge: float = 10.0, seconds: float = 0.2, name: str = "astable") -> float:
    """Frequency (Hz) of the switch-model astable from its threshold-node crossings.

    The frequency is the mean over the last full periods of the upward crossings of Vcc/2 at
    the threshold node (linearly interpolated), after the first period (which starts from 0 V).
    """
    out = tmp_path / f"{name}.txt"
    deck = f"""* benchfit design test: 555-style astable from the charging law (hysteretic discharge switch)
Vcc vcc 0 {vcc:.9g}
Ra vcc dis {ra:.9g}
Rb dis thr {rb:.9g}
C1 thr 0 {c1:.9g} ic=0
S1 dis 0 thr 0 sdis
.model sdis sw(vt={vcc / 2:.9g} vh={vcc / 6:.9g} ron={r_discharge:.9g} roff=1e12)
.options reltol=1e-7 abstol=1e-14 vntol=1e-10
.control
tran 1u {seconds:.9g} 0 1u uic
wrdata {out} v(thr)
quit
.endc
.end
"""
    data = _run(tmp_path, name, deck, out)
    t, v = data[:, 0], data[:, 1]
    level = vcc / 2.0
    up = np.nonzero((v[:-1] < level) & (v[1:] >= level))[0]
    times = t[up] + (level - v[up]) * (t[up + 1] - t[up]) / (v[up + 1] - v[up])
    times = times[1:]
    if times.size < 3:
        raise AssertionError("ngspice astable did not oscillate")
    return float((times.size - 1) / (times[-1] - times[0]))


def harmonics(x: np.ndarray, fs: float, f: float, n: int = 40) -> tuple[np.ndarray, float]:
    """Peak amplitudes of harmonics 1…n and the DC of ``x`` over a whole number of periods
    (projection on cos/sin at k·f; exact for a periodic steady state sampled over full periods)."""
    m = int(math.floor(x.size * f / fs))
    keep = int(round(m * fs / f))
    x = x[:keep]
    t = np.arange(keep) / fs
    amps = []
    for k in range(1, n + 1):
        e = np.exp(-2j * math.pi * k * f * t)
        amps.append(2.0 * abs(np.mean(x * e)))
    return np.array(amps), float(np.mean(x))
