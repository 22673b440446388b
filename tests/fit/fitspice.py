"""Helpers for the fit tests: an L-C low-pass simulated by ngspice (an independent tool).

The decks are written here and run by :func:`ngspice_run.run_deck` (``ngspice -b`` in a
temporary folder, read back from the ``wrdata`` file). Nothing is cached between test runs.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ngspice_run import run_deck


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
    out = tmp_path / f"sim_{freq:g}_{duty:g}.txt"
    return _run_deck(tmp_path, f"deck_{freq:g}_{duty:g}",
                     _deck(c, freq=freq, duty=duty, high=high, edge=edge, fs=fs, tstop=settle + keep, out=out),
                     out, fs=fs, settle=settle, keep=keep, timeout=60)


def _run_deck(tmp_path: Path, name: str, deck_text: str, out: Path, *, fs: float, settle: float, keep: float,
              timeout: float) -> tuple[np.ndarray, np.ndarray]:
    """Run one deck in batch mode; drive and output (V) on a uniform grid over the last ``keep`` s."""
    data = run_deck(tmp_path, name, deck_text, out, timeout=timeout)
    t, drive, vout = data[:, 0], data[:, 1], data[:, 3]
    n = int(round(keep * fs))
    grid = settle + np.arange(n) / fs
    # the output is on the tstep grid already ('interp'); np.interp only guards against rounding
    return np.interp(grid, t, drive), np.interp(grid, t, vout)


# --- units with the losses real boxes have (issue 11) ----------------------------------------

@dataclass(frozen=True)
class Unit:
    """A hum-check-style unit for ngspice: timer output → Rs → L (two coupled chokes, optional
    core loss Rp across them) → output; C with ESR and Rload to ground.

    ``r_high`` / ``r_low`` are the timer's output resistance while high / low (unequal in a real
    555-style output stage, REFERENCES §11); the drive probe ``drive`` sits at the timer pin, so
    the wiring resistance ``Rs`` is what a two-channel fit sees in series.
    """

    L1: float = 0.15
    L2: float = 0.15
    k: float = 0.0
    C: float = 33e-6
    Rs: float = 12.0
    Resr: float = 0.8
    Rload: float = 10e3
    Rp: float | None = None
    r_high: float = 0.0
    r_low: float = 0.0
    #: the timer's output levels with no current drawn: ``v_low`` above ground, ``v_drop`` below the
    #: ideal high level (0 and 0: an ideal rail-to-rail stage)
    v_low: float = 0.0
    v_drop: float = 0.0

    @property
    def L(self) -> float:
        """Effective inductance of the two windings in series aiding: L1 + L2 + 2k√(L1·L2)."""
        return self.L1 + self.L2 + 2 * self.k * (self.L1 * self.L2) ** 0.5


def _unit_deck(u: Unit, *, freq: float, duty: float, high: float, edge: float, fs: float,
               tstop: float, out: Path) -> str:
    period = 1.0 / freq
    width = duty * period - edge
    tmax = min(25e-6, 0.5 / fs)
    v_lo, v_hi = u.v_low, high - u.v_drop
    lines = [f"* benchfit issue-11 unit: timer (R high {u.r_high:g}, low {u.r_low:g}; levels {v_lo:g} / {v_hi:g} V) "
             "into Rs-L-(C+ESR)||Rload",
             f"Vt ideal 0 PULSE({v_lo:.9g} {v_hi:.9g} 0 {edge:.9g} {edge:.9g} {width:.9g} {period:.9g})"]
    if u.r_high > 0 or u.r_low > 0:
        # the output stage: a resistance that depends on the state (high while the ideal pin is high)
        lines.append(f"B1 ideal drive I = (V(ideal)-V(drive))/({u.r_low:.9g} + "
                     f"({u.r_high - u.r_low:.9g})*(V(ideal)-{v_lo:.9g})/{v_hi - v_lo:.9g})")
    else:
        lines.append("Rt ideal drive 1e-6")
    lines += [f"Rs drive n1 {u.Rs:.9g}",
              f"L1 n1 n2 {u.L1:.9g}", f"L2 n2 out {u.L2:.9g}"]
    if u.k > 0:
        lines.append(f"K12 L1 L2 {u.k:.9g}")
    if u.Rp is not None:
        lines.append(f"Rp n1 out {u.Rp:.9g}")
    lines += [f"C1 out nc {u.C:.9g}", f"Rc nc 0 {u.Resr:.9g}", f"Rl out 0 {u.Rload:.9g}",
              ".options interp reltol=1e-6 abstol=1e-12 vntol=1e-9",
              ".control", f"tran {1.0 / fs:.9g} {tstop:.9g} 0 {tmax:.9g}",
              f"wrdata {out} v(drive) v(out)", "quit", ".endc", ".end", ""]
    return "\n".join(lines)


def simulate_unit(tmp_path: Path, u: Unit, *, freq: float = 50.0, duty: float = 0.52, high: float = 12.0,
                  edge: float = 50e-6, fs: float = 20000.0, settle: float = 0.4,
                  keep: float = 0.5, tag: str = "unit") -> tuple[np.ndarray, np.ndarray]:
    """Drive (at the timer pin) and output (V) on a uniform grid over the last ``keep`` seconds."""
    out = tmp_path / f"{tag}.txt"
    return _run_deck(tmp_path, tag, _unit_deck(u, freq=freq, duty=duty, high=high, edge=edge, fs=fs,
                                               tstop=settle + keep, out=out),
                     out, fs=fs, settle=settle, keep=keep, timeout=120)
