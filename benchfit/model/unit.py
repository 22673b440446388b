"""The whole unit: rectangular drive + lc-lowpass filter → every quantity a spec can limit.

One forward model for design and trim (the filter's physics is :mod:`benchfit.model.filter`;
nothing here repeats it).

Drive. The timer output is a rectangular wave of frequency f, high for a fraction D of each
period (duty = high time / period, REFERENCES §4), between the levels ``v_low`` and
``v_high`` (volts at the point where the filter's ``Rs`` begins). Its Fourier series
(REFERENCES §5) is x(t) = v_low + S·[D + Σ_k Re(P_k e^{jkωt})] with S = v_high − v_low and
P_k = (2/(kπ))·sin(kπD)·e^{−jkπD} (:func:`benchfit.model.filter.rectangular_phasors`).

Source resistance. A real timer output has a different resistance high and low (TI SLFS022
output-voltage tables, REFERENCES §11). With r_high = r_low the circuit is linear and
time-invariant (the output formulas below). With r_high ≠ r_low it is switched: the output then
comes from the exact periodic steady state of :mod:`benchfit.model.switched` (each phase with its
own Thévenin level and resistance, divider included), stated in the prediction's notes; the fast
path :func:`predict_quantities` does the same. Only ``effective_filter`` keeps the time-averaged
resistance D·r_high + (1 − D)·r_low. A one-channel fit already holds the source resistance in its
``Rs`` (DESIGN.md), so then r_high = r_low = 0.

Output (REFERENCES §6, "square-wave drive"): harmonic k of the output is
Y_k = S·P_k·H(jkω) and its DC is (v_low + S·D)·H(0).

Stresses (both cases, one method). The circuit is linear within each phase of the drive, so its
state [i_L, v_C] is x̄ + e^{A·s}·(x_start − x̄) there, from the periodic steady state
(:func:`benchfit.model.switched.switched_samples`); every stress is linear in that state and the
phase's level, and is sampled exactly on each phase's grid (both ends included, so a quantity that
jumps at an edge is read on both sides of the jump, with no Gibbs overshoot of a truncated harmonic
sum). The inductor current is the choke's terminal current, L and its core loss Rp as one part (the
current in Rs; L's own current differs from it by v_L/Rp); the timer's current follows from it by
KCL at the divider's tap; the capacitor voltage is the capacitor's own, without its ESR, and its
current (the ripple current: it carries no DC in the steady state) i − v_out/Rload. RMS values
and the I²R loss are integrated over the phases (Simpson's rule on 2049 points a phase: below 1e-9
relative for these sums of exponentials); the loss is the dissipation in every resistance before the
choke: Rs, the timer's output stage (i_timer²·r_high while high, i_timer²·r_low while low) and the
divider's two resistors. Checked against ngspice in tests/model/test_unit_stresses_ngspice.py.

Capture chain (how ``benchfit measure`` would read the output). A sound card's line-in is
AC-coupled: a first-order high-pass of time constant τ multiplies harmonic k by
jkωτ/(1 + jkωτ) and removes the DC; a DC-coupled scope passes everything. ``measure``
reads vrms as the RMS of all samples, ``amplitude`` as the fundamental's peak, vpp as
max − min and THD as THD_F over harmonics 2…H with H = 10 by default
(:mod:`benchfit.measurement.distortion`). The prediction gives the same quantities through
the chosen chain; noise (which adds to a measured vrms and vpp) is not modelled.

The output's vpp (through the capture chain) comes from the harmonic sum evaluated on a fine
time grid; above ~400 harmonics the filtered output changes by less than 1e-6 of its amplitude
(it falls as 1/k² or faster).
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from benchfit.model.filter import (LowpassParts, feedthrough, rectangular_phasors, second_order, state_space,
                                   transfer)

__all__ = ["Drive", "CaptureChain", "UnitModel", "UnitPrediction", "predict", "predict_quantities",
           "MEASURE_HARMONICS", "SPEC_QUANTITIES"]

#: the THD harmonic count of ``benchfit measure`` (benchfit.measurement.distortion: H = 10)
MEASURE_HARMONICS = 10
#: harmonics summed for levels and waveforms
_WAVE_HARMONICS = 400
#: points per period of the evaluated waveform
_WAVE_POINTS = 4096

#: spec quantities (benchfit.report.spec) this model predicts
SPEC_QUANTITIES = ("frequency_hz", "amplitude", "vdc", "vrms", "vpp", "thd_pct",
                   "L", "C", "Rs", "Resr", "Rload", "resonant_frequency_hz", "q_factor",
                   "damped_frequency_hz", "decay_rate_per_s")


@dataclass(frozen=True)
class Drive:
    """The rectangular drive (timer output), as seen by the filter.

    Attributes
    ----------
    frequency_hz : float
        Drive frequency (Hz).
    duty : float
        High time / period, 0 < D < 1.
    v_high, v_low : float
        Output levels high and low (V).
    r_high, r_low : float
        Source resistance while high and while low (Ω), in addition to the filter's ``Rs``.
    divider : (float, float) or None
        Optional divider between the timer and the filter, (R_top, R_bottom) in Ω. When given,
        ``v_high``/``v_low`` are the *timer's* levels and the filter sees the Thévenin
        equivalent (levels × R_bottom/(R_top + R_bottom), source R_top ∥ R_bottom in series).
    """

    frequency_hz: float
    duty: float
    v_high: float
    v_low: float = 0.0
    r_high: float = 0.0
    r_low: float = 0.0
    divider: tuple[float, float] | None = None

    @property
    def swing_v(self) -> float:
        return self.v_high - self.v_low

    @property
    def r_average(self) -> float:
        """Time-averaged source resistance D·r_high + (1 − D)·r_low (Ω) — the linear model's."""
        return self.duty * self.r_high + (1.0 - self.duty) * self.r_low

    def thevenin(self) -> tuple[float, float, float]:
        """(level low, level high, source resistance) seen by the filter (V, V, Ω)."""
        r = self.r_average
        if self.divider is None:
            return self.v_low, self.v_high, r
        top, bottom = self.divider
        top = top + r
        k = bottom / (top + bottom)
        return self.v_low * k, self.v_high * k, top * bottom / (top + bottom)

    def to_dict(self) -> dict[str, Any]:
        return {"frequency_hz": self.frequency_hz, "duty": self.duty, "v_high": self.v_high,
                "v_low": self.v_low, "r_high": self.r_high, "r_low": self.r_low,
                "divider": None if self.divider is None else list(self.divider)}


@dataclass(frozen=True)
class CaptureChain:
    """How the output is captured: AC coupling (time constant) and THD harmonic count.

    Attributes
    ----------
    ac_coupled : bool
        True for a line-in (DC removed), False for a DC-coupled scope.
    coupling_tau_s : float or None
        High-pass time constant (s) of an AC-coupled input; None for an ideal DC block.
    n_harmonics : int
        H of the THD sum (``benchfit measure --harmonics``, default 10).
    """

    ac_coupled: bool = False
    coupling_tau_s: float | None = None
    n_harmonics: int = MEASURE_HARMONICS

    def response(self, frequency_hz: np.ndarray) -> np.ndarray:
        """Complex gain of the input at the given frequencies (1 when DC-coupled)."""
        f = np.asarray(frequency_hz, dtype=float)
        if not self.ac_coupled or self.coupling_tau_s is None:
            return np.ones_like(f, dtype=complex)
        st = 2j * math.pi * f * self.coupling_tau_s
        return st / (1.0 + st)

    def to_dict(self) -> dict[str, Any]:
        return {"ac_coupled": self.ac_coupled, "coupling_tau_s": self.coupling_tau_s,
                "n_harmonics": self.n_harmonics}


@dataclass(frozen=True)
class UnitModel:
    """A unit: its drive and its filter (the filter's ``Rs`` excludes the drive's own resistance)."""

    drive: Drive
    filter: LowpassParts

    def effective_filter(self) -> LowpassParts:
        """The filter with the drive's (Thévenin) source resistance added to Rs."""
        r = self.drive.thevenin()[2]
        return dataclasses.replace(self.filter, Rs=self.filter.Rs + r) if r else self.filter

    def with_filter(self, **changes: float) -> "UnitModel":
        return UnitModel(self.drive, dataclasses.replace(self.filter, **changes))

    def with_drive(self, **changes: Any) -> "UnitModel":
        return UnitModel(dataclasses.replace(self.drive, **changes), self.filter)


@dataclass(frozen=True)
class UnitPrediction:
    """Steady-state output of a unit and the electrical stresses (SI units; THD as a fraction).

    Output quantities are as ``benchfit measure`` would read them through ``chain``; the
    stresses are the circuit's own (no capture chain).
    """

    frequency_hz: float
    amplitude: float
    vdc: float
    vrms: float
    vpp: float
    thd: float
    n_harmonics: int
    output_max_v: float
    output_min_v: float
    inductor_peak_a: float
    inductor_rms_a: float
    series_loss_w: float
    capacitor_max_v: float
    capacitor_min_v: float
    capacitor_rms_a: float
    source_peak_a: float
    source_rms_a: float
    chain: CaptureChain = field(default_factory=CaptureChain)
    notes: tuple[str, ...] = ()
    divider_known: bool = False

    @property
    def thd_pct(self) -> float:
        return 100.0 * self.thd

    def to_dict(self) -> dict[str, Any]:
        d = {k: v for k, v in self.__dict__.items() if k not in ("chain", "notes")}
        d["thd_pct"] = self.thd_pct
        d["chain"] = self.chain.to_dict()
        d["notes"] = list(self.notes)
        return d


def _phase_circuits(unit: UnitModel):
    """The two phases of the drive (high, low), each as the filter sees it: its Thévenin level u and the
    circuit with that phase's source resistance in Rs, plus (timer resistance, divider top with it, k)."""
    d = unit.drive
    out: list[tuple[float, LowpassParts, float, float | None, float]] = []
    for level, r in ((d.v_high, d.r_high), (d.v_low, d.r_low)):
        if d.divider is None:
            out.append((level, dataclasses.replace(unit.filter, Rs=unit.filter.Rs + r), r, None, 1.0))
            continue
        top, bottom = d.divider
        top = top + r
        kk = bottom / (top + bottom)
        out.append((level * kk, dataclasses.replace(unit.filter, Rs=unit.filter.Rs + kk * top), r, top, kk))
    return out


def _switched(unit: UnitModel, orders: np.ndarray):
    """Mean and phasors of the output in the exact steady state of a switched source (r_high ≠ r_low)."""
    from benchfit.model.switched import switched_rows

    (u_h, high, *_), (u_l, low, *_) = _phase_circuits(unit)
    return switched_rows(orders, unit.drive.frequency_hz, unit.drive.duty, high, low, [None], u_h, u_l)[0]


#: samples per phase of the exact waveforms (odd, for Simpson's rule)
_PHASE_POINTS = 2049


def _stresses(unit: UnitModel) -> dict[str, float]:
    """Extremes and RMS of the output, the choke's current, the capacitor and the timer's current,
    and the I²R loss, from the exact piecewise solution (module text, "Stresses")."""
    from benchfit.model.switched import series_current_row, switched_samples

    d = unit.drive
    phases = _phase_circuits(unit)
    rows: list = [None, ((np.array([0.0, 1.0]), 0.0),) * 2]
    i_rows, t_rows, tap_rows, c_rows = [], [], [], []
    for _u, p, _r, top, kk in phases:
        c, dd = series_current_row(p)
        i_rows.append((c, dd))
        # the capacitor's current C·dv_C/dt = i − g·v_out (benchfit.model.filter.state_space)
        c_rows.append((c - p.g * state_space(p)[2], dd - p.g * feedthrough(p)))
        if top is None:
            t_rows.append((c, dd))
            tap_rows.append((0.0 * c, 0.0))
        else:
            par = kk * top  # R_top' ∥ R_bottom
            # KCL at the tap: v_tap = u − par·i, i_timer = (u/k − v_tap)/R_top'
            t_rows.append((c * (par / top), (1.0 / kk - 1.0) / top + dd * par / top))
            tap_rows.append((-par * c, 1.0 - par * dd))
    rows += [tuple(i_rows), tuple(t_rows), tuple(tap_rows), tuple(c_rows)]
    grids, (out, vc, i, it, tap, ic) = switched_samples(d.frequency_hz, d.duty, phases[0][1], phases[1][1], rows,
                                                    phases[0][0], phases[1][0], _PHASE_POINTS)
    period = 1.0 / d.frequency_hz

    def mean(vals, scale=(1.0, 1.0)) -> float:
        return sum(s * float(np.sum(w * v)) for (_, w), v, s in zip(grids, vals, scale)) / period

    sq = lambda v: [x * x for x in v]  # noqa: E731
    loss = mean(sq(i)) * unit.filter.Rs + mean(sq(it), (d.r_high, d.r_low))
    if d.divider is not None:
        loss += mean(sq(it)) * d.divider[0] + mean(sq(tap)) / d.divider[1]
    cat = np.concatenate
    return {"output_max_v": float(max(v.max() for v in out)), "output_min_v": float(min(v.min() for v in out)),
            "inductor_peak_a": float(np.max(np.abs(cat(i)))), "inductor_rms_a": math.sqrt(mean(sq(i))),
            "series_loss_w": loss,
            "capacitor_max_v": float(max(v.max() for v in vc)), "capacitor_min_v": float(min(v.min() for v in vc)),
            "capacitor_rms_a": math.sqrt(mean(sq(ic))),
            "source_peak_a": float(np.max(np.abs(cat(it)))), "source_rms_a": math.sqrt(mean(sq(it)))}


def _wave(dc: float, ph: np.ndarray, points: int) -> np.ndarray:
    """One period of dc + Σ Re(ph_k e^{jkωt}) on ``points`` samples (harmonic k = index + 1)."""
    spec = np.zeros(points // 2 + 1, dtype=complex)
    n = min(ph.size, points // 2 - 1)
    spec[1:n + 1] = ph[:n] * (points / 2.0)
    spec[0] = dc * points
    return np.fft.irfft(spec, n=points)


def _output_phasors(unit: UnitModel, orders: np.ndarray) -> tuple[float, np.ndarray]:
    """DC and phasors of the output: the exact switched steady state when r_high ≠ r_low, else P_k(D)·H(jkω)."""
    d = unit.drive
    if d.r_high != d.r_low:
        return _switched(unit, orders)
    p = unit.effective_filter()
    lo, hi, _ = d.thevenin()
    y = (hi - lo) * rectangular_phasors(orders, d.duty) * transfer(orders * d.frequency_hz, p)
    return float(np.real(transfer(0.0, p))) * (lo + (hi - lo) * d.duty), y


def predict(unit: UnitModel, chain: CaptureChain | None = None) -> UnitPrediction:
    """Steady-state output and stresses of ``unit`` (see the module text for the method).

    Parameters
    ----------
    unit : UnitModel
        Drive and filter.
    chain : CaptureChain, optional
        How the output is measured (default: DC-coupled, H = 10).
    """
    chain = chain or CaptureChain()
    k = np.arange(1, _WAVE_HARMONICS + 1, dtype=float)
    f = unit.drive.frequency_hz
    d = unit.drive
    y0, y = _output_phasors(unit, k)
    seen = y * chain.response(k * f)
    dc_seen = 0.0 if chain.ac_coupled else y0
    h = max(2, int(chain.n_harmonics))
    a = np.abs(seen)
    thd = float(math.sqrt(np.sum(a[1:h] ** 2)) / a[0]) if a[0] > 0 else math.inf
    out_seen = _wave(dc_seen, seen, _WAVE_POINTS)
    vrms = math.sqrt(dc_seen ** 2 + float(np.sum(a ** 2)) / 2.0)
    notes = []
    if d.r_high != d.r_low:
        notes.append(f"source resistance {d.r_high:g} Ω high / {d.r_low:g} Ω low: exact switched-source "
                     "steady state")
    return UnitPrediction(
        frequency_hz=f, amplitude=float(a[0]), vdc=float(dc_seen), vrms=vrms,
        vpp=float(out_seen.max() - out_seen.min()), thd=thd, n_harmonics=h, chain=chain, notes=tuple(notes),
        divider_known=d.divider is not None, **_stresses(unit))


def predict_quantities(unit: UnitModel, chain: CaptureChain | None = None) -> dict[str, float]:
    """The spec quantities (names of :mod:`benchfit.report.spec`) predicted for ``unit``.

    Fast path for Monte Carlo: only the first ``chain.n_harmonics`` and 40 harmonics for the
    levels (the output's harmonics fall as 1/k³ above resonance, so the rest of the RMS is
    below 1e-5 relative); vpp is not computed here (use :func:`predict`).
    """
    chain = chain or CaptureChain()
    kmax = max(40, int(chain.n_harmonics))
    k = np.arange(1, kmax + 1, dtype=float)
    f = unit.drive.frequency_hz
    y0, y = _output_phasors(unit, k)
    y = y * chain.response(k * f)
    a = np.abs(y)
    h = max(2, int(chain.n_harmonics))
    dc = 0.0 if chain.ac_coupled else y0
    so = second_order(unit.filter)
    out = {"frequency_hz": f, "amplitude": float(a[0]), "vdc": dc,
           "vrms": math.sqrt(dc * dc + float(np.sum(a * a)) / 2.0),
           "thd_pct": 100.0 * float(math.sqrt(np.sum(a[1:h] ** 2)) / a[0]) if a[0] > 0 else math.inf}
    out.update(unit.filter.as_dict())
    out.update(so)
    return out
