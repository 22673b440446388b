"""Shortcuts in the marginal grid's per-point work (fit.marginal) against the direct computation.

The estimates' delta-method uncertainties skip the finite differences of the extras (phase, duty) that no
reported quantity reads: every part and figure depends on the parts alone, so those columns of the gradient
are exactly 0 and the result is the same to the last bit (no tolerance: the same floating-point operations).
"""

from __future__ import annotations

import math

import numpy as np

from benchfit.fit.identify import numeric_jacobian
from benchfit.fit.marginal import FIGURE_NAMES, _quantities, figures_of

VALUES = {"L": 0.3, "C": 33e-6, "Rs": 20.0, "Resr": 1.5, "Rload": 1e4, "phase": 0.4, "duty": 0.47}
NAMES = ("C", "Rs", "phase", "duty")
KEYS = ("C", "Rs", "Resr", "Rload") + FIGURE_NAMES


def _direct(jac: np.ndarray):
    """The delta method with every column differenced (the computation before the shortcut)."""
    cov = np.linalg.pinv(jac.T @ jac, rcond=1e-12)
    is_log = [n not in ("phase", "duty") for n in NAMES]
    x0 = np.array([math.log(VALUES[n]) if lg else VALUES[n] for n, lg in zip(NAMES, is_log)])

    def all_of(z):
        v = dict(VALUES)
        v.update({n: float(math.exp(x)) if lg else float(x) for n, lg, x in zip(NAMES, is_log, z)})
        fig = figures_of(v)
        return np.array([v[k] if k in v and k not in fig else fig[k] for k in KEYS])

    grad = numeric_jacobian(all_of, x0, step=1e-6)
    return np.einsum("ij,jk,ik->i", grad, cov, grad)


def test_quantities_skip_only_columns_that_are_zero():
    rng = np.random.default_rng(5)
    jac = rng.normal(size=(40, len(NAMES)))
    jac[:, 2] += 0.5 * jac[:, 0]  # correlated with a part, so a wrong column would show
    est, u = _quantities(dict(VALUES), NAMES, jac, 1.0, KEYS)
    var = _direct(jac)
    assert [u[k] for k in KEYS] == [math.sqrt(max(s, 0.0)) for s in var]
    # the estimates pass the parts through exp(ln x): equal to a few ulp (1e-14 relative is about 50)
    assert math.isclose(est["C"], VALUES["C"], rel_tol=1e-14)
    assert math.isclose(est["q_factor"], figures_of(VALUES)["q_factor"], rel_tol=1e-14)
    # a further figure may read the extras: then they are differenced as before
    _, u_more = _quantities(dict(VALUES), NAMES, jac, 1.0, KEYS + ("duty_figure",), {"duty_figure": lambda v: v["duty"]})
    assert u_more["duty_figure"] > 0
