"""Drift runs in the measurement log: the summary as results, the interval series in its own table.

A drift run is appended with :func:`benchfit.log.store.append_run` (command ``"drift"``): its
summary quantities (``drift_ppm_per_h``, ``warmup_s``, ``adev_1s``, ``level_drift_pct_per_h``,
``final_frequency_hz``, ``thd_max_pct``) go in as ordinary results, so ``benchfit log stats``
and spec limits work on them like on any measured value. The per-interval series goes in a
table of its own (schema 3 of :mod:`benchfit.log.schema`, so the rows travel with the run
through the spool, ``log sync`` and ``log merge`` on both backends)::

    drift_series(run_id → runs, channel, k, t_start_s, t_mid_s, frequency_hz, frequency_u_hz,
                 chain_frequency_hz, chain_frequency_u_hz, phase_rad, phase_u_rad, segment,
                 amplitude, amplitude_u, vrms, thd_pct, thd_u_pct, duty_cycle_pct,
                 duty_cycle_u_pct, unit)        primary key (run_id, channel, k)

The series is written in the same transaction as the run: a drift run is either logged whole
or not at all.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any, Mapping

from benchfit.log.postgres import LogURL

__all__ = ["SERIES_COLUMNS", "series_rows", "log_drift_run", "read_series"]

#: columns of ``drift_series`` after (run_id, channel, k), in order
SERIES_COLUMNS = ("t_start_s", "t_mid_s", "frequency_hz", "frequency_u_hz", "chain_frequency_hz",
                  "chain_frequency_u_hz", "phase_rad", "phase_u_rad", "segment", "amplitude", "amplitude_u",
                  "vrms", "thd_pct", "thd_u_pct", "duty_cycle_pct", "duty_cycle_u_pct", "unit")


def series_rows(channel: str, series: list[Mapping[str, Any]]) -> list[dict[str, Any]]:
    """The ``drift_series`` rows of one channel's interval series (the run's JSON ``series``)."""
    return [{"channel": channel, "k": int(r["index"]), **{c: r.get(c) for c in SERIES_COLUMNS}} for r in series]


def read_series(db_path: str | Path | LogURL, run_id: int) -> list[dict[str, Any]]:
    """The series rows of one run, in interval order (empty when the run has none)."""
    from benchfit.log.store import open_store

    with open_store(db_path, create=False) as store:
        rows = store._read(lambda: store._rows(
            f"SELECT channel, k, {', '.join(SERIES_COLUMNS)} FROM drift_series WHERE run_id = ? "
            "ORDER BY channel, k", (run_id,)), f"the drift series of run {run_id}")
    for r in rows:
        r["index"] = r.pop("k")
    return [{"channel": r.pop("channel"), "index": r.pop("index"), **r} for r in rows]


def log_drift_run(db_path: str | Path | LogURL, run: Mapping[str, Any], *, operator: str | None = None) -> int:
    """Append a drift run (the JSON contract of :class:`~benchfit.measurement.drift_run.DriftRun`).

    The summary values are stored as results of role ``""`` (so ``log stats`` takes them) with
    their standard uncertainties, the interval series as ``drift_series`` rows of the same run;
    returns the run id.
    """
    from benchfit.log.store import append_run
    from benchfit.measurement.stability import SUMMARY_QUANTITIES

    st = run.get("stability") or {}
    params: dict[str, dict[str, Any]] = {}
    if st:
        for q, (vkey, ukey, unit) in SUMMARY_QUANTITIES.items():
            params[q] = {"value": st.get(vkey), "stderr": st.get(ukey) if ukey else None, "unit": unit}
    capture = {"path": run.get("kept") or run.get("file"), "sha256": run.get("sha256"),
               "metadata": {"channel": run.get("channel"), "sample_rate_hz": run.get("sample_rate_hz"),
                            "interval_s": run.get("interval_s"), "device": run.get("device"),
                            "calibration": run.get("calibration")}}
    details = {k: v for k, v in run.items() if k != "series"}
    return append_run(db_path, command="drift", operator=operator, unit=run.get("unit"),
                      captures=[capture] if capture["path"] else [],
                      fits=[{"file": capture["path"], "source": "drift", "channel": run.get("channel"),
                             "parameters": params}] if params else [],
                      details=details,
                      tables={"drift_series": series_rows(str(run.get("channel")), list(run.get("series") or []))})
