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
from typing import Any, Literal, Sequence

import numpy as np

from benchfit.capture.capture import Capture
from benchfit.errors import CaptureError

__all__ = ["read_csv", "parse_header_unit", "UnitKind", "JITTER_LIMIT"]

UnitKind = Literal["time", "volt", "rate", "other"]

#: largest accepted time-stamp deviation from the uniform grid, as a fraction of the step
JITTER_LIMIT = 0.01

_MICRO = ("u", "µ", "μ")
_TIME_PREFIX = {"": 1.0, "m": 1e-3, "u": 1e-6, "µ": 1e-6, "μ": 1e-6, "n": 1e-9, "p": 1e-12}
_VOLT_PREFIX = {"": 1.0, "m": 1e-3, "u": 1e-6, "µ": 1e-6, "μ": 1e-6, "n": 1e-9, "k": 1e3, "K": 1e3}
_RATE_PREFIX = {"": 1.0, "k": 1e3, "K": 1e3, "M": 1e6, "G": 1e9}
_TIME_BASES = ("seconds", "second", "secs", "sec", "s")
_TIME_WORDS = {"millisecond": 1e-3, "microsecond": 1e-6, "nanosecond": 1e-9,
               "min": 60.0, "minute": 60.0, "minutes": 60.0, "h": 3600.0, "hour": 3600.0, "hours": 3600.0}
_VOLT_BASES = ("volts", "volt", "v")
_RATE_BASES = ("samples/second", "samples/sec", "samples/s", "sample/s", "sa/sec", "sa/s", "s/s", "sps", "hz")
_OTHER_UNITS = ("a", "ma", "ua", "µa", "°c", "degc", "c", "%", "db", "dbv", "dbm", "dbfs", "w", "mw",
                "ohm", "ω", "pa", "kpa", "hz", "v^2", "v²", "a/div", "v/div", "div", "counts", "lsb", "fs")

_TIME_NAMES = {"time", "t", "times", "zeit", "temps", "tiempo", "tempo", "x", "timestamp", "elapsed",
               "elapsed time", "relative time", "rel time", "time axis", "horizontal", "seconds", "second", "sec"}
_INDEX_NAMES = {"no", "no.", "nr", "nr.", "index", "idx", "sample", "samples", "sample no", "sample no.",
                "sample number", "point", "points", "#", "n", "number", "num", "step"}
_NAN_TOKENS = {"nan", "-nan", "inf", "-inf", "+inf", "infinity", "-infinity", "n/a", "na", "null", "none",
               "error", "err", "-", "--", "?", "overflow", "ovl", "ol"}

# preamble keys, normalised by _norm_key (lower case, letters and digits only)
_INTERVAL_KEYS = {"sampleinterval", "sampleperiod", "samplinginterval", "samplingperiod", "xincrement",
                  "xinc", "timestep", "timeinterval", "dt", "deltat", "interval", "secondsperpoint",
                  "timeperpoint", "timeresolution", "sampletime", "samplingtime"}
_RATE_KEYS = {"samplerate", "samplingrate", "samplingfrequency", "samplefrequency", "fs", "samplespersecond",
              "srate", "acquisitionrate", "lograte", "scanrate"}
_TIME_UNIT_KEYS = {"horizontalunits", "horizontalunit", "timeunits", "timeunit", "xunits", "xunit",
                   "timebaseunits", "timebaseunit", "hunits", "hunit", "timeaxisunits", "timeaxisunit"}
_VOLT_UNIT_KEYS = {"verticalunits", "verticalunit", "yunits", "yunit", "voltageunits", "voltageunit",
                   "vunits", "vunit", "amplitudeunits", "amplitudeunit"}
_START_KEYS = {"starttime", "xorigin", "xstart", "t0", "firsttime", "xzero", "timeoffset", "starttimes"}
_RANGE_KEYS = {"verticalrange", "range", "inputrange", "voltagerange", "yrange", "fullscalerange", "fullscale"}
_RANGE_MIN_KEYS = {"verticalmin", "ymin", "vmin", "rangemin", "verticalminimum", "inputmin"}
_RANGE_MAX_KEYS = {"verticalmax", "ymax", "vmax", "rangemax", "verticalmaximum", "inputmax"}

_NUMBER_RE = re.compile(r"^\s*(±|\+/-|\+-)?\s*([+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?)\s*(.*?)\s*$")
_COMMA_DECIMAL_RE = re.compile(r"^\s*[+-]?\d*,\d+(?:[eE][+-]?\d+)?\s*$")
_DOT_DECIMAL_RE = re.compile(r"^\s*[+-]?\d*\.\d+(?:[eE][+-]?\d+)?\s*$")


# --------------------------------------------------------------------------- units
def _unit(text: str) -> tuple[UnitKind, float] | None:
    """Kind and SI factor of a unit string (``"ms"`` → ("time", 1e-3)), or None if not a unit."""
    u = text.strip().strip(".")
    if not u:
        return None
    low = u.lower()
    for word, factor in _TIME_WORDS.items():
        if low in (word, word + "s"):
            return "time", factor
    for base in _TIME_BASES:
        if low.endswith(base):
            prefix = u[: len(u) - len(base)]
            if prefix in _TIME_PREFIX:
                return "time", _TIME_PREFIX[prefix]
    for base in _RATE_BASES:
        if low.endswith(base):
            prefix = u[: len(u) - len(base)]
            if prefix in _RATE_PREFIX:
                return "rate", _RATE_PREFIX[prefix]
    for base in _VOLT_BASES:
        if low.endswith(base):
            prefix = u[: len(u) - len(base)]
            if prefix in _VOLT_PREFIX:
                return "volt", _VOLT_PREFIX[prefix]
    if low in _OTHER_UNITS or low.startswith(("°", "deg")):
        return "other", 1.0
    return None


# units accepted as a bare suffix ("v_out_V", "time_ms"): seconds and volts with small prefixes only, so that
# "Vertical Min" or "Channel A" keep their last word
_SUFFIX_UNITS = {("time", f) for f in _TIME_PREFIX.values()} | {("volt", f) for f in _VOLT_PREFIX.values()}


def parse_header_unit(header: str) -> tuple[str, str | None]:
    """Split a column header into (name, unit text) — ``"CH A [mV]"`` → ``("CH A", "mV")``.

    Brackets and parentheses always delimit a unit (the content may be any unit, or a
    non-unit remark, in which case the whole header is the name). A slash or a trailing
    ``_``/space/``-`` token counts only when it is a time or voltage unit. A header that is
    a unit alone (``"V"``, ``"Second"``) gives an empty name.
    """
    h = header.strip()
    for pattern in (r"^(.*?)\s*\[([^\[\]]*)\]\s*$", r"^(.*?)\s*\(([^()]*)\)\s*$"):
        m = re.match(pattern, h)
        if m:
            inner = m.group(2).strip()
            if not inner or inner in ("-", "1") or _unit(inner) is not None:
                return m.group(1).strip(), inner or None
            if re.fullmatch(r"[^\s]{1,6}", inner) and not inner.isalnum():
                return m.group(1).strip(), inner  # e.g. "°C", "%" — an unknown unit, kept
            return h, None
    m = re.match(r"^(.*\S)\s*/\s*([^\s/]+)$", h)
    if m and _unit(m.group(2)) is not None and _unit(m.group(2))[0] in ("time", "volt"):
        return m.group(1).strip(), m.group(2)
    m = re.match(r"^(.*?[^\s_\-])[\s_\-]+([A-Za-zµμ]+)$", h)
    if m and _unit(m.group(2)) in _SUFFIX_UNITS:
        return m.group(1).strip(), m.group(2)
    if _unit(h) is not None and _unit(h)[0] in ("time", "volt"):
        return "", h
    return h, None


def _norm_key(key: str) -> str:
    return re.sub(r"[^a-z0-9]", "", key.lower())


def _parse_value(text: str, decimal: str) -> tuple[float, str, bool] | None:
    """(number, unit text, had ±) from a preamble value such as ``"20 µs"`` or ``"±5 V"``."""
    t = text.strip().strip('"').strip()
    if decimal == ",":
        t = t.replace(",", ".")
    m = _NUMBER_RE.match(t)
    if not m:
        return None
    try:
        value = float(m.group(2))
    except ValueError:
        return None
    if not math.isfinite(value):
        return None
    return value, m.group(3), bool(m.group(1))


def _numbers_and_unit(text: str, decimal: str) -> tuple[list[float], str]:
    """All numbers in a range text (``"-5,5 V"``, ``"±2 V"``, ``"0 to 10 V"``) and the unit after them."""
    mark = "," if decimal == "," else r"\."
    num = rf"[+-]?(?:\d+(?:{mark}\d*)?|{mark}\d+)(?:[eE][+-]?\d+)?"
    t = text.strip().strip('"')
    nums = [float(x.replace(",", ".")) for x in re.findall(num, t)]
    rest = re.sub(r"±|\+/-|\bto\b|[,;\t]", " ", re.sub(num, " ", t)).split()
    return [x for x in nums if math.isfinite(x)], (rest[-1] if rest else "")


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
    is_key = bool(re.search(r"[A-Za-z]", first)) and first.lower() not in _NAN_TOKENS and not first.startswith(("#", "="))
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
    import pandas as pd

    p = Path(path)
    where = str(p)
    if raw is None:
        try:
            raw = p.read_bytes()
        except OSError as e:
            raise CaptureError(f"{where}: cannot read the file ({e.strerror or e}) — check the path") from e
    if not raw.strip():
        raise CaptureError(f"{where}: the file is empty — export the data again")
    text = _decode(raw, where)
    lines = text.replace("\r\n", "\n").replace("\r", "\n").split("\n")
    lay = _sniff_layout(lines, where)
    K = lay.n_fields

    # locate the first clean data row D, then walk back over damaged rows to the true start
    start = None
    for i, ln in enumerate(lines):
        if not ln.strip():
            continue
        cells = _cells(ln, lay)
        if len(cells) == K and all(_is_number(c, lay.decimal) for c in cells):
            start = i
            break
    if start is None:
        raise CaptureError(f"{where}: holds a header or preamble but no numeric data rows — export the data again")
    j = start - 1
    while j >= 0:
        if not lines[j].strip():
            j -= 1
            continue
        if _looks_like_data(_cells(lines[j], lay), lay):
            start = j
            j -= 1
            continue
        break

    # header (and optional row of units) just above the data
    head_idx: list[int] = []
    j = start - 1
    while j >= 0 and len(head_idx) < 2:
        ln = lines[j]
        if not ln.strip():
            j -= 1
            continue
        cells = _cells(ln, lay)
        if _is_marked(ln) and not (K > 1 and len(cells) == K):
            break
        if len(cells) == K and not any(_is_number(c, lay.decimal) for c in cells) and (K > 1 or not head_idx):
            head_idx.insert(0, j)
            j -= 1
            continue
        break
    names: list[str] | None = None
    unit_row: list[str] | None = None
    if head_idx:
        rows = [[c.strip().strip('"').strip() for c in _cells(lines[k], lay)] for k in head_idx]
        if len(rows) == 2 and all(not c or _unit(c) is not None for c in rows[1]):
            names, unit_row = rows
        else:
            names = rows[-1]
            head_idx = head_idx[-1:]
        if K == 1 and names and re.search(r"[:=,;\t]\s*[-+.\d]", names[0]):
            names, head_idx = None, []  # "key: value" line, not a header
    header_line = head_idx[0] if head_idx else start

    # preamble and comments → metadata
    preamble: dict[str, str] = {}
    comments: list[str] = []

    def keep(key: str, value: str) -> None:
        key, value = key.strip().strip('"').strip(), value.strip().strip('"').strip()
        if not key:
            return
        k, n = key, 2
        while k in preamble:
            k, n = f"{key} ({n})", n + 1
        preamble[k] = value

    for i, ln in enumerate(lines[:header_line]):
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
        if len(cells) >= 2 and cells[0].strip():
            keep(cells[0], (lay.delim if lay.delim != " " else " ").join(c for c in cells[1:] if c.strip()))
        else:
            m = re.match(r"^([^:=,;\t]{1,60}?)\s*[:=,;\t]\s*(.+)$", s)
            if m:
                keep(m.group(1), m.group(2))
            else:
                keep(f"line {i + 1}", s)

    # data rows: field count per line, then a fast numeric parse
    # (rows are re-joined with the unit separator \x1f so quoted cells cannot split)
    d = lay.delim
    block = lines[start:]
    while block and not block[-1].strip():
        block.pop()
    joined = "\n".join(block) if d in (",", ";", "\t") and not lay.strip_trailing else ""
    col_names = _column_labels(names, unit_row, K)
    if joined and '"' not in joined and not re.search(r"^[ \t]*(#|//|;|$)", joined, re.M):
        # fast path: plain rows, no quotes, comments or blank lines
        counts = [ln.count(d) for ln in block]
        if counts.count(K - 1) != len(counts):
            r = next(i for i, c in enumerate(counts) if c != K - 1)
            raise CaptureError(f"{where}: line {start + r + 1} has {counts[r] + 1} cell(s) but the data rows have "
                               f"{K} — fix or delete that line")
        fast_no = range(start + 1, start + 1 + len(block))
        values = _parse_numbers(block, fast_no, lay, col_names, where, pd, sep=d, joined=joined)
        header_no = head_idx[0] + 1 if names is not None else None
        if comments:
            preamble["comments"] = " | ".join(comments)
        return _build(values, fast_no, names, unit_row, preamble, lay, where, sha256, sample_rate, header_no)
    del joined
    data_no: list[int] = []
    data_txt: list[str] = []
    for i in range(start, len(lines)):
        ln = lines[i]
        if not ln.strip():
            continue
        cells: list[str] | None
        if lay.strip_trailing or d is None or d == " " or '"' in ln:
            cells = _cells(ln, lay)
            n = len(cells)
        else:
            cells = None
            n = ln.count(d) + 1
        if _is_marked(ln) and not _looks_like_data(cells if cells is not None else _cells(ln, lay), lay):
            continue  # a comment among or after the data
        if n != K:
            raise CaptureError(
                f"{where}: line {i + 1} has {n} cell(s) but the data rows have {K} — fix or delete that line"
            )
        data_no.append(i + 1)
        data_txt.append("\x1f".join(cells) if cells is not None else (ln.replace(d, "\x1f") if d else ln))
    values = _parse_numbers(data_txt, data_no, lay, col_names, where, pd)
    if values.shape[0] == 0:
        raise CaptureError(f"{where}: holds a header but no data rows — export the data again")

    header_no = head_idx[0] + 1 if names is not None else None
    if comments:
        preamble["comments"] = " | ".join(comments)
    return _build(values, data_no, names, unit_row, preamble, lay, where, sha256, sample_rate, header_no)


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
    shown = cell if len(cell) <= 40 else cell[:37] + "..."
    if not cell.strip():
        return "the cell is empty"
    try:
        float(cell.strip().strip('"').replace(",", "."))
    except ValueError:
        return f"{shown!r} is not a number"
    return f"{shown!r} is not a finite number"


def _parse_numbers(texts: list[str], line_no: Sequence[int], lay: _Layout, labels: list[str], where: str,
                   pd: Any, sep: str = "\x1f", joined: str | None = None) -> np.ndarray:
    """Parse the data rows to a float64 array (rows × columns) with pinpointed errors."""
    if not texts:
        return np.empty((0, lay.n_fields))
    try:
        frame = pd.read_csv(io.StringIO(joined if joined is not None else "\n".join(texts)), sep=sep, header=None, decimal=lay.decimal,
                            dtype=np.float64, engine="c", skip_blank_lines=False, skipinitialspace=True,
                            names=list(range(lay.n_fields)), index_col=False)
        values = frame.to_numpy(dtype=np.float64)
        if values.shape != (len(texts), lay.n_fields):
            raise ValueError("shape mismatch")
    except (ValueError, pd.errors.ParserError):
        values = None
    if values is not None and np.all(np.isfinite(values)):
        return values
    if values is not None:
        r, c = (int(v) for v in np.argwhere(~np.isfinite(values))[0])
        cell = texts[r].split(sep)[c]
        raise CaptureError(f"{where}: line {line_no[r]}, column {labels[c]!r}: {_cell_problem(cell)} — "
                           "fix or delete that row")
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
                raise CaptureError(f"{where}: line {line_no[r]}, column {labels[c]!r}: {_cell_problem(cell)} — "
                                   "fix or delete that row")
            out[r, c] = float(v)
    return out


def _build(values: np.ndarray, line_no: Sequence[int], names: list[str] | None, unit_row: list[str] | None,
           preamble: dict[str, str], lay: _Layout, where: str, sha256: str | None,
           sample_rate: float | None, header_no: int | None) -> Capture:
    K = values.shape[1]
    if values.shape[0] < 2:
        raise CaptureError(f"{where}: holds only {values.shape[0]} data row, at least 2 are needed — export more data")
    warnings: list[str] = []
    meta: dict[str, Any] = {"format": "CSV", "csv_delimiter": {None: "none", " ": "space", "\t": "tab"}.get(
        lay.delim, lay.delim), "csv_decimal": lay.decimal, "header_line": header_no}
    if preamble:
        meta["preamble"] = dict(preamble)

    # what the preamble says
    interval: tuple[float, str, float] | None = None  # (step s, key, rate Hz)
    start_time: float | None = None
    time_unit_hint: tuple[str, float] | None = None
    volt_unit_hint: tuple[str, float] | None = None
    rails: dict[str, list[float]] = {}
    for key, value in preamble.items():
        kname, kunit = parse_header_unit(key)
        nk = _norm_key(kname)
        parsed = _parse_value(value, lay.decimal)
        unit_text = (parsed[1] if parsed and parsed[1] else (kunit or ""))
        unit = _unit(unit_text) if unit_text else None
        if nk in _TIME_UNIT_KEYS:
            u = _unit(value.strip().strip('"'))
            if u and u[0] == "time":
                time_unit_hint = (value.strip(), u[1])
        elif nk in _VOLT_UNIT_KEYS:
            u = _unit(value.strip().strip('"'))
            if u and u[0] == "volt":
                volt_unit_hint = (value.strip(), u[1])
        elif parsed is None:
            continue
        elif (nk in _INTERVAL_KEYS or nk in _RATE_KEYS) and interval is None and parsed[0] > 0:
            kind = unit[0] if unit else ("time" if nk in _INTERVAL_KEYS else "rate")
            factor = unit[1] if unit else 1.0
            if kind == "time":
                interval = (parsed[0] * factor, key, 1.0 / (parsed[0] * factor))
            elif kind == "rate":
                interval = (1.0 / (parsed[0] * factor), key, parsed[0] * factor)
        elif nk in _START_KEYS:
            factor = unit[1] if unit and unit[0] == "time" else 1.0
            start_time = parsed[0] * factor
        elif (nk in _RANGE_KEYS or nk in _RANGE_MIN_KEYS or nk in _RANGE_MAX_KEYS
              or (nk.endswith("range") and not re.search(r"time|horizontal|^x", nk))):
            nums, rtext = _numbers_and_unit(value, lay.decimal)
            runit = _unit(rtext) if rtext else (_unit(kunit) if kunit else None)
            if not nums or (runit is not None and runit[0] != "volt"):
                continue
            factor = runit[1] if runit else 1.0
            label = "*" if (nk in _RANGE_KEYS or nk in _RANGE_MIN_KEYS or nk in _RANGE_MAX_KEYS) else \
                re.sub(r"[\s_]*range\s*$", "", kname, flags=re.I).strip()
            entry = rails.setdefault(label, [math.nan, math.nan])
            if nk in _RANGE_MIN_KEYS:
                entry[0] = nums[0] * factor
            elif nk in _RANGE_MAX_KEYS:
                entry[1] = nums[0] * factor
            elif len(nums) >= 2:
                entry[:] = sorted([nums[0] * factor, nums[1] * factor])
            else:
                entry[:] = [-abs(nums[0]) * factor, abs(nums[0]) * factor]  # "±5 V" or "5 V": symmetric
    if rails:
        meta["rails_v"] = {k: v for k, v in rails.items()}

    # column roles
    kinds: list[tuple[str, str | None, tuple[UnitKind, float] | None]] = []
    for i in range(K):
        if names is None:
            kinds.append(("", None, None))
            continue
        name, utext = parse_header_unit(names[i])
        if unit_row is not None and unit_row[i]:
            utext = unit_row[i]
        kinds.append((name, utext, _unit(utext) if utext else None))
    time_col: int | None = None
    dropped: list[str] = []
    index_cols: list[int] = []
    for i, (name, utext, unit) in enumerate(kinds):
        if unit is not None and unit[0] == "time" and time_col is None:
            time_col = i
    if time_col is None and names is not None:
        for i, (name, utext, unit) in enumerate(kinds):
            if name.lower() in _TIME_NAMES and unit is None and utext is None:
                time_col = i
                break
    if names is not None:
        for i, (name, utext, unit) in enumerate(kinds):
            if i != time_col and utext is None and name.lower() in _INDEX_NAMES:
                index_cols.append(i)
    elif K >= 2 and values.shape[0] >= 2:
        first = values[:, 0]
        steps = np.diff(first)
        if np.all(steps > 0):
            if np.all(first == np.round(first)) and np.all(steps == 1) and first[0] in (0.0, 1.0):
                index_cols.append(0)
                warnings.append(f"{where}: the first column counts 0, 1, 2… — read as a sample number, not time")
            else:
                time_col = 0
    # time axis
    t_src: str
    if time_col is not None:
        name, utext, unit = kinds[time_col]
        if unit is None:
            if time_unit_hint is not None:
                factor = time_unit_hint[1]
            else:
                factor = 1.0
                warnings.append(f"{where}: time column {(names[time_col] if names else 'column 1')!r} has no unit — "
                                "read as seconds")
        else:
            factor = unit[1]
        t = values[:, time_col] * factor
        label = names[time_col] if names else "column 1"
        dt, jitter = _check_time(t, line_no, label, where)
        fs = 1.0 / dt
        t0 = float(t[0])
        t_src = f"time column {label!r}"
        meta["time_jitter_max_rel"] = jitter
        if interval is not None and abs(interval[0] / dt - 1) > JITTER_LIMIT:
            warnings.append(f"{where}: preamble {interval[1]!r} gives a step of {interval[0]:.6g} s but the time "
                            f"column steps by {dt:.6g} s — the time column is used")
    elif interval is not None:
        dt, t0, fs = interval[0], (start_time if start_time is not None else 0.0), interval[2]
        t_src = f"preamble {interval[1]!r}"
    elif sample_rate is not None:
        if not (math.isfinite(float(sample_rate)) and float(sample_rate) > 0):
            raise CaptureError(f"sample rate: {sample_rate!r} must be a positive number of Hz — pass e.g. 50000")
        fs = float(sample_rate)
        dt, t0 = 1.0 / fs, (start_time if start_time is not None else 0.0)
        t_src = "sample rate given by the caller"
        sample_rate = None
    else:
        raise CaptureError(f"{where}: no time column and no sample interval in the file — pass the sample "
                           "rate (--sample-rate, in Hz)")
    if sample_rate is not None and abs(float(sample_rate) * dt - 1) > JITTER_LIMIT:
        warnings.append(f"{where}: sample rate {float(sample_rate):g} Hz given, but the file's {t_src} says "
                        f"{1 / dt:.6g} Hz — the file is used")
    meta["time_step_s"] = dt
    meta["time_source"] = t_src

    # channels
    ch_idx: list[int] = []
    ch_names: list[str] = []
    scales: list[float] = []
    seen: set[str] = set()
    for i, (name, utext, unit) in enumerate(kinds):
        if i == time_col or i in index_cols:
            if i in index_cols and names is not None:
                dropped.append(names[i])
            continue
        label = names[i] if names else f"column {i + 1}"
        if unit is not None and unit[0] == "time":
            dropped.append(label)
            warnings.append(f"{where}: column {label!r} is a second time column — skipped")
            continue
        if utext is not None and (unit is None or unit[0] != "volt"):
            dropped.append(label)
            warnings.append(f"{where}: column {label!r} is in {utext!r}, not volts — skipped")
            continue
        if unit is None:
            if volt_unit_hint is not None:
                scale = volt_unit_hint[1]
            else:
                scale = 1.0
                if names is not None:
                    warnings.append(f"{where}: column {label!r} has no unit — read as volts")
                elif not ch_idx:
                    warnings.append(f"{where}: no header row — values read as volts")
        else:
            scale = unit[1]
        base = name or f"ch{len(ch_idx) + 1}"
        final, n = base, 2
        while final.lower() in seen:
            final, n = f"{base}_{n}", n + 1
        seen.add(final.lower())
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
    samples = values[:, ch_idx].T * np.asarray(scales)[:, np.newaxis]
    return Capture(samples=samples, sample_rate=fs, channel_names=tuple(ch_names),
                   units=("V",) * len(ch_idx), source=where, sha256=sha256, metadata=meta,
                   warnings=tuple(warnings), t0=t0)


def _check_time(t: np.ndarray, line_no: Sequence[int], label: str, where: str) -> tuple[float, float]:
    """Mean step (s) and largest relative deviation from the uniform grid; errors name the line."""
    steps = np.diff(t)
    bad = np.flatnonzero(~(steps > 0))
    if bad.size:
        r = int(bad[0]) + 1
        raise CaptureError(f"{where}: line {line_no[r]}, column {label!r}: time {t[r]:.9g} s does not increase "
                           f"(previous {t[r - 1]:.9g} s) — sort the rows or remove the repeated ones")
    n = t.size
    dt = float((t[-1] - t[0]) / (n - 1))
    grid = t[0] + dt * np.arange(n)
    jitter = float(np.max(np.abs(t - grid)) / dt) if n > 2 else 0.0
    if jitter > JITTER_LIMIT:
        r = int(np.argmax(np.abs(steps - dt))) + 1
        raise CaptureError(
            f"{where}: line {line_no[r]}, column {label!r}: time step {steps[r - 1]:.6g} s differs from the mean "
            f"step {dt:.6g} s (time stamps stray up to {100 * jitter:.3g} % of a step, limit "
            f"{100 * JITTER_LIMIT:g} %) — the samples are not evenly spaced; export without gaps or resample"
        )
    return dt, jitter
