"""A nuisance the data pin far more tightly than the prior's grid is never reported tighter than it is.

Exact-model data (benchfit.model.filter.transfer, checked against scipy in tests/model): the complex
response of the lc-lowpass at 50 Hz and its orders 1…9, with seeded white noise small enough that
the ESR is known to about 0.01 % — thousands of times finer than the 0…20 Ω prior's first grid.
For a model this close to linear the posterior is Gaussian and its sd equals the linearised
standard error of the full fit (Gauss–Markov; Bard, *Nonlinear Parameter Estimation*, ch. 7, from
memory), the reference here. The grid (three rounds of refinement) cannot resolve such a posterior;
its unresolved part is then taken as rectangular between the neighbouring grid points (GUM 4.3.7),
so the reported u may be larger than the reference but never smaller (before, it was ± 0), and
no larger than the last grid step (the resolution the grid has).
"""

from __future__ import annotations

import math

import numpy as np

from benchfit.fit.identify import fit_log_parameters
from benchfit.fit.marginal import Nuisance, marginalise
from benchfit.model.filter import PART_NAMES, LowpassParts, transfer

TRUE = LowpassParts(0.3, 33e-6, 12.0, 1.5, 10e3)
FREQ = 50.0 * np.arange(1, 10)
SIGMA = 2e-6


def _residual_for(seed: int):
    rng = np.random.default_rng(seed)
    data = transfer(FREQ, TRUE) + SIGMA * (rng.normal(size=FREQ.size) + 1j * rng.normal(size=FREQ.size))

    def residual(v):
        p = LowpassParts(v["L"], v["C"], v["Rs"], v["Resr"], v["Rload"])
        d = (transfer(FREQ, p) - data) / SIGMA
        return np.concatenate([d.real, d.imag])

    return residual


def test_a_tightly_pinned_nuisance_is_not_reported_tighter_than_the_data_pin_it():
    fixed = {"L": TRUE.L, "Rload": TRUE.Rload}
    start = {"L": TRUE.L, "C": 30e-6, "Rs": 10.0, "Resr": 1.0, "Rload": TRUE.Rload}
    parts = tuple(n for n in PART_NAMES if n != "Rp")
    for seed in (1, 2):
        residual = _residual_for(seed)
        # the reference: ESR fitted with the others, its linearised standard error
        v, names, jac, _, ok, _ = fit_log_parameters(residual, start, ("C", "Rs", "Resr"), fixed)
        assert ok
        cov = np.linalg.inv(jac.T @ jac)
        u_ref = v["Resr"] * math.sqrt(cov[names.index("Resr"), names.index("Resr")])
        assert u_ref < 1e-3 * 20.0 / 14  # far below one step of the prior's first grid (15 points)
        nuis = (Nuisance("Resr", 0.0, 20.0, "value", "0…20 Ω (rectangular)", "test prior", "—"),)
        marg = marginalise(residual, {**start, "Rp": math.inf}, fixed, nuis, None, parts)
        grid = np.sort(np.unique(marg.points[:, 0]))
        last_step = float(np.min(np.diff(grid)))
        u = marg.u(("Resr"))
        assert abs(marg.mean["Resr"] - v["Resr"]) < max(u, 3 * u_ref)
        assert 0.9 * u_ref < u <= last_step, (u, u_ref, last_step)
