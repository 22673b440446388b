"""Candidate actions of the trim search, each a change applied to Monte Carlo draws of the unit.

Used by :mod:`benchfit.design.advice`. An action knows the change in words and numbers
(:class:`Change`, the issue 10 JSON) and how it alters a draw of the unit (:class:`_State`):
added parts are drawn rectangular within their tolerance (GUM 4.3.7).

Timer actions are calibrated by the measured frequency: at fixed thresholds the period is
proportional to C1 (charging law, REFERENCES §7; the diode's drop, §11), so after a change
f = f_meas·T(ra, rb)/T(ra', rb') with C1, its error and the timer's initial error cancelling;
the present ra, rb are drawn within their tolerance and ra', rb' are the same draws after the
change. The control pin is set from
a divider off the supply against its internal ⅔·Vcc feed through 5 kΩ ∥ 10 kΩ (NE555 block
diagram, REFERENCES §7), whose loose absolute value (±20 %, assumed) enters in full.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Callable

import numpy as np

from benchfit.design.astable import LN2, high_time_factor
from benchfit.design.parts import combine

__all__ = ["TimerParts", "Change", "CHOKE_TOLERANCE", "CHOKE_RS_SPREAD", "RESISTOR_TOLERANCE",
           "CONTROL_R_INTERNAL", "CONTROL_R_SPREAD", "TRIMMER_RESOLUTION"]

#: assumed tolerance of a replacement choke (from memory: ±10 % is usual for iron-cored chokes)
CHOKE_TOLERANCE = 0.10
#: a replacement choke's winding resistance is unknown: Rs taken as unchanged ±20 % (rectangular)
CHOKE_RS_SPREAD = 0.20
#: tolerance of an added resistor (common practice: 1 % metal film)
RESISTOR_TOLERANCE = 0.01


@dataclass(frozen=True)
class TimerParts:
    """The timer's nominal parts and supply (Ω, Ω, F, V); ``diode``: a steering diode across RB."""

    ra: float
    rb: float
    c1: float
    supply_v: float = 12.0
    diode: bool = False
    diode_drop_v: float = 0.65
    #: tolerance of the present RA and RB (fraction, rectangular): what is left uncertain once the
    #: measured frequency has calibrated C1 and the timer's own error
    tolerance_r: float = 0.01

    def period(self, ra: Any = None, rb: Any = None) -> Any:
        """Nominal period (s) from the charging law (REFERENCES §7; §11 for the diode's drop)."""
        ra = self.ra if ra is None else ra
        rb = self.rb if rb is None else rb
        if self.diode:
            v, vd = self.supply_v, self.diode_drop_v
            k_h = math.log((v - vd - v / 3.0) / (v - vd - 2.0 * v / 3.0))
            return k_h * ra * self.c1 + LN2 * rb * self.c1
        return high_time_factor() * (ra + rb) * self.c1 + LN2 * rb * self.c1


@dataclass(frozen=True)
class Change:
    """One change of a plan (issue 10 JSON: part, action, values, new_value, text)."""

    part: str
    action: str
    values: tuple[float, ...]
    new_value: float
    text: str

    def to_dict(self) -> dict[str, Any]:
        return {"part": self.part, "action": self.action, "values": list(self.values),
                "new_value": self.new_value, "text": self.text}


@dataclass
class _State:
    """Monte Carlo draws of the unit (arrays of length n)."""

    L: np.ndarray
    C: np.ndarray
    Rs: np.ndarray
    Resr: np.ndarray
    Rload: np.ndarray
    f: np.ndarray
    extra: dict[str, np.ndarray] = field(default_factory=dict)

    def copy(self) -> "_State":
        return _State(self.L.copy(), self.C.copy(), self.Rs.copy(), self.Resr.copy(), self.Rload.copy(),
                      self.f.copy(), dict(self.extra))

    def nominal(self) -> "_State":
        def first(a: np.ndarray) -> np.ndarray:
            return np.array([a[0]])

        return _State(first(self.L), first(self.C), first(self.Rs), first(self.Resr), first(self.Rload),
                      first(self.f), {k: first(v) for k, v in self.extra.items()})


@dataclass(frozen=True)
class _Action:
    group: str                 # "replace", "filter", "timer"
    change: Change
    n_parts: int
    size: float
    apply: Callable[[_State, np.random.Generator], _State]


def _q(v: float, unit: str, digits: int = 4) -> str:
    from benchfit.units import format_quantity

    return format_quantity(v, unit, digits)



def _uniform(rng, n: int, tol: float) -> np.ndarray:
    a = 1.0 + tol * rng.uniform(-1, 1, n)
    a[0] = 1.0
    return a


def _c_parallel(combo, tol: float) -> _Action:
    val = combo.value
    desc = combo.describe().removesuffix(" in parallel")

    def apply(s: _State, rng) -> _State:
        t = s.copy()
        t.C = s.C + val * _uniform(rng, s.C.size, tol)
        return t
    return _Action("filter", Change("C", "add in parallel", tuple(combo.parts), 0.0,
                                    f"add {desc} (±{tol * 100:g} %) in parallel with the capacitor bank"),
                   combo.n_parts, 0.0, apply)


def _c_series(combo, tol: float) -> _Action:
    val = combo.value
    desc = combo.describe()

    def apply(s: _State, rng) -> _State:
        t = s.copy()
        cs = val * _uniform(rng, s.C.size, tol)
        t.C = s.C * cs / (s.C + cs)
        return t
    return _Action("filter", Change("C", "add in series", tuple(combo.parts), 0.0,
                                    f"put {desc} (±{tol * 100:g} %) in series with the capacitor bank (non-polar or film)"),
                   combo.n_parts, 0.0, apply)


def _r_damp(combo, tol: float) -> _Action:
    val = combo.value

    def apply(s: _State, rng) -> _State:
        t = s.copy()
        t.Rs = s.Rs + val * _uniform(rng, s.Rs.size, tol)
        return t
    return _Action("filter", Change("Rdamp", "add in series", tuple(combo.parts), val,
                                    f"add a damping resistor of {combo.describe()} (±{tol * 100:g} %) in series with the choke"),
                   combo.n_parts, 0.0, apply)


def _replace(part: str, nominal: float, fitted: float, tol: float) -> _Action:
    unit = "H" if part == "L" else "F"

    def apply(s: _State, rng) -> _State:
        t = s.copy()
        new = nominal * _uniform(rng, s.L.size, tol)
        setattr(t, part, new)
        if part == "L":
            t.Rs = s.Rs * _uniform(rng, s.Rs.size, CHOKE_RS_SPREAD)
        return t
    text = (f"replace: {part} is {_q(fitted, unit)}, nominal {_q(nominal, unit)} — fit a new "
            f"{_q(nominal, unit)} {'choke' if part == 'L' else 'capacitor bank'} (±{tol * 100:g} % assumed)")
    return _Action("replace", Change(part, "replace", (nominal,), nominal, text), 1, abs(nominal / fitted - 1),
                   apply)


def _timer_actions(timer: TimerParts, f_meas: float, target: float, series: str, tol: float) -> list[_Action]:
    """Series/parallel additions to RB or RA, a fresh RB, a trimmer and the control pin.

    Calibration by the measured frequency: the period is proportional to C1 at fixed thresholds,
    so f_after = f_meas·T(ra, rb)/T(ra', rb') with C1 cancelling; ra and rb are the *present*
    resistors, drawn within their tolerance (``timer.tolerance_r``, rectangular), and ra', rb'
    the same draws after the change. C1's own error and the timer's initial error drop out.
    """
    t_meas = 1.0 / f_meas
    t_nom = timer.period()
    scale = t_meas / t_nom          # actual / nominal period
    t_need = 1.0 / target
    out: list[_Action] = []

    def present(rng, n: int) -> tuple[np.ndarray, np.ndarray]:
        return timer.ra * _uniform(rng, n, timer.tolerance_r), timer.rb * _uniform(rng, n, timer.tolerance_r)

    def make(part: str, how: str, exact: float) -> None:
        if not exact > 0 or not math.isfinite(exact):
            return
        for combo in _snap(exact, "R", series):
            val = combo.value

            def apply(s: _State, rng, val=val, part=part, how=how) -> _State:
                t = s.copy()
                n = s.f.size
                ra, rb = present(rng, n)
                r = val * _uniform(rng, n, tol)
                base = rb if part == "RB" else ra
                new = base + r if how == "series" else base * r / (base + r)
                after = timer.period(ra, new) if part == "RB" else timer.period(new, rb)
                t.f = s.f * timer.period(ra, rb) / after
                return t
            desc = combo.describe().removesuffix(' in series')
            desc = f"{desc} (±{tol * 100:g} %)"
            text = (f"add {desc} in series with {part} ({_q(getattr(timer, part.lower()), 'Ω')})" if how == "series"
                    else f"add {desc} in parallel with {part} "
                         f"({_q(getattr(timer, part.lower()), 'Ω')})")
            base = getattr(timer, part.lower())
            newv = base + val if how == "series" else base * val / (base + val)
            out.append(_Action("timer", Change(part, f"add in {how}", tuple(combo.parts), newv, text),
                               combo.n_parts, abs(newv / base - 1), apply))

    slope_rb = (LN2 if timer.diode else high_time_factor() + LN2) * timer.c1 * scale
    slope_ra = (timer.period(timer.ra + 1.0) - t_nom) * scale
    dt = t_need - t_meas
    if dt > 0:
        make("RB", "series", dt / slope_rb)
        make("RA", "series", dt / slope_ra)
    elif dt < 0:
        # parallel R: new = base·r/(base + r) = base − Δ → r = base·(base − Δ)/Δ
        for part, slope in (("RB", slope_rb), ("RA", slope_ra)):
            base = getattr(timer, part.lower())
            d = -dt / slope
            if 0 < d < base:
                make(part, "parallel", base * (base - d) / d)
    # a fresh RB from the series: its own tolerance enters in full (the measured error stays)
    rb_exact = timer.rb + dt / slope_rb
    if rb_exact > 0:
        for combo in sorted(_snap(rb_exact, "R", series), key=lambda c: abs(c.error))[:1]:
            val = combo.value

            def apply(s: _State, rng, val=val) -> _State:
                t = s.copy()
                n = s.f.size
                ra, rb = present(rng, n)
                rb_new = val * _uniform(rng, n, tol)
                t.f = s.f * timer.period(ra, rb) / timer.period(ra, rb_new)
                return t
            out.append(_Action("timer", Change("RB", "replace", tuple(combo.parts), val,
                                               f"replace RB ({_q(timer.rb, 'Ω')}) with {combo.describe()}"),
                               combo.n_parts + 1, abs(val / timer.rb - 1), apply))
    if not timer.diode:
        out += _control_actions(timer, scale, t_need, tol, present)
    out += _trimmer_actions(timer, t_meas, slope_rb, dt)
    return out


#: the control pin's internal feed: ⅔·Vcc behind 5 kΩ ∥ 10 kΩ (REFERENCES §7, NE555 block
#: diagram); the absolute values are loose, taken as ±20 % (rectangular, assumed)
CONTROL_R_INTERNAL = 5e3 * 10e3 / 15e3
CONTROL_R_SPREAD = 0.20


def _vc_divider(vcc, r1, r2, rint):
    """Control-pin voltage with R1 from Vcc and R2 to ground against the internal feed (KCL)."""
    return (vcc / r1 + (2.0 * vcc / 3.0) / rint) / (1.0 / r1 + 1.0 / r2 + 1.0 / rint)


def _period_vc(timer: TimerParts, vc, ra=None, rb=None):
    """Period (s) with the control pin at ``vc`` (REFERENCES §7: t_H = (RA + RB)·C·ln((Vcc − Vc/2)/(Vcc − Vc)))."""
    ra = timer.ra if ra is None else ra
    rb = timer.rb if rb is None else rb
    k = np.log((timer.supply_v - vc / 2.0) / (timer.supply_v - vc))
    return k * (ra + rb) * timer.c1 + LN2 * rb * timer.c1


def _control_actions(timer: TimerParts, scale: float, t_need: float, tol: float, present) -> list[_Action]:
    """A divider off the supply on the control pin (ratiometric, so supply sag cancels to first
    order); calibrated by the measured frequency like the resistor trims."""
    vcc = timer.supply_v
    k_need = (t_need / scale - LN2 * timer.rb * timer.c1) / ((timer.ra + timer.rb) * timer.c1)
    if not k_need > 0:
        return []
    e = math.exp(k_need)
    vc_need = vcc * (e - 1.0) / (e - 0.5)
    if not 0 < vc_need < vcc:
        return []
    from benchfit.design.parts import series_values

    best = None
    for r2 in series_values("E24", 1e3, 10e3):
        # R1 from the node equation with the nominal internal feed
        g = vc_need * (1.0 / r2 + 1.0 / CONTROL_R_INTERNAL) - (2.0 * vcc / 3.0) / CONTROL_R_INTERNAL
        if g <= 0:
            continue
        r1_exact = (vcc - vc_need) / g
        for r1 in series_values("E24", r1_exact * 0.9, r1_exact * 1.1):
            err = abs(_vc_divider(vcc, r1, r2, CONTROL_R_INTERNAL) - vc_need)
            if best is None or err < best[0]:
                best = (err, float(r1), float(r2))
    if best is None:
        return []
    _, r1, r2 = best
    vc_nom = _vc_divider(vcc, r1, r2, CONTROL_R_INTERNAL)

    def apply(s: _State, rng) -> _State:
        t = s.copy()
        n = s.f.size
        ra, rb = present(rng, n)
        rint = CONTROL_R_INTERNAL * _uniform(rng, n, CONTROL_R_SPREAD)
        vc = _vc_divider(vcc, r1 * _uniform(rng, n, tol), r2 * _uniform(rng, n, tol), rint)
        t.f = s.f * _period_vc(timer, 2.0 * vcc / 3.0, ra, rb) / _period_vc(timer, vc, ra, rb)
        return t
    text = (f"set the control pin to {vc_nom:.3f} V with {_q(r1, 'Ω')} from the supply and {_q(r2, 'Ω')} to "
            "ground (ratiometric: supply sag cancels to first order; the internal 3.3 kΩ feed is loose, ±20 %)")
    return [_Action("timer", Change("Vc", "set from a divider", (r1, r2), vc_nom, text), 2,
                    abs(vc_nom / (2 * vcc / 3) - 1), apply)]


#: trimmers tried in series with RB (Ω) and the setting resolution assumed, as a fraction of the
#: span (a 25-turn cermet trimmer set while watching the frequency; assumed)
_TRIMMERS = (100.0, 200.0, 500.0, 1e3, 2e3, 5e3)
TRIMMER_RESOLUTION = 0.002


def _trimmer_actions(timer: TimerParts, t_meas: float, slope_rb: float, dt: float) -> list[_Action]:
    """A trimmer in series with RB, set on the bench: covers the needed change with room either side."""
    need = dt / slope_rb
    out = []
    for pot in _TRIMMERS:
        # the trimmer at mid-travel adds pot/2: RB is not changed, so the need must lie in [0, pot]
        if not 0.1 * pot <= need <= 0.9 * pot:
            continue

        def apply(s: _State, rng, pot=pot) -> _State:
            t = s.copy()
            n = s.f.size
            setting = need + pot * TRIMMER_RESOLUTION * rng.uniform(-0.5, 0.5, n)
            setting[0] = need
            t.f = s.f * t_meas / (t_meas + slope_rb * setting)
            return t
        text = (f"add a {_q(pot, 'Ω')} trimmer in series with RB and set it to about {_q(need, 'Ω', 3)} while "
                "measuring the frequency (lock it; a trimmer drifts more than a fixed resistor)")
        out.append(_Action("timer", Change("RB", "set a trimmer", (pot,), timer.rb + need, text), 1,
                           pot / timer.rb, apply))
        break
    return out


def _snap(exact: float, kind: str, series: str) -> list:
    """Nearest single parts below/above and the best pair for ``exact``."""
    found = combine(exact, kind, series=series, max_parts=2, top=200).combinations
    singles = sorted((c for c in found if c.n_parts == 1), key=lambda c: abs(c.error))[:2]
    # two resistors in series, two capacitors in parallel ("add" in both cases): plain to build
    pairs = [c for c in found if c.n_parts == 2 and c.topology == "add2"]
    out = singles + pairs[:1]
    return out


def _continuous(kind: str, x: float) -> _Action:
    def apply(s: _State, rng) -> _State:
        t = s.copy()
        if kind == "par":
            t.C = s.C + x
        elif kind == "ser":
            t.C = s.C * x / (s.C + x)
        else:
            t.Rs = s.Rs + x
        return t
    return _Action("filter", Change("C", kind, (x,), x, ""), 1, 0.0, apply)
