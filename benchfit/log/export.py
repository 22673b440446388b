"""Export the measurement log to CSV or JSON (pandas), one row per stored result.

Columns: run_id, time_utc, command, unit, operator, verdict, role, source, channel,
quantity, value, uncertainty (standard, k = 1), value_unit, file, sha256, bench, run_uuid
(the run's global id: the same run in two logs has the same run_uuid, not always the same run_id).
An existing output file is never replaced unless ``overwrite=True``.
"""

from __future__ import annotations

from pathlib import Path
from typing import Literal, get_args

from benchfit.errors import LogError
from benchfit.log.postgres import LogURL
from benchfit.log.store import results_rows

__all__ = ["ExportFormat", "COLUMNS", "results_frame", "export_log"]

ExportFormat = Literal["csv", "json"]

COLUMNS = ("run_id", "time_utc", "command", "unit", "operator", "verdict", "role", "source",
           "channel", "quantity", "value", "uncertainty", "value_unit", "file", "sha256", "bench", "run_uuid")


def results_frame(db_path: str | Path | LogURL, *, quantity: str | None = None, unit: str | None = None,
                  since: str | None = None):
    """The log's results as a pandas DataFrame with :data:`COLUMNS`."""
    import pandas as pd

    rows = results_rows(db_path, quantity=quantity, unit=unit, since=since)
    return pd.DataFrame(rows, columns=list(COLUMNS))


def export_log(db_path: str | Path | LogURL, fmt: str, out: str | Path | None = None, *,
               overwrite: bool = False, unit: str | None = None, since: str | None = None) -> str | None:
    """Write the log as CSV or JSON (records) to ``out``, or return the text when ``out`` is None.

    Raises
    ------
    LogError
        Unknown format, or ``out`` exists and ``overwrite`` is False.
    """
    if fmt not in get_args(ExportFormat):
        raise LogError(f"fmt: {fmt!r} is unknown — use one of {', '.join(get_args(ExportFormat))}")
    if out is not None:
        p = Path(out)
        if p.exists() and not overwrite:
            raise LogError(f"{p}: file exists — choose another out= or add overwrite=True")
    df = results_frame(db_path, unit=unit, since=since)
    text = df.to_csv(index=False) if fmt == "csv" else df.to_json(orient="records", indent=1)
    if out is None:
        return text
    p = Path(out)
    try:
        mode = "w" if overwrite else "x"
        with p.open(mode, encoding="utf-8", newline="") as f:
            f.write(text)
    except FileExistsError as e:
        raise LogError(f"{p}: file exists — choose another out= or add overwrite=True") from e
    except OSError as e:
        raise LogError(f"{p}: cannot write the export ({e.strerror}) — check the directory") from e
    return None
