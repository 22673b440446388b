"""E-series tables and series/parallel combinations (benchfit.design.parts)."""

from __future__ import annotations

import itertools
import json
import math
from pathlib import Path

import numpy as np
import pytest

from benchfit.design.parts import (E_SERIES, SERIES_TOLERANCE, check_series, combination_value,
                                   combine, nearest_values, round_to_series, series_values)
from benchfit.errors import DesignError

DATA = Path(__file__).resolve().parents[1] / "data"


@pytest.fixture(scope="module")
def iec():
    return json.loads((DATA / "design_iec60063_series.json").read_text(encoding="utf-8"))


@pytest.mark.parametrize("name", ["E6", "E12", "E24"])
def test_series_match_iec60063_table1(iec, name):
    # IEC 60063:2015 Table 1, transcribed in tests/data/design_iec60063_series.json
    assert list(E_SERIES[name]) == iec[name]


def test_e24_is_not_the_rounded_geometric_series(iec):
    # IEC 60063 trap (reference sheet §8): round(10**(i/24), 1) differs from the published E24
    computed = [round(10 ** (i / 24), 1) for i in range(24)]
    differs = [e for e, c in zip(E_SERIES["E24"], computed) if e != c]
    assert differs == iec["E24_differs_from_rounded_geometric_at"]


def test_e96_and_e48_follow_the_geometric_rule():
    # E96 is hard-coded from memory (IEC 60063:2015 Table 2); the three-digit tables follow
    # round(100·10^(i/n)) except one E192 value, where the table has 9.20 and the rule 9.19
    # (from memory; the eseries package agrees, test_parts_properties.py) — an independent check
    e96 = [round(100 * 10 ** (i / 96)) / 100 for i in range(96)]
    e48 = [round(100 * 10 ** (i / 48)) / 100 for i in range(48)]
    e192 = [round(100 * 10 ** (i / 192)) / 100 for i in range(192)]
    assert list(E_SERIES["E96"]) == e96
    assert list(E_SERIES["E48"]) == e48
    assert list(E_SERIES["E48"]) == list(E_SERIES["E96"][::2])
    assert list(E_SERIES["E192"][::2]) == list(E_SERIES["E96"])
    differ = [(a, b) for a, b in zip(E_SERIES["E192"], e192) if a != b]
    assert differ == [(9.20, 9.19)]


def test_series_shapes_and_tolerances(iec):
    for name, n in (("E6", 6), ("E12", 12), ("E24", 24), ("E48", 48), ("E96", 96)):
        vals = np.asarray(E_SERIES[name])
        assert len(vals) == n
        assert vals[0] == 1.0 and vals[-1] < 10.0
        assert np.all(np.diff(vals) > 0)
        # conventional pairing of series and tolerance (reference sheet §8)
        assert SERIES_TOLERANCE[name] == iec["tolerances"][name]


def test_series_values_span_decades_exactly():
    vals = series_values("E12", 1e3, 1e5)
    assert vals[0] == 1e3 and vals[-1] == 1e5
    assert len(vals) == 2 * 12 + 1
    assert 4.7e3 in vals and 47e3 in vals and 8.2e4 in vals
    # values are the exact decimal floats (4.7e-6 is 4.7e-6, not 4.699999e-6)
    assert 4.7e-6 in series_values("E6", 1e-6, 1e-5)


def test_nearest_and_rounding():
    assert nearest_values(5.0e3, "E12") == (4.7e3, 5.6e3)
    assert nearest_values(4.7e-6, "E6") == (4.7e-6, 4.7e-6)
    # logarithmic midpoint of 4.7 and 5.6 is √(4.7·5.6) = 5.130
    assert round_to_series(5.12e3, "E12") == 4.7e3
    assert round_to_series(5.14e3, "E12") == 5.6e3


def _physical(kind, topology, parts):
    """Series/parallel rules written out independently (Horowitz & Hill, The Art of
    Electronics, 3rd ed., ch. 1): R and L add in series, C adds in parallel."""
    def series(*xs):
        return sum(xs) if kind in "RL" else 1 / sum(1 / x for x in xs)

    def parallel(*xs):
        return 1 / sum(1 / x for x in xs) if kind in "RL" else sum(xs)

    add, rec = (series, parallel) if kind in "RL" else (parallel, series)
    a = parts
    return {"single": lambda: a[0], "add2": lambda: add(*a), "add3": lambda: add(*a),
            "recip2": lambda: rec(*a), "recip3": lambda: rec(*a),
            "add_recip": lambda: add(rec(a[0], a[1]), a[2]),
            "recip_add": lambda: rec(add(a[0], a[1]), a[2])}[topology]()


@pytest.mark.parametrize("kind,target,series", [("R", 4321.0, "E24"), ("C", 29.7e-6, "E12"),
                                                ("L", 0.29, "E6"), ("R", 9.2e3, "E96")])
def test_combination_values_follow_the_textbook_rules(kind, target, series):
    res = combine(target, kind, series=series, max_parts=3, top=10)
    assert len(res.combinations) == 10
    for c in res.combinations:
        # textbook rule, written independently above (floating-point rounding only)
        assert c.value == pytest.approx(_physical(kind, c.topology, c.parts), rel=1e-12)
        assert c.value == pytest.approx(combination_value(c.topology, c.parts), rel=1e-12)
        assert c.error == pytest.approx(c.value / target - 1, abs=1e-12)
    # ranked by |error| (compared to 1e-12: equal errors are then ranked by part count)
    errs = [round(abs(c.error), 12) for c in res.combinations]
    assert errs == sorted(errs)


def test_words_name_the_right_topology():
    # two equal capacitors in series halve; two equal resistors in series double (textbook rule)
    c = combine(0.5e-6, "C", series="E6", max_parts=2, top=20)
    pair = next(x for x in c.combinations if x.parts == (1e-6, 1e-6))
    assert pair.topology == "recip2" and "in series" in pair.describe()
    r = combine(2e3, "R", series="E6", max_parts=2, top=20)
    pair = next(x for x in r.combinations if x.parts == (1e3, 1e3))
    assert pair.topology == "add2" and "in series" in pair.describe()
    p = combine(500.0, "R", series="E6", max_parts=2, top=20)
    pair = next(x for x in p.combinations if x.parts == (1e3, 1e3))
    assert "∥" in pair.describe() and "in parallel" in pair.describe()


def _brute_force(target, values, max_parts):
    best = math.inf
    for n in range(1, max_parts + 1):
        for parts in itertools.combinations_with_replacement(values, n):
            forms = ["single"] if n == 1 else (["add2", "recip2"] if n == 2 else
                                               ["add3", "recip3"])
            vals = [combination_value(f, parts) for f in forms]
            if n == 3:
                for perm in set(itertools.permutations(parts)):
                    vals += [combination_value("add_recip", perm), combination_value("recip_add", perm)]
            best = min(best, min(abs(v / target - 1) for v in vals))
    return best


@pytest.mark.parametrize("target", [3.14159e3, 777.0, 12.345e3])
def test_search_matches_exhaustive_enumeration(target):
    # independent check: every combination of up to three parts from a small stock list
    stock = [100.0, 220.0, 330.0, 470.0, 680.0, 1000.0, 1500.0, 2200.0, 3300.0, 4700.0, 6800.0]
    res = combine(target, "R", stock=stock, max_parts=3, top=1)
    assert abs(res.best.error) == pytest.approx(_brute_force(target, stock, 3), abs=1e-12)


def test_stock_counts_are_respected():
    res = combine(2e3, "R", stock=[1e3, 2.2e3, 4.7e3], stock_counts=[1, 1, 1], max_parts=2, top=50)
    assert all(c.parts != (1e3, 1e3) for c in res.combinations)
    res = combine(2e3, "R", stock=[1e3, 2.2e3, 4.7e3], stock_counts=[2, 1, 1], max_parts=2, top=1)
    assert res.best.parts == (1e3, 1e3) and res.best.error == 0.0


def test_stacked_inductors_carry_the_coupling_caution():
    res = combine(0.3, "L", series="E6", max_parts=2)
    assert res.best.parts == (0.15, 0.15)
    assert any("2M" in c for c in res.cautions)
    assert combine(2e3, "R", series="E12", max_parts=2).cautions == ()


@pytest.mark.parametrize("call", [
    lambda: combine(0.0, "R"), lambda: combine(-1.0, "C"), lambda: combine(1e3, "X"),
    lambda: combine(1e3, "R", series="E7"), lambda: combine(1e3, "R", max_parts=4),
    lambda: combine(1e3, "R", stock=[]), lambda: combine(1e3, "R", top=0),
    lambda: series_values("E12", 10, 1), lambda: check_series("E5"),
])
def test_bad_input_is_one_line_design_error(call):
    with pytest.raises(DesignError) as e:
        call()
    assert "\n" not in str(e.value)
