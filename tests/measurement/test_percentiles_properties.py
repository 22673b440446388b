"""The robust peak-to-peak's percentiles equal numpy's, however they are found (hypothesis).

Oracle: numpy.percentile with its default linear interpolation (numpy documentation, method
"linear", Hyndman & Fan definition 7), which benchfit.measurement.levels._percentiles states
it computes; long records take a path that sorts only their tails. The state levels' medians
(benchfit.measurement.pulse._median_in_place) against numpy.median, bit for bit.
"""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from benchfit.measurement.levels import _TAIL_MIN_SAMPLES, _percentiles
from benchfit.measurement.pulse import _median_in_place


@st.composite
def records(draw):
    n = draw(st.sampled_from([2, 3, 10, 1000, _TAIL_MIN_SAMPLES - 1, _TAIL_MIN_SAMPLES, 20_011, 96_000]))
    rng = np.random.default_rng(draw(st.integers(min_value=0, max_value=2**32 - 1)))
    kind = draw(st.sampled_from(["noise", "square", "quantised", "constant", "spikes", "sorted", "reversed"]))
    t = np.arange(n)
    if kind == "noise":
        x = rng.normal(0, 1, n)
    elif kind == "square":
        x = np.where(np.mod(t, 960) < 480, 0.5, -0.5) + rng.normal(0, 1e-3, n)
    elif kind == "quantised":  # 8-bit codes: many ties at the percentiles
        x = np.round(rng.normal(0, 20, n)) / 128
    elif kind == "constant":
        x = np.full(n, 0.25)
    elif kind == "spikes":  # rare outliers that a strided subset misses
        x = rng.normal(0, 1e-3, n)
        x[rng.integers(0, n, size=max(1, n // 500))] = rng.choice([-5.0, 5.0], size=max(1, n // 500))
    else:
        x = np.sort(rng.normal(0, 1, n))
        if kind == "reversed":
            x = x[::-1].copy()
    p = draw(st.sampled_from([(0.1, 99.9), (1.0, 99.0), (5.0, 95.0), (25.0, 75.0), (0.0, 100.0)]))
    return x, p


@settings(max_examples=60, deadline=None)
@given(records())
def test_percentiles_equal_numpys(record):
    x, (p_lo, p_hi) = record
    lo, hi = _percentiles(x, p_lo, p_hi)
    # bit for bit what one partial sort of the whole record gives (the path short records take)
    n = x.size
    pos = np.array([p_lo, p_hi]) / 100.0 * (n - 1)
    lo_i = np.floor(pos).astype(np.int64)
    hi_i = np.minimum(lo_i + 1, n - 1)
    s = np.sort(x)
    whole = s[lo_i] + (pos - lo_i) * (s[hi_i] - s[lo_i])
    assert (lo, hi) == (whole[0], whole[1])
    # and numpy's own, to the last bits (numpy interpolates from the nearer order statistic)
    ref = np.percentile(x, [p_lo, p_hi])
    scale = max(float(np.max(np.abs(x))), 1e-300)
    assert np.allclose([lo, hi], ref, rtol=0, atol=4 * np.spacing(scale))


@settings(max_examples=40, deadline=None)
@given(records())
def test_state_level_median_equals_numpys(record):
    x, _ = record
    assert _median_in_place(x.copy()) == float(np.median(x))
