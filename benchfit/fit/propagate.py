"""Inputs a fit holds fixed, propagated into its results (GUM budgets of fitted parts).

A least-squares fit that holds an input φ at a value (a part fixed with ``--fix``, the
channel gain ratio of a two-channel capture, an ESR the data cannot determine and that is
therefore held at the middle of a stated prior range) returns parameters θ̂(φ) that depend
on it. At the solution the normal equations JᵀW r = 0 hold for every φ, so by the implicit
function theorem the sensitivity is

    ∂θ̂/∂φ = −(JᵀJ)⁺ Jᵀ ∂r/∂φ

with J the whitened Jacobian in the free (log-)parameters and (JᵀJ)⁺ the pseudo-inverse on
the directions the data determine (= cov_log/χ²_red of :mod:`benchfit.fit.identify`). This
is the usual linearised propagation (GUM 5.1.2, sensitivity coefficients by numerical
differentiation, GUM 5.1.4 — clause numbers from memory). A derived value y(θ, φ) gets
dy/dφ = ∇_θ y · ∂θ̂/∂φ + ∂y/∂φ.

Each input with a standard uncertainty u_φ becomes a budget row (Type B, its distribution,
c = dy/dφ); the fit's own covariance is the Type A row "noise (fit)". When the residuals are
larger than the noise (χ²_red > 1) that covariance is already scaled by χ²_red — the Birge
ratio √χ²_red multiplies every fit uncertainty — and the row is named accordingly. Inputs
without an uncertainty make the result *conditional* on them (``conditional_on``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable, Mapping

import numpy as np

from benchfit.fit.identify import Identification, numeric_jacobian
from benchfit.fit.tolerance import FixedValue
from benchfit.model.filter import PART_NAMES
from benchfit.uncertainty import Budget, Contribution

__all__ = ["InputSpec", "input_sensitivities", "total_log_covariance", "part_budget", "derived_budget",
           "fit_row"]


@dataclass(frozen=True)
class InputSpec:
    """An input held fixed during a fit: its value (with tolerance), label, unit and role."""

    name: str
    fixed: FixedValue
    unit: str
    label: str
    role: str = "fixed"  # "fixed" (the user's), "prior" (marginalised part), "gain ratio"

    @property
    def u(self) -> float | None:
        return self.fixed.u


def _values_with(values: Mapping[str, float], names: tuple[str, ...], z: np.ndarray) -> dict[str, float]:
    v = dict(values)
    for n, x in zip(names, z):
        v[n] = float(math.exp(x)) if n in PART_NAMES else float(x)
    return v


def input_sensitivities(residual: Callable[[dict[str, float]], np.ndarray], values: Mapping[str, float],
                        ident: Identification, inputs: Mapping[str, InputSpec],
                        scale: Mapping[str, float]) -> dict[str, np.ndarray]:
    """∂(free log-parameters)/∂φ for every input φ (one vector over ``ident.names`` each).

    ``scale`` gives a typical size for each input so that the finite-difference step is
    sensible for an input that sits at zero (e.g. an ESR fixed at 0).
    """
    names = ident.names
    if not names or not inputs:
        return {k: np.zeros(len(names)) for k in inputs}
    x = np.array([math.log(values[n]) if n in PART_NAMES else float(values[n]) for n in names])
    jac = numeric_jacobian(lambda z: residual(_values_with(values, names, z)), x)
    pinv = ident.cov_log / max(ident.chi2_red, 1e-300)
    out: dict[str, np.ndarray] = {}
    for key, spec in inputs.items():
        phi = float(values.get(key, spec.fixed.value))
        h = 1e-6 * (abs(phi) if phi != 0 else float(scale.get(key, 1.0)))
        lo, hi = dict(values), dict(values)
        lo[key], hi[key] = phi - h, phi + h
        if key in PART_NAMES and phi - h <= 0:  # a part at (or near) zero: one-sided difference
            lo[key] = phi
            dr = (residual(hi) - residual(lo)) / h
        else:
            dr = (residual(hi) - residual(lo)) / (2 * h)
        out[key] = -pinv @ (jac.T @ dr)
    return out


def total_log_covariance(ident: Identification, inputs: Mapping[str, InputSpec],
                         sens: Mapping[str, np.ndarray]) -> np.ndarray:
    """Covariance of the free log-parameters including every input's tolerance (uncorrelated inputs)."""
    cov = ident.cov_log.copy()
    for key, spec in inputs.items():
        if spec.u is not None and key in sens:
            s = sens[key]
            cov = cov + np.outer(s, s) * spec.u ** 2
    return cov


def fit_row(u_fit: float, unit: str, chi2_red: float, dof: float) -> Contribution:
    """The Type A row of a fit: its covariance, Birge-scaled when χ²_red > 1."""
    if chi2_red > 1.0:
        name = f"noise and misfit (fit; scaled by √χ²ᵣ = {math.sqrt(chi2_red):.3g})"
        source = "fit covariance scaled by the reduced χ² (Birge ratio): residuals exceed the noise"
    else:
        name = "noise (fit)"
        source = "fit covariance from the capture's noise"
    return Contribution(name, "A", "normal", float(u_fit), unit, 1.0, float(dof), source)


def _input_row(spec: InputSpec, sensitivity: float) -> Contribution:
    """The Type B row of a fixed part with a stated tolerance (callers skip those without one)."""
    if spec.u is None:
        raise ValueError(f"{spec.label}: no stated uncertainty to propagate")
    return Contribution(spec.label, "B", spec.fixed.distribution, float(spec.u), spec.unit, float(sensitivity),
                        math.inf, spec.fixed.source)


def part_budget(name: str, value: float, unit: str, j: int, u_fit: float | None, ident: Identification,
                inputs: Mapping[str, InputSpec], sens: Mapping[str, np.ndarray], dof: float) -> Budget:
    """Budget of a fitted part (column j of the free log-parameters)."""
    rows: list[Contribution] = []
    if u_fit is not None:
        rows.append(fit_row(u_fit, unit, ident.chi2_red, dof))
    cond: list[str] = []
    for key, spec in inputs.items():
        if spec.u is None:
            cond.append(key)
            continue
        s = sens.get(key)
        if s is None:
            continue
        rows.append(_input_row(spec, value * float(s[j])))  # d(value)/dφ = value · d ln(value)/dφ
    return Budget(name, float(value), unit, tuple(rows), conditional_on=tuple(cond))


def derived_budget(name: str, value: float, unit: str, u_fit: float, grad_free: np.ndarray,
                   direct: Mapping[str, float], ident: Identification, inputs: Mapping[str, InputSpec],
                   sens: Mapping[str, np.ndarray], dof: float) -> Budget:
    """Budget of a derived value: ∇y·∂θ/∂φ + ∂y/∂φ for each input."""
    rows = [fit_row(u_fit, unit, ident.chi2_red, dof)]
    cond: list[str] = []
    for key, spec in inputs.items():
        if spec.u is None:
            cond.append(key)
            continue
        s = sens.get(key)
        c = (float(grad_free @ s) if s is not None and grad_free.size else 0.0) + float(direct.get(key, 0.0))
        rows.append(_input_row(spec, c))
    return Budget(name, float(value), unit, tuple(rows), conditional_on=tuple(cond))
