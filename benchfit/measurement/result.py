"""Result objects of :func:`benchfit.measure`: frozen dataclasses with the JSON contract.

``Measurement.to_dict()`` returns exactly the object ``benchfit measure --json`` prints
(DESIGN.md, "JSON contracts", plus the keys added since: the levels' and pulse parameters'
standard uncertainties ``vrms_u`` … and each harmonic's ``amplitude_u``). Extra detail that is
not part of the contract (overshoot, the analysis settings) is kept in
``ChannelMeasurement.extra`` and appears with ``to_dict(full=True)``.
"""

from __future__ import annotations

import html
import math
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Any, Mapping

__all__ = ["Harmonic", "ChannelMeasurement", "Measurement", "UNCERTAINTY_FIELDS"]

#: the standard uncertainties that are fields of :class:`ChannelMeasurement` (and JSON keys):
#: ``<quantity>_u`` or ``<quantity>_u_<unit>``, the names benchfit.report.spec.uncertainty_keys reads
UNCERTAINTY_FIELDS = ("amplitude_u", "vdc_u", "vrms_u", "vpp_u", "thd_u_pct", "duty_cycle_u_pct",
                      "rise_time_u_s", "fall_time_u_s")

#: the scalar float columns of Measurement.to_dataframe() (None becomes NaN)
_FLOAT_COLUMNS = ("frequency_hz", "frequency_u_hz", "amplitude", "vdc", "vrms", "vpp", "duty_cycle_pct",
                  "rise_time_s", "fall_time_s", "thd_pct", "thd_n_pct", "sinad_db") + UNCERTAINTY_FIELDS


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
                "amplitude": self.amplitude, "phase_deg": self.phase_deg,
                "amplitude_u": _clean(self.amplitude_u)}


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
    #: extra results and settings outside the JSON contract (overshoot, H, the method, …)
    extra: Mapping[str, Any] = field(default_factory=dict)
    #: standard uncertainties (k = 1) of the levels and pulse parameters, same unit as the value;
    #: None when not measured. Taken from ``extra`` when not given (measure_channel puts them there).
    amplitude_u: float | None = None
    vdc_u: float | None = None
    vrms_u: float | None = None
    vpp_u: float | None = None
    thd_u_pct: float | None = None
    duty_cycle_u_pct: float | None = None
    rise_time_u_s: float | None = None
    fall_time_u_s: float | None = None
    #: GUM budget per reported quantity (benchfit.uncertainty.Budget), e.g. "frequency_hz"
    budget: Mapping[str, Any] = field(default_factory=dict)

    def __post_init__(self) -> None:
        object.__setattr__(self, "harmonics", tuple(self.harmonics))
        object.__setattr__(self, "warnings", tuple(self.warnings))
        object.__setattr__(self, "extra", MappingProxyType(dict(self.extra)))
        for name in UNCERTAINTY_FIELDS:
            if getattr(self, name) is None and self.extra.get(name) is not None:
                object.__setattr__(self, name, float(self.extra[name]))
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
            **{name: _clean(getattr(self, name)) for name in UNCERTAINTY_FIELDS},
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
        """A channel's results by the rule of :func:`~benchfit.capture.capture.resolve_channel`:
        a name (case-insensitive), a 0-based int, or a 1-based number as text. KeyError if none."""
        from benchfit.capture.capture import resolve_channel
        from benchfit.errors import CaptureError

        try:
            return self.channels[resolve_channel(key, [c.name for c in self.channels], self.file or "measurement")]
        except CaptureError as e:
            raise KeyError(str(e)) from None

    def to_dict(self, full: bool = False) -> dict[str, Any]:
        """The ``benchfit measure --json`` object (DESIGN.md contract)."""
        return {"file": self.file, "sample_rate_hz": self.sample_rate_hz,
                "duration_s": self.duration_s,
                "channels": [c.to_dict(full=full) for c in self.channels]}

    def to_dataframe(self):
        """One row per channel, one column per scalar result and its uncertainty (pandas DataFrame).

        Index ``name``; value and uncertainty columns are floats, NaN where not measured
        (e.g. ``duty_cycle_pct`` and ``duty_cycle_u_pct`` of a sine).
        """
        import pandas as pd

        rows = []
        for c in self.channels:
            d = c.to_dict()
            d.pop("harmonics")
            d.pop("budget")
            d["warnings"] = "; ".join(d["warnings"])
            rows.append(d)
        df = pd.DataFrame(rows)
        for col in _FLOAT_COLUMNS:
            df[col] = pd.to_numeric(df[col], errors="coerce").astype(float)
        return df.set_index("name")

    def harmonics_dataframe(self):
        """The harmonic tables, one row per (channel, order) (pandas DataFrame).

        Columns ``frequency_hz``, ``amplitude`` (peak, the channel's unit), ``amplitude_u``
        (standard uncertainty, NaN when not known), ``phase_deg`` (cosine reference) and
        ``unit``; index ``(channel, order)``. Empty (same columns) when no channel has a table.
        """
        import pandas as pd

        rows = [{"channel": c.name, "order": h.order, "frequency_hz": float(h.frequency_hz),
                 "amplitude": float(h.amplitude),
                 "amplitude_u": float("nan") if h.amplitude_u is None else float(h.amplitude_u),
                 "phase_deg": float(h.phase_deg), "unit": c.unit}
                for c in self.channels for h in c.harmonics]
        columns = ["channel", "order", "frequency_hz", "amplitude", "amplitude_u", "phase_deg", "unit"]
        return pd.DataFrame(rows, columns=columns).set_index(["channel", "order"])

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
