"""A share posterior at the end of its axis (θ = 0, "no core loss") is reached, not missed.

A linear-Gaussian toy with the marginal's own parametrisation (fit.marginal, the ESR/core-loss split of an
output-only fit): the data give the ESR (1 − θ)·x as 1.5 ± 0.05 Ω and the core loss's series equivalent θ·x
as 0 ± 0.002 Ω, so the posterior of θ lies within about 0.002/1.5 of 0, far inside the first share cell
(0…1/3, point 1/6). Reference: the exact posterior of a linear-Gaussian model under a flat prior (e.g.
Gelman et al., *Bayesian Data Analysis*, ch. 3, from memory): the ESR 1.5 ± 0.05 Ω, the prior 0…3 Ω
being 30 σ wide. Before the edge cells were cut the mixture sat at ESR ≈ 0 (every point with an ESR
carried a core loss of ESR/5 the data reject). Tolerance: 0.2 σ on the mean and 20 % on u, the grid's
resolution (its x steps end near σ/2 and each share cell is one midpoint, _EDGE_TOL's 4 % on a cell's mass).
"""

from __future__ import annotations

import math

import numpy as np

from benchfit.fit.marginal import Nuisance, marginalise

L, C = 0.3, 22e-6
ESR, U_ESR, U_CORE = 1.5, 0.05, 0.002


def _residual(v):
    core = (L / C) / v["Rp"] if math.isfinite(v["Rp"]) else 0.0
    return np.array([(v["Rs"] - 12.0) / 0.1, (v["Resr"] - ESR) / U_ESR, core / U_CORE])


def test_a_share_posterior_at_the_axis_end_is_reached():
    nuis = (Nuisance("Resr", 0.0, 3.0, "value", "0…3 Ω", "stated", "an ESR meter"),
            Nuisance("Rp", 0.0, 1.0, "share", "0…1", "stated", "an LCR meter", share_of="Resr", scale=C / L,
                     points=3))
    m = marginalise(_residual, {"L": L, "C": C, "Rs": 11.0, "Resr": 0.5, "Rload": math.inf},
                    {"L": L, "C": C, "Rload": math.inf}, nuis, None, ("L", "C", "Rs", "Resr", "Rload"))
    theta = m.points[:, 1]
    assert float(m.weights @ theta) < 0.01, float(m.weights @ theta)
    assert abs(m.mean["Resr"] - ESR) < 0.2 * U_ESR, (m.mean["Resr"], m.u("Resr"))
    assert abs(m.u("Resr") / U_ESR - 1.0) < 0.2, m.u("Resr")
    assert abs(m.mean["Rs"] - 12.0) < 0.2 * 0.1, m.mean["Rs"]
