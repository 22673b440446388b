"""The closed-form Jacobian of the one-channel fit, and the Levenberg–Marquardt refit that uses it.

The derivatives are checked against forward differences by scipy (``scipy.optimize.approx_fprime``, an
independent implementation; source "scipy, finite differences"). Its step ε = 1e-7 on log-parts and on the
phase leaves a truncation error of about ε·|f''|/2 per column, and |f''| ≲ k²·|f'| for the phase at orders
k ≤ 12 (the largest curvature here), so 2e-5 of the column's largest entry bounds it with margin; rounding
adds about 1e-16/ε = 1e-9.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.optimize import approx_fprime, least_squares

from benchfit.fit.common import whiten, whitening
from benchfit.fit.identify import fit_log_parameters, levenberg_marquardt
from benchfit.fit.onechannel import OutputResidual
from benchfit.model.filter import PART_NAMES, LowpassParts, rectangular_phasors, transfer, transfer_log_gradient

EPS = 1e-7
#: the bound on the forward differences' truncation error relative to a column's largest entry (docstring)
REL = 2e-5
ORDERS = np.arange(1, 13, dtype=float)
F = 50.0
PARTS = {"L": 0.3, "C": 33e-6, "Rs": 20.0, "Resr": 1.5, "Rload": 1e4, "Rp": 3e3}


def _close(closed: np.ndarray, numeric: np.ndarray) -> None:
    scale = np.max(np.abs(numeric), axis=0)
    assert np.all(scale > 0)
    assert np.all(np.max(np.abs(closed - numeric), axis=0) <= REL * scale)


def test_transfer_log_gradient_matches_scipy_finite_differences():
    """∂H/∂ln x of every part, with load, ESR and core loss all finite (source: scipy, finite differences)."""
    fk = ORDERS * F
    z0 = np.log([PARTS[n] for n in PART_NAMES])

    def h_of(z: np.ndarray) -> np.ndarray:
        hz = transfer(fk, LowpassParts(*np.exp(z)))
        return np.concatenate([hz.real, hz.imag])

    h, dh = transfer_log_gradient(fk, LowpassParts(**PARTS))
    assert np.allclose(h, transfer(fk, LowpassParts(**PARTS)), rtol=1e-14, atol=0)
    _close(np.concatenate([dh.real, dh.imag], axis=1).T, approx_fprime(z0, h_of, EPS))


def _residual(duty: float | None) -> OutputResidual:
    rng = np.random.default_rng(3)
    cov = np.array([[[2e-6, 3e-7], [3e-7, 1e-6]]] * ORDERS.size)
    w = whitening(cov)
    y = 0.7 * rectangular_phasors(ORDERS, 0.45) * transfer(ORDERS * F, LowpassParts(**PARTS))
    wy = whiten(w, y + rng.normal(0, 1e-3, y.size) + 1j * rng.normal(0, 1e-3, y.size))
    return OutputResidual(w, wy, ORDERS, F, duty)


@pytest.mark.parametrize("duty", [None, 0.3])
def test_output_residual_jacobian_matches_scipy_finite_differences(duty):
    """∂r/∂ln part, ∂r/∂phase and ∂r/∂duty of the variable-projection residual (gain solved at each call)."""
    res = _residual(duty)
    v = {**PARTS, "phase": 0.4, **({"duty": 0.42} if duty is None else {})}
    names = ("C", "Rs", "Resr", "Rload", "Rp", "L", "phase") + (("duty",) if duty is None else ())
    raw = ("phase", "duty")

    def at(z: np.ndarray) -> np.ndarray:
        return res({**v, **{n: (x if n in raw else math.exp(x)) for n, x in zip(names, z)}})

    z0 = np.array([v[n] if n in raw else math.log(v[n]) for n in names])
    _close(res.log_jacobian(v, names), approx_fprime(z0, at, EPS))


def test_switched_source_jacobian_matches_scipy_finite_differences():
    """The switched source (r_high ≠ r_low): the model's forward differences through the closed-form chain rule
    of the variable projection agree with scipy's differences of the whole residual (source: scipy, finite
    differences; both steps' truncation ε·|f''|/2 is within the docstring's bound)."""
    res = _residual(None)
    v = {**PARTS, "phase": 0.4, "duty": 0.42, "asymmetry": 0.05}
    names = ("C", "Rs", "Resr", "Rload", "Rp", "phase", "duty", "asymmetry")
    raw = ("phase", "duty", "asymmetry")

    def at(z: np.ndarray) -> np.ndarray:
        return res({**v, **{n: (x if n in raw else math.exp(x)) for n, x in zip(names, z)}})

    z0 = np.array([v[n] if n in raw else math.log(v[n]) for n in names])
    _close(res.log_jacobian(v, names), approx_fprime(z0, at, EPS))


def test_levenberg_marquardt_reaches_scipy_least_squares_minimum():
    """The quick refit and scipy's trust-region solver end at the same minimum: χ² within 1e-6 and every
    fitted variable within 1e-3 of its standard deviation, the precision a marginal grid point's weight
    (a small fraction of 1 in χ²) and its estimates need (fit.marginal)."""
    res = _residual(None)
    free = ("C", "Rs")
    fixed = {k: PARTS[k] for k in PARTS if k not in free}
    start = {"C": 30e-6, "Rs": 25.0}
    extra = {"phase": (0.05, -4 * math.pi, 4 * math.pi), "duty": (0.4, 0.01, 0.99)}
    quick = fit_log_parameters(res, start, free, fixed, extra, tol=1e-10, quick=True)
    slow = fit_log_parameters(res, start, free, fixed, extra, tol=1e-10)
    assert quick[5].startswith("converged (Levenberg")
    assert not slow[5].startswith("converged (Levenberg")
    n = 2 * ORDERS.size - 4
    assert abs(quick[3] - slow[3]) * n <= 1e-6
    sd = np.sqrt(np.diag(np.linalg.inv(slow[2].T @ slow[2])))
    x = [np.array([math.log(f[0][k]) for k in free] + [f[0][k] for k in extra]) for f in (quick, slow)]
    assert np.all(np.abs(x[0] - x[1]) <= 1e-3 * sd)


def test_levenberg_marquardt_hands_over_at_the_box():
    """A step out of the bounds stops it where it is, unconverged, for the bounded solver to go on from."""
    def fcn(x):
        return np.array([x[0] - 3.0, 0.1 * x[0]])

    def jac(x):
        return np.array([[1.0], [0.1]])

    x, ok = levenberg_marquardt(fcn, jac, np.array([0.0]), np.array([-1.0]), np.array([1.0]), 1e-10, 100)
    assert not ok and -1.0 <= x[0] <= 1.0
    out = least_squares(fcn, x, jac=jac, bounds=([-1.0], [1.0]))
    assert out.x[0] == pytest.approx(1.0)
    x, ok = levenberg_marquardt(fcn, jac, np.array([0.0]), np.array([-10.0]), np.array([10.0]), 1e-10, 100)
    assert ok and x[0] == pytest.approx(3.0 / 1.01, rel=1e-9)  # the linear least-squares minimum


@pytest.mark.parametrize("parts", [LowpassParts(**PARTS), LowpassParts(0.3, 33e-6, 20.0, 0.0, math.inf, math.inf),
                                   LowpassParts(0.3, 33e-6, 20.0, 1.5, 1e4)])
def test_state_space_rows_give_the_transfer_function(parts):
    """The written-out state-space rows the switched source uses (benchfit.model.filter._state_space_rows)
    give C·(sI − A)⁻¹·B + D = H(s) of the coefficient form (benchfit.model.filter.transfer, derived apart
    from them), to rounding (linear-systems algebra, textbook; common practice, no source)."""
    from benchfit.model.filter import _state_space_rows, transfer

    (a00, a01, a10, a11), (b0, b1), (c0, c1), d = _state_space_rows(parts)
    a, b, c = np.array([[a00, a01], [a10, a11]]), np.array([b0, b1]), np.array([c0, c1])
    f = np.array([5.0, 50.0, 500.0, 5000.0])
    h_ss = np.array([c @ np.linalg.solve(2j * math.pi * fi * np.eye(2) - a, b) + d for fi in f])
    assert np.allclose(h_ss, transfer(f, parts), rtol=1e-12, atol=0)


def test_levenberg_marquardt_rests_a_part_on_its_lower_bound():
    """A log-part the data drive towards 0 (χ² falling all the way to its guard bound) is held there, converged,
    while the other variable still reaches its own minimum; without ``floor`` it hands over instead."""
    def fcn(x):
        return np.array([math.exp(x[0]), x[1] - 2.0, 0.5 * (x[1] - 2.0)])

    def jac(x):
        return np.array([[math.exp(x[0]), 0.0], [0.0, 1.0], [0.0, 0.5]])

    lo, hi = np.array([-25.0, -10.0]), np.array([25.0, 10.0])
    x, ok = levenberg_marquardt(fcn, jac, np.array([0.0, 0.0]), lo, hi, 1e-10, 200, floor=np.array([True, False]))
    assert ok and x[0] == -25.0 and x[1] == pytest.approx(2.0, rel=1e-9)
    x, ok = levenberg_marquardt(fcn, jac, np.array([0.0, 0.0]), lo, hi, 1e-10, 200)
    assert not ok


def test_complex_whitening_equals_the_per_harmonic_matrices():
    """OutputResidual's whitening by z ↦ p·z + q·z̄ gives whiten()'s 2×2 products, vectors and rows of vectors alike:
    the same real-linear map, so they agree to rounding (a few ulp of the largest entry: 1e-14 relative is
    about 50 ulp; linear algebra, common practice, no source)."""
    rng = np.random.default_rng(7)
    a = rng.normal(size=(ORDERS.size, 2, 2))
    w = whitening(a @ np.transpose(a, (0, 2, 1)) + 0.1 * np.eye(2))
    res = OutputResidual(w, np.zeros(2 * ORDERS.size), ORDERS, F, None)
    z = rng.normal(size=ORDERS.size) + 1j * rng.normal(size=ORDERS.size)
    rows = rng.normal(size=(3, ORDERS.size)) + 1j * rng.normal(size=(3, ORDERS.size))
    direct = whiten(w, z)
    assert np.max(np.abs(res._white(z) - direct)) <= 1e-14 * np.max(np.abs(direct))
    direct_rows = np.stack([whiten(w, row) for row in rows])
    assert np.max(np.abs(res._white(rows) - direct_rows)) <= 1e-14 * np.max(np.abs(direct_rows))


def test_output_residual_hands_out_the_same_arrays_for_the_same_values():
    """The residual and the Jacobian kept from the last call are those a fresh object computes (no stale
    values after other calls), and read-only, so no caller can change what is handed out again."""
    res = _residual(None)
    v = {**PARTS, "phase": 0.4, "duty": 0.42}
    other = {**v, "C": 34e-6}
    names = ("C", "Rs", "phase", "duty")
    r, j = res(v), res.log_jacobian(v, names)
    assert res(v) is r and res.log_jacobian(v, names) is j
    assert not r.flags.writeable and not j.flags.writeable
    res(other), res.log_jacobian(other, names)
    fresh = _residual(None)
    assert np.array_equal(res(v), fresh(v)) and np.array_equal(res.log_jacobian(v, names), fresh.log_jacobian(v, names))
    assert np.array_equal(res.log_jacobian(v, names[:2]), fresh.log_jacobian(v, names[:2]))
