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
time-invariant (the formulas below). With r_high ≠ r_low it is switched: the output, the
inductor current, the capacitor voltage and the source current then come from the exact
periodic steady state of :mod:`benchfit.model.switched` (each phase with its own Thévenin
level and resistance, divider included), stated in the prediction's notes. The fast path
:func:`predict_quantities` does the same for the output. Only ``effective_filter`` (and the
series loss, i_rms²·Rs) keeps the time-averaged resistance D·r_high + (1 − D)·r_low. A
one-channel fit already holds the source resistance in its ``Rs`` (DESIGN.md), so then
r_high = r_low = 0.

Output (REFERENCES §6, "square-wave drive"): harmonic k of the output is
Y_k = S·P_k·H(jkω) and its DC is (v_low + S·D)·H(0). The inductor current is
I_k = (X_k − Y_k)/(Rs_total + jkωL), the capacitor's own voltage (without its ESR)
V_C,k = Y_k − Resr·I_C,k with I_C,k = Y_k/(Resr + 1/(jkωC)).

Capture chain (how ``benchfit measure`` would read the output). A sound card's line-in is
AC-coupled: a first-order high-pass of time constant τ multiplies harmonic k by
jkωτ/(1 + jkωτ) and removes the DC; a DC-coupled scope passes everything. ``measure``
reads vrms as the RMS of all samples, ``amplitude`` as the fundamental's peak, vpp as
max − min and THD as THD_F over harmonics 2…H with H = 10 by default
(:mod:`benchfit.measurement.distortion`). The prediction gives the same quantities through
the chosen chain; noise (which adds to a measured vrms and vpp) is not modelled.

Waveform extremes (vpp, inductor current peak, capacitor minimum) come from the harmonic sum
evaluated on a fine time grid; above ~400 harmonics the filtered quantities change by less
than 1e-6 of their amplitude (they fall as 1/k² or faster), which is ample for ratings.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from benchfit.model.filter import LowpassParts, rectangular_phasors, second_order, transfer

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


def _phasors(unit: UnitModel, orders: np.ndarray):
    """Drive, output, inductor-current and capacitor phasors for the orders; DC values."""
    p = unit.effective_filter()
    lo, hi, _ = unit.drive.thevenin()
    f = unit.drive.frequency_hz
    x = (hi - lo) * rectangular_phasors(orders, unit.drive.duty)
    fk = orders * f
    h = transfer(fk, p)
    y = x * h
    w = 2 * math.pi * fk
    i_l = (x - y) / (p.Rs + 1j * w * p.L)
    zc = p.Resr + 1.0 / (1j * w * p.C)
    v_c = y - p.Resr * (y / zc)
    x0 = lo + (hi - lo) * unit.drive.duty
    y0 = float(np.real(transfer(0.0, p))) * x0
    i0 = y0 * p.g  # at DC the capacitor carries no current: i_L = load current
    return x, y, i_l, v_c, x0, y0, float(i0)


def _switched(unit: UnitModel, orders: np.ndarray, with_states: bool = True):
    """Exact steady state of a switched source (r_high ≠ r_low): means and phasors of the output,
    i_L, v_C and the timer's current, each phase with its own Thévenin source."""
    from benchfit.model.switched import switched_rows

    d = unit.drive
    phases = []
    for level, r in ((d.v_high, d.r_high), (d.v_low, d.r_low)):
        if d.divider is None:
            # the timer current is the inductor's: row [1, 0], no direct term
            phases.append((level, r, (np.array([1.0, 0.0]), 0.0)))
            continue
        top, bottom = d.divider
        top = top + r
        kk = bottom / (top + bottom)
        par = top * bottom / (top + bottom)
        # i_timer = v_t·(1 − par/top)/top + i_L·par/top (see _source_current) with v_t = level = u/kk
        phases.append((level * kk, par, (np.array([par / top, 0.0]), (1.0 - par / top) / top / kk)))
    high = dataclasses.replace(unit.filter, Rs=unit.filter.Rs + phases[0][1])
    low = dataclasses.replace(unit.filter, Rs=unit.filter.Rs + phases[1][1])
    rows: list = [None]
    if with_states:
        rows += [((np.array([1.0, 0.0]), 0.0),) * 2, ((np.array([0.0, 1.0]), 0.0),) * 2,
                 (phases[0][2], phases[1][2])]
    return switched_rows(orders, d.frequency_hz, d.duty, high, low, rows, phases[0][0], phases[1][0])


def _wave(dc: float, ph: np.ndarray, points: int) -> np.ndarray:
    """One period of dc + Σ Re(ph_k e^{jkωt}) on ``points`` samples (harmonic k = index + 1)."""
    spec = np.zeros(points // 2 + 1, dtype=complex)
    n = min(ph.size, points // 2 - 1)
    spec[1:n + 1] = ph[:n] * (points / 2.0)
    spec[0] = dc * points
    return np.fft.irfft(spec, n=points)


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
    if d.r_high != d.r_low:
        (y0, y), (i0, i_l), (vc0, v_c), (it0, i_t) = _switched(unit, k)
    else:
        _, y, i_l, v_c, _, y0, i0 = _phasors(unit, k)
        vc0 = y0
    seen = y * chain.response(k * f)
    dc_seen = 0.0 if chain.ac_coupled else y0
    h = max(2, int(chain.n_harmonics))
    a = np.abs(seen)
    thd = float(math.sqrt(np.sum(a[1:h] ** 2)) / a[0]) if a[0] > 0 else math.inf
    out_seen = _wave(dc_seen, seen, _WAVE_POINTS)
    out = _wave(y0, y, _WAVE_POINTS)
    il = _wave(i0, i_l, _WAVE_POINTS)
    vc = _wave(vc0, v_c, _WAVE_POINTS)
    vrms = math.sqrt(dc_seen ** 2 + float(np.sum(a ** 2)) / 2.0)
    il_rms = math.sqrt(i0 ** 2 + float(np.sum(np.abs(i_l) ** 2)) / 2.0)
    p = unit.effective_filter()
    notes = []
    if d.r_high != d.r_low:
        notes.append(f"source resistance {d.r_high:g} Ω high / {d.r_low:g} Ω low: exact switched-source "
                     f"steady state (the series loss uses its time average {d.r_average:.4g} Ω)")
        wave = _wave(it0, i_t, _WAVE_POINTS)
        src = (float(np.max(np.abs(wave))), float(np.sqrt(np.mean(wave ** 2))))
    else:
        src = _source_current(unit, i_l, i0)
    return UnitPrediction(
        frequency_hz=f, amplitude=float(a[0]), vdc=float(dc_seen), vrms=vrms,
        vpp=float(out_seen.max() - out_seen.min()), thd=thd, n_harmonics=h,
        output_max_v=float(out.max()), output_min_v=float(out.min()),
        inductor_peak_a=float(np.max(np.abs(il))), inductor_rms_a=il_rms,
        series_loss_w=il_rms ** 2 * p.Rs,
        capacitor_max_v=float(vc.max()), capacitor_min_v=float(vc.min()),
        source_peak_a=src[0], source_rms_a=src[1], chain=chain, notes=tuple(notes),
        divider_known=d.divider is not None)


def _source_current(unit: UnitModel, i_l: np.ndarray, i0: float) -> tuple[float, float]:
    """Peak and RMS of the timer's output current (A).

    Without a divider it is the inductor current. With a divider (R_top from the timer to the
    tap, R_bottom from the tap to ground) KCL at the tap gives
    i_timer = (v_t − v_tap)/R_top with v_tap = (v_t/R_top' − i_L)·(R_top' ∥ R_bottom),
    R_top' = R_top + source resistance.
    """
    d = unit.drive
    if d.divider is None:
        wave = _wave(i0, i_l, _WAVE_POINTS)
    else:
        top, bottom = d.divider
        top = top + d.r_average
        par = top * bottom / (top + bottom)
        k = np.arange(1, i_l.size + 1, dtype=float)
        vt = d.swing_v * rectangular_phasors(k, d.duty)
        vt0 = d.v_low + d.swing_v * d.duty
        it = (vt - (vt / top - i_l) * par) / top
        it0 = (vt0 - (vt0 / top - i0) * par) / top
        wave = _wave(it0, it, _WAVE_POINTS)
    return float(np.max(np.abs(wave))), float(np.sqrt(np.mean(wave ** 2)))


def predict_quantities(unit: UnitModel, chain: CaptureChain | None = None) -> dict[str, float]:
    """The spec quantities (names of :mod:`benchfit.report.spec`) predicted for ``unit``.

    Fast path for Monte Carlo: only the first ``chain.n_harmonics`` and 40 harmonics for the
    levels (the output's harmonics fall as 1/k³ above resonance, so the rest of the RMS is
    below 1e-5 relative); vpp is not computed here (use :func:`predict`).
    """
    chain = chain or CaptureChain()
    kmax = max(40, int(chain.n_harmonics))
    k = np.arange(1, kmax + 1, dtype=float)
    p = unit.effective_filter()
    lo, hi, _ = unit.drive.thevenin()
    f = unit.drive.frequency_hz
    if unit.drive.r_high != unit.drive.r_low:
        ((y0, y),) = _switched(unit, k, with_states=False)
        y = y * chain.response(k * f)
    else:
        y = (hi - lo) * rectangular_phasors(k, unit.drive.duty) * transfer(k * f, p) * chain.response(k * f)
        y0 = float(np.real(transfer(0.0, p))) * (lo + (hi - lo) * unit.drive.duty)
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
