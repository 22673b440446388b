"""ngspice (an independent circuit simulator) runs of a whole unit for the model and design tests.

Two decks, both written here and run with ``ngspice -b`` in the test's temporary folder; the
result is read back from the ``wrdata`` file (``ngspice -b`` may exit 1 after a ``.control``
run, so success is judged by that file).

* :func:`simulate_unit`: a rectangular source (PULSE, levels ``v_low``/``v_high``, 1 µs edges)
  behind a source resistance (``r_src``, or ``r_src`` while high and ``r_low`` while low: a
  behavioural current source I = (v_ideal − v_pin)/R(t), R moving from r_low to r_src with the
  ideal level), an optional divider, then Rs → L (optionally with a core loss Rp across it) →
  out, C + ESR to ground, load. Zero-volt sources sense the timer's current and the filter's
  input (series) current.
* :func:`simulate_astable`: a 555-style astable built from the charging law: RA from the
  supply to the discharge node, RB to the threshold node, C1 to ground, and a discharge switch
  with hysteresis that closes at ⅔·Vcc and opens at ⅓·Vcc (ngspice ``SW`` model, VT = Vcc/2,
  VH = Vcc/6; the two comparators and latch of the NE555 block diagram).

Nothing is cached between test runs.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ngspice_run import run_deck


@dataclass(frozen=True)
class SpiceUnit:
    """The simulated unit (SI units). ``r_src`` is the timer's output resistance (while high when
    ``r_low`` is given: the resistance while low); ``Rp`` a core loss across L (None: none)."""

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
    r_low: float | None = None
    Rp: float | None = None


def simulate_unit(tmp_path: Path, u: SpiceUnit, *, fs: float = 48000.0, settle: float = 1.0,
                  keep: float = 1.0, name: str = "unit", edge: float = 1e-6,
                  max_step: float = 10e-6, raw: bool = False) -> dict[str, np.ndarray]:
    """Over ``keep`` s after ``settle``: time, timer level (ideal source), filter output, inductor
    current (L alone), capacitor voltage, timer current, the filter's input current (through Rs), the
    timer pin's voltage behind its output resistance and the divider tap's voltage.

    On the uniform grid ``fs`` (ngspice's 'interp' output) by default; with ``raw`` on ngspice's own
    time points from ``settle`` on (the PULSE corners among them, so a quantity that jumps at an edge
    is sampled on both sides), at most ``max_step`` apart."""
    period = 1.0 / u.f
    width = u.duty * period - edge
    out = tmp_path / f"{name}.txt"
    if u.r_low is None:
        src = f"Rsrc timer ts {u.r_src:.9g}\n"
    else:
        # the output stage: r_low at the low level, r_src at the high level, linear in the ideal level between
        swing = u.v_high - u.v_low
        src = (f"B1 timer ts I = (V(timer)-V(ts))/({u.r_low:.9g} + ({u.r_src - u.r_low:.9g})*"
               f"(V(timer)-({u.v_low:.9g}))/{swing:.9g})\n")
    if u.divider is None:
        div = "Vit ts drive 0\n"
    else:
        top, bottom = u.divider
        div = f"Vit ts t1 0\nRtop t1 drive {top:.9g}\nRbot drive 0 {bottom:.9g}\n"
    rp = "" if u.Rp is None else f"Rp n1 out {u.Rp:.9g}\n"
    deck = f"""* benchfit design test: rectangular drive into source R, divider, Rs-L-(C+ESR)||Rload
Vt timer 0 PULSE({u.v_low:.9g} {u.v_high:.9g} 0 {edge:.9g} {edge:.9g} {width:.9g} {period:.9g})
{src}{div}Vis drive d2 0
Rs d2 n1 {u.Rs:.9g}
L1 n1 out {u.L:.9g}
{rp}C1 out nc {u.C:.9g}
Rc nc 0 {max(u.Resr, 1e-6):.9g}
Rl out 0 {u.Rload:.9g}
.options {"" if raw else "interp "}reltol=1e-6 abstol=1e-12 vntol=1e-9
.control
tran {1.0 / fs:.9g} {settle + keep:.9g} {settle if raw else 0:.9g} {min(max_step, 0.5 / fs):.9g}
wrdata {out} v(timer) v(out) i(L1) v(nc) i(Vit) i(Vis) v(ts) v(drive)
quit
.endc
.end
"""
    data = run_deck(tmp_path, name, deck, out)
    t = data[:, 0]
    names = ("timer", "out", "il", "nc", "it", "is", "pin", "tap")
    if raw:
        sel = t >= settle
        cols = {k: data[sel, 2 * j + 1] for j, k in enumerate(names)}
        cols["vc"] = cols["out"] - cols.pop("nc")
        return {"t": t[sel] - settle, **cols}
    n = int(round(keep * fs))
    grid = settle + np.arange(n) / fs
    col = lambda j: np.interp(grid, t, data[:, j])  # noqa: E731
    out_v = col(3)
    return {"t": grid - settle, "timer": col(1), "out": out_v, "il": col(5),
            "vc": out_v - col(7), "it": col(9), "is": col(11), "pin": col(13), "tap": col(15)}


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
    data = run_deck(tmp_path, name, deck, out)
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
