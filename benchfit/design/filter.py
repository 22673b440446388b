"""L-C low-pass that turns the timer's rectangular wave into a sine: parts and expected output.

The circuit and its response are those of the fit's ``lc-lowpass`` model
(:mod:`benchfit.model.filter`: drive → Rs → L → out; C in series with Resr to ground; Rload
across the output); this module never writes a second copy of the model. The filter is
usually tuned: its resonance f0 = ω0/2π, from the characteristic polynomial
(ω0² = a0/a2, i.e. 1/(2π√(LC)) for an unloaded filter without ESR) is put at the drive
frequency F so the fundamental passes with the filter's Q while the harmonics fall off at
about 40 dB per decade.

Expected output for a rectangular drive between 0 and A with duty D (REFERENCES §5/§6): the
drive's harmonic k has peak amplitude a_k = (2A/(kπ))·|sin(kπD)| and the output's is
a_k·|H(j·2π·k·F)|; the output's DC is A·D·H(0). THD is THD_F, the RMS of harmonics
2…K relative to the fundamental, with K = 40 by default (the h_max of IEC 61000-4-7,
REFERENCES §5).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from benchfit.design.parts import (BENCH_RANGES, SERIES_TOLERANCE, check_bench_range, check_filter_parts, check_series,
                                   combine, nearest_values)
from benchfit.errors import DesignError

__all__ = ["DriveResponse", "FilterOption", "FilterDesign", "rectangular_response",
           "resonant_frequency", "part_for_resonance", "design_filter"]


def _pos(value: float | None, name: str, *, zero_ok: bool = False) -> float:
    v = float(value)  # type: ignore[arg-type]
    if not math.isfinite(v) or v < 0 or (v == 0 and not zero_ok):
        need = "zero or positive" if zero_ok else "positive"
        raise DesignError(f"{name}: {value!r} must be a {need} finite number — give a value "
                          f"{'of at least 0' if zero_ok else 'above zero'}")
    return v


def _parts(L: float, C: float, rs: float, esr: float, load: float | None):
    from benchfit.model.filter import LowpassParts

    return LowpassParts(L=L, C=C, Rs=rs, Resr=esr, Rload=math.inf if load is None else load)


def resonant_frequency(L: float, C: float, *, rs_ohm: float = 0.0, esr_ohm: float = 0.0,
                       load_ohm: float | None = None) -> float:
    """Resonant frequency f0 (Hz) of the lc-lowpass model, √(a0/a2)/2π (see :mod:`benchfit.model.filter`)."""
    from benchfit.model.filter import coefficients

    _, a = coefficients(_parts(_pos(L, "inductance"), _pos(C, "capacitance"), rs_ohm, esr_ohm, load_ohm))
    return math.sqrt(float(a[2]) / float(a[0])) / (2 * math.pi)


def part_for_resonance(frequency_hz: float, *, inductance: float | None = None,
                       capacitance: float | None = None, rs_ohm: float = 0.0, esr_ohm: float = 0.0,
                       load_ohm: float | None = None) -> float:
    """The capacitance (given L) or inductance (given C) that puts f0 at ``frequency_hz``.

    From ω0² = a0/a2 = (1 + Rs/Rload)/(L·C·(1 + Resr/Rload)); without a load this is the
    familiar C = 1/(ω²L).
    """
    w = 2 * math.pi * check_bench_range("frequency", _pos(frequency_hz, "frequency"), "frequency")
    g = 0.0 if load_ohm is None else 1.0 / load_ohm
    ratio = (1.0 + rs_ohm * g) / (1.0 + esr_ohm * g)
    if (inductance is None) == (capacitance is None):
        raise DesignError("filter: give exactly one of inductance= and capacitance=")
    known = inductance if inductance is not None else capacitance
    return ratio / (w * w * float(known))  # type: ignore[arg-type]


@dataclass(frozen=True)
class DriveResponse:
    """Predicted output for a rectangular drive (volts peak/rms, THD as a fraction).

    Attributes
    ----------
    fundamental_peak_v : float
        Peak amplitude of the output's fundamental (V).
    fundamental_rms_v : float
        Its RMS value, peak/√2 (V).
    ac_rms_v : float
        RMS of the output without DC, harmonics 1…K (V).
    dc_v : float
        Output DC level (V).
    peak_v : float
        Upper bound of the output's instantaneous peak, DC + Σ|b_k| (V), for part ratings.
    thd : float
        THD_F over harmonics 2…K (fraction; 0.05 = 5 %).
    n_harmonics : int
        K, the highest harmonic summed.
    gain_at_fundamental : float
        |H| at the drive frequency.
    """

    fundamental_peak_v: float
    fundamental_rms_v: float
    ac_rms_v: float
    dc_v: float
    peak_v: float
    thd: float
    n_harmonics: int
    gain_at_fundamental: float

    def to_dict(self) -> dict:
        return dict(self.__dict__)


def rectangular_response(parts, drive_hz: float, *, duty: float = 0.5, amplitude_v: float = 12.0,
                         n_harmonics: int = 40) -> DriveResponse:
    """Output of the lc-lowpass model for a 0…A rectangular drive of duty D (see module text).

    Parameters
    ----------
    parts : benchfit.model.filter.LowpassParts
        The filter.
    drive_hz : float
        Drive frequency (Hz).
    duty : float
        High time / period of the drive, 0 < D < 1.
    amplitude_v : float
        Drive swing A (V): the drive is 0 V low and A high.
    n_harmonics : int
        Highest harmonic K used (≥ 2).
    """
    from benchfit.model.filter import rectangular_phasors, transfer

    f = _pos(drive_hz, "frequency")
    a = _pos(amplitude_v, "amplitude")
    if not 0 < duty < 1:
        raise DesignError(f"duty: {duty!r} must be between 0 and 1 — write e.g. 0.5 for 50 %")
    if int(n_harmonics) < 2:
        raise DesignError(f"harmonics: {n_harmonics!r} must be at least 2 — use e.g. 40")
    k = np.arange(1, int(n_harmonics) + 1)
    h = transfer(k * f, parts)
    if not np.all(np.isfinite(h)):
        raise DesignError("filter: the response is unbounded at a drive harmonic (no loss in the circuit) — "
                          "give rs_ohm=, esr_ohm= or load_ohm=")
    out = a * np.abs(rectangular_phasors(k, duty) * h)
    h0 = float(np.real(transfer(0.0, parts)))
    dc = a * duty * h0
    fund = float(out[0])
    thd = float(math.sqrt(np.sum(out[1:] ** 2)) / fund) if fund > 0 else math.inf
    return DriveResponse(fund, fund / math.sqrt(2), float(math.sqrt(np.sum(out ** 2) / 2)), dc,
                         float(abs(dc) + np.sum(out)), thd, int(n_harmonics), float(abs(h[0])))


@dataclass(frozen=True)
class FilterOption:
    """One way to build the filter: parts, resulting resonance and predicted output."""

    label: str
    inductance_h: float
    capacitance_f: float
    description: str
    resonant_frequency_hz: float
    q_factor: float
    response: DriveResponse
    stress: tuple = ()

    @property
    def flagged(self) -> tuple:
        """Stresses that exceed their rating (:mod:`benchfit.model.stress`): not recommended."""
        return tuple(s for s in self.stress if s.flagged)

    def to_dict(self) -> dict:
        d = {k: v for k, v in self.__dict__.items() if k not in ("response", "stress")}
        d["response"] = self.response.to_dict()
        d["stress"] = [s.to_dict() for s in self.stress]
        d["flagged"] = [s.text for s in self.flagged]
        return d


@dataclass(frozen=True)
class FilterDesign:
    """Result of :func:`design_filter`."""

    frequency_hz: float
    solved_for: str
    given_value: float
    nominal_value: float
    rs_ohm: float
    esr_ohm: float
    load_ohm: float | None
    duty: float
    amplitude_v: float
    series: str
    options: tuple[FilterOption, ...]
    notes: tuple[str, ...] = field(default_factory=tuple)
    cautions: tuple[str, ...] = field(default_factory=tuple)

    def to_dict(self) -> dict:
        return {"frequency_hz": self.frequency_hz, "solved_for": self.solved_for,
                "given_value": self.given_value, "nominal_value": self.nominal_value,
                "rs_ohm": self.rs_ohm, "esr_ohm": self.esr_ohm, "load_ohm": self.load_ohm,
                "duty": self.duty, "amplitude_v": self.amplitude_v, "series": self.series,
                "options": [o.to_dict() for o in self.options],
                "recommended": None if self.recommended is None else self.recommended.label,
                "notes": list(self.notes),
                "cautions": list(self.cautions)}

    @property
    def recommended(self) -> FilterOption | None:
        """The first option whose stresses are all within their ratings (None: every option is flagged)."""
        return next((o for o in self.options if not o.flagged), None)

    def summary_lines(self) -> list[str]:
        from benchfit.units import format_quantity as fq

        unit = "F" if self.solved_for == "C" else "H"
        lines = [f"{self.solved_for} for f0 = {self.frequency_hz:g} Hz: {fq(self.nominal_value, unit, 5)}"]
        for o in self.options:
            r = o.response
            lines.append(f"{o.label}: {o.description} → f0 {o.resonant_frequency_hz:.3f} Hz, Q {o.q_factor:.3g}, "
                         f"output {r.fundamental_rms_v:.3g} V rms fundamental, THD {r.thd * 100:.2f} %")
            lines += [f"  flagged, not recommended: {st.text}" for st in o.flagged]
        if self.recommended is None:
            lines.append("every option exceeds a rating: none is recommended — add damping (series resistance) "
                         "or drive the filter through a divider or buffer")
        return lines + list(self.notes) + [f"caution: {c}" for c in self.cautions]


def _stress(parts, f: float, duty: float, amplitude_v: float) -> tuple:
    """Stress checks of the filter driven by a 0…A rectangular wave straight from the timer
    (:func:`benchfit.model.unit.predict`, :func:`benchfit.model.stress.stress_checks`)."""
    from benchfit.model.stress import stress_checks
    from benchfit.model.unit import Drive, UnitModel, predict

    return stress_checks(predict(UnitModel(Drive(f, float(duty), float(amplitude_v)), parts)))


def design_filter(frequency_hz: float, *, inductance: float | None = None,
                  capacitance: float | None = None, load_ohm: float | None = None,
                  rs_ohm: float = 0.0, esr_ohm: float = 0.0, duty: float = 0.5,
                  series: str = "E12", amplitude_v: float = 12.0,
                  n_harmonics: int = 40) -> FilterDesign:
    """Parts of a tuned L-C low-pass for a rectangular drive at ``frequency_hz``.

    Parameters
    ----------
    frequency_hz : float
        Drive frequency F (Hz); the filter's resonance is put there.
    inductance, capacitance : float
        Give exactly one: the known part (H or F); the other is solved for.
    load_ohm : float, optional
        Load across the output (Ω); None for an open output.
    rs_ohm : float
        Everything in series with L: timer output resistance, winding resistance (Ω).
    esr_ohm : float
        Capacitor ESR (Ω).
    duty : float
        Drive duty (high time / period).
    series : str
        Series for the solved part (E6 … E192).
    amplitude_v : float
        Drive swing (V), 0 V to A.
    n_harmonics : int
        Highest harmonic K in the output prediction.

    Returns
    -------
    FilterDesign
        Options: the exact nominal part, the nearest series values below and above, and the
        best two-part combination, each with f0, Q and the predicted output.
    """
    from benchfit.model.filter import second_order

    f = check_bench_range("frequency", _pos(frequency_hz, "frequency"), "frequency")
    name = check_series(series)
    if (inductance is None) == (capacitance is None):
        raise DesignError("filter: give exactly one of inductance= and capacitance= — the other is solved for")
    rs = _pos(rs_ohm, "rs", zero_ok=True)
    esr = _pos(esr_ohm, "esr", zero_ok=True)
    load = None if load_ohm is None else _pos(load_ohm, "load")
    _pos(amplitude_v, "amplitude")
    if not 0 < float(duty) < 1:
        raise DesignError(f"duty: {duty!r} must be between 0 and 1 — write e.g. 0.5 for 50 %")
    if rs == 0 and esr == 0 and load is None:
        raise DesignError("filter: with no rs_ohm, esr_ohm or load_ohm the circuit has no loss and its response "
                          "at f0 is unbounded — give at least rs_ohm= (timer output and winding resistance)")
    solved = "C" if inductance is not None else "L"
    given = _pos(inductance if inductance is not None else capacitance, "inductance" if solved == "C"
                 else "capacitance")
    check_filter_parts(inductance=inductance, capacitance=capacitance, rs_ohm=rs, esr_ohm=esr, load_ohm=load)
    nominal = part_for_resonance(f, inductance=inductance, capacitance=capacitance, rs_ohm=rs,
                                 esr_ohm=esr, load_ohm=load)
    unit = "F" if solved == "C" else "H"
    low, high, _ = BENCH_RANGES[solved]
    if not low <= nominal <= high:
        known = ("inductance", given, "H") if solved == "C" else ("capacitance", given, "F")
        raise DesignError(f"frequency: {f:g} Hz with {known[0]} {known[1]:.4g} {known[2]} needs {solved} = "
                          f"{nominal:.4g} {unit}, outside any bench part ({low:g}…{high:g} {unit}) — check the "
                          f"frequency and the {known[0]}")
    below, above = nearest_values(nominal, name)
    combo = combine(nominal, solved, series=name, max_parts=2, top=1).best

    from benchfit.units import format_quantity as fq

    candidates = [("nominal", nominal, f"{fq(nominal, unit, 5)} (exact)"),
                  (f"{name} below", below, fq(below, unit, 4)),
                  (f"{name} above", above, fq(above, unit, 4))]
    if combo.n_parts > 1:
        candidates.append((f"{name} pair", combo.value, combo.describe()))
    options = []
    for label, value, desc in candidates:
        L, C = (given, value) if solved == "C" else (value, given)
        p = _parts(L, C, rs, esr, load)
        so = second_order(p)
        resp = rectangular_response(p, f, duty=duty, amplitude_v=amplitude_v, n_harmonics=n_harmonics)
        options.append(FilterOption(label, L, C, desc, so["natural_frequency_hz"], so["q_factor"], resp,
                                    _stress(p, f, duty, amplitude_v)))
    tol = SERIES_TOLERANCE[name]
    notes = [f"f0 moves by about ∓{tol / 2 * 100:g} % for a ±{tol * 100:g} % {solved} ({name}); "
             "a tuned filter's output changes fast near f0, so measure and trim (benchfit design trim)",
             f"THD is THD_F over harmonics 2 to {n_harmonics} of a 0 V…{amplitude_v:g} V drive with "
             f"{duty * 100:g} % duty; real timers add rise time and output resistance"]
    peak = max(o.response.peak_v for o in options)
    cautions = [f"the output reaches about {peak:.3g} V peak (DC plus resonant gain): rate the capacitors "
                "for at least 1.5 × that and mind electrolytic polarity (common practice, no source)",
                "a choke's stored energy gives a voltage spike when its current is interrupted — switch the "
                "supply, not the inductor path, and keep a load across the output",
                "before connecting the output to a sound-card input, block the DC with a capacitor and bring "
                "the level below the input's full scale with a divider; follow local codes and qualified "
                "practice for anything mains-powered"]
    return FilterDesign(f, solved, given, nominal, rs, esr, load, float(duty), float(amplitude_v), name,
                        tuple(options), tuple(notes), tuple(cautions))
