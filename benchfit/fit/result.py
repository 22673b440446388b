"""Result of a model fit: :class:`FitResult`, a frozen dataclass with the JSON contract.

Built by the fits (``fit/budgets.py``, ``fit/ringdown.py``) from their own arrays so that
report, log and design code get a stable schema. ``to_dict()`` returns exactly the object
``benchfit fit --json`` prints (DESIGN.md, "JSON contracts").
"""

from __future__ import annotations

import html
import math
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Any, Literal, Mapping

import numpy as np

__all__ = ["FitParameter", "DerivedValue", "FitQuality", "FitCurves", "FitResult",
           "PARAMETER_UNITS", "DERIVED_UNITS", "Method"]

Method = Literal["two-channel", "one-channel", "ringdown"]

#: units of the lc-lowpass model's parameters
PARAMETER_UNITS: Mapping[str, str] = MappingProxyType(
    {"L": "H", "C": "F", "Rs": "ohm", "Resr": "ohm", "Rload": "ohm", "Rp": "ohm"})


def _budget_from(d):
    if not d:
        return None
    from benchfit.uncertainty import Budget

    return Budget.from_dict(d)


def _num(v: float | None) -> float | None:
    if v is None:
        return None
    v = float(v)
    return v if math.isfinite(v) else None


def _budget_dict(b) -> dict[str, Any] | None:
    return None if b is None else b.to_dict()


@dataclass(frozen=True)
class FitParameter:
    """A model parameter: value and standard uncertainty (None when the data do not determine it).

    ``stderr`` is the *combined* standard uncertainty (k = 1) of everything in ``budget``:
    the fit's own (noise, Birge-scaled by √χ²_red when the residuals exceed the noise) and
    the tolerances of fixed inputs propagated into it. ``u_fit`` is the fit's part alone.
    A fixed part's ``stderr`` is its tolerance's standard uncertainty (None: no tolerance).
    ``conditional_on`` names fixed inputs without a tolerance: the value holds only if they do.
    """

    value: float | None
    stderr: float | None
    fixed: bool
    unit: str
    u_fit: float | None = None
    budget: Any = None  # benchfit.uncertainty.Budget or None
    conditional_on: tuple[str, ...] = ()

    def to_dict(self) -> dict[str, Any]:
        return {"value": _num(self.value), "stderr": _num(self.stderr),
                "fixed": bool(self.fixed), "unit": self.unit,
                "u_fit": _num(self.u_fit), "budget": _budget_dict(self.budget),
                "conditional_on": list(self.conditional_on)}


#: the unit of every derived value a fit reports (the JSON contract's spelling: "ohm", "1" for
#: a ratio); the budgets, the DataFrame and the measurement log take units from here
DERIVED_UNITS: Mapping[str, str] = MappingProxyType({
    "resonant_frequency_hz": "Hz", "natural_frequency_hz": "Hz", "damped_frequency_hz": "Hz",
    "decay_rate_per_s": "1/s", "q_factor": "1", "series_loss_ohm": "ohm", "total_loss_ohm": "ohm",
    "drive_asymmetry_ohm": "ohm"})


@dataclass(frozen=True)
class DerivedValue:
    """A quantity computed from the parameters, with propagated standard uncertainty.

    ``stderr`` is the combined standard uncertainty (see :class:`FitParameter`), ``u_fit``
    the fit's part alone, ``budget`` the rows.
    """

    value: float | None
    stderr: float | None
    u_fit: float | None = None
    budget: Any = None
    conditional_on: tuple[str, ...] = ()

    def to_dict(self) -> dict[str, Any]:
        return {"value": _num(self.value), "stderr": _num(self.stderr), "u_fit": _num(self.u_fit),
                "budget": _budget_dict(self.budget), "conditional_on": list(self.conditional_on)}


@dataclass(frozen=True)
class FitQuality:
    """Goodness of fit: normalised RMS error, coefficient of determination, points used."""

    nrmse: float
    r_squared: float
    n_points: int

    def to_dict(self) -> dict[str, Any]:
        return {"nrmse": _num(self.nrmse), "r_squared": _num(self.r_squared),
                "n_points": int(self.n_points)}


@dataclass(frozen=True, eq=False)
class FitCurves:
    """Arrays for figures (not part of the JSON contract).

    time_s, data, model : the fitted waveform over time (``model`` may be empty)
    harmonic_hz : frequencies of the harmonics used
    h_measured, h_model : complex response (or output phasors) at those frequencies
    h_measured_u : standard uncertainty of ``|h_measured|``
    residual : data − model on the points actually fitted (time or frequency domain)
    """

    time_s: np.ndarray = field(default_factory=lambda: np.zeros(0))
    data: np.ndarray = field(default_factory=lambda: np.zeros(0))
    model: np.ndarray = field(default_factory=lambda: np.zeros(0))
    harmonic_hz: np.ndarray = field(default_factory=lambda: np.zeros(0))
    h_measured: np.ndarray = field(default_factory=lambda: np.zeros(0, complex))
    h_model: np.ndarray = field(default_factory=lambda: np.zeros(0, complex))
    h_measured_u: np.ndarray = field(default_factory=lambda: np.zeros(0))
    residual: np.ndarray = field(default_factory=lambda: np.zeros(0))


@dataclass(frozen=True, eq=False)
class FitResult:
    """Effective parameters back-solved from a measured response."""

    file: str
    model: str
    method: Method
    parameters: Mapping[str, FitParameter]
    derived: Mapping[str, DerivedValue]
    correlations: Mapping[str, float]
    quality: FitQuality
    warnings: tuple[str, ...] = ()
    curves: FitCurves = field(default_factory=FitCurves)
    success: bool = True
    message: str = ""
    #: inputs held fixed during the fit (name → FixedValue.to_dict() plus "role"), and the
    #: names among them without a tolerance (every result is conditional on those)
    inputs: Mapping[str, Any] = field(default_factory=dict)
    conditional_on: tuple[str, ...] = ()
    #: model comparison and adequacy (χ²_red, Birge ratio, alternatives tried), JSON-safe
    adequacy: Mapping[str, Any] = field(default_factory=dict)

    def __post_init__(self) -> None:
        object.__setattr__(self, "inputs", MappingProxyType(dict(self.inputs)))
        object.__setattr__(self, "conditional_on", tuple(self.conditional_on))
        object.__setattr__(self, "adequacy", MappingProxyType(dict(self.adequacy)))
        object.__setattr__(self, "parameters", MappingProxyType(dict(self.parameters)))
        object.__setattr__(self, "derived", MappingProxyType(dict(self.derived)))
        object.__setattr__(self, "correlations", MappingProxyType(dict(self.correlations)))
        object.__setattr__(self, "warnings", tuple(self.warnings))

    def to_dict(self) -> dict[str, Any]:
        """The ``benchfit fit --json`` object (DESIGN.md contract)."""
        return {
            "file": self.file, "model": self.model, "method": self.method,
            "parameters": {k: p.to_dict() for k, p in self.parameters.items()},
            "derived": {k: d.to_dict() for k, d in self.derived.items()},
            "correlations": {k: _num(v) for k, v in self.correlations.items()},
            "quality": self.quality.to_dict(),
            "warnings": list(self.warnings),
            # added by issue 11 (uncertainty budgets); the keys above are unchanged
            "inputs": {k: dict(v) for k, v in self.inputs.items()},
            "conditional_on": list(self.conditional_on),
            "adequacy": dict(self.adequacy),
        }

    @classmethod
    def from_dict(cls, d: Mapping[str, Any]) -> "FitResult":
        """Rebuild a result (without curves) from its JSON object, e.g. for ``design trim``."""
        return cls(
            file=str(d["file"]), model=str(d["model"]), method=d["method"],
            parameters={k: FitParameter(v.get("value"), v.get("stderr"), bool(v.get("fixed", False)),
                                        v.get("unit", ""), v.get("u_fit"), _budget_from(v.get("budget")),
                                        tuple(v.get("conditional_on", ())))
                        for k, v in d.get("parameters", {}).items()},
            derived={k: DerivedValue(v.get("value"), v.get("stderr"), v.get("u_fit"), _budget_from(v.get("budget")),
                                     tuple(v.get("conditional_on", ())))
                     for k, v in d.get("derived", {}).items()},
            inputs=dict(d.get("inputs", {})), conditional_on=tuple(d.get("conditional_on", ())),
            adequacy=dict(d.get("adequacy", {})),
            correlations=dict(d.get("correlations", {})),
            quality=FitQuality(**d["quality"]) if "quality" in d else FitQuality(float("nan"), float("nan"), 0),
            warnings=tuple(d.get("warnings", ())),
        )

    def to_dataframe(self):
        """Parameters and derived values as a pandas DataFrame (value, stderr, unit, fixed)."""
        import pandas as pd

        rows = [{"name": k, "value": p.value, "stderr": p.stderr, "unit": p.unit, "fixed": p.fixed}
                for k, p in self.parameters.items()]
        rows += [{"name": k, "value": v.value, "stderr": v.stderr, "unit": DERIVED_UNITS.get(k, ""), "fixed": False}
                 for k, v in self.derived.items()]
        return pd.DataFrame(rows).set_index("name")

    def _repr_html_(self) -> str:
        rows = ""
        for k, p in self.parameters.items():
            err = "not determined" if p.stderr is None and not p.fixed else ("fixed" if p.fixed else f"± {p.stderr:.3g}")
            val = "—" if p.value is None else f"{p.value:.5g}"
            rows += f"<tr><td>{html.escape(k)}</td><td>{val} {p.unit}</td><td>{err}</td></tr>"
        for k, v in self.derived.items():
            val = "—" if v.value is None else f"{v.value:.6g}"
            err = "" if v.stderr is None else f"± {v.stderr:.3g}"
            unit = DERIVED_UNITS.get(k, "")
            rows += f"<tr><td>{html.escape(k)}</td><td>{val} {'' if unit == '1' else unit}</td><td>{err}</td></tr>"
        warn = "".join(f"<li>{html.escape(w)}</li>" for w in self.warnings)
        return (f"<div><b>Fit</b> {html.escape(self.model)} ({html.escape(self.method)}) of "
                f"{html.escape(self.file)}<table>{rows}</table>"
                + (f"<ul>{warn}</ul>" if warn else "") + "</div>")
