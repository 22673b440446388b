"""One BLAS thread for the estimators, whatever the caller's environment says.

Used by :func:`benchfit.measure` (per channel), :func:`benchfit.fit_lowpass` and
:func:`benchfit.fit_ringdown`. The fits behind them multiply tall, narrow matrices (samples × a few
harmonics); there a second BLAS thread costs more in hand-over than it saves, and on a
loaded machine several times more (scripts/bench_measure.py shows the figures). The command
line sets ``OPENBLAS_NUM_THREADS=1`` before numpy loads; a Python caller's numpy is already
loaded, so the limit is applied at run time with threadpoolctl, only while an estimator runs,
and the caller's setting is restored afterwards.
"""

from __future__ import annotations

import contextlib
import functools
import sys
from typing import Any, Callable, TypeVar

__all__ = ["one_blas_thread"]

F = TypeVar("F", bound=Callable[..., Any])


@functools.lru_cache(maxsize=1)
def _controller_for(n_modules: int) -> Any:
    """threadpoolctl's view of the loaded BLAS libraries (a scan, ~2 ms)."""
    try:
        from threadpoolctl import ThreadpoolController
    except ImportError:  # pragma: no cover - a declared dependency; without it nothing is limited
        return None
    return ThreadpoolController()


def _controller() -> Any:
    """The controller, scanned again whenever modules were imported since the last scan: an
    import (scipy's, say) can load a BLAS library of its own, which must be limited too."""
    return _controller_for(len(sys.modules))


def one_blas_thread(fn: F) -> F:
    """Decorator: run ``fn`` with the BLAS libraries limited to one thread."""

    @functools.wraps(fn)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        controller = _controller()
        limit = (contextlib.nullcontext() if controller is None
                 else controller.limit(limits=1, user_api="blas"))
        with limit:
            return fn(*args, **kwargs)

    return wrapper  # type: ignore[return-value]
