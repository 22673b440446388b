"""L-C low-pass designed for a THD target and a level tolerance: choose f0 *and* Q.

Tuning f0 to the drive frequency is the textbook shortcut; it maximises the output's
sensitivity to part tolerances (the fundamental sits on the resonance peak). Here the filter is
chosen over a grid of (f0/F, Q): for a known L, C = 1/((2π·r·F)²·L) and the total series
resistance R = √(L/C)/Q (REFERENCES §6: Q = (1/R)·√(L/C)), so the damping resistor is
R − Rs (it must be ≥ 0). Every point is judged with the unit model
(:mod:`benchfit.model.unit`): THD_F over harmonics 2…H (H = 10, as ``benchfit measure``), the
output level, and, by a seeded Monte Carlo over L and C drawn uniformly within their tolerances
(GUM 4.3.7 rectangular), the yield: the fraction of built filters whose THD is within the
target and whose level is within ±``level_tolerance`` of the nominal design's. Peaking is
max|H(jω)|/|H(0)| (how much the tank rings up). The stresses (:mod:`benchfit.model.stress`)
flag designs that exceed the timer's output rating; flagged points are not recommended.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from benchfit.design.parts import SERIES_TOLERANCE, check_bench_range, check_filter_parts, check_series, combine
from benchfit.errors import DesignError
from benchfit.model.filter import LowpassParts, transfer
from benchfit.model.stress import CAUTIONS, stress_checks
from benchfit.model.unit import CaptureChain, Drive, UnitModel, predict, predict_quantities

__all__ = ["DampedRow", "DampedDesign", "design_damped", "evaluate_filter"]

_RATIOS = (0.8, 0.9, 1.0, 1.1, 1.2, 1.3, 1.5)
_QS = (0.5, 0.7, 1.0, 1.5, 2.0, 3.0, 5.0)


@dataclass(frozen=True)
class DampedRow:
    """One (f0/F, Q) point: parts, nominal output, sensitivity and yield."""

    ratio: float
    q: float
    capacitance_f: float
    r_total_ohm: float
    r_damp_ohm: float
    thd_pct: float
    vrms: float
    level_spread: float
    peaking: float
    yield_fraction: float
    flagged: tuple[str, ...] = ()

    def to_dict(self) -> dict[str, Any]:
        d = dict(self.__dict__)
        d["flagged"] = list(self.flagged)
        return d


@dataclass(frozen=True)
class DampedDesign:
    """The chosen filter (parts from the E-series), its prediction and the trade-off table."""

    frequency_hz: float
    inductance_h: float
    capacitor: Any
    damping: Any | None
    prediction: Any
    stress: tuple
    yield_fraction: float
    yield_u: float
    table: tuple[DampedRow, ...]
    notes: tuple[str, ...] = ()
    cautions: tuple[str, ...] = CAUTIONS

    def to_dict(self) -> dict[str, Any]:
        return {"frequency_hz": self.frequency_hz, "inductance_h": self.inductance_h,
                "capacitor": self.capacitor.to_dict(),
                "damping": None if self.damping is None else self.damping.to_dict(),
                "prediction": self.prediction.to_dict(), "stress": [s.to_dict() for s in self.stress],
                "yield_fraction": self.yield_fraction, "yield_u": self.yield_u,
                "table": [r.to_dict() for r in self.table], "notes": list(self.notes),
                "cautions": list(self.cautions)}


def evaluate_filter(inductance: float, capacitance: float, frequency_hz: float, *, rs_ohm: float = 0.0,
                    esr_ohm: float = 0.0, load_ohm: float | None = None, duty: float = 0.5,
                    amplitude_v: float = 12.0, ac_coupled: bool = False, n_harmonics: int = 10):
    """Output and stresses of a given L and C driven at any frequency (rectangular 0…A drive).

    Returns (UnitPrediction, stress checks); THD over harmonics 2…``n_harmonics``.
    """
    for name, v in (("inductance", inductance), ("capacitance", capacitance), ("frequency", frequency_hz),
                    ("amplitude", amplitude_v)):
        if not (isinstance(v, (int, float)) and math.isfinite(v) and v > 0):
            raise DesignError(f"{name}: {v!r} must be a positive finite number — give a value above zero")
    check_bench_range("frequency", frequency_hz, "frequency")
    check_filter_parts(inductance=inductance, capacitance=capacitance, rs_ohm=rs_ohm, esr_ohm=esr_ohm,
                       load_ohm=load_ohm)
    if not 0 < duty < 1:
        raise DesignError(f"duty: {duty!r} must be between 0 and 1 — write e.g. 0.5 for 50 %")
    p = LowpassParts(inductance, capacitance, rs_ohm, esr_ohm, math.inf if load_ohm is None else load_ohm)
    pred = predict(UnitModel(Drive(frequency_hz, duty, amplitude_v), p),
                   CaptureChain(ac_coupled=ac_coupled, n_harmonics=n_harmonics))
    return pred, stress_checks(pred)


def _point(L: float, C: float, R: float, load: float, f: float, duty: float, amp: float, chain) -> dict:
    u = UnitModel(Drive(f, duty, amp), LowpassParts(L, C, R, 0.0, load))
    return predict_quantities(u, chain)


def _peaking(L: float, C: float, R: float, load: float) -> float:
    p = LowpassParts(L, C, R, 0.0, load)
    f0 = 1.0 / (2 * math.pi * math.sqrt(L * C))
    f = np.geomspace(f0 / 10, f0 * 10, 2001)
    h = np.abs(transfer(f, p))
    return float(h.max() / abs(transfer(0.0, p)))


def design_damped(frequency_hz: float, inductance: float, *, rs_ohm: float, load_ohm: float | None = None,
                  duty: float = 0.5, amplitude_v: float = 12.0, thd_max_pct: float = 5.0,
                  level_tolerance: float = 0.10, tolerance_l: float = 0.10, tolerance_c: float | None = None,
                  series: str = "E12", n_trials: int = 400, seed: int = 0) -> DampedDesign:
    """Choose C and the damping resistor for a THD target and a level tolerance (module text).

    Parameters
    ----------
    frequency_hz : float
        Drive frequency F (Hz).
    inductance : float
        The choke (H).
    rs_ohm : float
        Series resistance already there: timer output, divider, winding (Ω).
    load_ohm : float, optional
        Load (Ω); None for open.
    duty, amplitude_v : float
        Drive duty and swing (0 V to A).
    thd_max_pct : float
        THD target, % (THD_F over harmonics 2…10).
    level_tolerance : float
        Allowed relative change of the output level across part tolerances (fraction).
    tolerance_l, tolerance_c : float
        Part tolerances (fractions); C's default is the series'.
    series : str
        Series for C and the damping resistor (E24 for the resistor when coarser).
    n_trials : int
        Monte Carlo draws per grid point (≥ 100).
    seed : int
        Seed of the random generator.
    """
    f = float(frequency_hz)
    L = float(inductance)
    if not (math.isfinite(f) and f > 0 and math.isfinite(L) and L > 0):
        raise DesignError("filter: frequency and inductance must be positive — give e.g. frequency_hz=50, "
                          "inductance=0.3")
    check_bench_range("frequency", f, "frequency")
    check_filter_parts(inductance=L, rs_ohm=rs_ohm, load_ohm=load_ohm)
    if n_trials < 100:
        raise DesignError(f"trials: {n_trials!r} is too few — use at least 100")
    name = check_series(series)
    tc = SERIES_TOLERANCE[name] if tolerance_c is None else float(tolerance_c)
    load = math.inf if load_ohm is None else float(load_ohm)
    chain = CaptureChain(ac_coupled=True)
    rng = np.random.default_rng(seed)
    al = 1.0 + tolerance_l * rng.uniform(-1, 1, n_trials)
    ac = 1.0 + tc * rng.uniform(-1, 1, n_trials)
    rows: list[DampedRow] = []
    for r in _RATIOS:
        C = 1.0 / ((2 * math.pi * r * f) ** 2 * L)
        for q in _QS:
            R = math.sqrt(L / C) / q
            if R < rs_ohm:
                continue
            nom = _point(L, C, R, load, f, duty, amplitude_v, chain)
            thd = np.empty(n_trials)
            lev = np.empty(n_trials)
            for i in range(n_trials):
                d = _point(L * al[i], C * ac[i], R, load, f, duty, amplitude_v, chain)
                thd[i], lev[i] = d["thd_pct"], d["vrms"]
            rel = lev / nom["vrms"] - 1.0
            ok = (thd <= thd_max_pct) & (np.abs(rel) <= level_tolerance)
            pred = predict(UnitModel(Drive(f, duty, amplitude_v), LowpassParts(L, C, R, 0.0, load)))
            flags = tuple(s.text for s in stress_checks(pred) if s.flagged)
            rows.append(DampedRow(r, q, C, R, R - rs_ohm, nom["thd_pct"], nom["vrms"],
                                  float(np.percentile(np.abs(rel), 95)), _peaking(L, C, R, load),
                                  float(ok.mean()), flags))
    if not rows:
        raise DesignError(f"rs: {rs_ohm:g} Ω is already more than the damping any point of the grid needs — "
                          "use a larger inductance or a lower series resistance")
    good = [r for r in rows if not r.flagged]
    if not good:
        raise DesignError("filter: every design point exceeds a rating (timer output current) — drive the "
                          "filter through a divider or buffer, or use a larger inductance")
    # best yield; among equal yields the higher output level, then less peaking
    best = max(good, key=lambda r: (round(r.yield_fraction, 2), r.vrms, -r.peaking))
    # parallel capacitors before series (issue 10): one part or two in parallel
    found = combine(best.capacitance_f, "C", series=name, max_parts=2, top=400).combinations
    cap = next(c for c in found if c.topology in ("single", "add2"))
    damp = None
    if best.r_damp_ohm > 0.5:
        damp = combine(best.r_damp_ohm, "R", series="E24" if name in ("E6", "E12") else name, max_parts=1,
                       top=1).best
    R = rs_ohm + (0.0 if damp is None else damp.value)
    parts = LowpassParts(L, cap.value, R, 0.0, load)
    pred = predict(UnitModel(Drive(f, duty, amplitude_v), parts), chain)
    stress = stress_checks(pred)
    rng2 = np.random.default_rng(seed + 1)
    n2 = max(n_trials, 1000)
    al2 = 1.0 + tolerance_l * rng2.uniform(-1, 1, n2)
    ac2 = 1.0 + tc * rng2.uniform(-1, 1, n2)
    ok = 0
    for i in range(n2):
        d = _point(L * al2[i], cap.value * ac2[i], R, load, f, duty, amplitude_v, chain)
        ok += d["thd_pct"] <= thd_max_pct and abs(d["vrms"] / pred.vrms - 1) <= level_tolerance
    p = ok / n2
    notes = (f"grid f0/F = {', '.join(f'{r:g}' for r in _RATIOS)} × Q = {', '.join(f'{q:g}' for q in _QS)}; "
             f"yield = THD ≤ {thd_max_pct:g} % and level within ±{level_tolerance * 100:g} % with L "
             f"±{tolerance_l * 100:g} %, C ±{tc * 100:g} % (uniform, {n_trials} draws per point, seed {seed})",
             "f0 at the drive frequency gives the most level but the most sensitivity to the parts; a lower Q "
             "trades level for insensitivity, a higher f0/F trades THD for level",
             f"chosen: f0/F = {best.ratio:g}, Q = {best.q:g}; yield of the built parts {p * 100:.1f} % "
             f"± {math.sqrt(p * (1 - p) / n2) * 100:.1f} % ({n2} draws)")
    return DampedDesign(f, L, cap, damp, pred, stress, p, math.sqrt(p * (1 - p) / n2), tuple(rows), notes)
