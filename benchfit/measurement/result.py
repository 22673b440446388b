"""Result objects of :func:`benchfit.measure`: frozen dataclasses with the JSON contract.

``Measurement.to_dict()`` returns exactly the object ``benchfit measure --json`` prints
(DESIGN.md, "JSON contracts"). Extra detail that is not part of the contract (uncertainties
of levels, overshoot, the analysis settings) is kept in ``ChannelMeasurement.extra`` and
appears with ``to_dict(full=True)``.
"""

from __future__ import annotations

import html
import math
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Any, Mapping

__all__ = ["Harmonic", "ChannelMeasurement", "Measurement"]


def _clean(v: Any) -> Any:
    """JSON-safe float: NaN/inf become None."""
    if isinstance(v, float) and not math.isfinite(v):
        return None
    return v


@dataclass(frozen=True)
class Harmonic:
    """One line of the harmonic table: ``order`` × fundamental, peak amplitude, phase (cosine reference)."""

    order: int
    frequency_hz: float
    amplitude: float
    phase_deg: float
    amplitude_u: float | None = None

    def to_dict(self) -> dict[str, Any]:
        return {"order": self.order, "frequency_hz": self.frequency_hz,
                "amplitude": self.amplitude, "phase_deg": self.phase_deg}


@dataclass(frozen=True)
class ChannelMeasurement:
    """Everything measured on one channel. Values in SI units (or FS), ``None`` when not applicable."""

    name: str
    unit: str
    frequency_hz: float | None
    frequency_u_hz: float | None
    amplitude: float | None
    vdc: float
    vrms: float
    vpp: float
    duty_cycle_pct: float | None
    rise_time_s: float | None
    fall_time_s: float | None
    thd_pct: float | None
    thd_n_pct: float | None
    sinad_db: float | None
    harmonics: tuple[Harmonic, ...] = ()
    clipped: bool = False
    warnings: tuple[str, ...] = ()
    #: extra results and settings outside the JSON contract (uncertainties, overshoot, H, …)
    extra: Mapping[str, Any] = field(default_factory=dict)
    #: GUM budget per reported quantity (benchfit.uncertainty.Budget), e.g. "frequency_hz"
    budget: Mapping[str, Any] = field(default_factory=dict)

    def __post_init__(self) -> None:
        object.__setattr__(self, "harmonics", tuple(self.harmonics))
        object.__setattr__(self, "warnings", tuple(self.warnings))
        object.__setattr__(self, "extra", MappingProxyType(dict(self.extra)))
        object.__setattr__(self, "budget", MappingProxyType(dict(self.budget)))

    def to_dict(self, full: bool = False) -> dict[str, Any]:
        d = {
            "name": self.name, "unit": self.unit,
            "frequency_hz": _clean(self.frequency_hz), "frequency_u_hz": _clean(self.frequency_u_hz),
            "amplitude": _clean(self.amplitude),
            "vdc": _clean(self.vdc), "vrms": _clean(self.vrms), "vpp": _clean(self.vpp),
            "duty_cycle_pct": _clean(self.duty_cycle_pct),
            "rise_time_s": _clean(self.rise_time_s), "fall_time_s": _clean(self.fall_time_s),
            "thd_pct": _clean(self.thd_pct), "thd_n_pct": _clean(self.thd_n_pct),
            "sinad_db": _clean(self.sinad_db),
            "harmonics": [h.to_dict() for h in self.harmonics],
            "clipped": bool(self.clipped), "warnings": list(self.warnings),
            # added to the DESIGN.md contract: the GUM budget of each quantity that has a u
            "budget": {k: b.to_dict() for k, b in self.budget.items()},
        }
        if full:
            d["extra"] = {k: _clean(v) for k, v in self.extra.items()}
        return d


@dataclass(frozen=True)
class Measurement:
    """Measurement of a whole capture: one :class:`ChannelMeasurement` per channel."""

    file: str
    sample_rate_hz: float
    duration_s: float
    channels: tuple[ChannelMeasurement, ...]
    sha256: str | None = None

    def __post_init__(self) -> None:
        object.__setattr__(self, "channels", tuple(self.channels))

    def channel(self, key: str | int) -> ChannelMeasurement:
        """A channel's results by name (case-insensitive) or 0-based index."""
        if isinstance(key, int):
            return self.channels[key]
        for ch in self.channels:
            if ch.name.lower() == key.lower():
                return ch
        raise KeyError(f"no channel {key!r}; channels are {[c.name for c in self.channels]}")

    def to_dict(self, full: bool = False) -> dict[str, Any]:
        """The ``benchfit measure --json`` object (DESIGN.md contract)."""
        return {"file": self.file, "sample_rate_hz": self.sample_rate_hz,
                "duration_s": self.duration_s,
                "channels": [c.to_dict(full=full) for c in self.channels]}

    def to_dataframe(self):
        """One row per channel, one column per scalar result (pandas DataFrame)."""
        import pandas as pd

        rows = []
        for c in self.channels:
            d = c.to_dict()
            d.pop("harmonics")
            d.pop("budget")
            d["warnings"] = "; ".join(d["warnings"])
            rows.append(d)
        return pd.DataFrame(rows).set_index("name")

    def _repr_html_(self) -> str:
        keys = [("frequency_hz", "frequency", "Hz"), ("amplitude", "amplitude", ""),
                ("vrms", "rms", ""), ("duty_cycle_pct", "duty cycle", "%"),
                ("thd_pct", "THD", "%")]
        head = "".join(f"<th>{label}</th>" for _, label, _ in keys)
        body = ""
        for c in self.channels:
            d = c.to_dict()
            cells = ""
            for k, _, unit in keys:
                v = d[k]
                u = unit or c.unit
                if k == "frequency_hz" and v is not None and d["frequency_u_hz"] is not None:
                    cells += f"<td>{v:.6g} ± {d['frequency_u_hz']:.2g} {u}</td>"
                else:
                    cells += f"<td>{'—' if v is None else f'{v:.5g} {u}'}</td>"
            body += f"<tr><td>{html.escape(c.name)}</td>{cells}</tr>"
        return (f"<div><b>Measurement</b> {html.escape(self.file)}<table><tr><th>channel</th>{head}</tr>"
                f"{body}</table></div>")
