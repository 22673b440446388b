"""GUM budgets and the JCGM 101 Monte Carlo helper against published or derivable check values."""

from __future__ import annotations

import math

import numpy as np
import pytest

from benchfit.uncertainty import (Budget, Contribution, combine, coverage_factor, monte_carlo,
                                  standard_from_half_width, welch_satterthwaite)


def _row(u, dof=math.inf, c=1.0, name="x"):
    return Contribution(name, "A" if math.isfinite(dof) else "B", "normal", u, "1", c, dof)


def test_type_b_half_widths():
    # GUM 4.3.7 / 4.3.9 (REFERENCES §9): rectangular a/√3, triangular a/√6; arcsine a/√2 (JCGM 101 6.4.6, from memory)
    assert standard_from_half_width(3.0, "rectangular") == pytest.approx(3 / math.sqrt(3), rel=1e-15)
    assert standard_from_half_width(6.0, "triangular") == pytest.approx(6 / math.sqrt(6), rel=1e-15)
    assert standard_from_half_width(2.0, "arcsine") == pytest.approx(math.sqrt(2), rel=1e-15)
    with pytest.raises(ValueError):
        standard_from_half_width(1.0, "gaussian-ish")


def test_reference_sheet_budget_check_values():
    # REFERENCES §9 check values [C]: u1 = 0.3 (Type A, ν = 4), u2 = 0.4 (Type B, ν = ∞) →
    # u_c = 0.5, ν_eff = 30.86, k(95.45 %, ν = 30) = 2.087 (GUM G.4.1, Table G.2)
    b = Budget("y", 1.0, "1", (_row(0.3, 4), _row(0.4)))
    assert b.u == pytest.approx(0.5, rel=1e-12)
    assert b.dof == pytest.approx(30.86, abs=0.005)
    assert b.coverage == pytest.approx(2.087, abs=0.0015)
    assert b.expanded == pytest.approx(0.5 * 2.087, abs=0.001)
    # the t-quantile table of REFERENCES §9 (95.45 %): ν = 1 → 13.97, 5 → 2.65, ∞ → 2.00
    assert coverage_factor(1) == pytest.approx(13.97, abs=0.005)
    assert coverage_factor(5) == pytest.approx(2.65, abs=0.005)
    assert coverage_factor(math.inf) == 2.0
    assert coverage_factor(10, 0.95) == pytest.approx(2.23, abs=0.005)


def test_correlated_inputs_gum_5_2_2():
    # y = x1 − x2 with u1 = u2 = 1: r = +1 cancels fully, r = −1 doubles (GUM 5.2.2, derivable)
    rows = (_row(1.0, c=1.0), _row(1.0, c=-1.0))
    assert combine(rows) == pytest.approx(math.sqrt(2), rel=1e-15)
    assert combine(rows, np.array([[1, 1], [1, 1.0]])) == pytest.approx(0.0, abs=1e-12)
    assert combine(rows, np.array([[1, -1], [-1, 1.0]])) == pytest.approx(2.0, rel=1e-15)
    assert welch_satterthwaite(rows) == math.inf


def test_budget_round_trip():
    b = Budget("f", 50.0, "Hz", (Contribution("timebase", "B", "rectangular", 57.7, "ppm", 50e-6),), conditional_on=("L",))
    d = b.to_dict()
    assert d["u"] == pytest.approx(57.7 * 50e-6) and d["k"] == 2.0 and d["conditional_on"] == ["L"]
    again = Budget.from_dict(d)
    assert again.u == pytest.approx(b.u) and again.contributions[0].name == "timebase"


def test_monte_carlo_agrees_with_the_linear_law_for_a_linear_model():
    # JCGM 101 5.11 / GUM: for a linear model the MC standard deviation equals the GUM u_c;
    # a sum of a normal (u = 1) and a rectangular (u = 2) input: u = √5. MC error at
    # ≥ 20 000 trials: the sd of a sd is ≈ u/√(2n) ≈ 0.5 %, so 3 % is a safe bound
    r = monte_carlo(lambda a, b: a + b, [("normal", 1.0, 1.0), ("rectangular", 2.0, 2.0)], seed=3,
                    rel_tol=0.005)
    assert r.u == pytest.approx(math.sqrt(5.0), rel=0.03)
    assert r.mean == pytest.approx(3.0, abs=0.05)
    assert r.low < 3.0 < r.high and r.trials >= 20_000


def test_monte_carlo_of_a_resonance_matches_the_delta_method():
    # f0 = 1/(2π√(LC)) with L ±10 % rectangular and C 1 % normal: delta method gives
    # u_rel = √((0.5·0.0577)² + (0.5·0.01)²) = 2.93 %; the non-linearity is second order
    # (≈ (u_rel)² ≈ 0.1 %), so MC and the linear law agree within 3 % of u (MC error ~1 %)
    L, C = 0.3, 33e-6
    f0 = lambda l, c: 1 / (2 * math.pi * np.sqrt(l * c))
    r = monte_carlo(f0, [("rectangular", L, 0.1 * L / math.sqrt(3)), ("normal", C, 0.01 * C)], seed=5,
                    rel_tol=0.005)
    lin = f0(L, C) * math.hypot(0.5 * 0.1 / math.sqrt(3), 0.5 * 0.01)
    assert r.u == pytest.approx(lin, rel=0.03)
