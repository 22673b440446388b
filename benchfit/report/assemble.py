"""Gather the results of one unit into the report model, and run one unit end to end.

:func:`build_report` is pure: it takes already computed objects (Capture, Measurement,
FitResult, Spec) and returns the report model — a JSON-ready dict that is written as the
report's JSON twin and rendered to HTML. It does no maths beyond the decision-rule
comparisons of :mod:`benchfit.report.spec` and U = k·u with k = 2 (JCGM 100:2008, 6.2.1).
Every measured number in the model is copied from ``Measurement.to_dict()`` (the
``benchfit measure --json`` object) and every fitted one from ``FitResult.to_dict()``.

:func:`run_unit` is the per-unit job (load → measure → fit → assemble → write → log), a
top-level function with plain arguments so an integrator can run units in a process pool.
"""

from __future__ import annotations

import datetime as _dt
import importlib
import importlib.util
import inspect
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any, Callable, Literal, Mapping, Sequence

from benchfit.errors import BenchfitError, FitError, SpecError

if TYPE_CHECKING:
    from benchfit.capture.capture import Capture
    from benchfit.fit.result import FitResult
    from benchfit.measurement.result import Measurement
from benchfit.report.spec import (FITTED_QUANTITIES, MEASURED_QUANTITIES, Decision, Limit, Spec,
                                  decide, load_spec, overall_verdict, quantity_unit, uncertainty_keys)

__all__ = ["Role", "FitOptions", "UnitRun", "REPORT_FORMAT", "COVERAGE_K",
           "build_report", "run_unit", "METHODS", "SAFETY_NOTES"]

Role = Literal["as-found", "as-left"]

#: version of the report JSON twin's layout
REPORT_FORMAT = 1
#: coverage factor of the expanded uncertainty U = k·u
COVERAGE_K = 2.0

#: methods and standards named in every report
METHODS: tuple[str, ...] = (
    "Frequency, amplitude and harmonics: sine fit generalised to K harmonics "
    "(IEEE Std 1057 / IEEE Std 1241 sine-fit method), t = 0 at the first sample.",
    "THD relative to the fundamental (THD_F) from the fitted harmonic amplitudes (IEEE Std 1241 "
    "figures of merit); the number of harmonics is stated by the measurement.",
    "Duty cycle, rise and fall time: state levels by histogram, 10 %/50 %/90 % reference levels "
    "(IEEE Std 181).",
    "Effective parts (L, C, Rs, ESR, load) by least-squares fit of a second-order L-C low-pass model.",
    "Uncertainty: standard uncertainties from the methods, expanded with k = 2 "
    "(JCGM 100:2008 (GUM), 6.2.1; about 95 % coverage for a normal distribution).",
    "Conformity decision: ILAC-G8:09/2019 decision rules; the rule applied to each limit is "
    "named in the results table.",
)

#: cautions printed in every report (defer to local codes and qualified practice)
SAFETY_NOTES: tuple[str, ...] = (
    "A computer's audio input tolerates about 1–2 V peak and shares its ground with the computer "
    "and, through it, often with mains earth. Use an attenuator or isolation transformer and "
    "check the level before connecting; never connect mains-derived circuits directly.",
    "Chokes store energy: breaking the current through an inductor produces an inductive "
    "voltage spike. Switch the supply off and let the circuit settle before changing parts.",
    "Use a current-limited bench supply at the stated voltage, and check electrolytic capacitor "
    "polarity and voltage rating before power-up.",
    "These notes are general cautions, not a safety assessment: follow local electrical codes "
    "and the practice of a qualified person for anything connected to mains.",
)

@dataclass(frozen=True)
class FitOptions:
    """What to fit and how (passed on to ``benchfit.fit_lowpass`` / ``fit_ringdown``).

    Attributes
    ----------
    model : str
        ``"lc-lowpass"`` or ``"ringdown"``.
    drive, response : str or None
        Channel names (or 1-based numbers) of the drive and the filter output.
    fix : mapping of str to float
        Parameters held fixed, SI units (``{"Rload": 10e3}``).
    """

    model: str = "lc-lowpass"
    drive: str | None = None
    response: str | None = None
    fix: Mapping[str, float] = field(default_factory=dict)


@dataclass(frozen=True)
class UnitRun:
    """What :func:`run_unit` produced: the paths written, the verdict and the exit code."""

    html_path: Path
    json_path: Path
    verdict: str
    exit_code: int
    run_id: int | None = None
    #: with ``run_unit(..., defer_log=True)``: the keyword arguments of
    #: :func:`benchfit.log.store.append_run` as plain data, for the caller to append
    log_entry: Mapping[str, Any] | None = None


# --- picking values ----------------------------------------------------------------------

def _channel_index(limit: Limit, channels: Sequence[Mapping[str, Any]]) -> int | None:
    names = [str(c.get("name", "")).lower() for c in channels]
    if isinstance(limit.channel, int):
        return limit.channel if limit.channel < len(channels) else None
    if isinstance(limit.channel, str):
        return names.index(limit.channel.lower()) if limit.channel.lower() in names else None
    if len(channels) == 1:
        return 0
    return names.index("output") if "output" in names else None


def _measured_value(limit: Limit, measured: Sequence[Mapping[str, Any]]) -> dict[str, Any]:
    """First capture whose chosen channel has a value for ``limit`` (entries of the report model)."""
    reasons = []
    for entry in measured:
        m = entry["measurement"]
        idx = _channel_index(limit, m["channels"])
        if idx is None:
            names = ", ".join(c["name"] for c in m["channels"])
            reasons.append(f"{m['file']}: no channel "
                           f"{'named output' if limit.channel is None else repr(limit.channel)} "
                           f"(has {names}) — set channel in the spec")
            continue
        ch = m["channels"][idx]
        value = ch.get(limit.quantity)
        if value is None:
            reasons.append(f"{m['file']} {ch['name']}: {limit.quantity} not determined")
            continue
        if MEASURED_QUANTITIES[limit.quantity] == "<channel>" and ch["unit"] != limit.unit:
            reasons.append(f"{m['file']} {ch['name']}: level is in {ch['unit']}, the limit in {limit.unit} "
                           "— record with a calibration profile")
            continue
        u = None
        extra = entry["channel_extra"][idx]
        for key in uncertainty_keys(limit.quantity):
            u = ch.get(key) if ch.get(key) is not None else extra.get(key)
            if u is not None:
                break
        return {"value": value, "u": u, "file": m["file"], "channel": ch["name"],
                "unit": quantity_unit(limit.quantity, ch["unit"]), "reason": "",
                "budget": (ch.get("budget") or {}).get(limit.quantity)}
    return {"value": None, "u": None, "file": None, "channel": None, "unit": limit.unit,
            "reason": "; ".join(reasons) or "no capture measured", "budget": None}


def _fitted_value(limit: Limit, fits: Sequence[Mapping[str, Any]]) -> dict[str, Any]:
    reasons = []
    for entry in fits:
        f = entry["fit"]
        item = f["parameters"].get(limit.quantity) or f["derived"].get(limit.quantity)
        if item is None or item.get("value") is None:
            reasons.append(f"{f['file']}: {limit.quantity} not given by the {f['model']} fit")
            continue
        return {"value": item["value"], "u": item.get("stderr"), "file": f["file"], "channel": None,
                "unit": limit.unit, "reason": "", "budget": item.get("budget")}
    return {"value": None, "u": None, "file": None, "channel": None, "unit": limit.unit,
            "reason": "; ".join(reasons) or "no fit made — give fit options or check the fit errors",
            "budget": None}


#: the method line of a report that has a Stability section
DRIFT_METHOD = ("Stability (benchfit drift): back-to-back intervals, each fitted by least squares at the running "
                "frequency (IEEE Std 1057 three-parameter fit, harmonics for THD); midpoint phases chained across "
                "intervals give phase-continuous frequencies; overlapping Allan deviation of the fractional "
                "frequency (IEEE Std 1139) by the allantools library with Greenhall–Riley equivalent degrees of "
                "freedom, after removing the fitted warm-up and drift; warm-up f∞ + D·t + A·exp(−t/τ) by least "
                "squares, uncertainties widened for correlated residuals.")


def _drift_value(limit: Limit, drift: Mapping[str, Any] | None) -> dict[str, Any]:
    """A stability quantity from a drift run (the JSON contract of ``benchfit drift``)."""
    from benchfit.measurement.stability import SUMMARY_QUANTITIES

    none = {"value": None, "u": None, "file": None, "channel": None, "unit": limit.unit}
    if drift is None:
        return {**none, "reason": "no drift run given — add drift='RUN.json' (or the long capture) to the report"}
    st = drift.get("stability")
    if not st:
        return {**none, "reason": f"{drift.get('file') or 'drift run'}: no stability statistics "
                                  f"({'; '.join(drift.get('warnings') or []) or 'too short'})"}
    vkey, ukey, _ = SUMMARY_QUANTITIES[limit.quantity]
    value = st.get(vkey)
    if value is None:
        return {**none, "reason": f"{drift.get('file') or 'drift run'}: {limit.quantity} not determined"
                                  + (f" ({'; '.join(st.get('warnings') or [])})" if st.get("warnings") else "")}
    return {"value": value, "u": st.get(ukey) if ukey else None, "file": drift.get("file") or drift.get("kept"),
            "channel": drift.get("channel"), "unit": limit.unit, "reason": ""}


def stability_entry(drift: Mapping[str, Any]) -> dict[str, Any]:
    """The report model's ``stability`` object: the drift run without its series (the figures
    carry the series; the run's own JSON keeps it)."""
    return {k: v for k, v in drift.items() if k != "series"}


def _judge(limit: Limit, picked: dict[str, Any], rule: str) -> dict[str, Any]:
    u = picked["u"]
    expanded = None if u is None else COVERAGE_K * float(u)
    dec: Decision = decide(picked["value"], expanded, limit.lower, limit.upper, rule)  # type: ignore[arg-type]
    note = dec.note if picked["value"] is not None else picked["reason"]
    return {**picked, "expanded_u": expanded, "decision": dec.decision, "rule": dec.rule, "note": note}


# --- the report model --------------------------------------------------------------------

def _capture_entry(capture: Any, role: Role) -> dict[str, Any]:
    meta = dict(capture.metadata)
    return {
        "role": role, "path": capture.source, "sha256": capture.sha256,
        "device": meta.get("device"), "start_utc": meta.get("start_utc"),
        "sidecar": meta.get("sidecar"),
        "calibration": capture.calibration.to_dict(),
        "sample_rate_hz": capture.sample_rate, "duration_s": capture.duration_s,
        "channels": [{"name": n, "unit": u} for n, u in zip(capture.channel_names, capture.units)],
        "overflow_count": meta.get("overflow_count"), "clip_count": meta.get("clip_count"),
        "warnings": list(capture.warnings),
    }


def _measurement_entry(measurement: Any, role: Role) -> dict[str, Any]:
    full = measurement.to_dict(full=True)
    return {"role": role, "measurement": measurement.to_dict(),
            "channel_extra": [c.get("extra", {}) for c in full["channels"]]}


def _trim_entry(fits: Sequence[Any], spec: Spec, measurements: Sequence[Any] = ()) -> dict[str, Any] | None:
    """Suggested adjustment: the advice of :func:`benchfit.design.advice.advise`, judged on every
    limit of the spec (the same verdict as ``benchfit design trim --spec``), or None when the
    design package is not installed or no lc-lowpass fit was made."""
    if importlib.util.find_spec("benchfit.design.advice") is None:
        return None
    advice_mod = importlib.import_module("benchfit.design.advice")
    lowpass = [f for f in fits if f.model == "lc-lowpass" and "C" in f.parameters]
    if not lowpass:
        return None
    lim = spec.limit_for("frequency_hz") or spec.limit_for("resonant_frequency_hz")
    target = None if lim is None else lim.nominal
    nominal = {k: float(spec.conditions[f"nominal_{k}_{u}"]) for k, u in (("L", "h"), ("C", "f"))
               if isinstance(spec.conditions.get(f"nominal_{k}_{u}"), (int, float))}
    meas = None
    if measurements:
        full = measurements[0].to_dict(full=True)
        meas = dict(full)
    try:
        advice = advice_mod.advise(spec, fit=lowpass[0], measurement=meas, nominal=nominal)
    except BenchfitError as e:  # advice is optional in a report: say why there is none
        return {"target_hz": target, "from_fit": lowpass[0].file, "verdict": None, "advice": None,
                "lines": [f"no advice: {e}"]}
    return {"target_hz": target, "from_fit": lowpass[0].file, "verdict": advice.verdict,
            "advice": advice.to_dict(), "lines": advice.summary_lines()}


def build_report(*, unit: str, spec: Spec, as_left: Sequence[tuple[Any, Any]],
                 as_found: Sequence[tuple[Any, Any]] = (), fits_left: Sequence[Any] = (),
                 fits_found: Sequence[Any] = (), fit_errors: Sequence[str] = (),
                 operator: str | None = None, created_utc: str | None = None,
                 notes: Sequence[str] = (), drift: Mapping[str, Any] | None = None) -> dict[str, Any]:
    """The report model of one unit (JSON-ready dict).

    Parameters
    ----------
    unit : str
        Serial of the unit under test.
    spec : Spec
        Limits, conditions and decision rule.
    as_left, as_found : sequence of (Capture, Measurement)
        Captures after and before adjustment, each with its measurement.
    fits_left, fits_found : sequence of FitResult
        Fits of the as-left / as-found captures.
    fit_errors : sequence of str
        One-line reasons for fits that could not be made.
    operator : str, optional
        Who measured.
    created_utc : str, optional
        ISO 8601 UTC time stamp; default now.
    notes : sequence of str
        Extra notes.
    drift : mapping, optional
        A drift run of the unit (the JSON contract of ``benchfit drift``): its stability
        summary becomes the report's Stability section, and limits on ``warmup_s``,
        ``drift_ppm_per_h``, ``adev_1s``, … are judged from it.
    """
    if not as_left:
        raise SpecError(f"{unit}: no as-left capture — give at least one capture to report on")
    from benchfit import __version__

    created = created_utc or _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")
    left_meas = [_measurement_entry(m, "as-left") for _, m in as_left]
    found_meas = [_measurement_entry(m, "as-found") for _, m in as_found]
    left_fits = [{"role": "as-left", "fit": f.to_dict()} for f in fits_left]
    found_fits = [{"role": "as-found", "fit": f.to_dict()} for f in fits_found]
    rows = []
    for lim in spec.limits:
        if lim.source == "drift":
            left = _judge(lim, _drift_value(lim, drift), spec.decision_rule)
            found = None
        elif lim.quantity in FITTED_QUANTITIES:
            left = _judge(lim, _fitted_value(lim, left_fits), spec.decision_rule)
            found = _judge(lim, _fitted_value(lim, found_fits), spec.decision_rule) if as_found else None
        else:
            left = _judge(lim, _measured_value(lim, left_meas), spec.decision_rule)
            found = _judge(lim, _measured_value(lim, found_meas), spec.decision_rule) if as_found else None
        rows.append({"quantity": lim.quantity, "label": lim.label, "source": lim.source,
                     "channel": left["channel"], "unit": left["unit"] or lim.unit,
                     "nominal": lim.nominal, "lower": lim.lower, "upper": lim.upper,
                     "as_left": left, "as_found": found, "decision": left["decision"]})
    decisions = [Decision(r["decision"], r["as_left"]["value"], r["as_left"]["expanded_u"],
                          r["as_left"]["rule"]) for r in rows]
    verdict = overall_verdict(decisions)
    found_verdict = None
    if as_found:
        found_verdict = overall_verdict([Decision(r["as_found"]["decision"], r["as_found"]["value"],
                                                  r["as_found"]["expanded_u"], r["as_found"]["rule"])
                                         for r in rows])
    warnings = []
    for entry in left_meas + found_meas:
        for ch in entry["measurement"]["channels"]:
            warnings += [f"{entry['measurement']['file']} {ch['name']}: {w}" for w in ch["warnings"]]
    for entry in left_fits + found_fits:
        warnings += [f"{entry['fit']['file']} fit: {w}" for w in entry["fit"]["warnings"]]
    all_fits = list(fits_left)
    return {
        "benchfit_report": REPORT_FORMAT,
        "unit": unit,
        "created_utc": created,
        "operator": operator,
        "benchfit_version": __version__,
        "spec": spec.to_dict(),
        "verdict": verdict,
        "as_found_verdict": found_verdict,
        "exit_code": 1 if verdict == "fail" else 0,
        "coverage_factor": COVERAGE_K,
        "results": rows,
        "captures": [_capture_entry(c, "as-found") for c, _ in as_found]
                    + [_capture_entry(c, "as-left") for c, _ in as_left],
        "measurements": found_meas + left_meas,
        "fits": found_fits + left_fits,
        "fit_errors": list(fit_errors),
        "stability": stability_entry(drift) if drift is not None else None,
        "trim": _trim_entry(all_fits, spec, [m for _, m in as_left]),
        "methods": list(METHODS) + ([DRIFT_METHOD] if drift is not None else []),
        "warnings": warnings,
        "notes": ([spec.notes] if spec.notes else []) + list(notes),
        "safety": _safety_notes(left_fits + found_fits, spec),
    }


def _safety_notes(fits: Sequence[Mapping[str, Any]], spec: Spec) -> list[str]:
    """The cautions, with this unit's own inductance and supply where the fit and spec give them.

    Nothing is assumed about the unit: without a fitted L the choke note stays general, and the
    supply is named only when the spec's conditions state it (``supply_v``).
    """
    notes = list(SAFETY_NOTES)
    inductances = sorted({float(f["fit"]["parameters"]["L"]["value"]) for f in fits
                          if (f["fit"].get("parameters") or {}).get("L", {}).get("value")})
    if inductances:
        shown = " and ".join(f"{v * 1e3:.3g} mH" for v in inductances[:2])
        notes[1] = notes[1].replace("through an inductor", f"through the inductor (fitted L = {shown})")
    supply = spec.conditions.get("supply_v")
    if isinstance(supply, (int, float)) and not isinstance(supply, bool):
        notes[2] = notes[2].replace("at the stated voltage", f"at the stated {supply:g} V")
    return notes


# --- one unit, end to end (I/O) ----------------------------------------------------------

def load_drift(drift: str | Path | Mapping[str, Any]) -> dict[str, Any]:
    """A drift run as the JSON contract: given as a dict, a ``benchfit drift --json`` file, or
    the long capture (analysed at 1 s intervals with the defaults of ``benchfit drift``)."""
    import json

    if isinstance(drift, Mapping):
        return dict(drift)
    p = Path(drift)
    if p.suffix.lower() == ".json" and p.is_file():
        try:
            d = json.loads(p.read_text(encoding="utf-8"))
        except (OSError, UnicodeDecodeError, ValueError, RecursionError) as e:
            why = "nested too deeply" if isinstance(e, RecursionError) else str(e)
            raise SpecError(f"{p}: not a readable drift run ({why}) — give the JSON of 'benchfit drift --json' "
                            "or the capture itself") from e
        if not isinstance(d, dict) or d.get("benchfit_drift") != 1:
            raise SpecError(f"{p}: not a drift run (no \"benchfit_drift\": 1) — give the JSON of "
                            "'benchfit drift --json' or the capture itself")
        return d
    from benchfit.measurement.drift_run import drift_file

    return drift_file(p).to_dict()


def _with_spec_fixes(options: FitOptions, spec: Spec) -> FitOptions:
    """Parts the spec's [conditions] hold fixed (``fix_L = "300m±10%"``) unless --fix gave them.

    The value may carry a tolerance (``±10%`` or an absolute ``±5m``, read as rectangular), which
    the fit propagates into every fitted value; without one the results are conditional on it.
    """
    from dataclasses import replace

    from benchfit.fit.tolerance import FixedValue, parse_fixed

    extra: dict[str, Any] = {}
    for key, value in spec.conditions.items():
        if not key.startswith("fix_"):
            continue
        name = key[4:]
        if name in options.fix:
            continue
        try:
            fv = parse_fixed(str(value), f"conditions.{key}")
        except ValueError as e:
            raise SpecError(f"{spec.path or 'spec'}: {e}") from e
        extra[name] = FixedValue(fv.value, fv.half_width, fv.distribution, fv.text, f"spec [conditions] {key}")
    return replace(options, fix={**options.fix, **extra}) if extra else options


def _fit_call(options: FitOptions) -> tuple[Callable[..., Any], dict[str, Any]]:
    """``benchfit.fit_lowpass`` or ``benchfit.fit_ringdown`` and the keyword options it accepts.

    Raises FitError (bad input, exit 2) for an unknown model or an option the fitter does not take,
    before any capture is read.
    """
    import benchfit

    if options.model == "ringdown":
        fn = benchfit.fit_ringdown
    elif options.model == "lc-lowpass":
        fn = benchfit.fit_lowpass
    else:
        raise FitError(f"model: {options.model!r} is unknown — use model='lc-lowpass' or model='ringdown'")
    params = inspect.signature(fn).parameters
    wanted = {"drive": options.drive, "response": options.response,
              "fix": dict(options.fix) if options.fix else None}
    kwargs = {}
    for name, value in wanted.items():
        if value is None:
            continue
        if name not in params:
            raise FitError(f"{name}: the {options.model} fit does not take this option — leave it out")
        kwargs[name] = value
    return fn, kwargs


def _as_found_overlay(capture: Any, idx: int, f: float | None, as_found: Sequence[tuple[Any, Any]],
                      name: str) -> tuple[Any, Any] | None:
    """The as-found samples of the same channel, shifted to line up with the as-left wave.

    The shift is the lag (within one period of the as-left frequency) of the largest correlation
    over the first four periods; without a frequency, or a matching as-found channel, no overlay.
    """
    import numpy as np

    if not f or f <= 0:
        return None
    for found, _ in as_found:
        try:
            j = found.channel_index(name)
        except Exception:  # noqa: BLE001 - no such channel: nothing to overlay
            continue
        if found.units[j] != capture.units[idx] or found.sample_rate != capture.sample_rate:
            continue
        period = int(round(capture.sample_rate / f))
        window = min(4 * period, capture.n_samples, found.n_samples - period)
        if period < 2 or window < period:
            continue
        a = np.asarray(capture.samples[idx][:window], dtype=float)
        b = np.asarray(found.samples[j], dtype=float)
        a = a - a.mean()
        lags = [float(np.dot(a, b[d:d + window] - b[d:d + window].mean())) for d in range(period)]
        d = int(np.argmax(lags))
        return found, b[d:]
    return None


def _figures(as_left: Sequence[tuple[Any, Any]], fits: Sequence[Any], results: Sequence[Mapping[str, Any]],
             as_found: Sequence[tuple[Any, Any]] = ()) -> list[dict[str, str]]:
    """Inline SVG figures: waveform (with fitted model), harmonic spectrum, fit residuals."""
    from benchfit.report import figures

    out = []
    for capture, measurement in as_left:
        chosen = [r["as_left"]["channel"] for r in results
                  if r["as_left"]["file"] == measurement.file and r["as_left"]["channel"]]
        name = chosen[0] if chosen else measurement.channels[-1].name
        idx = capture.channel_index(name)
        ch = measurement.channels[idx]
        model = label = None
        if ch.harmonics:
            # the measurement's own harmonic model (DC + orders 1…H), evaluated, not refitted
            from benchfit.measurement.tone import synthesize

            model = synthesize(ch.vdc, [h.frequency_hz for h in ch.harmonics],
                               [h.amplitude for h in ch.harmonics], [h.phase_deg for h in ch.harmonics],
                               capture.n_samples, capture.sample_rate)
            label = f"harmonic model, orders 1…{len(ch.harmonics)}"
        out.append({"title": f"Waveform — {capture.source or 'capture'}, channel {name}",
                    "svg": str(figures.waveform_svg(capture, channel=idx, model=model, periods=4,
                                                    model_label=label or "model"))})
        out.append({"title": f"Harmonic spectrum — {capture.source or 'capture'}, channel {name}",
                    "svg": str(figures.spectrum_svg(measurement.channels[idx]))})
        overlay = _as_found_overlay(capture, idx, ch.frequency_hz, as_found, name)
        if overlay is not None:
            found_capture, shifted = overlay
            out.append({"title": f"As found ({found_capture.source or 'capture'}) and as left, channel {name}, "
                                 "aligned on the first period",
                        "svg": str(figures.waveform_svg(capture, channel=idx, model=shifted, periods=4,
                                                        model_label="as found"))})
    for f in fits:
        units = {u for capture, _ in as_left if capture.source == f.file for u in capture.units}
        out.append({"title": f"Fit of the {f.model} model — {f.file}",
                    "svg": str(figures.fit_svg(f, unit=units.pop() if len(units) == 1 else None))})
    return out


def _map_channels(capture: Any, channel_map: Mapping[str, str]) -> Any:
    """The capture with channels renamed as ``channel_map`` says (spec name → capture channel)."""
    from dataclasses import replace

    if not channel_map:
        return capture
    names = list(capture.channel_names)
    for spec_name, key in channel_map.items():
        idx = capture.channel_index(key)
        clash = [n for i, n in enumerate(names) if i != idx and n.lower() == spec_name.lower()]
        if clash:
            raise SpecError(f"channel_map={{'{spec_name}': '{key}'}}: {capture.source} already has a channel "
                            f"named {clash[0]!r} — map another name, or leave that name out of channel_map")
        names[idx] = spec_name
    return replace(capture, channel_names=tuple(names))


def _load_and_measure(path: str | Path, channel_map: Mapping[str, str], spec: Spec,
                      sample_rate: float | None = None) -> tuple[Capture, Measurement]:
    """(capture, measurement) of one file; a file too long to hold is measured in blocks, and its
    first block (with the file's source and SHA-256) is the capture that is fitted and drawn."""
    import benchfit
    from benchfit.measurement.long_record import is_long_file, measure_long_file

    if not is_long_file(path):
        capture = _check_channels(_map_channels(benchfit.load(path, sample_rate=sample_rate), channel_map), spec)
        return capture, benchfit.measure(capture)
    first: list[Any] = []
    m = measure_long_file(path, sample_rate=sample_rate, map_block=lambda b: _map_channels(b, channel_map),
                          on_first=lambda b: first.append(_check_channels(b, spec)),
                          reason="; the fit and the waveform figures use its first block")
    return first[0], m


def _check_channels(capture: Any, spec: Spec) -> Any:
    """Refuse a capture that lacks a channel the spec's measured limits are taken from."""
    channels = [{"name": n} for n in capture.channel_names]
    for lim in spec.limits:
        if lim.quantity in FITTED_QUANTITIES or _channel_index(lim, channels) is not None:
            continue
        if isinstance(lim.channel, int):
            raise SpecError(f"{capture.source}: the spec takes {lim.quantity} from channel {lim.channel + 1}, but "
                            f"the capture has {capture.n_channels} ({', '.join(capture.channel_names)}) — "
                            "correct channel in the spec")
        wanted = "output" if lim.channel is None else lim.channel
        raise SpecError(
            f"{capture.source}: no channel {wanted!r} for the spec's {lim.quantity} limit (the capture has "
            f"{', '.join(capture.channel_names)}) — map one with channel_map={{'{wanted}': 'CH'}} (a name or "
            f"1-based number, e.g. channel_map={{'{wanted}': '{capture.n_channels}'}}), or set channel in the spec")
    return capture


def run_unit(captures: Sequence[str | Path], *, unit: str, spec: str | Path | Spec,
             as_found: Sequence[str | Path] = (), operator: str | None = None,
             out_dir: str | Path = ".", fit: FitOptions | None = None,
             log_path: str | Path | None = None, with_figures: bool = True,
             progress: Callable[[str], None] | None = None, defer_log: bool = False,
             drift: str | Path | Mapping[str, Any] | None = None,
             channel_map: Mapping[str, str] | None = None, sample_rate: float | None = None) -> UnitRun:
    """Measure (and fit) one unit's captures, write its HTML report and JSON twin, log the run.

    Parameters
    ----------
    captures : sequence of path
        As-left capture files (WAV/FLAC/CSV), read with :func:`benchfit.load`.
    unit : str
        Serial of the unit.
    spec : path or Spec
        The spec TOML file (or an already parsed spec).
    as_found : sequence of path
        Captures made before adjustment.
    operator : str, optional
        Who measured.
    out_dir : path
        Directory for ``<serial>_<UTC time>.html`` and ``.json`` (never overwritten).
    fit : FitOptions, optional
        Fit the captures with these options. Without it, captures are fitted with the
        default ``lc-lowpass`` options only when the spec names a fitted quantity.
    log_path : path, optional
        Append the run to this measurement log (None: do not log).
    with_figures : bool
        Draw the inline SVG figures.
    progress : callable, optional
        Called with a short text before each step (the command line shows it on stderr).
    defer_log : bool
        Do not write the log; return what would be appended as ``UnitRun.log_entry``
        (plain, picklable data) so that a batch appends every unit from one process.
    drift : path or mapping, optional
        A drift run of the unit: the JSON written by ``benchfit drift --json``, or the long
        capture itself (then analysed here at 1 s intervals), or the run as a dict.
    channel_map : mapping of str to str, optional
        ``{spec channel name: capture channel}`` (a name or a 1-based number): the capture's
        channel is renamed to the spec's name before it is measured (``--channel output=2``).
    sample_rate : float, optional
        Sample rate in Hz of CSV captures without a time column (as :func:`benchfit.load`).

    Raises
    ------
    SpecError
        A capture lacks a channel the spec's limits need (a setup mistake, not a failed unit):
        the message names the capture's channels and the ``--channel`` mapping that fixes it.

    Returns
    -------
    UnitRun
    """
    from benchfit.errors import BenchfitError
    from benchfit.report.html import render_html, write_report

    step = progress or (lambda text: None)
    sp = spec if isinstance(spec, Spec) else load_spec(spec)
    if not unit or not unit.strip():
        raise SpecError("unit: the serial is empty — give the unit's serial, e.g. unit='HC-07'")
    fit_opts = fit if fit is not None else (FitOptions() if sp.needs_fit else None)
    if fit_opts is not None:
        fit_opts = _with_spec_fixes(fit_opts, sp)
    fit_fn, fit_kwargs = _fit_call(fit_opts) if fit_opts is not None else (None, {})
    left: list[tuple[Capture, Measurement]] = []
    found: list[tuple[Capture, Measurement]] = []
    for paths, group in ((captures, left), (as_found, found)):
        for p in paths:
            step(f"measuring {p}")
            group.append(_load_and_measure(p, channel_map or {}, sp, sample_rate))
    fits_left: list[FitResult] = []
    fits_found: list[FitResult] = []
    fit_errors: list[str] = []
    if fit_fn is not None:
        for group, target in ((left, fits_left), (found, fits_found)):
            for capture, _ in group:
                step(f"fitting {capture.source}")
                try:
                    target.append(fit_fn(capture, **fit_kwargs))
                except BenchfitError as e:
                    # a capture that cannot be fitted is reported (its fitted limits become
                    # "not measured"); the other captures are still judged
                    fit_errors.append(f"{capture.source}: {e}")
    drift_run = None
    if drift is not None:
        step(f"stability of {drift}" if not isinstance(drift, Mapping) else "stability")
        drift_run = load_drift(drift)
    report = build_report(unit=unit, spec=sp, as_left=left, as_found=found, fits_left=fits_left,
                          fits_found=fits_found, fit_errors=fit_errors, operator=operator, drift=drift_run)
    step("drawing figures and writing the report")
    figs = _figures(left, fits_left, report["results"], as_found=found) if with_figures else []
    if with_figures and drift_run is not None and drift_run.get("stability"):
        from benchfit.report import figures

        figs.append({"title": "Frequency over the run (phase-continuous, one point per interval)",
                     "svg": str(figures.drift_frequency_svg(drift_run)), "section": "stability"})
        figs.append({"title": "Overlapping Allan deviation with 68 % confidence intervals and the "
                              "estimator's white-noise floor", "svg": str(figures.allan_svg(drift_run)),
                     "section": "stability"})
    html_text = render_html(report, figs)
    html_path, json_path = write_report(report, html_text, out_dir)
    run_id = None
    entry = None
    if log_path is not None or defer_log:
        from benchfit.log.store import append_run

        # the objects themselves, or (deferred) their plain-data form
        caps: list[tuple[str, Any]] = [("as-found", c) for c, _ in found] + [("as-left", c) for c, _ in left]
        meas: list[tuple[str, Any]] = [("as-found", m) for _, m in found] + [("as-left", m) for _, m in left]
        fits: list[tuple[str, Any]] = [("as-found", f) for f in fits_found] + [("as-left", f) for f in fits_left]
        if defer_log:  # the same content as plain data (what append_run makes of the objects)
            caps = [(role, {"path": c.source, "sha256": c.sha256,
                            "metadata": {**dict(c.metadata), "calibration": c.calibration.to_dict()}})
                    for role, c in caps]
            meas = [(role, m.to_dict(full=True)) for role, m in meas]
            fits = [(role, f.to_dict()) for role, f in fits]
        decisions = [{"quantity": r["quantity"], "channel": r["channel"], "label": r["label"],
                      "value": r["as_left"]["value"], "expanded_u": r["as_left"]["expanded_u"],
                      "lower": r["lower"], "upper": r["upper"], "unit": r["unit"],
                      "rule": r["as_left"]["rule"], "decision": r["decision"], "note": r["as_left"]["note"]}
                     for r in report["results"]]
        entry = dict(command="report", operator=operator, unit=unit, captures=caps,
                     measurements=meas, fits=fits, decisions=decisions, verdict=report["verdict"],
                     details={"spec": sp.path, "spec_name": sp.name, "html": str(html_path),
                              "json": str(json_path)})
        if not defer_log and log_path is not None:
            run_id = append_run(log_path, **entry)
    return UnitRun(html_path=html_path, json_path=json_path, verdict=report["verdict"],
                   exit_code=report["exit_code"], run_id=run_id, log_entry=entry if defer_log else None)
