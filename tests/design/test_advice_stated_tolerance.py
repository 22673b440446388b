"""A fixed part's tolerance stated in the fit (--fix C=33u±10%) is used by the advice once.

The fit propagates the tolerance of a fixed C into L, Rs and the derived values (issue 11's
budgets); the advice draws the fixed part within that tolerance and scales the fitted parts
with it (impedance scaling: with f0 and Q fixed by the data, L ∝ 1/C and Rs ∝ 1/C). Counting the
tolerance both ways would widen the spread of L by about √2. Check: the spread of the drawn L is
L·(tol/√3) for a rectangular tolerance (GUM 4.3.7), not √2 times that.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np

import benchfit
from benchfit.design.advice import _fit_draws

ROOT = Path(__file__).resolve().parents[2]


def test_the_stated_tolerance_of_a_fixed_part_is_counted_once():
    cap = benchfit.load(ROOT / "sample_captures" / "hc07_output.wav")
    fit = benchfit.fit_lowpass(cap, fix={"C": "33u±10%", "Rload": 10e3})
    L = fit.parameters["L"]
    assert L.stderr / L.value > 0.05  # the fit's own budget holds the ±10 % of C
    notes: list[str] = []
    draws = _fit_draws(fit, 20000, np.random.default_rng(3), {"C": 0.02}, notes)
    spread = float(np.std(draws.L[1:]) / L.value)
    # rectangular ±10 % → 5.77 %; the fit's own part is 1e-4 of L; 20000 draws give ±1 % on the std
    assert math.isclose(spread, 0.10 / math.sqrt(3), rel_tol=0.03)
    assert any("±10 % (rectangular, as stated in the fit)" in n for n in notes)
