"""Electrical stress of a unit: currents, losses and voltages against ratings.

Pure: a :class:`benchfit.model.unit.UnitPrediction` and the ratings in, frozen checks out.

Ratings and their sources:

* timer output current: the NE555's recommended output current is ±200 mA (TI SLFS022,
  "recommended operating conditions"; REFERENCES §11). The same datasheet's output-level
  table shows the stage is far from an ideal switch well below that (high level 13.3 V at
  −100 mA, 12.5 V at −200 mA at VCC = 15 V), so a design near the limit also loses level.
* inductor peak/RMS current, series (I²R) loss, capacitor voltage and ripple current (RMS): the
  parts' own ratings,
  checked only when given (no default exists for an unknown choke or capacitor).
* capacitor below ground: a tank's capacitor swings below 0 V when the output's AC peak
  exceeds its DC level; a polarised (electrolytic) capacitor must then be replaced by a
  non-polar or film type (common practice, no source).
* sound-card input: a line input clips at about 1–2 V peak (from memory); the output peak is
  compared with ``line_in_peak_v`` and the attenuation needed is stated.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

__all__ = ["Ratings", "StressCheck", "stress_checks", "TIMER_OUTPUT_A", "LINE_IN_PEAK_V", "CAUTIONS"]

#: NE555 recommended output current, A (TI SLFS022, recommended operating conditions)
TIMER_OUTPUT_A = 0.200
#: typical full-scale peak of a computer's line input, V (from memory: about 1–2 V peak)
LINE_IN_PEAK_V = 1.0

#: the usual cautions shown with every design and every advice
CAUTIONS: tuple[str, ...] = (
    "switch the supply off and let the capacitors discharge before changing parts; a choke gives a "
    "voltage spike when its current is interrupted, so never break the inductor path while running",
    "a tuned filter can swing well above the supply and below ground: rate capacitors for at least 1.5× "
    "the peak and use non-polar or film capacitors where the voltage reverses (common practice, no source)",
    "before connecting the output to a sound-card input, block the DC and attenuate below the input's full "
    "scale; follow local codes and qualified practice, and never connect mains-derived circuits directly",
)


@dataclass(frozen=True)
class Ratings:
    """Ratings to check against (None: not known, the value is reported but not judged)."""

    timer_output_a: float | None = TIMER_OUTPUT_A
    inductor_peak_a: float | None = None
    inductor_rms_a: float | None = None
    series_loss_w: float | None = None
    capacitor_v: float | None = None
    capacitor_ripple_a: float | None = None
    line_in_peak_v: float | None = LINE_IN_PEAK_V


@dataclass(frozen=True)
class StressCheck:
    """One stress: the predicted value, the rating (None if unknown) and whether it is exceeded."""

    quantity: str
    value: float
    unit: str
    rating: float | None
    flagged: bool
    text: str

    def to_dict(self) -> dict[str, Any]:
        return {"quantity": self.quantity, "value": self.value, "unit": self.unit,
                "rating": self.rating, "flagged": self.flagged, "text": self.text}


def _check(q: str, value: float, unit: str, rating: float | None, what: str, source: str) -> StressCheck:
    over = rating is not None and math.isfinite(value) and abs(value) > rating
    if rating is None:
        text = f"{what} {value:.4g} {unit} (no rating given)"
    else:
        text = (f"{what} {value:.4g} {unit} {'exceeds' if over else 'within'} the "
                f"{rating:.4g} {unit} {source}")
    return StressCheck(q, float(value), unit, rating, bool(over), text)


def stress_checks(pred, ratings: Ratings | None = None) -> tuple[StressCheck, ...]:
    """Every stress of ``pred`` (a UnitPrediction) against ``ratings``.

    Flagged: timer output current above its rating, a given part rating exceeded, and an output
    peak more than 20× the line-input peak (an attenuator is then a must, and a mistake damages
    the input). The capacitor's swing below ground is reported (not flagged) with the
    non-polar/film note.
    """
    r = ratings or Ratings()
    what = ("timer output current peak" if pred.divider_known else
            "timer output current peak (the filter's input current; a divider between timer and filter adds its own)")
    checks = [
        _check("timer_output_peak_a", pred.source_peak_a, "A", r.timer_output_a,
               what, "NE555 recommended output current (TI SLFS022)"),
        _check("inductor_peak_a", pred.inductor_peak_a, "A", r.inductor_peak_a,
               "inductor current peak", "choke rating"),
        _check("inductor_rms_a", pred.inductor_rms_a, "A", r.inductor_rms_a,
               "inductor current RMS", "choke rating"),
        _check("series_loss_w", pred.series_loss_w, "W", r.series_loss_w,
               "I²R loss before the choke (windings, wiring, timer output stage, divider)", "rating"),
        _check("capacitor_peak_v", max(abs(pred.capacitor_max_v), abs(pred.capacitor_min_v)), "V",
               r.capacitor_v, "capacitor voltage peak", "capacitor rating"),
        _check("capacitor_ripple_a", pred.capacitor_rms_a, "A", r.capacitor_ripple_a,
               "capacitor ripple current RMS", "capacitor ripple-current rating"),
    ]
    vmin = pred.capacitor_min_v
    if vmin < 0:
        checks.append(StressCheck("capacitor_min_v", vmin, "V", None, False,
                                  f"capacitor swings to {vmin:.3g} V (below ground): use a non-polar or "
                                  "film capacitor, not a polarised electrolytic"))
    else:
        checks.append(StressCheck("capacitor_min_v", vmin, "V", None, False,
                                  f"capacitor stays above ground (minimum {vmin:.3g} V)"))
    peak = max(abs(pred.output_max_v), abs(pred.output_min_v))  # DC included: what reaches the jack
    if r.line_in_peak_v is not None:
        ratio = peak / r.line_in_peak_v
        flagged = ratio > 20.0
        text = (f"output peak {peak:.3g} V against a {r.line_in_peak_v:g} V peak line input: "
                + (f"attenuate by at least {ratio:.3g}× before connecting" if ratio > 1 else "fits the input"))
        checks.append(StressCheck("output_peak_v", peak, "V", r.line_in_peak_v, flagged, text))
    return tuple(checks)
