"""GUM budgets of one channel's results (:func:`channel_budgets`), from measure's pieces.

Rows (JCGM 100:2008; clause numbers from memory, REFERENCES §9):

* **noise** (Type A): the estimator's own standard uncertainty from the record's noise
  (fit covariance, edge-regression scatter, percentile noise) — sensitivity 1.
* **timebase** (Type B): the sample clock's relative error u_ppm, sensitivity ∂f/∂ppm =
  f·10⁻⁶ Hz/ppm for frequencies (times scale as −t·10⁻⁶ s/ppm). A calibrated clock uses the
  profile's u (normal); an uncalibrated one the stated default
  (:data:`benchfit.uncertainty.DEFAULT_TIMEBASE_HALF_WIDTH_PPM`, rectangular).
* **gain** (Type B): relative gain error, sensitivity = the level itself (a level in V is
  samples × gain). Levels in FS carry no gain row. Where the gain comes from is decided by
  :func:`gain_term`: a sound-card profile's stated u (normal), the ±1 % default for a profile
  that states none, or — for volts an instrument wrote itself (a scope's CSV) — the stated
  vertical-gain default :data:`DEFAULT_SCOPE_GAIN_HALF_WIDTH_REL` (rectangular), each
  overridable by a figure the caller states.
* **card distortion** (Type B): a THD the card itself adds, known from ``calibrate
  distortion``: the card's harmonics add to the unit's with unknown phase, so the unit's THD
  lies within ± the floor of the reading; taken as rectangular of half-width floor.

Ratios of times or of levels of one channel (duty cycle, THD, SINAD) do not depend on the
gain or on the clock, so they carry no such row.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from benchfit.uncertainty import Budget, Contribution

__all__ = ["channel_budgets", "gain_term", "GainTerm", "DEFAULT_SCOPE_GAIN_HALF_WIDTH_REL",
           "DEFAULT_SCOPE_GAIN_U_REL", "DEFAULT_SCOPE_GAIN_NOTE"]

#: half-width of the relative vertical (dc) gain error of a scope or logger channel whose CSV
#: benchfit reads as volts with no calibration of its own: general-purpose USB and bench
#: oscilloscopes with 8-bit converters state a dc gain accuracy of ±(2…3) % (usually of full
#: scale) per channel (common practice, no source). Taken as ±3 % of the reading,
#: rectangular; a trace that fills only part of the screen can be further off, so state the
#: channel's real figure whenever it is known.
DEFAULT_SCOPE_GAIN_HALF_WIDTH_REL = 0.03
#: its standard uncertainty, a/√3 (GUM 4.3.7): 1.73 %
DEFAULT_SCOPE_GAIN_U_REL = DEFAULT_SCOPE_GAIN_HALF_WIDTH_REL / math.sqrt(3.0)
DEFAULT_SCOPE_GAIN_NOTE = (
    f"vertical gain not calibrated: levels in V read from the instrument's file are taken as "
    f"± {100 * DEFAULT_SCOPE_GAIN_HALF_WIDTH_REL:g} % (rectangular, u = {100 * DEFAULT_SCOPE_GAIN_U_REL:.2f} %; a "
    "scope channel's usual dc gain accuracy, common practice, no source) and their uncertainties include "
    "it — state the channel's calibrated figure with gain_u_rel=")

_STATED = "stated by the caller (gain_u_rel=)"


@dataclass(frozen=True)
class GainTerm:
    """The gain row's inputs for one channel: relative standard uncertainty (None: no gain row),
    its provenance, the clip check's full scale (V per FS of a calibrated card) and a note."""

    u_rel: float | None
    source: str
    full_scale: float | None = None
    note: str | None = None
    name: str = "gain"


def gain_term(unit: str, index: int, *, gains: tuple[float | None, ...] | None,
              gains_u: tuple[float | None, ...] | None, instrument_volts: bool, profile: str | None,
              stated_u_rel: float | None = None) -> GainTerm:
    """Which gain uncertainty applies to channel ``index`` (see the module docstring).

    ``stated_u_rel`` (a figure the caller gives) wins over every default, but not over a
    calibration that states its own u. Levels in FS (no gain applied) get no gain row.
    """
    if unit != "V":
        return GainTerm(None, "")
    prof = f"calibration profile {profile or 'unnamed'}"
    own = gains_u[index] if gains_u is not None and index < len(gains_u) else None
    gain = gains[index] if gains is not None and index < len(gains) else None
    if gain:
        full_scale = abs(float(gain))
        if own is not None:
            return GainTerm(float(own), prof, full_scale)
        if stated_u_rel is not None:
            return GainTerm(float(stated_u_rel), _STATED, full_scale)
        from benchfit.uncertainty import DEFAULT_GAIN_NOTE, DEFAULT_GAIN_U_REL

        return GainTerm(DEFAULT_GAIN_U_REL, "stated default (calibration gives no uncertainty)", full_scale,
                        f"{DEFAULT_GAIN_NOTE}: calibration profile {profile or 'unnamed'!s} does not state it — "
                        "run 'benchfit calibrate gain --rms-u …' again and record with the new profile")
    if own is not None:  # volts from an instrument whose channel calibration states its u
        return GainTerm(float(own), "stated vertical gain uncertainty (capture calibration)", name="vertical gain")
    if stated_u_rel is not None:
        return GainTerm(float(stated_u_rel), _STATED, name="vertical gain")
    if instrument_volts:
        return GainTerm(DEFAULT_SCOPE_GAIN_U_REL, "stated default for an uncalibrated scope channel "
                        "(common practice, no source)", None, DEFAULT_SCOPE_GAIN_NOTE,
                        "vertical gain (not calibrated: stated default)")
    return GainTerm(None, "")  # volts from the caller's own arrays: their gain is the caller's business


def _noise(name: str, u: float | None, unit: str, what: str = "noise") -> Contribution | None:
    if u is None or not math.isfinite(u):
        return None
    return Contribution(what, "A", "normal", float(u), unit, 1.0, math.inf, f"{name}: the record's own scatter")


def channel_budgets(*, unit: str, frequency_hz: float | None, frequency_u_noise_hz: float | None,
                    frequency_method: str, timebase_u_ppm: float, timebase_calibrated: bool,
                    timebase_source: str, levels: dict[str, tuple[float | None, float | None]],
                    gain_u_rel: float | None, gain_source: str, thd_pct: float | None,
                    thd_u_noise_pct: float | None, distortion_floor_pct: float | None,
                    duty: tuple[float | None, float | None] = (None, None),
                    times: dict[str, tuple[float | None, float | None]] | None = None,
                    gain_name: str = "gain") -> dict[str, Budget]:
    """Budgets of one channel's quantities (see the module docstring).

    ``levels`` maps a level name (amplitude, vdc, vrms, vpp) to (value, noise u) in ``unit``;
    ``times`` maps rise/fall time names to (value, noise u) in s.
    """
    out: dict[str, Budget] = {}
    if timebase_calibrated:
        tb = ("timebase (calibration)", "normal")
    else:
        tb = ("timebase (not calibrated: stated default)", "rectangular")
    if frequency_hz is not None and math.isfinite(frequency_hz):
        rows = [r for r in (_noise("frequency", frequency_u_noise_hz, "Hz", f"noise ({frequency_method})"),) if r]
        rows.append(Contribution(tb[0], "B", tb[1], float(timebase_u_ppm), "ppm", abs(frequency_hz) * 1e-6,
                                 math.inf, timebase_source))
        out["frequency_hz"] = Budget("frequency_hz", float(frequency_hz), "Hz", tuple(rows))
    for name, (value, u_noise) in levels.items():
        if value is None or not math.isfinite(value):
            continue
        rows = [r for r in (_noise(name, u_noise, unit),) if r]
        if unit == "V" and gain_u_rel is not None:
            rows.append(Contribution(gain_name, "B", "rectangular" if "default" in gain_source else "normal",
                                     float(gain_u_rel), "1", abs(float(value)), math.inf, gain_source))
        out[name] = Budget(name, float(value), unit, tuple(rows))
    if thd_pct is not None and math.isfinite(thd_pct):
        rows = [r for r in (_noise("thd", thd_u_noise_pct, "%"),) if r]
        if distortion_floor_pct is not None:
            rows.append(Contribution("card distortion floor", "B", "rectangular",
                                     float(distortion_floor_pct) / math.sqrt(3.0), "%", 1.0, math.inf,
                                     "calibration profile (calibrate distortion): ± the card's own THD"))
        out["thd_pct"] = Budget("thd_pct", float(thd_pct), "%", tuple(rows))
    if duty[0] is not None and duty[1] is not None:
        out["duty_cycle_pct"] = Budget("duty_cycle_pct", float(duty[0]), "%",
                                       tuple(r for r in (_noise("duty", duty[1], "%"),) if r))
    for name, (value, u_noise) in (times or {}).items():
        if value is None or u_noise is None:
            continue
        rows = [r for r in (_noise(name, u_noise, "s"),) if r]
        rows.append(Contribution(tb[0], "B", tb[1], float(timebase_u_ppm), "ppm", abs(float(value)) * 1e-6,
                                 math.inf, timebase_source))
        out[name] = Budget(name, float(value), "s", tuple(rows))
    return out
