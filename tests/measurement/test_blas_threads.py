"""measure() runs its estimators on one BLAS thread whatever the caller's setting, and restores it.

threadpoolctl reports and sets the thread count of the loaded BLAS library (its documented
API: threadpool_info, threadpool_limits). Common practice, no other source.
"""

from __future__ import annotations

import json
import math

import numpy as np
from threadpoolctl import threadpool_info, threadpool_limits

import benchfit
from benchfit.capture.capture import Capture
from benchfit.measurement.threads import one_blas_thread


def _blas_threads() -> list[int]:
    return [i["num_threads"] for i in threadpool_info() if i["user_api"] == "blas"]


def test_a_blas_library_loaded_later_is_limited_too():
    """scipy carries a BLAS of its own; loaded after the first call, it is limited all the same.

    In a fresh interpreter, so that scipy is not loaded yet when the first call scans."""
    import subprocess
    import sys

    code = (
        "import numpy\n"
        "from threadpoolctl import threadpool_info, threadpool_limits\n"
        "from benchfit.measurement.threads import one_blas_thread\n"
        "probe = one_blas_thread(lambda: [i['num_threads'] for i in threadpool_info() if i['user_api'] == 'blas'])\n"
        "first = probe()\n"
        "import scipy.linalg\n"
        "with threadpool_limits(2, user_api='blas'):\n"
        "    later = probe()\n"
        "import json; print(json.dumps({'first': first, 'later': later}))\n"
    )
    res = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert res.returncode == 0, res.stderr[-2000:]
    seen = json.loads(res.stdout)
    assert set(seen["later"]) == {1}, seen  # every BLAS library, the late one included, on one thread
    assert len(seen["later"]) >= len(seen["first"])


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


def test_the_fits_run_on_one_blas_thread_too(monkeypatch):
    """fit_lowpass and fit_ringdown take the same limit as measure(): seen from inside, where
    each first turns its argument into a capture (stopped there: the limit is what is checked)."""
    import pytest

    import benchfit.fit.lowpass as lowpass

    class Seen(Exception):
        pass

    def probe(capture):
        raise Seen(_blas_threads())

    monkeypatch.setattr(lowpass, "as_capture", probe)
    for fit in (benchfit.fit_lowpass, benchfit.fit_ringdown):
        with threadpool_limits(2, user_api="blas"), pytest.raises(Seen) as seen:
            fit(None)
        assert seen.value.args[0] and set(seen.value.args[0]) == {1}, (fit.__name__, seen.value.args)
