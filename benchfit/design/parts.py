"""Preferred part values (IEC 60063 E-series) and series/parallel combinations.

Pure functions: numbers and frozen dataclasses in and out.

* :data:`E_SERIES` — the IEC 60063 tables, hard-coded (they cannot be computed: see below).
* :func:`series_values` — every value of a series within a range (several decades).
* :func:`nearest_values` — the series values just below and just above a target.
* :func:`combine` — the best combinations of up to three parts for a target value, taken from
  a series or from a stock list, with the combining rule of each kind of part.

Combining rules (Horowitz & Hill, *The Art of Electronics*, 3rd ed., ch. 1): resistances and
inductances add in series and combine as 1/(1/a + 1/b) in parallel; capacitances add in parallel
and combine as 1/(1/a + 1/b) in series. Internally a combination is written with two operators,
``add`` (a + b) and ``recip`` (1/(1/a + 1/b)); the kind of part decides which physical topology
each one is. Inductors combined without regard to their mutual coupling M give
L = L1 + L2 ± 2M in series, so :func:`combine` adds a caution for multi-part inductances.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from types import MappingProxyType
from typing import Literal, Mapping, Sequence, get_args

import numpy as np

from benchfit.errors import DesignError

__all__ = ["SeriesName", "PartKind", "E_SERIES", "SERIES_TOLERANCE", "PART_UNITS", "BENCH_RANGES",
           "MADE_RANGES", "check_bench_range", "check_filter_parts", "check_series", "check_kind", "series_values", "nearest_values", "round_to_series",
           "Combination", "CombinationSet", "combine", "combination_value"]

SeriesName = Literal["E6", "E12", "E24", "E48", "E96", "E192"]
PartKind = Literal["R", "C", "L"]

# IEC 60063:2015 Table 1 (two significant digits). These are the published tables; note that
# round(10**(i/24), 1) does NOT give E24: it differs at 2.7, 3.0, 3.3, 3.6, 3.9, 4.3, 4.7 and 8.2.
_E6 = (1.0, 1.5, 2.2, 3.3, 4.7, 6.8)
_E12 = (1.0, 1.2, 1.5, 1.8, 2.2, 2.7, 3.3, 3.9, 4.7, 5.6, 6.8, 8.2)
_E24 = (1.0, 1.1, 1.2, 1.3, 1.5, 1.6, 1.8, 2.0, 2.2, 2.4, 2.7, 3.0,
        3.3, 3.6, 3.9, 4.3, 4.7, 5.1, 5.6, 6.2, 6.8, 7.5, 8.2, 9.1)
# IEC 60063:2015 Table 2 (three significant digits) — from memory, not checked against the
# standard's text. For E96 (and E48, every second E96 value) round(100·10**(i/96)) reproduces
# every value listed here; E192 is round(100·10**(i/192)) except one value, where the table has
# 9.20 and the formula gives 9.19. The tests compare all of them with the eseries package.
_E96 = tuple(v / 100 for v in (
    100, 102, 105, 107, 110, 113, 115, 118, 121, 124, 127, 130, 133, 137, 140, 143,
    147, 150, 154, 158, 162, 165, 169, 174, 178, 182, 187, 191, 196, 200, 205, 210,
    215, 221, 226, 232, 237, 243, 249, 255, 261, 267, 274, 280, 287, 294, 301, 309,
    316, 324, 332, 340, 348, 357, 365, 374, 383, 392, 402, 412, 422, 432, 442, 453,
    464, 475, 487, 499, 511, 523, 536, 549, 562, 576, 590, 604, 619, 634, 649, 665,
    681, 698, 715, 732, 750, 768, 787, 806, 825, 845, 866, 887, 909, 931, 953, 976))
_E48 = _E96[::2]
_E192 = tuple(v / 100 for v in (
    100, 101, 102, 104, 105, 106, 107, 109, 110, 111, 113, 114, 115, 117, 118, 120,
    121, 123, 124, 126, 127, 129, 130, 132, 133, 135, 137, 138, 140, 142, 143, 145,
    147, 149, 150, 152, 154, 156, 158, 160, 162, 164, 165, 167, 169, 172, 174, 176,
    178, 180, 182, 184, 187, 189, 191, 193, 196, 198, 200, 203, 205, 208, 210, 213,
    215, 218, 221, 223, 226, 229, 232, 234, 237, 240, 243, 246, 249, 252, 255, 258,
    261, 264, 267, 271, 274, 277, 280, 284, 287, 291, 294, 298, 301, 305, 309, 312,
    316, 320, 324, 328, 332, 336, 340, 344, 348, 352, 357, 361, 365, 370, 374, 379,
    383, 388, 392, 397, 402, 407, 412, 417, 422, 427, 432, 437, 442, 448, 453, 459,
    464, 470, 475, 481, 487, 493, 499, 505, 511, 517, 523, 530, 536, 542, 549, 556,
    562, 569, 576, 583, 590, 597, 604, 612, 619, 626, 634, 642, 649, 657, 665, 673,
    681, 690, 698, 706, 715, 723, 732, 741, 750, 759, 768, 777, 787, 796, 806, 816,
    825, 835, 845, 856, 866, 876, 887, 898, 909, 920, 931, 942, 953, 965, 976, 988))

#: mantissas (1 ≤ m < 10) of each series
E_SERIES: Mapping[str, tuple[float, ...]] = MappingProxyType(
    {"E6": _E6, "E12": _E12, "E24": _E24, "E48": _E48, "E96": _E96, "E192": _E192})

#: conventional tolerance of each series (fraction), as usually paired with it; the 2015
#: edition of IEC 60063 loosened this pairing, so read it as convention.
SERIES_TOLERANCE: Mapping[str, float] = MappingProxyType(
    {"E6": 0.20, "E12": 0.10, "E24": 0.05, "E48": 0.02, "E96": 0.01, "E192": 0.005})

#: SI unit of each kind of part (for messages and tables)
PART_UNITS: Mapping[str, str] = MappingProxyType({"R": "Ω", "C": "F", "L": "H"})


#: values no bench L-C filter of this kind comes near (common practice, no source): outside them a number is
#: a prefix mistake (M for mega where m, milli, was meant; a missing u for micro) rather than a part, and a
#: drive frequency is outside what lumped chokes and capacitors on a bench are used for
BENCH_RANGES: Mapping[str, tuple[float, float, str]] = MappingProxyType({
    "L": (1e-9, 100.0, "H"), "C": (1e-13, 1.0, "F"), "Rs": (0.0, 1e7, "Ω"), "Resr": (0.0, 1e7, "Ω"),
    "Rload": (1e-3, 1e10, "Ω"), "frequency": (1e-3, 1e7, "Hz")})
#: the values resistors, capacitors and inductors are made in, shunts and supercapacitors included
#: (common practice, no source): what :func:`combine` accepts
MADE_RANGES: Mapping[str, tuple[float, float, str]] = MappingProxyType({
    "R": (1e-6, 1e12, "Ω"), "C": (1e-15, 1e4, "F"), "L": (1e-12, 1e3, "H")})


def check_bench_range(name: str, value: float, param: str,
                      ranges: Mapping[str, tuple[float, float, str]] = BENCH_RANGES) -> float:
    """``value`` if it lies within ``ranges[name]`` (:data:`BENCH_RANGES`), else a DesignError naming ``param``."""
    low, high, unit = ranges[name]
    if math.isfinite(value) and low <= value <= high:
        return value
    what = "bench drive frequency" if name == "frequency" else "bench part" if ranges is BENCH_RANGES else "part made"
    raise DesignError(f"{param}: {value:.4g} {unit} is outside any {what} ({low:g}…{high:g} {unit}) — "
                      "check the value and its SI prefix (M mega, k kilo, m milli, u micro, n nano, p pico)")


def check_filter_parts(*, inductance: float | None = None, capacitance: float | None = None,
                       rs_ohm: float | None = None, esr_ohm: float | None = None,
                       load_ohm: float | None = None) -> None:
    """Refuse an L-C filter part given outside :data:`BENCH_RANGES`, naming its parameter (None: not given)."""
    for key, param, value in (("L", "inductance", inductance), ("C", "capacitance", capacitance),
                              ("Rs", "rs_ohm", rs_ohm), ("Resr", "esr_ohm", esr_ohm), ("Rload", "load_ohm", load_ohm)):
        if value is not None:
            check_bench_range(key, float(value), param)


def check_series(series: str) -> str:
    """Return the canonical series name (``"e12"`` → ``"E12"``) or raise :class:`DesignError`."""
    name = str(series).strip().upper()
    if name not in get_args(SeriesName):
        raise DesignError(f"series: unknown series {series!r} — use one of "
                          f"{', '.join(get_args(SeriesName))}")
    return name


def check_kind(kind: str) -> str:
    """Return the canonical part kind (``"r"`` → ``"R"``) or raise :class:`DesignError`."""
    k = str(kind).strip().upper()
    if k not in get_args(PartKind):
        raise DesignError(f"kind: unknown part kind {kind!r} — use one of {', '.join(get_args(PartKind))}")
    return k


def _positive(value: float, name: str) -> float:
    v = float(value)
    if not math.isfinite(v) or v <= 0:
        raise DesignError(f"{name}: {value!r} must be a positive finite number — give a value above zero")
    return v


def series_values(series: str, low: float, high: float) -> np.ndarray:
    """All values of ``series`` in ``[low, high]``, ascending (e.g. E12 from 1 kΩ to 1 MΩ).

    Parameters
    ----------
    series : {"E6", "E12", "E24", "E48", "E96", "E192"}
        IEC 60063 series.
    low, high : float
        Range (any unit; the series is scale-free). Must be positive, ``low <= high``.
    """
    name = check_series(series)
    lo, hi = _positive(low, "low"), _positive(high, "high")
    if lo > hi:
        raise DesignError(f"range: low {lo:g} is above high {hi:g} — swap them")
    mant = np.asarray(E_SERIES[name])
    digits = 2 if name in ("E6", "E12", "E24") else 3
    out = []
    for dec in range(math.floor(math.log10(lo)) - 1, math.floor(math.log10(hi)) + 2):
        vals = mant * 10.0 ** dec
        # round to the series' significant digits so 4.7e-6 is exactly the float 4.7e-6
        vals = np.array([float(f"{v:.{digits}g}") for v in vals])
        out.append(vals[(vals >= lo * (1 - 1e-12)) & (vals <= hi * (1 + 1e-12))])
    return np.unique(np.concatenate(out))


def nearest_values(value: float, series: str) -> tuple[float, float]:
    """The series values just at/below and just at/above ``value`` (equal when it is a series value)."""
    v = _positive(value, "value")
    vals = series_values(series, v / 20, v * 20)
    below = vals[vals <= v * (1 + 1e-9)]
    above = vals[vals >= v * (1 - 1e-9)]
    return float(below[-1]), float(above[0])


def round_to_series(value: float, series: str) -> float:
    """The series value nearest to ``value`` on a logarithmic scale."""
    lo, hi = nearest_values(value, series)
    v = float(value)
    return lo if abs(math.log(v / lo)) <= abs(math.log(hi / v)) else hi


# --- combinations -----------------------------------------------------------------------

Topology = Literal["single", "add2", "recip2", "add3", "recip3", "add_recip", "recip_add"]


def _add(*xs: float) -> float:
    return float(sum(xs))


def _recip(*xs: float) -> float:
    return 1.0 / sum(1.0 / x for x in xs)


def combination_value(topology: str, parts: Sequence[float]) -> float:
    """Value of a combination in the abstract form used by :class:`Combination`.

    ``add2``/``add3``: a + b (+ c); ``recip2``/``recip3``: 1/(1/a + 1/b (+ 1/c));
    ``add_recip``: (a ⊕ b) + c, where ⊕ is ``recip``; ``recip_add``: (a + b) ⊕ c.
    """
    p = [float(x) for x in parts]
    if topology == "single":
        return p[0]
    if topology in ("add2", "add3"):
        return _add(*p)
    if topology in ("recip2", "recip3"):
        return _recip(*p)
    if topology == "add_recip":
        return _recip(p[0], p[1]) + p[2]
    if topology == "recip_add":
        return _recip(p[0] + p[1], p[2])
    raise DesignError(f"topology: unknown {topology!r} — use one of {', '.join(get_args(Topology))}")


@dataclass(frozen=True)
class Combination:
    """One combination of parts.

    Attributes
    ----------
    kind : {"R", "C", "L"}
        Kind of part.
    topology : str
        Abstract form (see :func:`combination_value`).
    parts : tuple of float
        Part values in SI units (Ω, F or H), in the order the topology uses them.
    value : float
        Value of the combination (SI unit).
    error : float
        Relative error ``value/target − 1``.
    """

    kind: str
    topology: str
    parts: tuple[float, ...]
    value: float
    error: float

    @property
    def n_parts(self) -> int:
        return len(self.parts)

    def describe(self) -> str:
        """Words and symbols for a person: ``"33 µF ∥ 2.2 µF (parallel)"``."""
        from benchfit.units import format_quantity

        unit = PART_UNITS[self.kind]
        f = [format_quantity(p, unit, 4) for p in self.parts]

        def series(xs: list[str]) -> str:
            return " + ".join(xs) + " in series" if self.kind != "C" else " in series with ".join(xs)

        def parallel(xs: list[str]) -> str:
            return " ∥ ".join(xs) + " in parallel"

        # "add" is series for R and L, parallel for C; "recip" is the other one
        add, rec = (parallel, series) if self.kind == "C" else (series, parallel)
        t = self.topology
        if t == "single":
            return f[0]
        if t in ("add2", "add3"):
            return add(f[:])
        if t in ("recip2", "recip3"):
            return rec(f[:])
        inner, outer = (rec, add) if t == "add_recip" else (add, rec)
        return outer([f"({inner(f[:2])})", f[2]])

    def to_dict(self) -> dict:
        return {"kind": self.kind, "topology": self.topology, "parts": list(self.parts),
                "value": self.value, "error": self.error, "description": self.describe()}


@dataclass(frozen=True)
class CombinationSet:
    """Result of :func:`combine`: the target, where the parts came from, the ranked list."""

    kind: str
    target: float
    source: str
    max_parts: int
    combinations: tuple[Combination, ...]
    cautions: tuple[str, ...] = ()

    @property
    def best(self) -> Combination:
        return self.combinations[0]

    def to_dict(self) -> dict:
        return {"kind": self.kind, "target": self.target, "unit": PART_UNITS[self.kind],
                "source": self.source, "max_parts": self.max_parts,
                "combinations": [c.to_dict() for c in self.combinations],
                "cautions": list(self.cautions)}


def _neighbours(values: np.ndarray, ideal: np.ndarray) -> np.ndarray:
    """Indices (…, 2) of the candidate values just below and above each ideal value."""
    i = np.searchsorted(values, ideal)
    lo = np.clip(i - 1, 0, len(values) - 1)
    hi = np.clip(i, 0, len(values) - 1)
    return np.stack([lo, hi], axis=-1)


def _candidates(target: float, pool: np.ndarray, max_parts: int, count: Mapping[float, int] | None
                ) -> list[tuple[str, tuple[float, ...], float]]:
    """Brute-force-with-pruning search: every topology, the best third part per pair."""
    out: list[tuple[str, tuple[float, ...], float]] = []
    v = pool
    # one part
    for j in np.unique(_neighbours(v, np.array([target])).ravel()):
        out.append(("single", (float(v[j]),), float(v[j])))
    if max_parts >= 2:
        # add: a + b = T, a ≤ b → a ≤ T/2
        a = v[v <= target]
        if a.size:
            idx = _neighbours(v, target - a)
            for k in range(2):
                b = v[idx[:, k]]
                out += [("add2", (float(x), float(y)), float(x + y)) for x, y in zip(a, b)]
        # recip: 1/a + 1/b = 1/T with a ≥ T
        a = v[v > target]
        if a.size:
            ideal = 1.0 / np.maximum(1.0 / target - 1.0 / a, 1e-300)
            idx = _neighbours(v, ideal)
            for k in range(2):
                b = v[idx[:, k]]
                out += [("recip2", (float(x), float(y)), float(x * y / (x + y))) for x, y in zip(a, b)]
    if max_parts >= 3:
        ia, ib = np.triu_indices(len(v))
        a, b = v[ia], v[ib]
        pairs = {
            "add3": (a + b, lambda s: target - s),
            "recip3": (a * b / (a + b), lambda s: 1.0 / np.where(1.0 / target - 1.0 / s > 0,
                                                                1.0 / target - 1.0 / s, np.nan)),
            "add_recip": (a * b / (a + b), lambda s: target - s),
            "recip_add": (a + b, lambda s: 1.0 / np.where(1.0 / target - 1.0 / s > 0,
                                                         1.0 / target - 1.0 / s, np.nan)),
        }
        for topo, (pair_val, third) in pairs.items():
            ideal = third(pair_val)
            ok = np.isfinite(ideal) & (ideal > 0)
            if not ok.any():
                continue
            pa, pb, pv, ideal = a[ok], b[ok], pair_val[ok], ideal[ok]
            idx = _neighbours(v, ideal)
            for k in range(2):
                c = v[idx[:, k]]
                if topo in ("add3", "add_recip"):
                    val = pv + c
                else:
                    val = pv * c / (pv + c)
                err = np.abs(val / target - 1.0)
                keep = np.argsort(err)[:200]  # only the best few matter for the ranking
                out += [(topo, (float(pa[i]), float(pb[i]), float(c[i])), float(val[i])) for i in keep]
    if count is not None:
        def allowed(parts: tuple[float, ...]) -> bool:
            used: dict[float, int] = {}
            for p in parts:
                used[p] = used.get(p, 0) + 1
            return all(n <= count.get(p, 0) for p, n in used.items())

        out = [c for c in out if allowed(c[1])]
    return out


def combine(target: float, kind: str, *, series: str = "E12", stock: Sequence[float] | None = None,
            stock_counts: Sequence[int] | None = None, max_parts: int = 3, top: int = 5,
            source: str | None = None) -> CombinationSet:
    """Best combinations of up to ``max_parts`` parts whose value is closest to ``target``.

    Parameters
    ----------
    target : float
        Wanted value in SI units (Ω, F or H).
    kind : {"R", "C", "L"}
        Kind of part; decides which topology is "series" and which is "parallel".
    series : {"E6", "E12", "E24", "E48", "E96", "E192"}
        Series to draw parts from (decades from target/100 to target·100) when no ``stock``.
    stock : sequence of float, optional
        The values on hand (SI units); replaces the series.
    stock_counts : sequence of int, optional
        How many of each ``stock`` value there are (default: unlimited).
    max_parts : int
        1, 2 or 3.
    top : int
        Number of combinations returned, ranked by |relative error|, then by part count.
    source : str, optional
        Label of where the parts came from (default: the series name or "stock").

    Returns
    -------
    CombinationSet
    """
    k = check_kind(kind)
    t = check_bench_range(k, _positive(target, "value"), "value", MADE_RANGES)
    if int(max_parts) != max_parts or not 1 <= max_parts <= 3:
        raise DesignError(f"max-parts: {max_parts!r} is not supported — use 1, 2 or 3")
    if int(top) != top or top < 1:
        raise DesignError(f"top: {top!r} must be a whole number of at least 1")
    counts: dict[float, int] | None = None
    if stock is not None:
        vals = [float(x) for x in stock]
        if not vals:
            raise DesignError("stock: the stock list is empty — add at least one value")
        for x in vals:
            _positive(x, "stock value")
        if stock_counts is not None:
            if len(stock_counts) != len(vals):
                raise DesignError("stock: counts and values differ in length — give one count per value")
            counts = {}
            for x, n in zip(vals, stock_counts):
                counts[x] = counts.get(x, 0) + int(n)
        pool = np.unique(np.asarray(vals))
        label = source or "stock"
    else:
        name = check_series(series)
        pool = series_values(name, t / 100, t * 100)
        label = source or name
    raw = _candidates(t, pool, int(max_parts), counts)
    seen: set[tuple[str, tuple[float, ...]]] = set()
    combos: list[Combination] = []
    for topo, parts, val in raw:
        # canonical form: sort the interchangeable parts
        if topo in ("add2", "recip2", "add3", "recip3"):
            parts = tuple(sorted(parts))
        elif topo in ("add_recip", "recip_add"):
            parts = tuple(sorted(parts[:2])) + (parts[2],)
        key = (topo, parts)
        if key in seen:
            continue
        seen.add(key)
        combos.append(Combination(k, topo, parts, val, val / t - 1.0))
    if not combos:
        raise DesignError(f"value: no combination of the given parts reaches {t:g} — "
                          "add larger or smaller values to the stock list")
    combos.sort(key=lambda c: (round(abs(c.error), 12), c.n_parts, c.parts))
    best = tuple(combos[: int(top)])
    cautions: list[str] = []
    if k == "L" and any(c.n_parts > 1 for c in best):
        cautions.append("inductors near each other couple: two in series give L1 + L2 ± 2M, not "
                        "L1 + L2 — mount them apart or with their axes at right angles, or measure "
                        "the combination as built")
    return CombinationSet(k, t, label, int(max_parts), best, tuple(cautions))

