"""Turning what a command hands the log (result objects or their dicts) into plain run records.

A *run record* is the backend-neutral form of one run, used to write it, to spool it and to
copy it between logs (merge, sync)::

    {"run": {"uuid", "bench", "unit", "command", "time_utc", "operator", "benchfit_version",
             "verdict", "details_json"},
     "captures": [{"role", "path", "sha256", "metadata_json"}, ...],
     "results": [{"capture": index into captures or None, "role", "source", "channel",
                  "quantity", "value", "uncertainty", "unit"}, ...],
     "decisions": [{"quantity", "channel", "label", "value", "expanded_u", "lower", "upper",
                    "unit", "rule", "decision", "note"}, ...]}

``time_utc`` None means "now, by the clock of the database that stores it". A record read
from a log whose schema has tables of run rows (:data:`benchfit.log.schema.RUN_TABLES`) also
has ``"tables": {name: [row without id and run_id, ...]}``.
"""

from __future__ import annotations

import json
import math
import uuid as _uuid
from typing import Any, Mapping, Sequence

from benchfit.errors import LogError
from benchfit.report.spec import uncertainty_keys

__all__ = ["make_record"]

# scalar quantities of the measure contract (DESIGN.md) and their unit ("<ch>": the channel's)
_MEASURED: tuple[tuple[str, str], ...] = (
    ("frequency_hz", "Hz"), ("amplitude", "<ch>"), ("vdc", "<ch>"), ("vrms", "<ch>"), ("vpp", "<ch>"),
    ("duty_cycle_pct", "%"), ("rise_time_s", "s"), ("fall_time_s", "s"), ("thd_pct", "%"),
    ("thd_n_pct", "%"), ("sinad_db", "dB"),
)


def _derived_unit(name: str) -> str:
    """A derived value's unit as the log stores it (a ratio such as Q has none)."""
    from benchfit.fit.result import DERIVED_UNITS

    unit = DERIVED_UNITS.get(name, "")
    return "" if unit == "1" else unit


def _cell(v: Any) -> Any:
    """A value for a run table's cell: text and integers as they are, a non-finite number as NULL."""
    if isinstance(v, float) and not math.isfinite(v):
        return None
    return v


def _finite(v: Any) -> float | None:
    if v is None or isinstance(v, bool):
        return None
    try:
        f = float(v)
    except (TypeError, ValueError):
        return None
    return f if math.isfinite(f) else None


# --- normalising the inputs ----------------------------------------------------------------

def _as_dict(obj: Any, **kwargs: Any) -> dict[str, Any]:
    if isinstance(obj, Mapping):
        return dict(obj)
    to_dict = getattr(obj, "to_dict", None)
    if to_dict is None:
        raise LogError(f"append_run: cannot store a {type(obj).__name__} — pass a result object or a dict")
    try:
        return to_dict(**kwargs)
    except TypeError:
        return to_dict()


def _capture_row(obj: Any) -> dict[str, Any]:
    if isinstance(obj, Mapping):
        d = dict(obj)
        return {"role": str(d.get("role", "")), "path": d.get("path") or d.get("source") or d.get("file"),
                "sha256": d.get("sha256"), "metadata": d.get("metadata", {})}
    meta = dict(getattr(obj, "metadata", {}) or {})
    cal = getattr(obj, "calibration", None)
    if cal is not None and hasattr(cal, "to_dict"):
        meta = {**meta, "calibration": cal.to_dict()}
    return {"role": "", "path": getattr(obj, "source", None), "sha256": getattr(obj, "sha256", None),
            "metadata": meta}


def _measurement_rows(m: Mapping[str, Any], role: str) -> list[dict[str, Any]]:
    rows = []
    for ch in m.get("channels", []):
        extra = ch.get("extra", {}) or {}
        for q, unit in _MEASURED:
            if q not in ch:
                continue
            u = None
            for k in uncertainty_keys(q):
                if ch.get(k) is not None:
                    u = ch.get(k)
                elif extra.get(k) is not None:
                    u = extra.get(k)
                if u is not None:
                    break
            rows.append({"file": m.get("file"), "role": role, "source": "measure",
                         "channel": ch.get("name"), "quantity": q, "value": _finite(ch.get(q)),
                         "uncertainty": _finite(u),
                         "unit": ch.get("unit", "") if unit == "<ch>" else unit})
    return rows


def _fit_rows(f: Mapping[str, Any], role: str) -> list[dict[str, Any]]:
    rows = []
    source = f.get("source") or "fit"          # a drift run's summary says "drift"
    for name, p in (f.get("parameters") or {}).items():
        rows.append({"file": f.get("file"), "role": role, "source": source, "channel": f.get("channel"),
                     "quantity": name, "value": _finite(p.get("value")),
                     "uncertainty": _finite(p.get("stderr")), "unit": p.get("unit", "")})
    for name, d in (f.get("derived") or {}).items():
        rows.append({"file": f.get("file"), "role": role, "source": "fit", "channel": None,
                     "quantity": name, "value": _finite(d.get("value")),
                     "uncertainty": _finite(d.get("stderr")), "unit": _derived_unit(name)})
    return rows


def _role_of(item: Any) -> tuple[Any, str]:
    """``(obj, role)`` from either an object or a ``(role, obj)`` pair."""
    if isinstance(item, tuple) and len(item) == 2 and isinstance(item[0], str):
        return item[1], item[0]
    return item, ""



def make_record(*, command: str, operator: str | None, unit: str | None, bench: str,
                captures: Sequence[Any], measurements: Sequence[Any], fits: Sequence[Any],
                decisions: Sequence[Any], verdict: str | None, details: Mapping[str, Any] | None,
                where: str, tables: Mapping[str, Sequence[Mapping[str, Any]]] | None = None) -> dict[str, Any]:
    """The run record of one new run (a fresh UUID, time left to the storing database)."""
    from benchfit import __version__

    cap_rows = []
    for item in captures:
        obj, role = _role_of(item)
        row = _capture_row(obj)
        row["role"] = role or row["role"]
        cap_rows.append(row)
    res_rows: list[dict[str, Any]] = []
    for item in measurements:
        obj, role = _role_of(item)
        res_rows += _measurement_rows(_as_dict(obj, full=True), role)
    for item in fits:
        obj, role = _role_of(item)
        res_rows += _fit_rows(_as_dict(obj), role)
    dec_rows = [_as_dict(d) for d in decisions]
    try:
        details_json = json.dumps(dict(details or {}), allow_nan=False, default=str)
        cap_json = [json.dumps(r["metadata"], allow_nan=False, default=str) for r in cap_rows]
    except ValueError as e:
        raise LogError(f"{where}: run details contain a non-finite number ({e}) — report this as a bug") from e
    index: dict[tuple[Any, str], int] = {}
    for i, r in enumerate(cap_rows):
        index.setdefault((r["path"], r["role"]), i)
        index.setdefault((r["path"], ""), i)
    return {
        "run": {"uuid": str(_uuid.uuid4()), "bench": bench, "unit": unit or None, "command": command,
                "time_utc": None, "operator": operator, "benchfit_version": __version__,
                "verdict": verdict, "details_json": details_json},
        "captures": [{"role": r["role"], "path": r["path"], "sha256": r["sha256"], "metadata_json": mj}
                     for r, mj in zip(cap_rows, cap_json)],
        "results": [{"capture": index.get((r["file"], r["role"])), "role": r["role"], "source": r["source"],
                     "channel": r["channel"], "quantity": r["quantity"], "value": r["value"],
                     "uncertainty": r["uncertainty"], "unit": r["unit"]} for r in res_rows],
        "decisions": [{"quantity": d.get("quantity"),
                       "channel": None if d.get("channel") is None else str(d["channel"]),
                       "label": d.get("label"), "value": _finite(d.get("value")),
                       "expanded_u": _finite(d.get("expanded_u")), "lower": _finite(d.get("lower")),
                       "upper": _finite(d.get("upper")), "unit": d.get("unit", ""), "rule": d.get("rule", ""),
                       "decision": d.get("decision", ""), "note": d.get("note", "")} for d in dec_rows],
        **({"tables": {t: [{k: _cell(v) for k, v in r.items()} for r in rows] for t, rows in tables.items()}}
           if tables else {}),
    }
