"""The drive's source-resistance asymmetry in an output-only (one-channel) lc-lowpass fit.

A timer's output stage sources through r_high and sinks through r_low (REFERENCES §11). The
plain one-channel model drives the filter with an ideal rectangular wave through one constant
Rs; the real circuit is time-varying, and its output harmonics follow the exact periodic steady
state of :mod:`benchfit.model.switched` instead. The mean resistance D·r_high + (1 − D)·r_low
stays in Rs as before; the asymmetry Δr = r_high − r_low is the one extra parameter:

    Rs(high) = Rs + (1 − D)·Δr,    Rs(low) = Rs − D·Δr.

It is fitted as the dimensionless ``asymmetry`` a = Δr/√(L/C), a shape parameter like the duty
(scaling every impedance of the circuit by λ leaves a and the output's shape alone), so the
impedance scale the user fixes (L or C with its tolerance) enters Δr = a·√(L/C) only through
√(L/C), as it enters every other resistance.

It is added only when the data support it: the extra-sum-of-squares F-test with one extra
parameter (as for the core loss, :func:`benchfit.fit.budgets.compare_core_loss`) at p < 0.001,
with AIC/BIC on the same χ², reported in the fit's ``adequacy`` under ``drive_asymmetry``
(screened first by its linearised score form, see :func:`compare_drive_asymmetry`).
"""

from __future__ import annotations

import math
from typing import Mapping

import numpy as np

from benchfit.model.filter import PART_NAMES, LowpassParts
from benchfit.model.switched import switched_phasors

__all__ = ["NAME", "FIGURE", "BOUND", "asymmetric_phasors", "asymmetry_ohm", "compare_drive_asymmetry",
           "asymmetry_value", "with_asymmetry", "marginal_asymmetry"]

#: the fitted (dimensionless) parameter: Δr/√(L/C)
NAME = "asymmetry"
#: the reported figure: Δr = r_high − r_low in ohm
FIGURE = "drive_asymmetry_ohm"
#: |a| bound of the fit: Δr up to ±2·√(L/C), far beyond a timer's tens of ohms behind a choke of Z0 ~ 100 Ω
BOUND = 2.0
#: the F-test's level, as for the core loss
_P_LIMIT = 1e-3


def asymmetry_ohm(v: Mapping[str, float]) -> float:
    """Δr = a·√(L/C) in ohm from a dict of fitted values (0 without the parameter)."""
    return float(v.get(NAME, 0.0)) * math.sqrt(float(v["L"]) / float(v["C"]))


def asymmetric_phasors(orders: np.ndarray, frequency_hz: float, duty: float, p: LowpassParts,
                       a: float) -> np.ndarray:
    """Output phasors per volt of a 0 → 1 V drive whose series resistance is Rs + (1 − D)·Δr while
    high and Rs − D·Δr while low, Δr = a·√(L/C) (module docstring)."""
    dr = a * math.sqrt(p.L / p.C)
    # built directly rather than by dataclasses.replace, which cost as much as the model's own 2 × 2 algebra
    high = LowpassParts(p.L, p.C, p.Rs + (1.0 - duty) * dr, p.Resr, p.Rload, p.Rp)
    low = LowpassParts(p.L, p.C, p.Rs - duty * dr, p.Resr, p.Rload, p.Rp)
    return switched_phasors(orders, frequency_hz, duty, high, low)


def compare_drive_asymmetry(residual, values: Mapping[str, float], names: tuple[str, ...],
                            extra: Mapping[str, tuple[float, float, float]]):
    """Does an unequal high/low source resistance explain the data better? F-test and AIC/BIC.

    ``names`` are the base fit's free parameters (parts as logarithms, extras as themselves). First
    the score (Lagrange-multiplier) form of the test, at the base fit: the χ² drop of one linearised
    Gauss–Newton step with ``asymmetry`` added, Δχ² = rᵀJ(JᵀJ)⁺Jᵀr (J the whitened Jacobian over all
    parameters at a = 0; the base fit's own columns contribute nothing at its optimum). It needs no
    iterative fit, which matters where Rs and the load leave a flat valley that a refit would crawl
    along. Only when it is significant at 1 % (ten times the decision level, so a nonlinear gain
    the step misses is still caught) is the model refitted from that step and judged on the refit's
    χ²: F = (χ²₀ − χ²₁)/(χ²₁/(n − p₁)) on one extra parameter, p from F(1, n − p₁) (the
    extra-sum-of-squares F-test, e.g. Bates & Watts, *Nonlinear Regression Analysis*, from memory).

    Returns (summary dict, values of the asymmetric model when chosen, else None).
    """
    from scipy.special import fdtrc  # F's survival function, as scipy.stats.f.sf computes it

    from benchfit.fit.identify import fit_log_parameters, numeric_jacobian

    base = dict(values)
    r0 = residual(base)
    n = r0.size
    chi0 = float(r0 @ r0)
    p0 = len(names)
    p1 = p0 + 1
    dof1 = max(n - p1, 1)
    all_names = tuple(names) + (NAME,)
    x0 = np.array([math.log(base[k]) if k in PART_NAMES else float(base[k]) for k in names] + [0.0])

    def at(z: np.ndarray) -> np.ndarray:
        v = dict(base)
        for k, x in zip(all_names, z):
            v[k] = float(math.exp(x)) if k in PART_NAMES else float(x)
        return residual(v)

    jac = numeric_jacobian(at, x0, step=1e-6)
    step = -np.linalg.pinv(jac, rcond=1e-10) @ r0
    drop = float(max(chi0 - float((r0 + jac @ step) @ (r0 + jac @ step)), 0.0))
    f_score = drop / max((chi0 - drop) / dof1, 1e-300)
    p_score = float(fdtrc(1, dof1, f_score))
    a_step = float(np.clip(step[-1], -BOUND, BOUND))
    summary: dict = {"models": ["lc-lowpass (ideal rectangular drive)", "lc-lowpass, switched source r_high ≠ r_low"],
                     "n_points": n, "n_params": [p0, p1], "score_test_p_value": p_score}
    chi1, v1 = chi0 - drop, {**base, NAME: a_step}
    test = "score test (linearised at r_high = r_low)"
    if p_score < 10 * _P_LIMIT:
        free = tuple(k for k in names if k in PART_NAMES)
        held = {k: float(v) for k, v in base.items() if k in PART_NAMES and k not in free}
        ex = {k: (float(base[k]), lo, hi) for k, (_, lo, hi) in extra.items()}
        ex[NAME] = (a_step, -BOUND, BOUND)
        try:
            v1, names1, _, chi2r1, _, _ = fit_log_parameters(residual, base, free, held, ex, max_nfev=1500)
            chi1 = chi2r1 * max(n - len(names1), 1)
            test = "extra-sum-of-squares F-test (refitted)"
        except Exception:  # the refit failed: the linearised step stands, and decides nothing below
            test = "score test (linearised; the refit failed)"
    fstat = max(chi0 - chi1, 0.0) / max(chi1 / dof1, 1e-300)
    pval = float(fdtrc(1, dof1, fstat))
    chosen = pval < _P_LIMIT and test.startswith("extra")
    summary.update({"test": test, "chi2": [chi0, chi1], "aic": [chi0 + 2 * p0, chi1 + 2 * p1],
                    "bic": [chi0 + p0 * math.log(n), chi1 + p1 * math.log(n)], "f_statistic": fstat,
                    "p_value": pval, "chosen": summary["models"][1 if chosen else 0],
                    "drive_asymmetry_ohm_at_comparison": asymmetry_ohm(v1)})
    return summary, (dict(v1) if chosen else None)


def asymmetry_value(values: Mapping[str, float], ident, specs, sens, dof: int):
    """Δr with its budget (delta method over a, ln L, ln C; the inputs' rows from their sensitivities)."""
    from benchfit.fit.propagate import derived_budget
    from benchfit.fit.result import DERIVED_UNITS, DerivedValue

    names = ident.names
    dr = asymmetry_ohm(values)
    g = np.zeros(len(names))
    for n, d in ((NAME, math.sqrt(values["L"] / values["C"])), ("L", 0.5 * dr), ("C", -0.5 * dr)):
        if n in names:
            g[names.index(n)] = d
    und = NAME in ident.undetermined
    u_fit = math.sqrt(max(float(g @ ident.cov_log @ g), 0.0))
    # a fixed L or C enters Δr = a·√(L/C) directly as well
    direct = {k: d for k, d in (("L", 0.5 * dr / float(values["L"])), ("C", -0.5 * dr / float(values["C"])))
              if k not in names}
    b = derived_budget(FIGURE, dr, DERIVED_UNITS[FIGURE], u_fit, g, direct, ident, specs, sens, dof)
    if und or not math.isfinite(b.u):
        return DerivedValue(dr, None, None, b)
    return DerivedValue(dr, b.u, u_fit, b, b.conditional_on)


#: Δr is not determined when its standard uncertainty exceeds this fraction of |Δr|: the 50 % limit of
#: the identifiability analysis (fit.identify._SIGMA_LIMIT)
_REL_LIMIT = 0.5


def _undetermined_note(dr: float) -> str:
    return (f"{FIGURE}: the data call for an uneven drive but do not pin r_high − r_low (best value "
            f"{dr:.3g} Ω, its uncertainty more than half of it); it is fitted so that the other values "
            "are not biased by the ideal-drive model, and their uncertainties include it — measure the "
            "drive at the timer pin (a second channel) to pin it")


def with_asymmetry(result, summary: Mapping, values: Mapping[str, float], ident, specs, sens):
    """The FitResult with the comparison in ``adequacy`` and, when chosen, Δr as a derived value."""
    from dataclasses import replace

    adequacy = {**result.adequacy, "drive_asymmetry": {k: v for k, v in summary.items() if k != "note"}}
    if NAME not in values:
        return replace(result, adequacy=adequacy)
    dv = asymmetry_value(values, ident, specs, sens, int(result.adequacy.get("dof", 1)))
    warnings = list(result.warnings)
    dr = asymmetry_ohm(values)
    if dv.stderr is None or dv.stderr > _REL_LIMIT * abs(dr):
        from benchfit.fit.result import DerivedValue

        dv = DerivedValue(dr, None, None, dv.budget)
        warnings.append(_undetermined_note(dr))
    return replace(result, derived={**result.derived, FIGURE: dv}, adequacy=adequacy, warnings=tuple(warnings))


def marginal_asymmetry(result, marg):
    """Δr replaced by its marginal mean and uncertainty (fit.marginal: the nuisances' spread included)."""
    from dataclasses import replace

    from benchfit.fit.marginal import _budget, scale_input
    from benchfit.fit.result import DERIVED_UNITS, DerivedValue

    base = result.derived.get(FIGURE)
    value = float(marg.mean[FIGURE])
    names = ", ".join(q.name for q in marg.nuisances)
    b = _budget(FIGURE, value, DERIVED_UNITS[FIGURE], marg, None if base is None else base.budget,
                f"undetermined {names}, marginalised over the stated range (spread over the posterior)",
                scale_input(result))
    warnings = [w for w in result.warnings if not w.startswith(f"{FIGURE}: the data call for an uneven drive but")]
    if not math.isfinite(b.u) or b.u > _REL_LIMIT * abs(value):
        dv = DerivedValue(value, None, None, b)
        warnings.append(_undetermined_note(value))
    else:
        dv = DerivedValue(value, b.u, marg.u_fit[FIGURE], b, b.conditional_on)
    return replace(result, derived={**result.derived, FIGURE: dv}, warnings=tuple(warnings))
