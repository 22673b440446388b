"""Budgets and attribution of an lc-lowpass fit: the inputs it held fixed, their propagation,
the channel gain ratio, the core-loss model comparison, and the assembled :class:`FitResult`.

Split out of :mod:`benchfit.fit.lowpass` (which re-exports these names); see
:mod:`benchfit.fit.propagate` for the method.
"""

from __future__ import annotations

import math
from typing import Mapping

import numpy as np

from benchfit.fit.common import parts_of, source_name
from benchfit.fit.identify import (DERIVED_NAMES, Identification, ambiguity, correlations, derived_values,
                                   display_unit, numeric_jacobian, parameter_table, undetermined_warning)
from benchfit.fit.propagate import InputSpec, derived_budget, input_sensitivities, part_budget, total_log_covariance
from benchfit.fit.tdnoise import chi2_red_limit
from benchfit.fit.result import DERIVED_UNITS, PARAMETER_UNITS, DerivedValue, FitCurves, FitParameter, FitQuality, FitResult, Method
from benchfit.fit.tolerance import FixedValue
from benchfit.model.filter import PART_NAMES, LowpassParts, second_order
from benchfit.uncertainty import (DEFAULT_CHANNEL_RATIO_HALF_WIDTH_REL, DEFAULT_CHANNEL_RATIO_NOTE, Budget,
                                  Contribution)
from benchfit.units import format_quantity

__all__ = ["input_specs", "propagate", "assemble", "channel_gain_ratio", "compare_core_loss",
           "core_loss_not_separated"]

MODEL_NAME = "lc-lowpass"


#: below this Q the two poles of the low-pass are 100× apart or more: no resonance to speak of, and
#: the data look like a first-order R-C low-pass (common practice, no source)
_NO_RESONANCE_Q = 0.1


def input_specs(fix_specs: Mapping[str, FixedValue], fixed: Mapping[str, float], folded: list[str],
                gain_ratio: FixedValue | None = None) -> dict[str, InputSpec]:
    """The inputs a fit held fixed: the user's parts, the marginalised ones, the channel gain ratio."""
    out: dict[str, InputSpec] = {}
    for n, fv in fix_specs.items():
        tol = f" ({fv.text}, {fv.distribution})" if fv.u is not None else " (no tolerance given)"
        out[n] = InputSpec(n, fv, PARAMETER_UNITS[n], f"fixed {n}{tol}", "fixed")
    for n in folded:
        a = float(fixed.get(f"{n}_bound", 0.0))
        # held at 0, spread evenly over 0…a: rms distance from 0 is a/√3 (as a rectangular of half-width a)
        fv = FixedValue(float(fixed[n]), a, "rectangular", f"0…{a:.3g} {display_unit(n)}",
                        "range the data allow: not determined, bounded by the total series loss and the "
                        "data's own bound")
        out[n] = InputSpec(n, fv, PARAMETER_UNITS[n], f"undetermined {n} (0…{a:.3g} {display_unit(n)}, held at 0)",
                           "prior")
    if gain_ratio is not None:
        out["gain_ratio"] = InputSpec("gain_ratio", gain_ratio, "1",
                                      f"channel gain ratio ({gain_ratio.text}, {gain_ratio.distribution})",
                                      "gain ratio")
    return out


def propagate(residual, values: Mapping[str, float], ident: Identification,
              specs: Mapping[str, InputSpec]) -> dict[str, np.ndarray]:
    """Sensitivities of the free log-parameters to every input (see :mod:`benchfit.fit.propagate`)."""
    z0 = math.sqrt(values["L"] / values["C"])
    # an input at zero is stepped by 10⁻⁶ of a typical size: the impedance level for a part, its own u for a
    # timing (a step of 10⁻⁶·Z0 seconds would turn the top harmonics' phase by radians)
    scale = {n: (float(sp.u) if sp.role == "timing" and sp.u else z0) for n, sp in specs.items()}
    return input_sensitivities(residual, values, ident, specs, scale)


def assemble(cap, method: Method, values: dict[str, float], ident: Identification,
             user_fix: Mapping[str, float], folded: list[str], warnings: list[str],
             curves: FitCurves, quality: FitQuality, success: bool, message: str,
             alternatives: list[dict[str, float]] | None = None,
             specs: Mapping[str, InputSpec] | None = None,
             sens: Mapping[str, np.ndarray] | None = None, noise_dof: float | None = None) -> FitResult:
    """Build the FitResult: parameter table with budgets, derived values, correlations and warnings.

    ``noise_dof``: the effective degrees of freedom of a noise level estimated apart from the fit (the
    time-domain refinement's, :mod:`benchfit.fit.tdnoise`); χ²ᵣ is then judged against F(ν, ν_σ).
    """
    from dataclasses import replace

    specs = dict(specs or {})
    for n, v in user_fix.items():  # a caller that gave plain floats: inputs without tolerance
        if n not in specs:
            specs[n] = InputSpec(n, FixedValue(float(v)), PARAMETER_UNITS[n], f"fixed {n} (no tolerance given)")
    sens = dict(sens or {})
    cov_local = ident.cov_log
    ident, amb_warn = ambiguity(values, ident, alternatives or [])
    params = parameter_table(values, ident, {**user_fix, **{n: 0.0 for n in folded}})
    dof = max(quality.n_points - len(ident.names), 1)
    cond = tuple(n for n, sp in specs.items() if sp.u is None)
    for name, p in list(params.items()):
        spec = specs.get(name)
        b: Budget | None
        if name in folded and spec is not None and spec.u is not None:
            b = Budget(name, float(values[name]), p.unit,
                       (Contribution(spec.label, "B", "rectangular", float(spec.u), p.unit, 1.0, math.inf,
                                     spec.fixed.source),))
            params[name] = FitParameter(0.0, None, False, p.unit, None, b)
        elif p.fixed:
            b = None if spec is None or spec.u is None or p.value is None else Budget(
                name, float(p.value), p.unit, (Contribution(spec.label, "B", spec.fixed.distribution, float(spec.u),
                                                            p.unit, 1.0, math.inf, spec.fixed.source),))
            params[name] = FitParameter(p.value, None if b is None else b.u, True, p.unit, None, b,
                                        (name,) if b is None else ())
        elif p.stderr is not None and p.value is not None and name in ident.names:
            j = ident.names.index(name)
            pb = part_budget(name, float(p.value), p.unit, j, p.stderr, ident, specs, sens, dof)
            params[name] = FitParameter(p.value, pb.u, False, p.unit, p.stderr, pb, pb.conditional_on)
    z0 = math.sqrt(values["L"] / values["C"])
    high_z = values["Rload"] > 30.0 * z0 or "Rload" in ident.undetermined
    named = {n.strip() for w in amb_warn for n in w.split(":")[0].split(",")}
    und_plain = tuple(n for n in ident.undetermined if n not in named and n in PART_NAMES)
    if amb_warn and und_plain and not {"L", "C"} <= set(und_plain):
        # these move together with the parts of the other solution: fixing the load settles them
        amb_warn.append(f"{', '.join(und_plain)}: not determined by these data either (they shift "
                        "with the other solution above) — fixing Rload usually settles them; otherwise "
                        f"measure {und_plain[0]} and pass fix={{'{und_plain[0]}': …}}")
        und_plain = ()
    warn = list(warnings) + amb_warn + undetermined_warning(und_plain, high_z)
    if not success:
        warn.append(f"fit: the optimiser did not report convergence ({message}) — check the "
                    "capture and pass approximate part values as guess=")
    # derived values use the local covariance; the spread between equally good solutions is
    # checked on the derived values themselves below (it widens only the parts' own errors)
    derived = derived_values(values, replace(ident, cov_log=cov_local))
    if "Resr" in folded and "Rs" not in user_fix:
        derived["series_loss_ohm"] = _series_loss(values, ident, cov_local, specs, sens, dof)
    derived = _derived_budgets(values, derived, replace(ident, cov_log=cov_local), specs, sens, dof)
    for name, dv in list(derived.items()):  # a derived value that differs between solutions
        if dv.value is None or dv.stderr is None:
            continue
        for alt in alternatives or []:
            if name not in DERIVED_NAMES:
                continue
            other = second_order(parts_of(alt))[name]
            if not math.isfinite(other):
                continue
            diff = abs(other - dv.value)
            if diff > 0.05 * abs(dv.value):
                derived[name] = DerivedValue(dv.value, None)
            elif diff > 3 * dv.stderr:  # small but significant: widen by half the spread
                wb = dv.budget.with_rows(Contribution("other equally good solution (half the spread)", "B",
                                                      "rectangular", diff / 2, dv.budget.unit, 1.0)) \
                    if dv.budget is not None else None
                derived[name] = DerivedValue(dv.value, math.hypot(dv.stderr, diff / 2), dv.u_fit, wb,
                                             dv.conditional_on)
    q = derived.get("q_factor")
    if q is not None and q.value is not None and 0 < q.value < _NO_RESONANCE_Q:
        warn.append(f"no resonance: Q = {q.value:.2g}, so the response is a first-order (RC-like) low-pass with "
                    f"its second pole about {1 / q.value ** 2:.0f}× higher, and L rests on that fast pole alone — "
                    "check that the circuit is an L-C filter (an R-C low-pass also fits this model closely)")
    if cond:
        shown = ", ".join(f"{n} = {format_quantity(specs[n].fixed.value, display_unit(n), 4)}"
                          for n in cond if n in PARAMETER_UNITS)
        warn.append(f"{', '.join(cond)}: fixed without a tolerance ({shown}), so every fitted part and derived "
                    f"value is conditional on it — give the tolerance, e.g. fix={{'{cond[0]}': '…±10%'}}, to include it")
    limit = chi2_red_limit(dof, math.inf if noise_dof is None else noise_dof)
    if ident.chi2_red > limit:
        warn.append(f"fit: the residuals are {math.sqrt(ident.chi2_red):.2g}× the noise (χ²ᵣ = {ident.chi2_red:.3g} "
                    f"on {dof} degrees of freedom), so the model does not describe these data fully; every fit "
                    "uncertainty is scaled by that factor (Birge ratio) — check for losses the model lacks "
                    "(core loss, an uneven drive) and read the values with care")
    total = replace(ident, cov_log=total_log_covariance(ident, specs, sens))
    inputs = {n: {**sp.fixed.to_dict(), "role": sp.role, "unit": sp.unit} for n, sp in specs.items()}
    adequacy = {"chi2_red": ident.chi2_red, "dof": dof, "birge_ratio": math.sqrt(max(ident.chi2_red, 0.0)),
                "chi2_red_limit": limit}
    return FitResult(file=source_name(cap), model=MODEL_NAME, method=method, parameters=params,
                     derived=derived, correlations=correlations(total),
                     quality=quality, warnings=tuple(warn), curves=curves, success=success,
                     message=message, inputs=inputs, conditional_on=cond, adequacy=adequacy)


def _figure_function(values: Mapping[str, float], names: tuple[str, ...], keys: tuple[str, ...]):
    def figures(z: np.ndarray, over: Mapping[str, float] | None = None) -> np.ndarray:
        v = {n: values[n] for n in PART_NAMES if n in values}
        v.update({n: float(math.exp(x)) for n, x in zip(names, z) if n in PART_NAMES})
        if over:
            v.update({k: x for k, x in over.items() if k in PART_NAMES})
        fig = second_order(LowpassParts(**v))
        fig["series_loss_ohm"] = v["Rs"] + v["Resr"]
        return np.array([fig[k] for k in keys])
    return figures


def _derived_budgets(values, derived, ident, specs, sens, dof):
    """Add the inputs' rows to every derived value that has a fit uncertainty."""
    keys = tuple(derived)
    names = ident.names
    x = np.array([math.log(values[n]) if n in PART_NAMES else float(values[n]) for n in names])
    figures = _figure_function(values, names, keys)
    base = figures(x)
    grad = numeric_jacobian(figures, x, step=1e-6) if x.size else np.zeros((len(keys), 0))
    direct: dict[str, np.ndarray] = {}
    for key, spec in specs.items():
        if key not in PART_NAMES or spec.u is None:
            continue
        phi = float(values.get(key, spec.fixed.value))
        h = 1e-6 * (abs(phi) if phi else math.sqrt(values["L"] / values["C"]))
        lo = max(phi - h, 0.0) if phi - h <= 0 else phi - h
        direct[key] = (figures(x, {key: phi + h}) - figures(x, {key: lo})) / (phi + h - lo)
    out = {}
    for i, name in enumerate(keys):
        dv = derived[name]
        if dv.stderr is None or dv.value is None:
            out[name] = dv
            continue
        g = grad[:, :][i] if grad.size else np.zeros(0)
        unit = DERIVED_UNITS.get(name, "")
        b = derived_budget(name, float(base[i]), unit, dv.stderr, g, {k: float(v[i]) for k, v in direct.items()},
                           ident, specs, sens, dof)
        out[name] = DerivedValue(dv.value, b.u, dv.stderr, b, b.conditional_on)
    return out



def _series_loss(values, ident, cov_local, specs, sens, dof) -> DerivedValue:
    """Rs + Resr, the total series loss that the data do determine when they cannot split it."""
    names = ident.names
    total = values["Rs"] + values["Resr"]
    g = np.zeros(len(names))
    if "Rs" in names:
        g[names.index("Rs")] = values["Rs"]
    if "Resr" in names:
        g[names.index("Resr")] = values["Resr"]
    var = float(g @ cov_local @ g) if g.size else 0.0
    return DerivedValue(total, math.sqrt(max(var, 0.0)))


def channel_gain_ratio(cap, di: int, ri: int) -> tuple[FixedValue, str | None]:
    """The output/drive gain ratio of the two inputs: 1 with its uncertainty, and a note.

    Both channels calibrated in volts with a stated gain uncertainty: u = √(u_d² + u_o²)
    (normal). Otherwise the stated default (±3 % rectangular,
    :data:`benchfit.uncertainty.DEFAULT_CHANNEL_RATIO_HALF_WIDTH_REL`).
    """
    cal = cap.calibration
    gu = cal.gain_u_rel
    if (cal.gain_v_per_fs is not None and gu is not None and max(di, ri) < len(gu)
            and cap.units[di] == cap.units[ri] == "V"):
        u = math.hypot(gu[di], gu[ri])
        return FixedValue(1.0, u, "normal", f"u = {100 * u:.2g} %",
                          f"calibration profile {cal.profile or 'unnamed'}"), None
    half = DEFAULT_CHANNEL_RATIO_HALF_WIDTH_REL
    return FixedValue(1.0, half, "rectangular", f"±{100 * half:g} %",
                      "stated default for unmatched inputs (from memory)"), DEFAULT_CHANNEL_RATIO_NOTE


def core_loss_not_separated(comparison: dict, warnings, kept: str, split: str) -> list[str]:
    """The comparison called for a core loss, but the refit with Rp cannot separate it: the plain
    model stays chosen, and a note says so (``kept``: what the fit does instead; ``split``: the
    measurement that would separate it). Returns the warnings with the note added."""
    comparison["chosen"] = comparison["models"][0]
    comparison["note"] = (f"core loss: the data call for a loss rising with frequency (F-test p = "
                          f"{comparison['p_value']:.2g}) but do not separate Rp from the other losses, "
                          f"so {kept} — {split}")
    return list(warnings) + [comparison["note"]]


def compare_core_loss(residual, values: Mapping[str, float], ident: Identification,
                      fixed: Mapping[str, float], fix: Mapping[str, float],
                      extra: Mapping[str, tuple[float, float, float]] | None = None):
    """Does a core loss (Rp across L) explain the data better? F-test and AIC/BIC.

    The base fit (no Rp) and fits with Rp free from two starts (Rp = 10 and 100 × ω0·L)
    are compared on their χ² (whitened residuals): F = (χ²₀ − χ²₁)/(χ²₁/(n − p₁)) with one
    extra parameter (plus the ESR when the base fit had to hold it), p from F(Δp, n − p₁)
    (the extra-sum-of-squares F-test, e.g. Bates & Watts, *Nonlinear Regression Analysis*,
    from memory); AIC = χ² + 2p and BIC = χ² + p·ln n on the same χ². The core-loss model is
    chosen when p < 0.001 and its Rp is a finite, positive value.

    ``extra`` are the further parameters of the residual (a one-channel fit's timing phase and
    duty: name → (start, min, max)); they are refitted in the core-loss model too.

    Returns (summary dict, start values of the chosen core-loss model or None).
    """
    from scipy.special import fdtrc  # F's survival function, as scipy.stats.f.sf computes it

    from benchfit.fit.identify import fit_log_parameters

    r0 = residual(dict(values))
    n = r0.size
    chi0 = float(r0 @ r0)
    p0 = len(ident.names)
    base_fixed = {k: v for k, v in fixed.items() if k in fix or k == "gain_ratio"}
    free = tuple(k for k in PART_NAMES if k not in base_fixed and k in values or k == "Rp")
    free = tuple(k for k in free if k not in base_fixed)
    w0l = values["L"] / math.sqrt(values["L"] * values["C"])
    best = None
    for m in (10.0, 100.0):
        st = {k: (v if v > 0 else 1e-3 * math.sqrt(values["L"] / values["C"])) for k, v in values.items()}
        st["Rp"] = m * w0l
        ex = {k: (float(values[k]), lo, hi) for k, (_, lo, hi) in (extra or {}).items()} or None
        try:
            v1, names1, _, chi2r1, ok1, _ = fit_log_parameters(residual, st, free, base_fixed, ex, max_nfev=1500)
        except Exception:  # a start that fails to converge is skipped, others remain
            continue
        chi1 = chi2r1 * max(n - len(names1), 1)
        if best is None or chi1 < best[0]:
            best = (chi1, v1, len(names1))
    if best is None:
        return None, None
    chi1, v1, p1 = best
    dp = max(p1 - p0, 1)
    dof1 = max(n - p1, 1)
    fstat = max(chi0 - chi1, 0.0) / dp / max(chi1 / dof1, 1e-300)
    pval = float(fdtrc(dp, dof1, fstat))
    summary = {"models": ["lc-lowpass", "lc-lowpass + core loss Rp"], "chi2": [chi0, chi1], "n_params": [p0, p1],
               "n_points": n, "aic": [chi0 + 2 * p0, chi1 + 2 * p1],
               "bic": [chi0 + p0 * math.log(n), chi1 + p1 * math.log(n)], "f_statistic": fstat, "p_value": pval}
    rp = v1.get("Rp", math.inf)
    chosen = pval < 1e-3 and math.isfinite(rp) and rp > 0
    summary["chosen"] = summary["models"][1 if chosen else 0]
    summary["note"] = (f"core loss: the data support a resistance across L (F-test p = {pval:.2g}, ΔAIC = "
                       f"{summary['aic'][1] - summary['aic'][0]:.3g}, ΔBIC = {summary['bic'][1] - summary['bic'][0]:.3g}); "
                       "Rp is fitted — the choke's core loss, which a plain model would have called ESR")
    return summary, (dict(v1) if chosen else None)
