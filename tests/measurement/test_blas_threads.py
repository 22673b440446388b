"""measure() runs its estimators on one BLAS thread whatever the caller's setting, and restores it.

threadpoolctl reports and sets the thread count of the loaded BLAS library (its documented
API: threadpool_info, threadpool_limits). Common practice, no other source.
"""

from __future__ import annotations

import math

import numpy as np
from threadpoolctl import threadpool_info, threadpool_limits

import benchfit
from benchfit.capture.capture import Capture
from benchfit.measurement.threads import one_blas_thread


def _blas_threads() -> list[int]:
    return [i["num_threads"] for i in threadpool_info() if i["user_api"] == "blas"]


def test_the_limit_holds_inside_and_is_undone_after():
    seen = []

    @one_blas_thread
    def probe():
        seen.extend(_blas_threads())
        return 7

    with threadpool_limits(2, user_api="blas"):
        before = _blas_threads()
        assert probe() == 7
        assert _blas_threads() == before  # restored
    assert seen and set(seen) == {1}


def test_the_result_does_not_depend_on_the_callers_threads():
    rng = np.random.default_rng(7)
    t = np.arange(24_000) / 48_000.0
    x = 0.5 * np.cos(2 * math.pi * 50.2 * t) + rng.normal(0, 1e-3, t.size)
    cap = Capture(x, 48_000.0, ("output",))
    with threadpool_limits(2, user_api="blas"):
        a = benchfit.measure(cap).to_dict(full=True)
    with threadpool_limits(1, user_api="blas"):
        b = benchfit.measure(cap).to_dict(full=True)
    assert a == b  # the same arithmetic on one thread either way: equal to the last bit
