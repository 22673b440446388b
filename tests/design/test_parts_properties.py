"""E-series tables against an independent implementation, and property tests of part combinations.

Oracle: the ``eseries`` package (PyPI, an independent implementation of the IEC 60063
preferred-number series). Combining rules: Horowitz & Hill, The Art of Electronics, 3rd ed.,
ch. 1 (resistors add in series, combine as 1/(1/a + 1/b) in parallel; capacitors the other way).
"""

from __future__ import annotations

import math

import eseries
import pytest
from hypothesis import example, given, settings
from hypothesis import strategies as st

from benchfit.design.parts import E_SERIES, SERIES_TOLERANCE, combination_value, combine, series_values


@pytest.mark.parametrize("name", ["E6", "E12", "E24", "E48", "E96", "E192"])
def test_e_series_tables_match_the_eseries_package(name):
    oracle = getattr(eseries, name)
    digits = 2 if name in ("E6", "E12", "E24") else 3
    theirs = [v / 10 ** (digits - 1) for v in eseries.series(oracle)]
    assert list(E_SERIES[name]) == pytest.approx(theirs, rel=1e-12)
    assert SERIES_TOLERANCE[name] == eseries.tolerance(oracle)


@pytest.mark.parametrize("name", ["E12", "E96", "E192"])
def test_series_values_over_decades_match_the_eseries_package(name):
    oracle = getattr(eseries, name)
    ours = series_values(name, 1e3, 1e6)
    theirs = [float(v) for v in eseries.erange(oracle, 1e3, 1e6)]
    assert list(ours) == pytest.approx(theirs, rel=1e-12)


values = st.floats(min_value=1e-12, max_value=1e9, allow_nan=False, allow_infinity=False)
TOPOLOGY_PARTS = {"single": 1, "add2": 2, "recip2": 2, "add3": 3, "recip3": 3, "add_recip": 3, "recip_add": 3}


@settings(max_examples=300, deadline=None)
@given(st.lists(values, min_size=2, max_size=3))
def test_add_exceeds_every_part_and_recip_is_below_every_part(parts):
    n = len(parts)
    added = combination_value(f"add{n}", parts)
    recip = combination_value(f"recip{n}", parts)
    assert added >= max(parts) * (1 - 1e-12)
    assert recip <= min(parts) * (1 + 1e-12)
    # two equal parts: twice and half (1/(1/a + 1/a) = a/2)
    a = parts[0]
    assert math.isclose(combination_value("add2", [a, a]), 2 * a, rel_tol=1e-12)
    assert math.isclose(combination_value("recip2", [a, a]), a / 2, rel_tol=1e-12)


@settings(max_examples=300, deadline=None)
@given(st.lists(values, min_size=3, max_size=3), st.permutations(range(3)))
def test_add_and_recip_ignore_the_order_of_parts(parts, order):
    shuffled = [parts[i] for i in order]
    for topology in ("add3", "recip3"):
        assert math.isclose(combination_value(topology, parts), combination_value(topology, shuffled), rel_tol=1e-12)
    # the nested forms: only the inner pair may swap
    for topology in ("add_recip", "recip_add"):
        swapped = [parts[1], parts[0], parts[2]]
        assert math.isclose(combination_value(topology, parts), combination_value(topology, swapped), rel_tol=1e-12)


@settings(max_examples=40, deadline=None)
@example(2.0, "R", "E6", 3)  # found: 2 Ω exactly and 2 Ω + 2e-16 tie at the ranking's 12 decimals
@given(st.floats(min_value=1.0, max_value=1e6), st.sampled_from(["R", "C", "L"]),
       st.sampled_from(["E6", "E12", "E24"]), st.integers(min_value=1, max_value=3))
def test_combine_reports_what_its_parts_give_and_ranks_by_error(target, kind, series, max_parts):
    # six decades of each kind inside the values parts are made in (benchfit.design.parts.MADE_RANGES):
    # 1 Ω…1 MΩ, 1 nF…1 mF, 1 µH…1 H
    target *= {"R": 1.0, "C": 1e-9, "L": 1e-6}[kind]
    result = combine(target, kind, series=series, max_parts=max_parts, top=5)
    errors = [abs(c.error) for c in result.combinations]
    # ranked by |relative error| to 12 decimals (below that a tie, broken by part count)
    assert all(a <= b + 1e-12 for a, b in zip(errors, errors[1:])), errors
    pool = set(series_values(series, target / 100, target * 100))
    for c in result.combinations:
        assert c.n_parts <= max_parts == result.max_parts
        assert math.isclose(combination_value(c.topology, c.parts), c.value, rel_tol=1e-12)
        assert math.isclose(c.value / target - 1, c.error, rel_tol=1e-9, abs_tol=1e-15)
        assert all(p in pool for p in c.parts)
    # one part is never beaten by adding none: the best is at least as good as rounding to the series
    best_single = min(abs(v / target - 1) for v in pool)
    assert errors[0] <= best_single + 1e-12  # (the ranking rounds to 12 decimals)
    if max_parts >= 2:  # more parts never make the best worse
        assert errors[0] <= abs(combine(target, kind, series=series, max_parts=1).best.error) + 1e-12
