"""Trim advice: from a unit's fitted effective values to the one part to change.

Filter (capacitor) trim. With every other part unchanged the lc-lowpass model's resonance
goes as f0 ∝ 1/√C (ω0² = a0/a2, :mod:`benchfit.model.filter`), so moving f0 to the target F
needs C_new = C·(f0/F)², a change ΔC = C_new − C. After adding ΔC' (the parts actually
fitted in) the predicted resonance is f_new = f0·√(C/(C + ΔC')).

Uncertainty (GUM, JCGM 100:2008, law of propagation 5.1/5.2 with correlations): when the fit
determined L and C separately, f_new ∝ 1/√(L·(C + ΔC')), so
(u(f_new)/f_new)² = ¼·[(u_L/L)² + w²(u_C/C)² + 2·w·ρ_LC·(u_L/L)(u_C/C)] with w = C/(C + ΔC'),
plus ¼·(u(ΔC')/(C + ΔC'))² for the added part's tolerance (rectangular: u = tol·ΔC'/√3,
GUM 4.3.7). When L or C was not determined, the advice works from f0 and its standard
uncertainty and the fitted or fixed C, and says so: an error ε in that C then changes the
needed ΔC by the same fraction ε.

Timer trim. The measured timer frequency against the 555 equations (:mod:`astable`) gives a
scale s = f_predicted/f_measured that absorbs the parts' deviations; the new RB, or the new
control-pin voltage, is solved so the scaled prediction meets the target.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Sequence

from benchfit.design.astable import (LN2, astable_timing, control_voltage_for_factor,
                                     high_time_factor)
from benchfit.design.parts import SERIES_TOLERANCE, Combination, check_series, combine
from benchfit.errors import DesignError

__all__ = ["TrimChange", "TrimAdvice", "suggest_trim", "suggest_capacitor_trim", "capacitor_trim",
           "timer_trim"]


def _pos(value: Any, name: str) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError) as e:
        raise DesignError(f"{name}: {value!r} is not a number — give a positive value") from e
    if not math.isfinite(v) or v <= 0:
        raise DesignError(f"{name}: {value!r} must be a positive finite number — give a value above zero")
    return v


@dataclass(frozen=True)
class TrimChange:
    """One suggested change and its predicted result.

    Attributes
    ----------
    kind : str
        ``"capacitor"`` (filter C), ``"timer-rb"`` or ``"timer-control"``.
    action : str
        What to do, in words (``"add 1.5 µF in parallel with the capacitor bank"``).
    part : str
        The quantity changed: ``"C"``, ``"RB"`` or ``"Vc"``.
    unit : str
        Its unit (``"F"``, ``"Ω"``, ``"V"``).
    present : float
        Present value (fitted for C, nominal for RB / Vc).
    needed : float
        Exact value that would meet the target.
    needed_u : float or None
        Standard uncertainty (k = 1) of ``needed`` from the fit or measurement.
    chosen : float
        Value after fitting the suggested parts.
    parts : Combination or None
        The suggested part(s) from the E-series (for C: what to add or what to build).
    predicted_hz : float
        Predicted frequency after the change (f0 of the filter, or timer frequency), Hz.
    predicted_u_hz : float or None
        Its standard uncertainty (k = 1), Hz.
    before_hz : float
        The frequency before the change, Hz.
    """

    kind: str
    action: str
    part: str
    unit: str
    present: float
    needed: float
    needed_u: float | None
    chosen: float
    parts: Combination | None
    predicted_hz: float
    predicted_u_hz: float | None
    before_hz: float

    def interval(self, k: float = 2.0) -> tuple[float, float] | None:
        """Predicted frequency interval ``f ± k·u`` (Hz), None without an uncertainty."""
        if self.predicted_u_hz is None:
            return None
        return self.predicted_hz - k * self.predicted_u_hz, self.predicted_hz + k * self.predicted_u_hz

    def to_dict(self) -> dict:
        d = {k: v for k, v in self.__dict__.items() if k != "parts"}
        d["parts"] = None if self.parts is None else self.parts.to_dict()
        iv = self.interval(2.0)
        d["predicted_interval_k2_hz"] = None if iv is None else list(iv)
        return d


@dataclass(frozen=True)
class TrimAdvice:
    """Trim advice for one unit: the target, the suggested changes and the reasoning notes."""

    target_hz: float
    source: str
    changes: tuple[TrimChange, ...]
    notes: tuple[str, ...] = field(default_factory=tuple)
    cautions: tuple[str, ...] = field(default_factory=tuple)

    @property
    def capacitor(self) -> TrimChange | None:
        """The filter-capacitor change, if any."""
        return next((c for c in self.changes if c.kind == "capacitor"), None)

    def to_dict(self) -> dict:
        return {"target_hz": self.target_hz, "source": self.source,
                "changes": [c.to_dict() for c in self.changes], "notes": list(self.notes),
                "cautions": list(self.cautions)}

    def summary_lines(self) -> list[str]:
        """Readable sentences, one per change, then notes and cautions."""
        from benchfit.units import format_quantity as fq
        from benchfit.units import format_with_uncertainty as fu

        lines = []
        for c in self.changes:
            iv = c.interval(2.0)
            pred = fu(c.predicted_hz, c.predicted_u_hz, "Hz")
            rng = "" if iv is None else f", 95 % interval {iv[0]:.3f} Hz to {iv[1]:.3f} Hz (k = 2)"
            what = "filter resonance" if c.kind == "capacitor" else "timer frequency"
            lines.append(f"{c.action}: {what} {c.before_hz:.3f} Hz → {pred}{rng}")
            need = fu(c.needed, c.needed_u, c.unit) if c.needed_u else fq(c.needed, c.unit, 5)
            lines.append(f"  ({c.part} now {fq(c.present, c.unit, 5)}, exact value for "
                         f"{self.target_hz:g} Hz {need})")
        if not self.changes:
            lines.append(f"no change suggested for {self.target_hz:g} Hz")
        return lines + list(self.notes) + [f"caution: {c}" for c in self.cautions]


# --- filter capacitor ---------------------------------------------------------------------

def _param(fit, name: str) -> tuple[float | None, float | None, bool]:
    p = fit.parameters.get(name)
    if p is None:
        return None, None, False
    return p.value, p.stderr, bool(p.fixed)


def _correlation(fit, a: str, b: str) -> float:
    for key in (f"{a},{b}", f"{b},{a}"):
        v = fit.correlations.get(key)
        if v is not None and math.isfinite(float(v)):
            return float(v)
    return 0.0


def _parallel_only(target: float, series: str, max_parts: int) -> Combination:
    """Best single part or parallel group (capacitances add) for ``target`` farads."""
    found = combine(target, "C", series=series, max_parts=max_parts, top=400)
    ok = [c for c in found.combinations if c.topology in ("single", "add2", "add3")]
    return ok[0] if ok else found.best


#: above this |correlation| of L and C the fit has in effect determined only their product
#: (a tuned low-pass separates L from C only through the small L/Rload term)
SEPARATE_LC_MAX_CORRELATION = 0.999
#: tolerance assumed for the capacitor bank when its make-up is given and the fit did not
#: determine C (aluminium electrolytics are commonly ±20 %; common practice, no source)
BANK_TOLERANCE = 0.20


def capacitor_trim(fit, target_hz: float, *, series: str = "E12", max_parts: int = 2,
                   part_tolerance: float | None = None, bank: Sequence[float] | None = None,
                   bank_tolerance: float = BANK_TOLERANCE) -> tuple[TrimChange, list[str]]:
    """The capacitance change that moves the fitted resonance to ``target_hz``.

    Three cases, by what the fit determined:

    * L and C separately (both with a standard error, |ρ(L, C)| ≤ 0.999): the new resonance
      is propagated from L and C with their correlation;
    * C fixed in the fit (``--fix C=…``, e.g. the bank measured on a meter): f0 and its
      standard error, C taken as exact;
    * otherwise only the product LC is known: f0 and its standard error with C taken from
      ``bank`` (the sum of its nominal values, ±``bank_tolerance`` rectangular) or, without a
      bank, the fit's C, whose error the prediction then cannot include (a note says so).

    Parameters
    ----------
    fit : FitResult
        Result of an lc-lowpass or ring-down fit (derived resonant_frequency_hz; parameters
        L and C when the fit has them).
    target_hz : float
        Wanted resonance (Hz).
    series : str
        Series for the parts to add (E6 … E192).
    max_parts : int
        At most this many parts in the suggested group (1 to 3).
    part_tolerance : float, optional
        Tolerance of the added part(s) as a fraction, treated as rectangular (u = tol/√3).
        None: the conventional tolerance of ``series``; 0 for parts measured before fitting.
    bank : sequence of float, optional
        Nominal values (F) of the capacitors that make up the present bank; used when the fit
        did not determine C, and to say which one to remove or swap when C must decrease.
    bank_tolerance : float
        Tolerance of the bank's nominal sum as a fraction (rectangular).

    Returns
    -------
    (TrimChange, notes)
    """
    name = check_series(series)
    target = _pos(target_hz, "target")
    if fit.model not in ("lc-lowpass", "ringdown"):
        raise DesignError(f"{fit.file}: model {fit.model!r} has no filter resonance — "
                          "fit with fit_lowpass() or fit_ringdown()")
    cv, cu, cfixed = _param(fit, "C")
    lv, lu, lfixed = _param(fit, "L")
    if cv is not None and not cv > 0:
        cv = None
    if lv is not None and not lv > 0:
        lv = None
    # the loaded natural frequency √(a0/a2)/2π is what the data fix (issue 11 named it apart from
    # the L-C resonance 1/(2π√(LC)) of resonant_frequency_hz); older results have only the latter
    d = fit.derived.get("natural_frequency_hz") or fit.derived.get("resonant_frequency_hz")
    f0 = None if d is None else d.value
    f0u = None if d is None else d.stderr
    if f0 is None and lv is not None and cv is not None:
        f0 = 1.0 / (2 * math.pi * math.sqrt(lv * cv))
    if f0 is None or not f0 > 0:
        raise DesignError(f"{fit.file}: the fit has no resonant frequency — fit again with L and C")
    tol = SERIES_TOLERANCE[name] if part_tolerance is None else float(part_tolerance)
    if not math.isfinite(tol) or tol < 0 or tol >= 1:
        raise DesignError(f"part-tolerance: {part_tolerance!r} must be a fraction from 0 to below 1")
    if not math.isfinite(bank_tolerance) or not 0 <= bank_tolerance < 1:
        raise DesignError(f"bank-tolerance: {bank_tolerance!r} must be a fraction from 0 to below 1")
    notes: list[str] = []
    from benchfit.units import format_quantity as fq

    rho = _correlation(fit, "L", "C")
    # C has its own standard error and L is fixed or has one, and the two are not merely
    # their product (a ring-down with L fixed gives C from f0: then L is exact and u_C = 2·u_f0/f0·C)
    separate = (cv is not None and not cfixed and cu is not None and lv is not None
                and (lfixed or lu is not None) and abs(rho) <= SEPARATE_LC_MAX_CORRELATION)
    rl = rc = 0.0
    rc_known = True
    c_ref = cv
    if separate:
        assert cv is not None and cu is not None and lv is not None  # what "separate" requires
        route = "LC"
        rl, rc = (0.0 if lfixed or lu is None else lu / lv), cu / cv
        notes.append("L fixed and C from the resonance" if lfixed else
                     f"L and C determined separately by the fit (correlation {rho:+.4f}); their "
                     "uncertainties and correlation are propagated")
    elif cv is not None and cfixed:
        route = "f0"
        notes.append(f"C was fixed at {fq(cv, 'F', 5)} in the fit: the advice takes it as exact — an error "
                     "ε in it changes the capacitance to add by the same fraction ε")
    else:
        route = "f0"
        why = ("the fit has no C" if cv is None else "C has no standard error" if cu is None else
               f"L and C are {abs(rho):.5f} correlated" if lv is not None else "L is missing")
        if bank:
            c_ref = float(sum(_pos(v, "bank value") for v in bank))
            rc = bank_tolerance / math.sqrt(3.0)
            notes.append(f"the fit did not determine C by itself ({why}): the advice works from "
                         f"f0 = {f0:.6g} Hz and the bank's nominal {fq(c_ref, 'F', 5)} "
                         f"(±{bank_tolerance * 100:g} %, rectangular, included)")
        elif cv is not None:
            rc_known = False
            notes.append(f"the fit did not determine C by itself ({why}): the advice works from "
                         f"f0 = {f0:.6g} Hz and the fit's C = {fq(cv, 'F', 5)}; an error ε in that C "
                         "changes the capacitance to add by the same fraction and is NOT in the "
                         "prediction — give the bank's make-up (bank=) or fix C in the fit")
        else:
            raise DesignError(f"{fit.file}: the fit gives the resonance but no capacitance — give the "
                              "capacitor bank's values (bank=[22e-6, 10e-6, 1e-6]) or fix C or L in the fit")
    assert c_ref is not None  # every route above sets it or raises
    c_new = c_ref * (f0 / target) ** 2
    delta = c_new - c_ref
    # standard uncertainty of the needed total C: C_new = (a0/a2 ratio)/(ω²L) in the LC case,
    # C_ref·(f0/F)² otherwise
    if route == "LC":
        needed_u = c_new * rl
    else:
        rf = 0.0 if f0u is None else f0u / f0
        needed_u = c_new * math.hypot(2 * rf, rc)
    combo: Combination | None
    if delta >= 0:
        combo = _parallel_only(delta, name, max_parts)
        what = combo.describe().removesuffix(" in parallel")
        action = f"add {what} across the capacitor bank"
        kept, new = c_ref, combo.value
    else:
        combo, action, kept, new = _decrease(c_ref, c_new, -delta, name, bank, max_parts, notes)
    # after the change: the kept share of the present C (same relative error as C) plus new parts
    c_after = kept + new
    predicted = f0 * math.sqrt(c_ref / c_after)
    w = kept / c_after
    u_part = tol * new / math.sqrt(3.0)
    if route == "LC":
        # ln f_new = const − ½ ln L − ½ ln(kept + new)
        var_rel = 0.25 * (rl ** 2 + (w * rc) ** 2 + 2 * w * rho * rl * rc)
    else:
        # ln f_new = ln f0 + ½ ln C − ½ ln(kept + new): C enters with ½(1 − w)
        var_rel = (0.0 if f0u is None else (f0u / f0) ** 2) + (0.5 * (1 - w) * rc) ** 2
    var_rel += 0.25 * (u_part / c_after) ** 2
    pred_u = None if (route == "f0" and f0u is None) else predicted * math.sqrt(var_rel)
    if f0u is None and route == "f0":
        notes.append("the fit gave no uncertainty for f0, so the prediction has none")
    if tol > 0:
        notes.append(f"prediction includes ±{tol * 100:g} % tolerance of the added part(s) (rectangular)")
    if not rc_known:
        notes.append("the prediction's uncertainty leaves out the error of C (see above)")
    notes.append(f"computed with every other part unchanged (f0 ∝ 1/√C); the added part's ESR and "
                 f"leads are neglected — needed C {fq(c_new, 'F', 5)} for {target:g} Hz")
    change = TrimChange("capacitor", action, "C", "F", c_ref, c_new, needed_u, c_after, combo,
                        predicted, pred_u, f0)
    return change, notes


def _decrease(cv: float, c_new: float, need_less: float, series: str, bank: Sequence[float] | None,
              max_parts: int, notes: list[str]) -> tuple[Combination | None, str, float, float]:
    """Advice when the capacitance must go down: remove or swap a bank part, or rebuild.

    Returns the suggested new parts, the action in words, the part of the fitted C that stays
    (F) and the nominal value of the new parts (F).
    """
    from benchfit.units import format_quantity as fq

    if bank:
        vals = [_pos(v, "bank value") for v in bank]
        scale = cv / sum(vals)  # assume every bank part is off its nominal value by the same factor
        if abs(scale - 1.0) > 1e-9:
            notes.append(f"bank parts taken as {scale:.4f} × nominal (fitted C over the bank's nominal sum)")
        best: tuple[float, str, float, float, Combination | None] | None = None
        for v in vals:
            rest = cv - scale * v
            options: list[tuple[str, float, Combination | None]] = [
                (f"remove the {fq(v, 'F')} capacitor from the bank", 0.0, None)]
            if c_new > rest:
                combo = _parallel_only(c_new - rest, series, max_parts)
                what = combo.describe().removesuffix(" in parallel")
                options.append((f"swap the {fq(v, 'F')} capacitor for {what}", combo.value, combo))
            for text, new, option in options:
                after = rest + new
                err = abs(after / c_new - 1.0)
                if after > 0 and (best is None or err < best[0]):
                    best = (err, text, rest, new, option)
        if best is not None:
            return best[4], best[1], best[2], best[3]
    rebuilt = _parallel_only(c_new, series, max_parts)
    notes.append(f"the bank must lose {fq(need_less, 'F', 4)}; without the bank's make-up (bank=) the "
                 "suggestion is to rebuild it from new parts taken at their nominal values")
    return rebuilt, f"reduce the capacitance: rebuild the bank as {rebuilt.describe()}", 0.0, rebuilt.value


# --- timer -------------------------------------------------------------------------------

def timer_trim(timer_hz: float, target_hz: float, *, ra_ohm: float, rb_ohm: float, c1_farad: float,
               timer_u_hz: float | None = None, supply_v: float | None = None,
               control_voltage_v: float | None = None, diode: bool = False,
               series: str = "E24", resistor_tolerance: float = 0.01) -> tuple[list[TrimChange], list[str]]:
    """New RB (and, with a supply voltage, new control voltage) for the timer to hit ``target_hz``.

    Parameters
    ----------
    timer_hz : float
        Measured timer frequency (Hz).
    target_hz : float
        Wanted frequency (Hz).
    ra_ohm, rb_ohm, c1_farad : float
        Nominal timer parts (Ω, Ω, F).
    timer_u_hz : float, optional
        Standard uncertainty of the measured frequency (Hz).
    supply_v, control_voltage_v : float, optional
        Supply (V) and present control-pin voltage (V, None for the internal ⅔·Vcc).
    diode : bool
        Diode variant.
    series : str
        Series for the new resistor.
    resistor_tolerance : float
        Tolerance of the new resistor(s) as a fraction, rectangular (default 1 %, metal film).
    """
    name = check_series(series)
    f_meas = _pos(timer_hz, "timer-frequency")
    target = _pos(target_hz, "target")
    ra, rb, c = _pos(ra_ohm, "ra"), _pos(rb_ohm, "rb"), _pos(c1_farad, "c1")
    nominal = astable_timing(ra, rb, c, supply_v=supply_v, control_voltage_v=control_voltage_v, diode=diode)
    scale = nominal.frequency_hz / f_meas  # actual period / predicted period
    rel_u = None if timer_u_hz is None else _pos(timer_u_hz, "timer-frequency-u") / f_meas
    k = high_time_factor(supply_v, control_voltage_v)
    t_need = 1.0 / (target * scale)  # period the nominal equations must give
    notes = [f"the timer runs at {f_meas:.4f} Hz against {nominal.frequency_hz:.4f} Hz predicted from its "
             f"nominal parts: the advice scales the whole period by {scale:.5f} (e.g. C1 off its value)"]
    changes: list[TrimChange] = []
    rb_need = (t_need - k * ra * c) / (LN2 * c) if diode else (t_need / c - k * ra) / (k + LN2)
    if rb_need > 0:
        combo = combine(rb_need, "R", series=name, max_parts=2, top=1).best
        rb_new = combo.value
        f_after = astable_timing(ra, rb_new, c, supply_v=supply_v, control_voltage_v=control_voltage_v,
                                 diode=diode).frequency_hz / scale
        if not 0 <= resistor_tolerance < 1:
            raise DesignError(f"tolerance-r: {resistor_tolerance!r} must be a fraction from 0 to below 1")
        rb_tol = resistor_tolerance / math.sqrt(3.0)
        # sensitivity of the period to RB: ∂T/∂RB·RB/T
        t_after = 1.0 / (f_after * scale)
        sens = ((LN2 if diode else k + LN2) * c * rb_new) / t_after
        u = f_after * math.sqrt((rel_u or 0.0) ** 2 + (sens * rb_tol) ** 2)
        from benchfit.units import format_quantity as fq

        # RB_need is linear in t_need ∝ f_meas: u(RB_need) = (∂RB/∂t)·t_need·u(f)/f
        rb_need_u = None if rel_u is None else t_need / (c * (LN2 if diode else k + LN2)) * rel_u
        changes.append(TrimChange("timer-rb", f"replace RB ({fq(rb, 'Ω')}) with {combo.describe()}", "RB",
                                  "Ω", rb, rb_need, rb_need_u, rb_new, combo, f_after, u, f_meas))
        notes.append(f"the new RB's ±{resistor_tolerance * 100:g} % tolerance (rectangular) is in the timer "
                     "prediction's uncertainty")
    else:
        notes.append("no RB value reaches the target with this RA and C1 — change C1 or RA")
    if supply_v is not None:
        vcc = _pos(supply_v, "supply")
        r_high = ra if diode else ra + rb
        k_need = (t_need / c - LN2 * rb) / r_high
        try:
            vc = control_voltage_for_factor(k_need, vcc)
        except DesignError:
            vc = None
        if vc is not None and 0 < vc < vcc:
            f_after = astable_timing(ra, rb, c, supply_v=vcc, control_voltage_v=vc,
                                     diode=diode).frequency_hz / scale
            vc_u = None if rel_u is None else f_after * rel_u
            now = control_voltage_v if control_voltage_v is not None else 2.0 * vcc / 3.0
            changes.append(TrimChange("timer-control", f"set the control pin to {vc:.3f} V", "Vc", "V", now,
                                      vc, None, vc, None, f_after, vc_u, f_meas))
            notes.append("the control pin is fed internally through about 3.3 kΩ: set it from a stiff divider")
        else:
            notes.append("no control-pin voltage below the supply reaches the target — change RB")
    return changes, notes


# --- front doors --------------------------------------------------------------------------

def suggest_trim(fit_result, target_hz: float, *, series: str = "E12", max_parts: int = 2,
                 part_tolerance: float | None = None, bank: Sequence[float] | None = None,
                 bank_tolerance: float = BANK_TOLERANCE,
                 timer_frequency_hz: float | None = None, timer_frequency_u_hz: float | None = None,
                 ra_ohm: float | None = None, rb_ohm: float | None = None, c1_farad: float | None = None,
                 supply_v: float | None = None, control_voltage_v: float | None = None,
                 diode: bool = False, resistor_series: str = "E24",
                 resistor_tolerance: float = 0.01) -> TrimAdvice:
    """Trim advice for a unit: filter capacitance from its fit, and the timer when its data are given.

    Parameters
    ----------
    fit_result : FitResult or None
        The unit's lc-lowpass or ring-down fit (``benchfit.fit_lowpass`` or ``FitResult.from_dict`` of
        ``benchfit fit --json``). None for timer advice only.
    target_hz : float
        Wanted frequency (Hz): the filter's resonance and the timer's frequency.
    series, max_parts, part_tolerance, bank, bank_tolerance
        See :func:`capacitor_trim`.
    timer_frequency_hz, timer_frequency_u_hz, ra_ohm, rb_ohm, c1_farad, supply_v,
    control_voltage_v, diode, resistor_series, resistor_tolerance
        See :func:`timer_trim`; timer advice is given when ``timer_frequency_hz`` is set.

    Examples
    --------
    >>> advice = suggest_trim(fit, 50.0)                       # doctest: +SKIP
    >>> print("\\n".join(advice.summary_lines()))               # doctest: +SKIP
    """
    target = _pos(target_hz, "target")
    changes: list[TrimChange] = []
    notes: list[str] = []
    source = "" if fit_result is None else fit_result.file
    if fit_result is not None:
        change, n = capacitor_trim(fit_result, target, series=series, max_parts=max_parts,
                                   part_tolerance=part_tolerance, bank=bank,
                                   bank_tolerance=bank_tolerance)
        changes.append(change)
        notes += n
    if timer_frequency_hz is not None:
        missing = [n for n, v in (("ra", ra_ohm), ("rb", rb_ohm), ("c1", c1_farad)) if v is None]
        if missing:
            raise DesignError(f"timer: {', '.join(missing)} missing — give the timer's nominal RA, RB and C1 "
                              "with the measured timer frequency")
        assert ra_ohm is not None and rb_ohm is not None and c1_farad is not None  # none is missing
        tc, tn = timer_trim(timer_frequency_hz, target, ra_ohm=ra_ohm, rb_ohm=rb_ohm, c1_farad=c1_farad,
                            timer_u_hz=timer_frequency_u_hz, supply_v=supply_v,
                            control_voltage_v=control_voltage_v, diode=diode, series=resistor_series,
                            resistor_tolerance=resistor_tolerance)
        changes += tc
        notes += tn
    elif fit_result is None:
        raise DesignError("trim: nothing to work from — give a fit result, the timer's frequency, or both")
    cautions = ("switch the unit off and let the capacitor bank discharge before changing parts; the chokes "
                "give a voltage spike if their current is broken while running",)
    return TrimAdvice(target, source, tuple(changes), tuple(notes), cautions)


def suggest_capacitor_trim(fit_result, target_hz: float) -> TrimAdvice | None:
    """Filter-capacitor advice for a calibration report, or None when none applies.

    None when the fit is neither an lc-lowpass nor a ring-down fit, when it lacks what the
    advice needs (f0, and C or a fixed L), or when f0 is already within two standard
    uncertainties of the target (no significant change to make).
    """
    if fit_result is None or getattr(fit_result, "model", None) not in ("lc-lowpass", "ringdown"):
        return None
    d = fit_result.derived.get("natural_frequency_hz") or fit_result.derived.get("resonant_frequency_hz")
    if d is not None and d.value is not None and d.stderr is not None:
        if abs(d.value - float(target_hz)) <= 2.0 * d.stderr:
            return None
    try:
        return suggest_trim(fit_result, target_hz)
    except DesignError:
        return None

