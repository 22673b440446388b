"""Specification files and the decision rule: is a measured value within its limits?

A spec is a TOML file with benchfit's own keys. Example (``sample_captures/hc_spec.toml``)::

    [spec]
    name = "hum-check box"            # free text, shown in the report
    revision = "A"                    # free text
    decision_rule = "guard-banded"    # "simple" | "guard-banded" | "guard-banded-binary"

    [conditions]                      # test conditions: free text and/or numbers
    load = "10 kΩ resistor across the output"
    load_ohm = 10000
    supply = "12 V bench supply"
    supply_v = 12.0

    [[limit]]
    quantity = "frequency_hz"         # a measured or fitted quantity (see QUANTITIES)
    channel = "output"                # channel name or 1-based number (measured quantities)
    nominal = 50.0
    tolerance = 0.25                  # ± around nominal, in the quantity's unit

    [[limit]]
    quantity = "thd_pct"
    max = 5.0

    [[limit]]
    quantity = "vrms"
    min = 1.0
    max = 1.6
    unit = "V"                        # required unit of the channel (V or FS), default V

Keys of a ``[[limit]]`` table:

``quantity``
    One of :data:`MEASURED_QUANTITIES` (from ``benchfit measure``),
    :data:`FITTED_QUANTITIES` (parameters and derived values of ``benchfit fit``) or
    :data:`DRIFT_QUANTITIES` (the stability summary of ``benchfit drift``: ``warmup_s``,
    ``drift_ppm_per_h``, ``adev_1s``, …; judged from the run given to ``report --drift``).
``channel``
    Name (case-insensitive) or 1-based number of the channel a measured quantity is taken
    from. Default: the only channel, else the channel named ``output``.
``nominal``
    Nominal value (required with ``tolerance`` or ``tolerance_pct``).
``tolerance`` / ``tolerance_pct``
    Symmetric limits nominal ± tolerance (same unit as the quantity) or ± percent of nominal.
``min`` / ``max``
    Absolute lower / upper limit; one of them may be left out (one-sided limit).
    Not combinable with a tolerance.
``unit``
    For level quantities (amplitude, vdc, vrms, vpp) the unit the channel must be in:
    ``"V"`` (default) or ``"FS"``. An uncalibrated capture (FS) cannot be judged against
    a limit in volts.
``label``
    Optional display name.

Decision rules (ILAC-G8:09/2019, "Guidelines on Decision Rules and Statements of
Conformity"), U = expanded uncertainty with k = 2 (JCGM 100:2008, 6.2.1), guard band w = U:

``simple``  (4.2.1, binary, simple acceptance, w = 0)
    pass when the value lies inside the tolerance interval (limits included), else fail.
``guard-banded-binary``  (4.2.2, binary with guard band, acceptance limit AL = TL − w)
    pass when the value lies inside the acceptance interval (limits included), else fail.
``guard-banded``  (4.2.3, non-binary with guard band w = U)
    pass when the value is inside the tolerance by more than w; conditional pass within w
    inside a limit (limit included); conditional fail within w outside a limit (TL + w
    included); fail beyond. The value exactly at TL is a conditional pass, the value
    exactly at TL − w is a conditional pass.

A value that could not be measured gives ``not measured``. When a guard-banded rule is
chosen but the method gives no uncertainty for a value, simple acceptance is applied to
it and the decision carries a note saying so.

Overall verdict (:func:`overall_verdict`): ``fail`` if any limit gives fail, conditional
fail or not measured; else ``conditional pass`` if any limit gives conditional pass; else
``pass``. The command line exits 1 on ``fail`` (conditional fail counts as fail; a
conditional pass exits 0).
"""

from __future__ import annotations

import datetime
import math
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from types import MappingProxyType
from typing import Any, Literal, Mapping, get_args

from benchfit.errors import SpecError

__all__ = [
    "DecisionRule", "DecisionLabel", "Limit", "Spec", "Decision",
    "MEASURED_QUANTITIES", "FITTED_QUANTITIES", "DRIFT_QUANTITIES", "QUANTITY_UNITS",
    "load_spec", "parse_spec", "decide", "overall_verdict", "quantity_unit", "uncertainty_keys",
]

DecisionRule = Literal["simple", "guard-banded", "guard-banded-binary"]
DecisionLabel = Literal["pass", "conditional pass", "conditional fail", "fail", "not measured"]

#: quantities of ``benchfit measure`` (DESIGN.md JSON contract) and their unit;
#: "<channel>" means the channel's own unit (V or FS)
MEASURED_QUANTITIES: Mapping[str, str] = MappingProxyType({
    "frequency_hz": "Hz", "amplitude": "<channel>", "vdc": "<channel>", "vrms": "<channel>",
    "vpp": "<channel>", "duty_cycle_pct": "%", "rise_time_s": "s", "fall_time_s": "s",
    "thd_pct": "%", "thd_n_pct": "%", "sinad_db": "dB",
})

#: parameters and derived values of ``benchfit fit`` (DESIGN.md JSON contract) and their unit
FITTED_QUANTITIES: Mapping[str, str] = MappingProxyType({
    "L": "H", "C": "F", "Rs": "ohm", "Resr": "ohm", "Rload": "ohm",
    "resonant_frequency_hz": "Hz", "q_factor": "", "damped_frequency_hz": "Hz",
    "decay_rate_per_s": "1/s",
})

#: stability summary of ``benchfit drift`` (judged when the report is given a drift run) and its unit
DRIFT_QUANTITIES: Mapping[str, str] = MappingProxyType({
    "warmup_s": "s", "drift_ppm_per_h": "ppm/h", "adev_1s": "", "level_drift_pct_per_h": "%/h",
    "final_frequency_hz": "Hz", "thd_max_pct": "%",
})

#: every quantity a spec may name, with its unit
QUANTITY_UNITS: Mapping[str, str] = MappingProxyType({**MEASURED_QUANTITIES, **FITTED_QUANTITIES,
                                                      **DRIFT_QUANTITIES})

_LIMIT_KEYS = ("quantity", "channel", "nominal", "tolerance", "tolerance_pct", "min", "max",
               "unit", "label")
_SPEC_KEYS = ("name", "revision", "decision_rule", "notes")
_TOP_KEYS = ("spec", "conditions", "limit")


def quantity_unit(quantity: str, channel_unit: str | None = None) -> str:
    """Display unit of a quantity; level quantities take the channel's unit (default V)."""
    unit = QUANTITY_UNITS.get(quantity, "")
    if unit == "<channel>":
        return channel_unit or "V"
    return unit


_UNIT_SUFFIXES = ("_per_s", "_hz", "_pct", "_s", "_db")


def uncertainty_keys(quantity: str) -> tuple[str, ...]:
    """Names under which a measured quantity's standard uncertainty (k = 1) may be stored.

    ``frequency_hz`` → ``frequency_u_hz`` (the DESIGN.md contract name); ``thd_pct`` →
    ``thd_u_pct``; ``vrms`` → ``vrms_u``. The second name (``<quantity>_u``) is also accepted.
    """
    for suffix in _UNIT_SUFFIXES:
        if quantity.endswith(suffix):
            base = quantity[: -len(suffix)]
            return (f"{base}_u{suffix}", f"{quantity}_u")
    return (f"{quantity}_u",)


@dataclass(frozen=True)
class Limit:
    """Limits for one quantity.

    Attributes
    ----------
    quantity : str
        Key of :data:`QUANTITY_UNITS`.
    lower, upper : float or None
        Tolerance limits (TL) in the quantity's SI unit; ``None`` for a one-sided limit.
    nominal : float or None
        Nominal value, shown in the report.
    channel : str or int or None
        Channel name, or 0-based index, for a measured quantity; ``None`` = default choice.
    unit : str
        Unit of the limit values ("Hz", "%", "V", ...).
    label : str
        Display name.
    """

    quantity: str
    lower: float | None
    upper: float | None
    nominal: float | None = None
    channel: str | int | None = None
    unit: str = ""
    label: str = ""

    @property
    def source(self) -> Literal["measure", "fit", "drift"]:
        """Where the value comes from: ``"measure"``, ``"fit"`` or ``"drift"`` (a drift run)."""
        if self.quantity in DRIFT_QUANTITIES:
            return "drift"
        return "fit" if self.quantity in FITTED_QUANTITIES else "measure"

    def to_dict(self) -> dict[str, Any]:
        return {"quantity": self.quantity, "label": self.label, "channel": self.channel,
                "nominal": self.nominal, "lower": self.lower, "upper": self.upper,
                "unit": self.unit, "source": self.source}


@dataclass(frozen=True)
class Spec:
    """A parsed specification file."""

    name: str
    revision: str
    decision_rule: DecisionRule
    limits: tuple[Limit, ...]
    conditions: Mapping[str, Any] = field(default_factory=dict)
    notes: str = ""
    path: str | None = None

    def __post_init__(self) -> None:
        object.__setattr__(self, "limits", tuple(self.limits))
        object.__setattr__(self, "conditions", MappingProxyType(dict(self.conditions)))

    @property
    def needs_fit(self) -> bool:
        """True when any limit names a fitted quantity."""
        return any(lim.source == "fit" for lim in self.limits)

    def limit_for(self, quantity: str) -> Limit | None:
        """The first limit on ``quantity``, or None."""
        for lim in self.limits:
            if lim.quantity == quantity:
                return lim
        return None

    def to_dict(self) -> dict[str, Any]:
        return {"name": self.name, "revision": self.revision, "decision_rule": self.decision_rule,
                "path": self.path, "notes": self.notes, "conditions": dict(self.conditions),
                "limits": [lim.to_dict() for lim in self.limits]}


@dataclass(frozen=True)
class Decision:
    """Outcome of comparing one value with its limits.

    Attributes
    ----------
    decision : str
        One of :data:`DecisionLabel`.
    value : float or None
        The measured value in the limit's unit.
    expanded_u : float or None
        Expanded uncertainty U (k = 2) used for the guard band, same unit.
    rule : str
        The decision rule actually applied (``simple`` when U was missing).
    note : str
        Why the rule fell back or why there is no value; empty otherwise.
    """

    decision: DecisionLabel
    value: float | None
    expanded_u: float | None
    rule: DecisionRule
    note: str = ""

    @property
    def failed(self) -> bool:
        """True for fail, conditional fail and not measured."""
        return self.decision in ("fail", "conditional fail", "not measured")

    def to_dict(self) -> dict[str, Any]:
        return {"decision": self.decision, "value": self.value, "expanded_u": self.expanded_u,
                "rule": self.rule, "note": self.note}


# --- parsing ---------------------------------------------------------------------------

#: no limit of this tool's quantities comes near this magnitude (1e15 Hz, F, Ω …); a larger number is a
#: typing mistake, and sums such as nominal + tolerance would overflow (common practice, no source)
_MAX_MAGNITUDE = 1e15


def _shown(raw: Any) -> str:
    """``repr`` of a spec value for a one-line message, cut to 40 characters."""
    text = repr(raw)
    return text if len(text) <= 40 else text[:37] + "..."


def _number(where: str, key: str, raw: Any) -> float:
    if isinstance(raw, bool) or not isinstance(raw, (int, float)):
        raise SpecError(f"{where}: {key} = {_shown(raw)} is not a number — write a plain number in SI units, "
                        f"e.g. {key} = 0.25")
    try:
        value = float(raw)
    except OverflowError:  # an integer with hundreds of digits
        value = math.inf
    if not math.isfinite(value):
        raise SpecError(f"{where}: {key} = {_shown(raw)} is not finite — give a finite number")
    if abs(value) > _MAX_MAGNITUDE:
        raise SpecError(f"{where}: {key} = {_shown(raw)} is beyond any limit of this tool (|value| > "
                        f"{_MAX_MAGNITUDE:.0e}) — check the number and its SI unit")
    return value


def _parse_limit(where: str, raw: Any) -> Limit:
    if not isinstance(raw, dict):
        raise SpecError(f"{where}: must be a table with quantity and limits — write it as [[limit]]")
    for key in raw:
        if key not in _LIMIT_KEYS:
            raise SpecError(f"{where}.{key}: unknown key — use one of {', '.join(_LIMIT_KEYS)}")
    quantity = raw.get("quantity")
    if quantity is None:
        raise SpecError(f"{where}.quantity: missing — name what is checked, e.g. quantity = \"frequency_hz\"")
    if not isinstance(quantity, str) or quantity not in QUANTITY_UNITS:
        raise SpecError(f"{where}.quantity: unknown quantity {_shown(quantity)} — use one of "
                        f"{', '.join(QUANTITY_UNITS)}")
    where_q = f"{where} ({quantity})"
    nums = {k: _number(where_q, k, raw[k]) for k in ("nominal", "tolerance", "tolerance_pct", "min", "max")
            if k in raw}
    has_tol = [k for k in ("tolerance", "tolerance_pct") if k in nums]
    has_abs = [k for k in ("min", "max") if k in nums]
    if len(has_tol) == 2:
        raise SpecError(f"{where_q}: both tolerance and tolerance_pct are given — keep one of them")
    if has_tol and has_abs:
        raise SpecError(f"{where_q}: {has_tol[0]} and {has_abs[0]} are both given — use either a tolerance "
                        "around nominal or absolute min/max")
    if not has_tol and not has_abs:
        raise SpecError(f"{where_q}: no limits — add tolerance, tolerance_pct, min or max")
    nominal = nums.get("nominal")
    lower: float | None
    upper: float | None
    if has_tol:
        key = has_tol[0]
        if nominal is None:
            raise SpecError(f"{where_q}.nominal: missing — {key} needs a nominal value to be applied to")
        tol = nums[key]
        if tol <= 0:
            raise SpecError(f"{where_q}.{key}: {raw[key]!r} must be positive — give the half-width of the interval")
        half = tol if key == "tolerance" else abs(nominal) * tol / 100.0
        lower, upper = nominal - half, nominal + half
    else:
        lower, upper = nums.get("min"), nums.get("max")
        if lower is not None and upper is not None and not lower < upper:
            raise SpecError(f"{where_q}.min: {lower!r} is not below max = {upper!r} — swap or correct them")
    channel = raw.get("channel")
    if channel is not None:
        if isinstance(channel, bool) or not isinstance(channel, (str, int)):
            raise SpecError(f"{where_q}.channel: {_shown(channel)} — give a channel name or a 1-based number")
        if isinstance(channel, int):
            if channel < 1:
                raise SpecError(f"{where_q}.channel: {channel} — channel numbers start at 1")
            channel = channel - 1
        if quantity in FITTED_QUANTITIES:
            raise SpecError(f"{where_q}.channel: a fitted quantity has no channel — remove the key")
    unit = quantity_unit(quantity)
    if "unit" in raw:
        if QUANTITY_UNITS[quantity] != "<channel>":
            raise SpecError(f"{where_q}.unit: only level quantities (amplitude, vdc, vrms, vpp) take a unit "
                            f"— {quantity} is always in {unit or 'no unit'}; remove the key")
        if raw["unit"] not in ("V", "FS"):
            raise SpecError(f"{where_q}.unit: {_shown(raw['unit'])} — use \"V\" or \"FS\"")
        unit = raw["unit"]
    label = raw.get("label", "")
    if not isinstance(label, str):
        raise SpecError(f"{where_q}.label: {_shown(label)} — give text")
    return Limit(quantity=quantity, lower=lower, upper=upper, nominal=nominal, channel=channel,
                 unit=unit, label=label or quantity)


def parse_spec(data: Mapping[str, Any], where: str = "spec") -> Spec:
    """Build a :class:`Spec` from the parsed TOML mapping; ``where`` names the file in errors."""
    for key in data:
        if key not in _TOP_KEYS:
            raise SpecError(f"{where}: unknown table {_shown(key)} — use [spec], [conditions] and [[limit]]")
    head = data.get("spec", {})
    if not isinstance(head, dict):
        raise SpecError(f"{where}: spec must be a table — write it as [spec]")
    for key in head:
        if key not in _SPEC_KEYS:
            raise SpecError(f"{where}: spec.{key} is an unknown key — use one of {', '.join(_SPEC_KEYS)}")
    rule = head.get("decision_rule", "simple")
    if rule not in get_args(DecisionRule):
        raise SpecError(f"{where}: spec.decision_rule = {_shown(rule)} is unknown — use one of "
                        f"{', '.join(get_args(DecisionRule))}")
    for key in ("name", "revision", "notes"):
        if key in head and not isinstance(head[key], str):
            raise SpecError(f"{where}: spec.{key} = {_shown(head[key])} — give text in quotes")
    conditions = data.get("conditions", {})
    if not isinstance(conditions, dict):
        raise SpecError(f"{where}: conditions must be a table — write it as [conditions]")
    conditions = dict(conditions)
    for key, value in conditions.items():
        if isinstance(value, (dict, list)):
            raise SpecError(f"{where}: conditions.{key} must be text or a number — nested tables are not allowed")
        if isinstance(value, (datetime.date, datetime.time)):  # a TOML date or time: kept as its ISO text
            conditions[key] = value.isoformat()
        elif isinstance(value, (int, float)) and not isinstance(value, bool):
            _number(f"{where}: conditions", key, value)
    raw_limits = data.get("limit")
    if raw_limits is None:
        raise SpecError(f"{where}: no [[limit]] tables — add at least one limit")
    if not isinstance(raw_limits, list) or not raw_limits:
        raise SpecError(f"{where}: limit must be an array of tables — write each one as [[limit]]")
    limits = tuple(_parse_limit(f"{where}: limit {i + 1}", item) for i, item in enumerate(raw_limits))
    seen: set[tuple[str, Any]] = set()
    for lim in limits:
        pair = (lim.quantity, lim.channel)
        if pair in seen:
            raise SpecError(f"{where}: two limits on {lim.quantity}"
                            f"{'' if lim.channel is None else f' (channel {_shown(lim.channel)})'} — keep one")
        seen.add(pair)
    return Spec(name=head.get("name", ""), revision=head.get("revision", ""), decision_rule=rule,
                limits=limits, conditions=conditions, notes=head.get("notes", ""),
                path=None if where == "spec" else where)


def load_spec(path: str | Path) -> Spec:
    """Read a spec TOML file.

    Raises
    ------
    SpecError
        One line naming the file and key when the file is missing or malformed.
    """
    p = Path(path)
    try:
        with p.open("rb") as f:
            data = tomllib.load(f)
    except FileNotFoundError as e:
        raise SpecError(f"{p}: spec file not found — check the path of the spec file") from e
    except IsADirectoryError as e:
        raise SpecError(f"{p}: is a folder, not a spec file — give the path of the spec TOML file itself") from e
    except OSError as e:
        raise SpecError(f"{p}: cannot read the spec file ({e.strerror}) — check its permissions") from e
    except tomllib.TOMLDecodeError as e:
        raise SpecError(f"{p}: not valid TOML ({e}) — fix the syntax") from e
    except RecursionError as e:  # arrays or tables nested thousands deep: no spec looks like that
        raise SpecError(f"{p}: nested too deeply to be a spec file — fix the file (a spec holds flat "
                        "[spec], [conditions] and [[limit]] tables)") from e
    except UnicodeDecodeError as e:
        raise SpecError(f"{p}: not UTF-8 text (byte {e.start} is not UTF-8) — save the spec as UTF-8") from e
    return parse_spec(data, str(p))


# --- the decision rule -----------------------------------------------------------------

_ORDER: dict[str, int] = {"pass": 0, "conditional pass": 1, "conditional fail": 2, "fail": 3,
                          "not measured": 4}


def _side(distance_inside: float, w: float, rule: DecisionRule) -> DecisionLabel:
    """Classify one side. ``distance_inside`` = how far the value is inside that limit (TL)."""
    if rule == "simple":
        return "pass" if distance_inside >= 0 else "fail"
    if rule == "guard-banded-binary":
        return "pass" if distance_inside >= w else "fail"
    # guard-banded, non-binary (ILAC-G8:09/2019 4.2.3)
    if distance_inside > w:
        return "pass"
    if distance_inside >= 0:
        return "conditional pass"
    if distance_inside >= -w:
        return "conditional fail"
    return "fail"


def decide(value: float | None, expanded_u: float | None, lower: float | None, upper: float | None,
           rule: DecisionRule) -> Decision:
    """Apply a decision rule to one value.

    Parameters
    ----------
    value : float or None
        Measured value (the limit's unit); ``None`` gives ``not measured``.
    expanded_u : float or None
        Expanded uncertainty U (k = 2), same unit; the guard band is w = U.
    lower, upper : float or None
        Tolerance limits; ``None`` for an open side.
    rule : DecisionRule
        ``simple``, ``guard-banded`` or ``guard-banded-binary``.
    """
    if rule not in get_args(DecisionRule):
        raise SpecError(f"decision_rule: {rule!r} is unknown — use one of {', '.join(get_args(DecisionRule))}")
    if value is None or not math.isfinite(value):
        return Decision("not measured", None, expanded_u, rule, "no value — the method could not determine it")
    applied: DecisionRule = rule
    note = ""
    w = 0.0
    if rule != "simple":
        if expanded_u is None or not math.isfinite(expanded_u) or expanded_u < 0:
            applied, note = "simple", "no uncertainty available — simple acceptance applied"
            expanded_u = None
        else:
            w = expanded_u
    labels: list[DecisionLabel] = []
    if upper is not None:
        labels.append(_side(upper - value, w, applied))
    if lower is not None:
        labels.append(_side(value - lower, w, applied))
    worst: DecisionLabel = max(labels, key=_ORDER.__getitem__) if labels else "pass"
    return Decision(worst, value, expanded_u, applied, note)


def overall_verdict(decisions: list[Decision] | tuple[Decision, ...]) -> DecisionLabel:
    """One verdict for a unit: ``fail``, ``conditional pass`` or ``pass`` (see module docstring)."""
    if not decisions:
        raise SpecError("spec: no decisions to combine — the spec has no limits")
    if any(d.failed for d in decisions):
        return "fail"
    if any(d.decision == "conditional pass" for d in decisions):
        return "conditional pass"
    return "pass"
