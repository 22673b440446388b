"""Property tests (hypothesis) of the decision rules in benchfit.report.spec.decide.

Rules as ILAC-G8:09/2019 defines them: simple acceptance (4.2.1: pass inside the tolerance
limits), guard-banded binary (4.2.2: pass only inside the limits narrowed by w = U), guard-banded
non-binary (4.2.3: pass, conditional pass, conditional fail, fail by where the value lies with
respect to TL ± w).
"""

from __future__ import annotations

from hypothesis import assume, given, settings
from hypothesis import strategies as st

from benchfit.report.spec import decide

finite = st.floats(min_value=-1e6, max_value=1e6, allow_nan=False, allow_infinity=False)
widths = st.floats(min_value=1e-6, max_value=1e6, allow_nan=False)
us = st.floats(min_value=0.0, max_value=1e5, allow_nan=False)
RANK = {"pass": 0, "conditional pass": 1, "conditional fail": 2, "fail": 3}


@st.composite
def cases(draw):
    lower = draw(finite)
    upper = lower + draw(widths)
    value = draw(st.floats(min_value=lower - 3 * (upper - lower) - 1, max_value=upper + 3 * (upper - lower) + 1,
                           allow_nan=False))
    return value, draw(us), lower, upper


@settings(max_examples=200, deadline=None)
@given(cases())
def test_simple_acceptance_is_inside_the_limits(case):
    value, _u, lower, upper = case
    d = decide(value, None, lower, upper, "simple")
    assert (d.decision == "pass") == (lower <= value <= upper)
    assert d.decision in ("pass", "fail")


@settings(max_examples=200, deadline=None)
@given(cases())
def test_guard_banded_binary_passes_only_inside_the_narrowed_limits(case):
    value, u, lower, upper = case
    d = decide(value, u, lower, upper, "guard-banded-binary")
    # distances inside each limit, as the rule states them (computed the same way in floating point)
    assert (d.decision == "pass") == (value - lower >= u and upper - value >= u)
    if d.decision == "pass":
        assert decide(value, None, lower, upper, "simple").decision == "pass"


@settings(max_examples=200, deadline=None)
@given(cases())
def test_non_binary_labels_follow_the_guard_bands(case):
    value, u, lower, upper = case
    d = decide(value, u, lower, upper, "guard-banded").decision
    inside = min(value - lower, upper - value)  # distance inside the nearer limit
    expected = ("pass" if inside > u else "conditional pass" if inside >= 0
                else "conditional fail" if inside >= -u else "fail")
    assert d == expected
    # a pass with the guard band is a pass without it; a fail with it is a fail without it
    simple = decide(value, None, lower, upper, "simple").decision
    if d == "pass":
        assert simple == "pass"
    if d in ("fail", "conditional fail"):
        assert simple == "fail"


@settings(max_examples=150, deadline=None)
@given(cases(), us)
def test_a_larger_uncertainty_makes_a_decision_less_certain_never_better(case, more):
    value, u, lower, upper = case
    # binary: a larger guard band can only turn a pass into a fail
    a = decide(value, u, lower, upper, "guard-banded-binary").decision
    b = decide(value, u + more, lower, upper, "guard-banded-binary").decision
    assert RANK[b] >= RANK[a]
    # non-binary: a larger U widens the conditional zone from both sides — a pass stays a pass
    # only if it was one, a fail stays a fail only if it was one
    a = decide(value, u, lower, upper, "guard-banded").decision
    b = decide(value, u + more, lower, upper, "guard-banded").decision
    if b == "pass":
        assert a == "pass"
    if b == "fail":
        assert a == "fail"
    if a in ("conditional pass", "conditional fail"):
        assert b == a  # which side of the limit the value lies on does not depend on U


@settings(max_examples=150, deadline=None)
@given(cases())
def test_mirroring_about_the_middle_keeps_the_decision(case):
    value, u, lower, upper = case
    mirrored = lower + upper - value
    # only where floating point mirrors exactly: the distances to the two limits swap
    assume(value - lower == upper - mirrored and upper - value == mirrored - lower)
    for rule in ("simple", "guard-banded", "guard-banded-binary"):
        assert decide(value, u, lower, upper, rule).decision == decide(mirrored, u, lower, upper, rule).decision


@settings(max_examples=200, deadline=None)
@given(cases())
def test_one_sided_limits_judge_only_their_side(case):
    value, u, lower, upper = case
    only_upper = decide(value, u, None, upper, "guard-banded").decision
    expected = ("pass" if upper - value > u else "conditional pass" if upper - value >= 0
                else "conditional fail" if upper - value >= -u else "fail")
    assert only_upper == expected
