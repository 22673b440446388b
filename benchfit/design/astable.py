"""555-style astable timer: timing equations, part choice, tolerance spread and trim range.

Timing (NE555 datasheet astable equations; REFERENCES §7). With thresholds at ⅔·Vcc and ⅓·Vcc,

    t_H = ln2·(RA + RB)·C      (output high: C charges through RA + RB)
    t_L = ln2·RB·C             (output low: C discharges through RB)

and with a voltage Vc forced on the control pin the thresholds move to Vc and Vc/2:

    t_H = (RA + RB)·C·ln((Vcc − Vc/2)/(Vcc − Vc)),   t_L = RB·C·ln2   (independent of Vc).

The diode variant (a steering diode across RB, so C charges through RA alone) charges C toward
Vcc − Vd instead of Vcc, so t_H = k_H·RA·C with k_H = ln((Vcc − Vd − Vc/2)/(Vcc − Vd − Vc))
(the charging law; REFERENCES §11: 0.786 at Vcc = 12 V, Vd = 0.65 V, not ln 2), and
t_L = ln2·RB·C. Duty is high time over period (REFERENCES §4: duty = pulse duration / period);
some datasheets quote t_L/T instead. Comparator delays, output levels, discharge saturation and
threshold currents are neglected in the equations; the timer's own initial error, temperature
coefficient and supply sensitivity (TI SLFS022 astable figures, REFERENCES §11) enter the
Monte Carlo spread of :func:`design_astable`.

All functions are pure. Randomness (the tolerance spread) comes from a seeded generator.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Literal, get_args

import numpy as np

from benchfit.design.parts import check_series, series_values
from benchfit.errors import DesignError

__all__ = ["Distribution", "TimingForm", "AstableTiming", "ToleranceSpread", "TrimRange",
           "AstableDesign", "high_time_factor", "astable_timing", "control_voltage_for_factor",
           "design_astable", "tolerance_spread"]

Distribution = Literal["uniform", "normal"]
TimingForm = Literal["exact", "datasheet"]

LN2 = math.log(2.0)
#: resistor range the part search keeps to: RA, RB ≥ 1 kΩ limits the discharge-pin current,
#: RA + RB ≤ 1 MΩ keeps the threshold input current negligible (common practice, no source)
R_MIN_OHM = 1e3
R_MAX_OHM = 1e6
#: capacitor range searched when the timing capacitor is not given (common practice, no source)
C_MIN_F = 1e-9
C_MAX_F = 100e-6
#: end-to-end tolerance assumed for a trimming potentiometer (common practice, no source)
POT_TOLERANCE = 0.20
#: forward drop of a small-signal silicon steering diode, V (REFERENCES §11 uses 0.65 V)
DIODE_DROP_V = 0.65
#: NE555 astable figures (TI SLFS022, RA = 1 kΩ to 100 kΩ, C = 0.1 µF; REFERENCES §11): initial
#: error of the timing interval 2.25 % typ, temperature coefficient 150 ppm/°C typ, supply
#: sensitivity 0.3 %/V typ. A "typ" figure is not a bound; the spread takes it as one standard
#: deviation (normal) — an interpretation, stated in the design notes.
NE555_INITIAL_ERROR = 0.0225
NE555_TEMPCO_PER_C = 150e-6
NE555_SUPPLY_PER_V = 0.003
#: operating ranges assumed for the spread: ±10 °C around the calibration temperature and
#: ±0.5 V of supply (assumptions, stated in the notes)
TEMPERATURE_SPAN_C = 10.0
SUPPLY_SPAN_V = 0.5


def _pos(value: float | None, name: str) -> float:
    if value is None:
        raise DesignError(f"{name}: missing — give a positive value")
    v = float(value)
    if not math.isfinite(v) or v <= 0:
        raise DesignError(f"{name}: {value!r} must be a positive finite number — give a value above zero")
    return v


def _fraction(value: float, name: str, *, upper_open: bool = True) -> float:
    v = float(value)
    if not math.isfinite(v) or v < 0 or v >= 1:
        raise DesignError(f"{name}: {value!r} must be a fraction from 0 to below 1 — write e.g. 0.05 for 5 %")
    return v


def high_time_factor(supply_v: float | None = None, control_voltage_v: float | None = None,
                     diode_drop_v: float = 0.0) -> float:
    """k_H in t_H = k_H·R·C: ln((Vcc − Vd − Vc/2)/(Vcc − Vd − Vc)), Vc = ⅔·Vcc unless forced.

    With Vd = 0 and the internal divider this is ln 2.

    Parameters
    ----------
    supply_v : float, optional
        Supply voltage Vcc (V); needed with ``control_voltage_v`` or a diode drop.
    control_voltage_v : float, optional
        Voltage on the control pin (V), 0 < Vc < Vcc. None: the internal ⅔·Vcc.
    diode_drop_v : float
        Forward drop (V) of a steering diode in the charge path (diode variant), else 0.
    """
    if control_voltage_v is None and not diode_drop_v:
        return LN2
    if supply_v is None:
        raise DesignError("supply: missing — the diode's drop and a forced control voltage change the "
                          "charge factor with the supply; give the supply voltage (supply_v=)")
    vcc = _pos(supply_v, "supply")
    vc = 2.0 * vcc / 3.0 if control_voltage_v is None else _pos(control_voltage_v, "control-voltage")
    top = vcc - float(diode_drop_v)
    if vc >= top:
        raise DesignError(f"control-voltage: {vc:g} V must be below the supply {vcc:g} V"
                          f"{f' less the diode drop {diode_drop_v:g} V' if diode_drop_v else ''} — "
                          "the upper threshold cannot reach it")
    return math.log((top - vc / 2.0) / (top - vc))


def control_voltage_for_factor(k_high: float, supply_v: float) -> float:
    """Inverse of :func:`high_time_factor`: the control voltage (V) giving ``k_high``.

    From ln((Vcc − Vc/2)/(Vcc − Vc)) = k: with e = exp(k), Vc = Vcc·(e − 1)/(e − ½).
    """
    if not math.isfinite(k_high) or k_high <= 0:
        raise DesignError(f"control-voltage: no control voltage gives a high-time factor of {k_high:.4g} — "
                          "change RB instead")
    e = math.exp(k_high)
    return supply_v * (e - 1.0) / (e - 0.5)


@dataclass(frozen=True)
class AstableTiming:
    """Timing of an astable: high and low times (s), period (s), frequency (Hz), duty (high/period)."""

    t_high_s: float
    t_low_s: float
    period_s: float
    frequency_hz: float
    duty: float

    def to_dict(self) -> dict:
        return {"t_high_s": self.t_high_s, "t_low_s": self.t_low_s, "period_s": self.period_s,
                "frequency_hz": self.frequency_hz, "duty": self.duty}


def _times(ra, rb, c, k_high: float, diode: bool):
    t_high = k_high * (ra if diode else ra + rb) * c
    t_low = LN2 * rb * c
    return t_high, t_low


def astable_timing(ra_ohm: float, rb_ohm: float, c_farad: float, *, supply_v: float | None = None,
                   control_voltage_v: float | None = None, diode: bool = False,
                   form: TimingForm = "exact", diode_drop_v: float = DIODE_DROP_V) -> AstableTiming:
    """High time, low time, frequency and duty of a 555-style astable.

    Parameters
    ----------
    ra_ohm, rb_ohm : float
        Timing resistors RA (supply to discharge pin) and RB (discharge to threshold), Ω.
    c_farad : float
        Timing capacitor, F.
    supply_v : float, optional
        Supply voltage (V); needed only with ``control_voltage_v``.
    control_voltage_v : float, optional
        Voltage forced on the control pin (V); None leaves the internal ⅔·Vcc.
    diode : bool
        Diode variant (C charges through RA and the diode only; needs ``supply_v``).
    diode_drop_v : float
        The steering diode's forward drop (V), default 0.65 V (REFERENCES §11).
    form : {"exact", "datasheet"}
        ``"exact"`` uses ln 2; ``"datasheet"`` the rounded 0.693 for the times and
        f = 1.44/((RA + 2RB)·C) for the frequency, as printed in NE555 datasheets (basic
        circuit, internal thresholds only).
    """
    if form not in get_args(TimingForm):
        raise DesignError(f"form: unknown {form!r} — use one of {', '.join(get_args(TimingForm))}")
    ra, rb, c = _pos(ra_ohm, "RA"), _pos(rb_ohm, "RB"), _pos(c_farad, "C1")
    if form == "datasheet":
        if diode or control_voltage_v is not None:
            raise DesignError("form: the datasheet constants cover only the basic circuit with the "
                              "internal thresholds — use form 'exact'")
        t_high, t_low = 0.693 * (ra + rb) * c, 0.693 * rb * c
        f = 1.44 / ((ra + 2 * rb) * c)
        return AstableTiming(t_high, t_low, t_high + t_low, f, t_high / (t_high + t_low))
    k = high_time_factor(supply_v, control_voltage_v, diode_drop_v if diode else 0.0)
    t_high, t_low = _times(ra, rb, c, k, diode)
    period = t_high + t_low
    return AstableTiming(t_high, t_low, period, 1.0 / period, t_high / period)


@dataclass(frozen=True)
class ToleranceSpread:
    """Monte Carlo spread of frequency and duty over part tolerances.

    Part values are drawn independently around their nominal values: ``"uniform"`` over
    ±tolerance, or ``"normal"`` with the tolerance taken as 3σ. The interval is the central
    95 % of the trials (2.5th to 97.5th percentile). ``yield_fraction`` is the fraction of
    trials with |f − target|/target ≤ ``yield_within``; ``yield_u`` its binomial standard
    uncertainty √(p(1 − p)/n).
    """

    distribution: str
    n_trials: int
    seed: int
    tolerance_r: float
    tolerance_c: float
    frequency_mean_hz: float
    frequency_std_hz: float
    frequency_low_hz: float
    frequency_high_hz: float
    duty_mean: float
    duty_std: float
    duty_low: float
    duty_high: float
    yield_within: float
    yield_fraction: float
    yield_u: float

    def to_dict(self) -> dict:
        return dict(self.__dict__)


@dataclass(frozen=True)
class TrimRange:
    """Frequency range reachable with a trimming element, and the setting for the target.

    kind ``"pot"``: a potentiometer of ``span`` Ω in series with RB (setting in Ω);
    kind ``"control"``: the control-pin voltage from ``low`` to ``high`` V (setting in V).
    ``trimmable_fraction`` is the fraction of Monte Carlo units whose target lies in their range.
    """

    kind: str
    low: float
    high: float
    unit: str
    frequency_low_hz: float
    frequency_high_hz: float
    setting_for_target: float | None
    duty_at_target: float | None
    trimmable_fraction: float

    def to_dict(self) -> dict:
        return dict(self.__dict__)


@dataclass(frozen=True)
class AstableDesign:
    """A chosen set of astable parts with predicted timing, spread and trim range."""

    target_frequency_hz: float
    target_duty: float | None
    ra_ohm: float
    rb_ohm: float
    c_farad: float
    c_given: bool
    series: str
    supply_v: float
    control_voltage_v: float | None
    diode: bool
    timing: AstableTiming
    spread: ToleranceSpread
    trim: TrimRange | None = None
    notes: tuple[str, ...] = field(default_factory=tuple)
    cautions: tuple[str, ...] = field(default_factory=tuple)

    @property
    def frequency_error(self) -> float:
        """Relative error of the nominal design: f/target − 1."""
        return self.timing.frequency_hz / self.target_frequency_hz - 1.0

    def to_dict(self) -> dict:
        return {"target_frequency_hz": self.target_frequency_hz, "target_duty": self.target_duty,
                "ra_ohm": self.ra_ohm, "rb_ohm": self.rb_ohm, "c_farad": self.c_farad,
                "c_given": self.c_given, "series": self.series, "supply_v": self.supply_v,
                "control_voltage_v": self.control_voltage_v, "diode": self.diode,
                "timing": self.timing.to_dict(), "frequency_error": self.frequency_error,
                "spread": self.spread.to_dict(),
                "trim": None if self.trim is None else self.trim.to_dict(),
                "notes": list(self.notes), "cautions": list(self.cautions)}

    def summary_lines(self) -> list[str]:
        """Plain sentences for a person (units on every number)."""
        from benchfit.units import format_quantity as fq

        s = self.spread
        lines = [
            f"RA = {fq(self.ra_ohm, 'Ω')}, RB = {fq(self.rb_ohm, 'Ω')}, C1 = {fq(self.c_farad, 'F')}"
            f" ({self.series}{', diode across RB' if self.diode else ''})",
            f"nominal frequency {self.timing.frequency_hz:.4f} Hz ({self.frequency_error * 100:+.2f} % from "
            f"{self.target_frequency_hz:g} Hz), duty {self.timing.duty * 100:.2f} %",
            f"with RA, RB ±{s.tolerance_r * 100:g} % and C1 ±{s.tolerance_c * 100:g} % ({s.distribution}"
            f"{', tolerance = 3σ' if s.distribution == 'normal' else ''}, {s.n_trials} trials, seed {s.seed}): "
            f"95 % of units between {s.frequency_low_hz:.3f} Hz and {s.frequency_high_hz:.3f} Hz, "
            f"duty {s.duty_low * 100:.2f} % to {s.duty_high * 100:.2f} %",
            f"{s.yield_fraction * 100:.1f} % ± {s.yield_u * 100:.1f} % of units within "
            f"±{s.yield_within * 100:g} % of the target frequency",
        ]
        t = self.trim
        if t is not None:
            what = (f"a {fq(t.high, 'Ω')} trimmer in series with RB" if t.kind == "pot"
                    else f"the control pin from {t.low:.3g} V to {t.high:.3g} V")
            setting = ("—" if t.setting_for_target is None
                       else fq(t.setting_for_target, t.unit))
            lines.append(f"{what} covers {t.frequency_low_hz:.3f} Hz to {t.frequency_high_hz:.3f} Hz; "
                         f"setting for the target {setting}; {t.trimmable_fraction * 100:.1f} % of units "
                         f"can be trimmed to it")
        lines += list(self.notes) + [f"caution: {c}" for c in self.cautions]
        return lines


def _draw(rng: np.random.Generator, nominal: float, tol: float, n: int, distribution: str) -> np.ndarray:
    if tol == 0:
        return np.full(n, nominal)
    if distribution == "uniform":
        return nominal * (1.0 + rng.uniform(-tol, tol, n))
    return nominal * (1.0 + rng.normal(0.0, tol / 3.0, n))


def tolerance_spread(ra_ohm: float, rb_ohm: float, c_farad: float, target_hz: float, *,
                     tolerance_r: float = 0.01, tolerance_c: float = 0.10,
                     yield_within: float = 0.01, distribution: Distribution = "uniform",
                     n_trials: int = 20000, seed: int = 0, supply_v: float | None = None,
                     control_voltage_v: float | None = None, diode: bool = False,
                     diode_drop_v: float = DIODE_DROP_V, timer_variation: bool = False,
                     _samples: bool = False):
    """Seeded Monte Carlo of frequency and duty over part tolerances (see :class:`ToleranceSpread`).

    Parameters
    ----------
    ra_ohm, rb_ohm, c_farad : float
        Nominal parts (Ω, Ω, F).
    target_hz : float
        Frequency the yield is judged against (Hz).
    tolerance_r, tolerance_c : float
        Tolerances as fractions (0.01 = ±1 %).
    yield_within : float
        Acceptance band as a fraction of the target.
    distribution : {"uniform", "normal"}
        Uniform over ±tolerance, or normal with tolerance = 3σ.
    n_trials : int
        Number of simulated units.
    seed : int
        Seed of the random generator (numpy PCG64).
    diode_drop_v : float
        Steering diode's forward drop (V) in the diode variant.
    timer_variation : bool
        Add the timer's own variation (TI SLFS022 astable figures, REFERENCES §11): initial error
        2.25 % (taken as 1σ, normal), 150 ppm/°C over ±10 °C and 0.3 %/V over ±0.5 V (uniform).
    """
    if distribution not in get_args(Distribution):
        raise DesignError(f"distribution: unknown {distribution!r} — use one of "
                          f"{', '.join(get_args(Distribution))}")
    tr, tc = _fraction(tolerance_r, "tolerance-r"), _fraction(tolerance_c, "tolerance-c")
    yw = _fraction(yield_within, "yield-within")
    n = int(n_trials)
    if n < 100:
        raise DesignError(f"trials: {n_trials!r} is too few — use at least 100")
    rng = np.random.default_rng(int(seed))
    ra = _draw(rng, ra_ohm, tr, n, distribution)
    rb = _draw(rng, rb_ohm, tr, n, distribution)
    c = _draw(rng, c_farad, tc, n, distribution)
    k = high_time_factor(supply_v, control_voltage_v, diode_drop_v if diode else 0.0)
    th, tl = _times(ra, rb, c, k, diode)
    if timer_variation:
        scale = (1.0 + rng.normal(0.0, NE555_INITIAL_ERROR, n)
                 + NE555_TEMPCO_PER_C * rng.uniform(-TEMPERATURE_SPAN_C, TEMPERATURE_SPAN_C, n)
                 + NE555_SUPPLY_PER_V * rng.uniform(-SUPPLY_SPAN_V, SUPPLY_SPAN_V, n))
        th, tl = th * scale, tl * scale
    f = 1.0 / (th + tl)
    d = th / (th + tl)
    inside = np.abs(f / target_hz - 1.0) <= yw
    p = float(inside.mean())
    spread = ToleranceSpread(
        distribution, n, int(seed), tr, tc, float(f.mean()), float(f.std(ddof=1)),
        float(np.percentile(f, 2.5)), float(np.percentile(f, 97.5)), float(d.mean()),
        float(d.std(ddof=1)), float(np.percentile(d, 2.5)), float(np.percentile(d, 97.5)),
        yw, p, math.sqrt(p * (1 - p) / n))
    if _samples:
        return spread, (ra, rb, c, rng)
    return spread


def _vc_for_factor(k_high: float, supply_v: float, diode_drop_v: float) -> float:
    """Control voltage giving ``k_high`` with a diode drop: from ln((V' − Vc/2)/(V' − Vc)) = k,
    V' = Vcc − Vd: Vc = V'·(e − 1)/(e − ½), e = exp(k)."""
    return control_voltage_for_factor(k_high, supply_v - diode_drop_v)


def _score(f: np.ndarray, d: np.ndarray, target_f: float, target_d: float, duty_weight: float,
           rb: np.ndarray) -> np.ndarray:
    # frequency error first, duty second; a small preference for RB in 10 kΩ…100 kΩ, where
    # leakage, threshold current and discharge current all stay small (common practice, no source)
    off = np.maximum(0.0, np.abs(np.log10(rb / math.sqrt(1e4 * 1e5))) - 0.5)
    return np.abs(f / target_f - 1.0) + duty_weight * np.abs(d - target_d) + 1e-3 * off


def design_astable(frequency_hz: float, duty: float | None = None, *, c1_farad: float | None = None,
                   series: str = "E24", c_series: str = "E6", supply_v: float = 12.0,
                   control_voltage_v: float | None = None, diode: bool = False,
                   tolerance_r: float = 0.01, tolerance_c: float = 0.10, yield_within: float = 0.01,
                   distribution: Distribution = "uniform", n_trials: int = 20000, seed: int = 0,
                   trim_pot_ohm: float | None = None,
                   control_range_v: tuple[float, float] | None = None,
                   diode_drop_v: float = DIODE_DROP_V, timer_variation: bool = True) -> AstableDesign:
    """Choose RA, RB (and C1 when not given) from an IEC 60063 series for a frequency and duty.

    Parameters
    ----------
    frequency_hz : float
        Wanted frequency (Hz).
    duty : float, optional
        Wanted duty (high time / period, 0 < D < 1). None: as close to 50 % as the circuit allows.
        The basic circuit cannot go below k_H/(k_H + ln2) (50 % with the internal thresholds).
    c1_farad : float, optional
        Timing capacitor (F). None: chosen from ``c_series`` between 1 nF and 100 µF.
    series : str
        Resistor series (E6, E12, E24, E48, E96, E192).
    c_series : str
        Capacitor series used when ``c1_farad`` is None.
    supply_v : float
        Supply voltage (V); used with the control voltage and for the cautions.
    control_voltage_v : float, optional
        Voltage forced on the control pin (V).
    diode : bool
        Use the diode variant (any duty from 0 to 1).
    tolerance_r, tolerance_c, yield_within, distribution, n_trials, seed
        See :func:`tolerance_spread`.
    trim_pot_ohm : float, optional
        A trimming potentiometer (Ω) in series with RB; RB is then chosen so that the target
        sits near mid-travel.
    control_range_v : (float, float), optional
        Range (V) over which the control-pin voltage can be set, for a control-pin trim.
    diode_drop_v : float
        Steering diode's forward drop (V), diode variant only.
    timer_variation : bool
        Include the timer's own initial error, temperature and supply sensitivity (TI SLFS022)
        in the spread (default); False for the parts' tolerances alone.
    """
    f_t = _pos(frequency_hz, "frequency")
    vcc = _pos(supply_v, "supply")
    name = check_series(series)
    k = high_time_factor(vcc, control_voltage_v, diode_drop_v if diode else 0.0)
    d_min = k / (k + LN2)
    if duty is not None:
        d_t = float(duty)
        if not math.isfinite(d_t) or not 0 < d_t < 1:
            raise DesignError(f"duty: {duty!r} must be between 0 and 1 — write e.g. 0.55 for 55 %")
        if not diode and d_t <= d_min:
            raise DesignError(
                f"duty: {d_t * 100:.4g} % is impossible with the basic astable, whose high time always "
                f"exceeds its low time (duty above {d_min * 100:.2f} % here) — use diode=True (diode across RB)"
                " or a lower control voltage")
        duty_weight = 1.0
    else:
        d_t = 0.5
        duty_weight = 0.1
    if trim_pot_ohm is not None and control_range_v is not None:
        raise DesignError("trim: both a trimmer in series with RB and a control-pin range given — give only one of them")
    period = 1.0 / f_t
    if c1_farad is not None:
        c_cands = np.array([_pos(c1_farad, "cap")])
    else:
        c_cands = series_values(check_series(c_series), C_MIN_F, C_MAX_F)
    r_vals = series_values(name, R_MIN_OHM, R_MAX_OHM)
    pot = None if trim_pot_ohm is None else _pos(trim_pot_ohm, "trim-pot")
    c_pot = None
    if pot is not None:
        # capacitor for which the trimmer's full travel moves the period by about 1.2 × the
        # ±(tolerance_c + tolerance_r) spread: P·(k_H + ln2)·C = 2.4·(tc + tr)·T (basic circuit)
        c_pot = 2.4 * (float(tolerance_c) + float(tolerance_r)) * period / (pot * (LN2 + (0 if diode else k)))
    best: tuple[float, float, float, float] | None = None
    for c in c_cands:
        t_high, t_low = d_t * period, (1 - d_t) * period
        rb_ideal = t_low / (LN2 * c)
        ra_ideal = t_high / (k * c) - (0.0 if diode else rb_ideal)
        if duty is None and not diode:
            # lowest duty: RA as small as allowed, RB sets the period
            ra_ideal = R_MIN_OHM
            rb_ideal = (period / c - k * ra_ideal) / (k + LN2)
        if pot is not None:
            if rb_ideal - pot / 2 < R_MIN_OHM:
                continue
            rb_ideal -= pot / 2
        if rb_ideal < R_MIN_OHM / 2 or rb_ideal > 2 * R_MAX_OHM or ra_ideal > 2 * R_MAX_OHM:
            continue
        idx_a = np.unique(np.clip(np.searchsorted(r_vals, [ra_ideal, ra_ideal]) + [-1, 0], 0, len(r_vals) - 1))
        idx_b = np.unique(np.clip(np.searchsorted(r_vals, [rb_ideal, rb_ideal]) + [-1, 0], 0, len(r_vals) - 1))
        ra_grid, rb_grid = np.meshgrid(r_vals[idx_a], r_vals[idx_b])
        ras, rbs = ra_grid.ravel(), rb_grid.ravel()  # every pair of candidate values
        rb_eff = rbs if pot is None else rbs + pot / 2
        th, tl = _times(ras, rb_eff, c, k, diode)
        f, d = 1.0 / (th + tl), th / (th + tl)
        sc = _score(f, d, f_t, d_t, duty_weight, rbs)
        if c_pot is not None and c1_farad is None:
            sc = sc + 0.05 * abs(math.log10(c / c_pot))
        i = int(np.argmin(sc))
        if best is None or sc[i] < best[0]:
            best = (float(sc[i]), float(ras[i]), float(rbs[i]), float(c))
    if best is None:
        slow = 1.0 / sum(_times(R_MAX_OHM, R_MAX_OHM, float(c_cands.max()), k, diode))
        fast = 1.0 / sum(_times(R_MIN_OHM, R_MIN_OHM, float(c_cands.min()), k, diode))
        if duty is not None and slow <= f_t <= fast:
            # the duty depends on RA/RB alone: the resistor range bounds it whatever the capacitor
            d_lo, d_hi = (th / (th + tl) for th, tl in (_times(R_MIN_OHM, R_MAX_OHM, 1e-6, k, diode),
                                                        _times(R_MAX_OHM, R_MIN_OHM, 1e-6, k, diode)))
            if not d_lo <= d_t <= d_hi:
                raise DesignError(f"duty: {d_t * 100:.4g} % cannot be made with resistors from 1 kΩ to 1 MΩ "
                                  f"(RA/RB from 1/1000 to 1000 gives {d_lo * 100:.4g} % to {d_hi * 100:.4g} % "
                                  f"here; {f_t:g} Hz itself is in reach) — ask for a duty in that range")
        hint = ("use a trimmer well below 2 × RB" if pot is not None and slow <= f_t <= fast
                else "choose another c1_farad" if c1_farad is not None else "ask for a frequency in that range")
        raise DesignError(f"frequency: {f_t:g} Hz cannot be reached with resistors from 1 kΩ to 1 MΩ "
                          f"(about {slow:.3g} Hz to {fast:.3g} Hz with this timing capacitor range) — {hint}")
    _, ra, rb, c = best
    notes: list[str] = []
    cautions: list[str] = []
    trim: TrimRange | None = None
    if pot is not None:
        notes.append("untrimmed figures are for the trimmer at mid-travel")
    rb_mid = rb if pot is None else rb + pot / 2
    timing = astable_timing(ra, rb_mid, c, supply_v=vcc, control_voltage_v=control_voltage_v, diode=diode,
                            diode_drop_v=diode_drop_v)
    spread, (ra_s, rb_s, c_s, rng) = tolerance_spread(
        ra, rb_mid, c, f_t, tolerance_r=tolerance_r, tolerance_c=tolerance_c, yield_within=yield_within,
        distribution=distribution, n_trials=n_trials, seed=seed, supply_v=vcc,
        control_voltage_v=control_voltage_v, diode=diode, diode_drop_v=diode_drop_v,
        timer_variation=timer_variation, _samples=True)
    if pot is not None:
        rb_s = rb_s * (rb / rb_mid)  # the fixed resistor's share of the drawn values
        t_fast = astable_timing(ra, rb, c, supply_v=vcc, control_voltage_v=control_voltage_v, diode=diode,
                                diode_drop_v=diode_drop_v)
        t_slow = astable_timing(ra, rb + pot, c, supply_v=vcc, control_voltage_v=control_voltage_v, diode=diode,
                                diode_drop_v=diode_drop_v)
        need = ((period / c - k * ra) / (k + LN2)) if not diode else (period - k * ra * c) / (LN2 * c)
        setting = need - rb
        setting_ok = 0 <= setting <= pot
        d_at = (astable_timing(ra, rb + setting, c, supply_v=vcc, control_voltage_v=control_voltage_v,
                               diode=diode, diode_drop_v=diode_drop_v).duty if setting_ok else None)
        pot_s = _draw(rng, pot, POT_TOLERANCE, len(ra_s), distribution)
        f_hi = 1.0 / sum(_times(ra_s, rb_s, c_s, k, diode))
        f_lo = 1.0 / sum(_times(ra_s, rb_s + pot_s, c_s, k, diode))
        frac = float(np.mean((f_lo <= f_t) & (f_t <= f_hi)))
        trim = TrimRange("pot", 0.0, pot, "Ω", t_slow.frequency_hz, t_fast.frequency_hz,
                         setting if setting_ok else None, d_at, frac)
        notes.append(f"trimmer end-to-end tolerance taken as ±{POT_TOLERANCE * 100:g} % "
                     "(common practice, no source)")
    elif control_range_v is not None:
        v_lo, v_hi = sorted(float(v) for v in control_range_v)
        _pos(v_lo, "control-range low")
        vd = diode_drop_v if diode else 0.0
        k_lo, k_hi = high_time_factor(vcc, v_lo, vd), high_time_factor(vcc, v_hi, vd)
        f_fast = astable_timing(ra, rb, c, supply_v=vcc, control_voltage_v=v_lo, diode=diode, diode_drop_v=vd)
        f_slow = astable_timing(ra, rb, c, supply_v=vcc, control_voltage_v=v_hi, diode=diode, diode_drop_v=vd)
        r_high = ra if diode else ra + rb
        k_need = (period / c - LN2 * rb) / r_high
        setting = None
        d_at = None
        if k_lo <= k_need <= k_hi:
            setting = control_voltage_for_factor(k_need, vcc) if not diode else _vc_for_factor(k_need, vcc, vd)
            d_at = astable_timing(ra, rb, c, supply_v=vcc, control_voltage_v=setting, diode=diode,
                                  diode_drop_v=vd).duty
        r_high_s = ra_s if diode else ra_s + rb_s
        k_need_s = (1.0 / f_t - LN2 * rb_s * c_s) / (r_high_s * c_s)
        frac = float(np.mean((k_lo <= k_need_s) & (k_need_s <= k_hi)))
        trim = TrimRange("control", v_lo, v_hi, "V", f_slow.frequency_hz, f_fast.frequency_hz,
                         setting, d_at, frac)
        cautions.append("the control pin is fed internally from ⅔·Vcc through about 3.3 kΩ (5 kΩ ∥ 10 kΩ, "
                        "NE555 block diagram): drive it from a stiff divider or buffer, or the setting "
                        "will be loaded")
    if control_voltage_v is not None:
        notes.append(f"control pin held at {control_voltage_v:g} V: thresholds {control_voltage_v:g} V and "
                     f"{control_voltage_v / 2:g} V")
    if diode:
        notes.append(f"diode variant: C charges through RA and the diode toward Vcc − {diode_drop_v:g} V, so the "
                     f"high-time factor is {k:.3f}, not ln 2 = {LN2:.3f} (charging law, REFERENCES §11)")
    if timer_variation:
        notes.append("spread includes the NE555's own variation (TI SLFS022 astable figures): initial error "
                     "2.25 % typ taken as 1σ, 150 ppm/°C over ±10 °C, 0.3 %/V over ±0.5 V (assumed ranges); "
                     "trim after building")
    if duty is not None and abs(d_t - 0.5) < 0.02:
        notes.append("for a true 50 % square (no even harmonics): a CMOS 555 with one resistor from its output "
                     "to the timing capacitor, or run the timer at twice the frequency and divide by two with a "
                     "flip-flop")
    if duty is None and not diode:
        notes.append("no duty given: RA kept small so the duty stays as close to 50 % as the basic astable allows")
    notes.append("equations neglect comparator delay, output levels and threshold currents; "
                 "expect a few tenths of a percent from real timers")
    if vcc > 15:
        cautions.append(f"{vcc:g} V is above the usual 4.5 V to 15 V range of bipolar 555 timers — check the "
                        "datasheet's absolute maximum (from memory: 18 V)")
    return AstableDesign(f_t, None if duty is None else d_t, ra, rb, c, c1_farad is not None, name, vcc,
                         control_voltage_v, diode, timing, spread, trim, tuple(notes), tuple(cautions))
