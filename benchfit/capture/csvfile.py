"""CSV reader for waveform exports from USB oscilloscopes and data loggers → :class:`Capture`.

Accepted layouts (any mix):

* delimiter ``,``, ``;``, tab, or runs of spaces (sniffed from the last data rows);
  decimal comma with ``;``, tab or space delimiters (or inside quoted cells);
* comment lines (``#``, ``//``, ``;``) and a preamble of ``key<delim>value`` lines before
  the header; ``key: value`` / ``key = value`` comments are kept too. Recognised keys give
  the sample interval or rate, the time and voltage units, the start time and the
  vertical range (kept in metadata as rails);
* a header whose names carry units in brackets, parentheses, after a slash or as a suffix
  (``time (ms)``, ``CH A [mV]``, ``t/us``, ``v_out_V``, ``Time[s]``), optionally followed by a
  row of units alone (``Second,Volt``); values are converted to seconds and volts;
* no header at all: the first column is time if it is strictly increasing, otherwise all
  columns are channels and the sample rate must come from the preamble or the caller.

Time stamps may jitter by up to 1 % of the mean step (measured as the largest distance of a
time stamp from the uniform grid through the first and last ones); the mean step is used
and the jitter is kept in metadata. Anything worse is an error naming the line.

The unit vocabulary, header units and preamble hints live in the pure module
:mod:`benchfit.capture.csvpreamble`; this module is the text layer and the reader.

Every problem is a :class:`~benchfit.errors.CaptureError` with one line naming the file
and, for data, the 1-based line number and the column's header.
"""

from __future__ import annotations

import csv
import io
import math
import os
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Sequence

import numpy as np

from benchfit.capture.capture import Capture, InputCalibration
from benchfit.capture.csvpreamble import PreambleHints, UnitKind, parse_header_unit, read_hints, unit_kind
from benchfit.errors import CaptureError

__all__ = ["read_csv", "parse_header_unit", "UnitKind", "JITTER_LIMIT"]

#: largest accepted time-stamp deviation from the uniform grid, as a fraction of the step
JITTER_LIMIT = 0.01

_TIME_NAMES = {"time", "t", "times", "zeit", "temps", "tiempo", "tempo", "x", "timestamp", "elapsed",
               "elapsed time", "relative time", "rel time", "time axis", "horizontal", "seconds", "second", "sec"}
_INDEX_NAMES = {"no", "no.", "nr", "nr.", "index", "idx", "sample", "samples", "sample no", "sample no.",
                "sample number", "point", "points", "#", "n", "number", "num", "step"}
_NAN_TOKENS = {"nan", "-nan", "inf", "-inf", "+inf", "infinity", "-infinity", "n/a", "na", "null", "none",
               "error", "err", "-", "--", "?", "overflow", "ovl", "ol"}

_COMMA_DECIMAL_RE = re.compile(r"^\s*[+-]?\d*,\d+(?:[eE][+-]?\d+)?\s*$")
_DOT_DECIMAL_RE = re.compile(r"^\s*[+-]?\d*\.\d+(?:[eE][+-]?\d+)?\s*$")


# --------------------------------------------------------------------------- text layer
@dataclass(frozen=True)
class _Layout:
    delim: str | None          # None: one column; " ": runs of white space
    decimal: str               # "." or ","
    n_fields: int
    strip_trailing: bool


def _decode(raw: bytes, where: str) -> str:
    if raw.startswith((b"\xff\xfe", b"\xfe\xff")):
        try:
            return raw.decode("utf-16")
        except UnicodeDecodeError as e:
            raise CaptureError(f"{where}: damaged UTF-16 text — export the file again as UTF-8") from e
    if b"\x00" in raw[:8192]:
        raise CaptureError(
            f"{where}: not an audio file and not CSV text (binary data) — give a WAV, FLAC or OGG "
            "recording or a CSV export"
        )
    try:
        return raw.decode("utf-8-sig")
    except UnicodeDecodeError:
        return raw.decode("latin-1")


def _split(line: str, delim: str | None) -> list[str]:
    if delim is None:
        return [line.strip().strip('"')]
    if delim == " ":
        return line.split()
    if '"' in line:
        return [c.strip() for c in next(csv.reader([line], delimiter=delim))]
    return [c.strip() for c in line.split(delim)]


def _is_number(cell: str, decimal: str) -> bool:
    c = cell.strip().strip('"')
    if decimal == ",":
        c = c.replace(",", ".")
    if not c or "_" in c:
        return False
    try:
        return math.isfinite(float(c))
    except ValueError:
        return False


def _is_marked(line: str) -> bool:
    s = line.lstrip()
    return s.startswith(("#", "//", ";"))


def _sniff_layout(lines: list[str], where: str) -> _Layout:
    tail: list[str] = []
    for ln in reversed(lines):
        if ln.strip() and not ln.lstrip().startswith(("#", "//")):
            tail.append(ln)
            if len(tail) == 200:
                break
    tail.reverse()
    if not tail:
        raise CaptureError(f"{where}: the file holds no data rows, only comments — export the data again")
    numeric_start = [ln for ln in tail if re.match(r'\s*"?[-+.\d]', ln)]
    if numeric_start:
        tail = numeric_start  # data rows start with a number; preamble and header lines mostly do not
    chosen: str | None = None
    modal = 1
    for d in ("\t", ";", ",", " "):
        if d == "," and sum(1 for ln in tail if any(re.search(r"\S\s+\S", c) for c in _split(ln, d))) > 0.5 * len(tail):
            continue  # cells with spaces inside: space-delimited columns with decimal commas
        counts = [len(_split(ln, d)) for ln in tail]
        values, freq = np.unique(counts, return_counts=True)
        k = int(values[np.argmax(freq)])
        if k >= 2 and freq.max() > 0.5 * len(tail):
            chosen, modal = d, k
            break
    if chosen is None:
        return _Layout(None, ".", 1, False)
    strip_trailing = False
    if chosen != " ":
        ends = sum(1 for ln in tail if ln.rstrip(" \r").endswith(chosen))
        if ends >= 0.9 * len(tail):
            strip_trailing = True
            modal -= 1
            if modal < 1:
                raise CaptureError(f"{where}: every row is empty between delimiters — export the data again")
    cells = [c for ln in tail[-50:] for c in _split(ln, chosen)]
    commas = sum(1 for c in cells if _COMMA_DECIMAL_RE.match(c.strip('"')))
    dots = sum(1 for c in cells if _DOT_DECIMAL_RE.match(c.strip('"')))
    decimal = "," if commas and not dots else "."  # with "," as delimiter only quoted cells hold commas
    if strip_trailing and modal == 1:
        return _Layout(chosen, decimal, 1, True)
    return _Layout(chosen, decimal, modal, strip_trailing)


def _cells(line: str, lay: _Layout) -> list[str]:
    if lay.strip_trailing and lay.delim:
        line = line.rstrip(" \r")
        if line.endswith(lay.delim):
            line = line[: -len(lay.delim)]
    return _split(line, lay.delim)


def _looks_like_data(cells: list[str], lay: _Layout) -> bool:
    """A row of the data width whose first cell is a number, or any cell after a non-key first cell."""
    if len(cells) != lay.n_fields:
        return False
    numeric = [_is_number(c, lay.decimal) for c in cells]
    if numeric[0]:
        return True
    first = cells[0].strip().strip('"')
    if not any(numeric):
        return False
    is_key = (bool(re.search(r"[A-Za-z]", first)) and first.lower() not in _NAN_TOKENS
              and not first.startswith(("#", "=")))
    return not is_key


# --------------------------------------------------------------------------- reader
def read_csv(path: str | os.PathLike[str], *, sha256: str | None = None, sample_rate: float | None = None,
             raw: bytes | None = None) -> Capture:
    """Read a waveform CSV export into a :class:`Capture` in seconds and volts.

    Parameters
    ----------
    path : str or Path
        The CSV/TSV/TXT file (used in messages and as the capture's source).
    sha256 : str, optional
        SHA-256 of the file's bytes (computed by the caller).
    sample_rate : float, optional
        Samples per second (Hz) for a file with neither a time column nor a sample
        interval/rate in its preamble. Ignored, with a warning when it disagrees, otherwise.
    raw : bytes, optional
        The file's bytes when the caller has read them already.

    Raises
    ------
    CaptureError
        One line naming the file and, for data problems, the line and column.
    """
    p = Path(path)
    where = str(p)
    if raw is None:
        try:
            raw = p.read_bytes()
        except OSError as e:
            raise CaptureError(f"{where}: cannot read the file ({e.strerror or e}) — check the path") from e
    if not raw.strip():
        raise CaptureError(f"{where}: the file is empty — export the data again")
    lines = _decode(raw, where).replace("\r\n", "\n").replace("\r", "\n").split("\n")
    lay = _sniff_layout(lines, where)
    start = _data_start(lines, lay, where)
    names, unit_row, header_at = _header(lines, start, lay)
    preamble = _preamble(lines[: start if header_at is None else header_at], lay)
    values, line_no = _data(lines, start, lay, _column_labels(names, unit_row, lay.n_fields), where)
    return _build(values, line_no, names, unit_row, preamble, lay, where, sha256, sample_rate,
                  None if header_at is None else header_at + 1)


def _data_start(lines: list[str], lay: _Layout, where: str) -> int:
    """Index of the first data row: the first all-numeric row, moved up over damaged rows above it."""
    start = next((i for i, ln in enumerate(lines) if ln.strip() and len(cells := _cells(ln, lay)) == lay.n_fields
                  and all(_is_number(c, lay.decimal) for c in cells)), None)
    if start is None:  # no clean row at all: start at the first row that looks like damaged data
        start = next((i for i, ln in enumerate(lines) if ln.strip() and not _is_marked(ln)
                      and _looks_like_data(_cells(ln, lay), lay)), None)
    if start is None:
        raise CaptureError(f"{where}: holds a header or preamble but no numeric data rows — export the data again")
    for j in range(start - 1, -1, -1):
        if not lines[j].strip():
            continue
        if not _looks_like_data(_cells(lines[j], lay), lay):
            break
        start = j
    return start


def _header_cells(line: str, lay: _Layout) -> list[str]:
    """Cells of a header line; with white-space columns, names may hold single spaces ("Time (s)  CH1 (V)")."""
    cells = _cells(line, lay)
    if lay.delim == " " and len(cells) != lay.n_fields:
        wide = re.split(r"\s{2,}|\t", line.strip())
        if len(wide) == lay.n_fields:
            return wide
    return cells


def _header(lines: list[str], start: int, lay: _Layout) -> tuple[list[str] | None, list[str] | None, int | None]:
    """(names, units row, index of the first header line) from the non-numeric rows just above the data."""
    K = lay.n_fields
    found: list[int] = []
    for j in range(start - 1, -1, -1):
        if len(found) == 2 or (found and K == 1):
            break
        ln = lines[j]
        if not ln.strip():
            continue
        cells = _header_cells(ln, lay)
        if (_is_marked(ln) and not (K > 1 and len(cells) == K)) or len(cells) != K \
                or any(_is_number(c, lay.decimal) for c in cells):
            break
        found.insert(0, j)
    if not found:
        return None, None, None
    rows = [[c.strip().strip('"').strip() for c in _header_cells(lines[k], lay)] for k in found]
    if len(rows) == 2 and all(not c or unit_kind(c) is not None for c in rows[1]):
        return rows[0], rows[1], found[0]
    if K == 1 and re.search(r"[:=,;\t]\s*[-+.\d]", rows[-1][0]):
        return None, None, None  # a "key: value" line, not a header
    return rows[-1], None, found[-1]


def _preamble(lines: list[str], lay: _Layout) -> dict[str, str]:
    """``key<delim>value``, ``key: value`` and ``# key = value`` lines as a dict; other comments joined."""
    out: dict[str, str] = {}
    comments: list[str] = []

    def keep(key: str, value: str) -> None:
        key, value = key.strip().strip('"').strip(), value.strip().strip('"').strip()
        k, n = key, 2
        while k in out:
            k, n = f"{key} ({n})", n + 1
        out[k] = value

    for i, ln in enumerate(lines):
        s = ln.strip()
        if not s:
            continue
        if _is_marked(s):
            body = re.sub(r"^(#+|//+|;+)\s*", "", s)
            m = re.match(r"^([^:=]{1,60}?)\s*[:=]\s*(.+)$", body)
            if m:
                keep(m.group(1), m.group(2))
            elif body:
                comments.append(body)
            continue
        cells = _cells(ln, lay) if lay.delim else [s]
        m = re.match(r"^([^:=,;\t]{1,60}?)\s*[:=,;\t]\s*(.+)$", s)
        if len(cells) >= 2 and cells[0].strip():
            keep(cells[0], (lay.delim or " ").join(c for c in cells[1:] if c.strip()))
        elif m:
            keep(m.group(1), m.group(2))
        else:
            keep(f"line {i + 1}", s)
    if comments:
        out["comments"] = " | ".join(comments)
    return out


def _data(lines: list[str], start: int, lay: _Layout, labels: list[str],
          where: str) -> tuple[np.ndarray, Sequence[int]]:
    """Parse the data rows (rows × columns, float64) and their 1-based line numbers."""
    K, d = lay.n_fields, lay.delim
    block = lines[start:]
    while block and not block[-1].strip():
        block.pop()
    joined = "\n".join(block) if d in (",", ";", "\t") and not lay.strip_trailing else ""
    if d is not None and joined and '"' not in joined and not re.search(r"^[ \t]*(#|//|;|$)", joined, re.M):
        # fast path: plain rows without quotes, comments or blank lines (joined only with a set delimiter)
        counts = [ln.count(d) for ln in block]
        if counts.count(K - 1) != len(counts):
            r = next(i for i, c in enumerate(counts) if c != K - 1)
            raise CaptureError(f"{where}: line {start + r + 1} has {counts[r] + 1} cell(s) but the data rows have "
                               f"{K} — fix or delete that line")
        line_no: Sequence[int] = range(start + 1, start + 1 + len(block))
        return _parse_numbers(block, line_no, lay, labels, where, sep=d, joined=joined), line_no
    # general path: rows re-joined with the unit separator \x1f so quoted cells cannot split
    numbers: list[int] = []
    texts: list[str] = []
    for i, ln in enumerate(block, start=start):
        if not ln.strip():
            continue
        cells = _cells(ln, lay)
        if _is_marked(ln) and not _looks_like_data(cells, lay):
            continue  # a comment among or after the data
        if len(cells) != K:
            raise CaptureError(
                f"{where}: line {i + 1} has {len(cells)} cell(s) but the data rows have {K} — fix or delete that line"
            )
        numbers.append(i + 1)
        texts.append("\x1f".join(cells))
    return _parse_numbers(texts, numbers, lay, labels, where), numbers


def _column_labels(names: list[str] | None, unit_row: list[str] | None, K: int) -> list[str]:
    if names is None:
        return [f"column {i + 1}" for i in range(K)]
    out = []
    for i, n in enumerate(names):
        label = n or f"column {i + 1}"
        if unit_row is not None and unit_row[i]:
            label = f"{label} [{unit_row[i]}]"
        out.append(label)
    return out


def _cell_problem(cell: str) -> str:
    """What is wrong with a cell and what to do, for the one-line error."""
    shown = cell if len(cell) <= 40 else cell[:37] + "..."
    if not cell.strip():
        return "the cell is empty — fix or delete that row"
    if re.search(r"\d:\d\d", cell):
        return (f"{shown!r} is a clock time, not a number — export elapsed time in seconds "
                "(or drop the column and pass the sample rate)")
    try:
        float(cell.strip().strip('"').replace(",", "."))
    except ValueError:
        return f"{shown!r} is not a number — fix or delete that row"
    if "_" in cell:
        return f"{shown!r} is not a number — fix or delete that row"
    return f"{shown!r} is not a finite number — fix or delete that row"


def _parse_numbers(texts: list[str], line_no: Sequence[int], lay: _Layout, labels: list[str], where: str,
                   sep: str = "\x1f", joined: str | None = None) -> np.ndarray:
    """Parse the data rows to a float64 array (rows × columns) with pinpointed errors.

    numpy's C reader takes the rows when every cell is a plain number (a decimal comma is turned
    into a point first, unless the comma also separates the cells); anything it cannot read goes
    to the Python reader below, which names the first bad cell.
    """
    if not texts:
        return np.empty((0, lay.n_fields))
    text = joined if joined is not None else "\n".join(texts)
    values: np.ndarray | None = None
    if lay.decimal != "," or sep != ",":
        if lay.decimal == ",":
            text = text.replace(",", ".")
        try:
            values = np.loadtxt(io.StringIO(text), delimiter=sep, dtype=np.float64, comments=None, ndmin=2)
        except ValueError:
            values = None
        if values is not None and values.shape != (len(texts), lay.n_fields):
            values = None
    if values is not None and np.all(np.isfinite(values)):
        return values
    if values is not None:
        r, c = (int(v) for v in np.argwhere(~np.isfinite(values))[0])
        cell = texts[r].split(sep)[c]
        raise CaptureError(f"{where}: line {line_no[r]}, column {labels[c]!r}: {_cell_problem(cell)}")
    # slow path: parse in Python, naming the first cell that cannot be read
    out = np.empty((len(texts), lay.n_fields))
    for r, t in enumerate(texts):
        for c, cell in enumerate(t.split(sep)):
            v = cell.strip().strip('"')
            if lay.decimal == ",":
                v = v.replace(",", ".")
            try:
                ok = math.isfinite(float(v)) and "_" not in v
            except ValueError:
                ok = False
            if not ok:
                raise CaptureError(f"{where}: line {line_no[r]}, column {labels[c]!r}: {_cell_problem(cell)}")
            out[r, c] = float(v)
    return out



def _build(values: np.ndarray, line_no: Sequence[int], names: list[str] | None, unit_row: list[str] | None,
           preamble: dict[str, str], lay: _Layout, where: str, sha256: str | None,
           sample_rate: float | None, header_no: int | None) -> Capture:
    """Turn parsed rows into a Capture: pick the time axis and the voltage columns, scale to SI."""
    if values.shape[0] < 2:
        raise CaptureError(
            f"{where}: holds only {values.shape[0]} data row, at least 2 are needed — export more data")
    warnings: list[str] = []
    meta: dict[str, Any] = {"format": "CSV", "csv_delimiter": {None: "none", " ": "space", "\t": "tab"}.get(
        lay.delim, lay.delim), "csv_decimal": lay.decimal, "header_line": header_no}
    if preamble:
        meta["preamble"] = dict(preamble)
    hints = read_hints(preamble, lay.decimal)
    if hints.rails:
        meta["rails_v"] = hints.rails
    labels = list(names) if names is not None else [f"column {i + 1}" for i in range(values.shape[1])]
    kinds = [(("", None) if names is None else parse_header_unit(n)) for n in labels]
    if unit_row is not None:
        kinds = [(name, unit_row[i] or utext) for i, (name, utext) in enumerate(kinds)]
    units = [unit_kind(u) if u else None for _, u in kinds]
    time_col, skip = _column_roles(values, names, kinds, units, where, warnings)
    fs, t0 = _time_axis(values, line_no, time_col, labels, units, hints, sample_rate, where, warnings, meta)

    ch_idx: list[int] = []
    ch_names: list[str] = []
    scales: list[float] = []
    dropped = [labels[i] for i in skip if names is not None]
    for i, ((name, utext), unit) in enumerate(zip(kinds, units)):
        if i == time_col or i in skip:
            continue
        if utext is not None and (unit is None or unit[0] != "volt"):
            dropped.append(labels[i])
            what = "a second time column" if unit and unit[0] == "time" else f"in {utext!r}, not volts"
            warnings.append(f"{where}: column {labels[i]!r} is {what} — skipped")
            continue
        scale = unit[1] if unit else (hints.volt_unit[1] if hints.volt_unit else 1.0)
        if unit is None and hints.volt_unit is None and (names is not None or not ch_idx):
            warnings.append(f"{where}: column {labels[i]!r} has no unit — read as volts" if names is not None
                            else f"{where}: no header row — values read as volts")
        base, n = name or f"ch{len(ch_idx) + 1}", 2
        final = base
        while final.lower() in {c.lower() for c in ch_names}:
            final, n = f"{base}_{n}", n + 1
        ch_idx.append(i)
        ch_names.append(final)
        scales.append(scale)
    if not ch_idx:
        raise CaptureError(f"{where}: no voltage column found (only {', '.join(dropped) or 'time'}) — "
                           "export the channel data with the time column")
    if dropped:
        meta["dropped_columns"] = dropped
    if names is not None:
        meta["columns"] = list(names)
        # each channel's header as written ("drive_V" for the channel named "drive"): accepted as its name too
        meta["channel_headers"] = [labels[i].strip() for i in ch_idx]
    samples = values[:, ch_idx].T * np.asarray(scales)[:, np.newaxis]
    # volts as the scope wrote them: its own vertical gain applies, uncalibrated (measure budgets a default)
    return Capture(samples=samples, sample_rate=fs, channel_names=tuple(ch_names), units=("V",) * len(ch_idx),
                   source=where, sha256=sha256, metadata=meta, warnings=tuple(warnings), t0=t0,
                   calibration=InputCalibration(instrument_volts=True))


def _column_roles(values: np.ndarray, names: list[str] | None, kinds: list[tuple[str, str | None]],
                  units: list[tuple[UnitKind, float] | None], where: str,
                  warnings: list[str]) -> tuple[int | None, list[int]]:
    """(time column or None, sample-number columns to skip)."""
    if names is None:
        first = values[:, 0]
        steps = np.diff(first)
        if values.shape[1] < 2 or not np.all(steps > 0):
            return None, []
        if np.all(steps == 1) and first[0] in (0.0, 1.0):
            warnings.append(f"{where}: the first column counts 0, 1, 2… — read as a sample number, not time")
            return None, [0]
        return 0, []
    time_col = next((i for i, u in enumerate(units) if u is not None and u[0] == "time"), None)
    if time_col is None:
        time_col = next((i for i, (n, u) in enumerate(kinds) if u is None and n.lower() in _TIME_NAMES), None)
    skip = [i for i, (n, u) in enumerate(kinds) if i != time_col and u is None and n.lower() in _INDEX_NAMES]
    return time_col, skip


def _time_axis(values: np.ndarray, line_no: Sequence[int], time_col: int | None, labels: list[str],
               units: list[tuple[UnitKind, float] | None], hints: PreambleHints, sample_rate: float | None, where: str,
               warnings: list[str], meta: dict[str, Any]) -> tuple[float, float]:
    """(sample rate in Hz, time of the first sample in s) from the time column, the preamble or the caller."""
    interval = hints.interval
    start = hints.start_time if hints.start_time is not None else 0.0
    if time_col is not None:
        unit = units[time_col]
        factor = unit[1] if unit else (hints.time_unit[1] if hints.time_unit else 1.0)
        t = values[:, time_col] * factor
        n_warn = len(warnings)
        dt, jitter = _check_time(t, line_no, labels[time_col], where, warnings)
        fs, t0, source = 1.0 / dt, float(t[0]), f"time column {labels[time_col]!r}"
        rounded = len(warnings) > n_warn  # the stamps are rounded: a rate the caller gives may be better
        if rounded and sample_rate is not None and abs(float(sample_rate) / fs - 1) <= JITTER_LIMIT:
            fs, source = float(sample_rate), "sample rate given by the caller (the rounded time column agrees)"
            warnings[-1] = (warnings[-1].split(" — ")[0] + f" — the given sample rate {fs:g} Hz is used; it "
                            "agrees with the time column")
            sample_rate = None
        if unit is None and hints.time_unit is None:
            warnings.append(f"{where}: time column {labels[time_col]!r} has no unit — read as seconds"
                            + _time_unit_hint(fs, labels[time_col]))
        meta["time_jitter_max_rel"] = jitter
        if interval is not None and abs(interval[0] / dt - 1) > JITTER_LIMIT:
            warnings.append(f"{where}: preamble {interval[1]!r} gives a step of {interval[0]:.6g} s but the time "
                            f"column steps by {dt:.6g} s — the time column is used")
    elif interval is not None:
        fs, t0, source = interval[2], start, f"preamble {interval[1]!r}"
    elif sample_rate is not None:
        fs = float(sample_rate)
        if not (math.isfinite(fs) and fs > 0):
            raise CaptureError(f"sample_rate: {sample_rate!r} must be a positive number of Hz — pass e.g. sample_rate=50000")
        t0, source, sample_rate = start, "sample rate given by the caller", None
    else:
        raise CaptureError(f"{where}: no time column and no sample interval in the file — pass the sample "
                           "rate in Hz (sample_rate=)")
    if sample_rate is not None and abs(float(sample_rate) / fs - 1) > JITTER_LIMIT:
        warnings.append(f"{where}: sample rate {float(sample_rate):g} Hz given, but the file's {source} says "
                        f"{fs:.6g} Hz — the file is used")
    meta["time_step_s"] = 1.0 / fs
    meta["time_source"] = source
    return fs, t0


def _time_unit_hint(fs: float, label: str) -> str:
    """For a unitless time column: the reading in ms/µs/ns when seconds give an implausibly slow rate."""
    if fs >= 1.0:
        return ""
    for prefix, factor in (("ms", 1e-3), ("µs", 1e-6), ("ns", 1e-9)):
        if 1e3 <= fs / factor <= 1e11:  # a rate a sound card or scope samples at (common practice, no source)
            return (f", which gives {fs:.3g} Hz; read as {prefix} it would be {fs / factor:.6g} Hz — name the "
                    f"unit in the header, e.g. '{label} ({prefix.replace('µ', 'u')})'")
    return f", which gives {fs:.3g} Hz — name the unit in the header if that is wrong"


def _print_resolution(t: np.ndarray) -> float:
    """The decimal grid the time stamps were printed on (1e-6 for "0.000021"), or 0 if none is found."""
    span = float(np.max(np.abs(t))) or 1.0
    for k in range(-12, 4):
        r = 10.0 ** float(k)
        if span / r < 1e15 and np.max(np.abs(t / r - np.round(t / r))) < 1e-3:
            # the finest grid that holds every value is the print resolution only if no coarser one does
            coarser = 10.0 * r
            if not np.max(np.abs(t / coarser - np.round(t / coarser))) < 1e-3:
                return r
    return 0.0


def _check_time(t: np.ndarray, line_no: Sequence[int], label: str, where: str,
                warnings: list[str] | None = None) -> tuple[float, float]:
    """Mean step (s) and jitter: the largest distance of a time stamp from the least-squares uniform
    grid, as a fraction of the step. Errors name the line: the first decreasing time, the largest gap
    (a step off by more than half), or the first time stamp straying more than :data:`JITTER_LIMIT`.

    Time stamps printed on a coarse decimal grid (48 kHz written to 1 µs: steps of 20 and 21 µs)
    stray by up to half that grid; that rounding is accepted (and said in ``warnings``), and the
    step is the least-squares slope over all rows.
    """
    steps = np.diff(t)
    bad = np.flatnonzero(~(steps > 0))
    if bad.size:
        r = int(bad[0]) + 1
        raise CaptureError(f"{where}: line {line_no[r]}, column {label!r}: time {t[r]:.9g} s does not increase "
                           f"(previous {t[r - 1]:.9g} s) — sort the rows or remove the repeated ones")
    n = t.size
    dt = float((t[-1] - t[0]) / (n - 1))
    if n < 3:
        return dt, 0.0
    k = np.arange(n) - (n - 1) / 2
    slope = float(np.dot(k, t - t.mean()) / np.dot(k, k))
    deviation = np.abs(t - t.mean() - slope * k) / dt
    jitter = float(deviation.max())
    if jitter > JITTER_LIMIT:
        res = _print_resolution(t)
        # rounding strays up to res/2 from the true grid; the fitted grid itself may sit off it by the
        # ordinary limit (a least-squares line through rounded stamps)
        # a grid coarser than a tenth of a step would hide real irregular sampling: refused as before
        if 0 < res <= 0.1 * dt and jitter * dt <= 0.5 * res + JITTER_LIMIT * dt:
            if warnings is not None:
                warnings.append(f"{where}: column {label!r}: time stamps are rounded to {res:.3g} s "
                                f"({100 * res / slope:.2g} % of a step) — the step {slope:.9g} s is fitted over all "
                                f"{n} rows; export more decimals to check it")
            return slope, jitter
    if jitter > JITTER_LIMIT:
        off = np.abs(steps - dt)
        r = int(np.argmax(off)) + 1 if off.max() > 0.5 * dt else int(np.argmax(deviation > JITTER_LIMIT))
        r = max(r, 1)
        raise CaptureError(
            f"{where}: line {line_no[r]}, column {label!r}: time step {steps[r - 1]:.6g} s against a mean step of "
            f"{dt:.6g} s: the samples are not evenly spaced (time stamps stray up to {100 * jitter:.3g} % of a "
            f"step from a uniform grid, limit {100 * JITTER_LIMIT:g} %) — export without gaps or resample"
        )
    return dt, jitter
