"""The index page of a report folder: every calibration record in it, newest first.

``report`` rewrites ``index.html`` in its ``--out`` folder after each run, from the JSON twins
found there (so the page never disagrees with the files), through a temporary file and a
rename, so a reader never sees half a page. Nothing else in the folder is touched.
"""

from __future__ import annotations

import html
import json
from pathlib import Path

from benchfit.capture.fileio import write_text_atomic

__all__ = ["write_index", "INDEX_NAME"]

INDEX_NAME = "index.html"

_STYLE = ("body{font-family:system-ui,sans-serif;margin:2rem;color:#222}"
          "table{border-collapse:collapse}td,th{padding:.3rem .9rem;border-bottom:1px solid #ccc;text-align:left}"
          ".fail,.conditional-fail,.not-measured{color:#a00;font-weight:600}.pass{color:#064}"
          ".conditional-pass{color:#850}")


def _entries(folder: Path) -> list[dict[str, str]]:
    rows = []
    for twin in folder.glob("*.json"):
        page = twin.with_suffix(".html")
        if not page.is_file():
            continue
        try:
            d = json.loads(twin.read_text(encoding="utf-8"))
        except (ValueError, OSError, RecursionError):
            continue
        if not isinstance(d, dict) or "benchfit_report" not in d:
            continue  # not a report twin (another program's JSON)
        spec = d.get("spec")
        if not isinstance(spec, dict):
            spec = {}
        rows.append({"page": page.name, "unit": str(d.get("unit", page.stem)), "verdict": str(d.get("verdict", "")),
                     "found": str(d.get("as_found_verdict") or ""), "when": str(d.get("created_utc", "")),
                     "spec": str(spec.get("name") or ""), "operator": str(d.get("operator") or "")})
    rows.sort(key=lambda r: (r["when"], r["page"]), reverse=True)
    return rows


def write_index(folder: str | Path) -> Path:
    """Write (or rewrite) ``folder/index.html`` listing the reports in ``folder``; returns its path.

    Raises
    ------
    OSError
        The page cannot be written (the caller decides whether that is an error).
    """
    out = Path(folder)
    rows = _entries(out)
    body = "".join(
        f"<tr><td><a href=\"{html.escape(r['page'])}\">{html.escape(r['unit'])}</a></td>"
        f"<td class=\"{html.escape(r['verdict'].replace(' ', '-'))}\">{html.escape(r['verdict'])}</td>"
        f"<td>{html.escape(r['found']) or '—'}</td><td>{html.escape(r['when'])}</td>"
        f"<td>{html.escape(r['spec'])}</td><td>{html.escape(r['operator'])}</td></tr>" for r in rows)
    page = ("<!doctype html><html lang=\"en\"><head><meta charset=\"utf-8\"><title>Calibration records</title>"
            f"<style>{_STYLE}</style></head><body><h1>Calibration records</h1>"
            f"<p>{len(rows)} report(s) in this folder, newest first.</p>"
            "<table><tr><th>unit</th><th>as left</th><th>as found</th><th>made (UTC)</th><th>spec</th>"
            f"<th>operator</th></tr>{body}</table></body></html>\n")
    path = out / INDEX_NAME
    write_text_atomic(path, page)
    return path
