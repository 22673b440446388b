"""GUM budgets of one channel's results (:func:`channel_budgets`), from measure's pieces.

Rows (JCGM 100:2008; clause numbers from memory, REFERENCES §9):

* **noise** (Type A): the estimator's own standard uncertainty from the record's noise
  (fit covariance, edge-regression scatter, percentile noise) — sensitivity 1.
* **timebase** (Type B): the sample clock's relative error u_ppm, sensitivity ∂f/∂ppm =
  f·10⁻⁶ Hz/ppm for frequencies (times scale as −t·10⁻⁶ s/ppm). A calibrated clock uses the
  profile's u (normal); an uncalibrated one the stated default
  (:data:`benchfit.uncertainty.DEFAULT_TIMEBASE_HALF_WIDTH_PPM`, rectangular).
* **gain** (Type B): relative gain error, sensitivity = the level itself (a level in V is
  samples × gain). Levels in FS carry no gain row.
* **card distortion** (Type B): a THD the card itself adds, known from ``calibrate
  distortion``: the card's harmonics add to the unit's with unknown phase, so the unit's THD
  lies within ± the floor of the reading; taken as rectangular of half-width floor.

Ratios of times or of levels of one channel (duty cycle, THD, SINAD) do not depend on the
gain or on the clock, so they carry no such row.
"""

from __future__ import annotations

import math

from benchfit.uncertainty import Budget, Contribution

__all__ = ["channel_budgets"]


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
                    times: dict[str, tuple[float | None, float | None]] | None = None) -> dict[str, Budget]:
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
            rows.append(Contribution("gain", "B", "normal" if "default" not in gain_source else "rectangular",
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
