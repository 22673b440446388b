"""Unit vocabulary, column-header units and preamble hints of waveform CSV exports (pure).

The text-independent half of :mod:`benchfit.capture.csvfile`: given strings already cut out
of a file, these functions say what they mean, and never read files or raise.

* :func:`unit_kind` — the kind and SI factor of a unit string (``"ms"`` → time, 1e-3;
  ``"kS/s"`` → rate, 1e3; ``"mV"`` → volt, 1e-3; ``"°C"`` → other);
* :func:`parse_header_unit` — a column header split into name and unit (``"CH A [mV]"``);
* :func:`read_hints` — what the recognised preamble keys say about the sample interval or
  rate, the start time, the time and voltage units and the vertical range (rails).
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field
from typing import Literal

__all__ = ["UnitKind", "unit_kind", "parse_header_unit", "PreambleHints", "read_hints"]

UnitKind = Literal["time", "volt", "rate", "other"]

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

# order matters: "S/s" and "kS/s" end in the time base "s" and are rates only because "S/" and "kS/" are no
# time prefixes
_PREFIXED: tuple[tuple[UnitKind, tuple[str, ...], dict[str, float]], ...] = (
    ("time", _TIME_BASES, _TIME_PREFIX), ("rate", _RATE_BASES, _RATE_PREFIX), ("volt", _VOLT_BASES, _VOLT_PREFIX))

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


def unit_kind(text: str) -> tuple[UnitKind, float] | None:
    """Kind and SI factor of a unit string (``"ms"`` → ("time", 1e-3)), or None if not a unit.

    The factor converts a value in the unit to seconds (time), volts (volt) or hertz
    (rate); for "other" units (current, temperature, dB, …) it is 1.0 and means nothing.
    """
    u = text.strip().strip(".")
    if not u:
        return None
    low = u.lower()
    for word, factor in _TIME_WORDS.items():
        if low in (word, word + "s"):
            return "time", factor
    for kind, bases, prefixes in _PREFIXED:
        for base in bases:
            if low.endswith(base):
                prefix = u[: len(u) - len(base)]  # the prefix keeps its case: "M" is mega, "m" milli
                if prefix in prefixes:
                    return kind, prefixes[prefix]
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
    for opening, closing in (("[", "]"), ("(", ")")):
        # "name [unit]": plain string search, linear in the header's length (a regex with a lazy
        # group before a run of spaces took minutes on a header cell padded with 100k spaces)
        start = h.rfind(opening)
        if h.endswith(closing) and start >= 0 and closing not in h[start + 1:-1]:
            name, inner = h[:start].strip(), h[start + 1:-1].strip()
            if not inner or inner in ("-", "1") or unit_kind(inner) is not None:
                return name, inner or None
            if re.fullmatch(r"[^\s]{1,6}", inner) and not inner.isalnum():
                return name, inner  # e.g. "°C", "%" — an unknown unit, kept
            return h, None
    m = re.match(r"^(.*\S)\s*/\s*([^\s/]+)$", h)
    kind = unit_kind(m.group(2)) if m else None
    if m and kind is not None and kind[0] in ("time", "volt"):
        return m.group(1).strip(), m.group(2)
    m = re.match(r"^(.*?[^\s_\-])[\s_\-]+([A-Za-zµμ]+)$", h)
    if m and unit_kind(m.group(2)) in _SUFFIX_UNITS:
        return m.group(1).strip(), m.group(2)
    kind = unit_kind(h)
    if kind is not None and kind[0] in ("time", "volt"):
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


@dataclass(frozen=True)
class PreambleHints:
    """What the preamble says about the time axis, the units and the vertical range.

    ``rails`` maps a channel label (``"*"`` for all channels) to ``[min V, max V]``, either
    end None when the preamble gives only the other.
    """

    interval: tuple[float, str, float] | None = None   # (step in s, preamble key, rate in Hz)
    start_time: float | None = None                    # s
    time_unit: tuple[str, float] | None = None         # (unit text, factor to s)
    volt_unit: tuple[str, float] | None = None         # (unit text, factor to V)
    rails: dict[str, list[float | None]] = field(default_factory=dict)  # label → [min V, max V]


def read_hints(preamble: dict[str, str], decimal: str) -> PreambleHints:
    """Interpret the recognised preamble keys (see the ``_*_KEYS`` sets); other keys are ignored.

    Parameters
    ----------
    preamble : dict of str to str
        The file's ``key → value`` lines, as cut out by the reader (keys may carry a unit,
        ``"Sample interval (us)"``).
    decimal : {".", ","}
        The file's decimal mark.
    """
    interval: tuple[float, str, float] | None = None
    start_time: float | None = None
    time_unit_hint: tuple[str, float] | None = None
    volt_unit_hint: tuple[str, float] | None = None
    rails: dict[str, list[float]] = {}
    for key, value in preamble.items():
        kname, kunit = parse_header_unit(key)
        nk = _norm_key(kname)
        parsed = _parse_value(value, decimal)
        unit_text = (parsed[1] if parsed and parsed[1] else (kunit or ""))
        unit = unit_kind(unit_text) if unit_text else None
        if nk in _TIME_UNIT_KEYS:
            u = unit_kind(value.strip().strip('"'))
            if u and u[0] == "time":
                time_unit_hint = (value.strip(), u[1])
        elif nk in _VOLT_UNIT_KEYS:
            u = unit_kind(value.strip().strip('"'))
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
            nums, rtext = _numbers_and_unit(value, decimal)
            runit = unit_kind(rtext) if rtext else (unit_kind(kunit) if kunit else None)
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
    clean = {k: [None if math.isnan(v) else v for v in pair] for k, pair in rails.items()}
    return PreambleHints(interval, start_time, time_unit_hint, volt_unit_hint, clean)
