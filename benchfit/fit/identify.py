"""Fitting engine shared by the lc-lowpass methods, and the identifiability analysis.

The free parts are fitted as natural logarithms (so they stay positive and the Jacobian
is in relative units) with scipy's trust-region least squares on a vector of *whitened*
residuals (each residual divided by its standard uncertainty, or multiplied by the
inverse Cholesky factor of its covariance), so χ² has its usual meaning.

Identifiability. At the solution the whitened Jacobian J (residuals × log-parameters) is
decomposed, J = U·S·Vᵀ. Along the right singular vector v_i the standard deviation of the
log-parameters is σ_i = √χ²_red / s_i. A direction with σ_i > 0.5 (more than about 50 %
relative uncertainty, or numerically singular) is *undetermined*; a parameter with a noticeable
component in such a direction is not determined by the data and is reported with
``stderr=None`` and a warning naming what to measure. The classic case: with a light
(high-impedance) load the response depends on L·C, Rs·C and Resr·C only, so the direction
(+L, −C, +Rs, +Resr, +Rload) is free and one part must be fixed.

Derived values (resonant frequency, Q, damped frequency, decay rate) get uncertainties by
the delta method with the covariance of the determined directions; a derived value that
changes along an undetermined direction is itself reported as not determined.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Callable, Mapping

import numpy as np

from benchfit.model.filter import PARAMETER_NAMES, PART_NAMES, LowpassParts, second_order
from benchfit.fit.result import PARAMETER_UNITS, DerivedValue, FitParameter

__all__ = ["Identification", "identify", "fit_log_parameters", "numeric_jacobian",
           "parameter_table", "derived_values", "correlations", "undetermined_warning", "DERIVED_NAMES",
           "solve", "ambiguity", "display_unit", "levenberg_marquardt"]

DERIVED_NAMES: tuple[str, ...] = ("resonant_frequency_hz", "natural_frequency_hz", "q_factor",
                                  "damped_frequency_hz", "decay_rate_per_s")

#: a direction whose log-parameter standard deviation exceeds this is undetermined: 0.5 is
#: a factor e^0.5 ≈ 1.65 either way (over 50 % relative), where the linearised error bar
#: itself stops being trustworthy and a part value is no longer useful
_SIGMA_LIMIT = 0.5
#: components of undetermined directions smaller than this are rounding, not dependence
_COMPONENT_FLOOR = 1e-3


@dataclass(frozen=True, eq=False)
class Identification:
    """What the data determine, from the whitened Jacobian at the solution.

    Attributes
    ----------
    names : tuple of str
        The free (fitted) parameters, in column order.
    cov_log : ndarray
        Covariance of the log-parameters restricted to the determined directions.
    undetermined : tuple of str
        Parameters with a noticeable component in an undetermined direction.
    null_directions : list of ndarray
        Unit vectors (in log-parameter space) of the undetermined directions.
    chi2_red : float
        Reduced χ² of the fit (the covariance is scaled by it).
    """

    names: tuple[str, ...]
    cov_log: np.ndarray
    undetermined: tuple[str, ...]
    null_directions: list = field(default_factory=list)
    chi2_red: float = 1.0
    #: standard deviation along each undetermined direction (inf when numerically singular)
    null_sigmas: tuple = ()


def numeric_jacobian(fun: Callable[[np.ndarray], np.ndarray], x: np.ndarray,
                     step: float = 1e-6) -> np.ndarray:
    """Central-difference Jacobian of ``fun`` at ``x`` (columns = parameters).

    An output that comes out the same on both sides has derivative 0, also where it is
    infinite (a load held at "no load", Rload = ∞, does not move with the fitted parts).
    """
    x = np.asarray(x, dtype=float)
    cols = []
    for i in range(x.size):
        dx = np.zeros_like(x)
        dx[i] = step
        hi, lo = np.asarray(fun(x + dx), dtype=float), np.asarray(fun(x - dx), dtype=float)
        cols.append(np.subtract(hi, lo, out=np.zeros_like(hi), where=hi != lo) / (2 * step))
    return np.stack(cols, axis=1) if cols else np.zeros((fun(x).size, 0))


def identify(jac: np.ndarray, names: tuple[str, ...], chi2_red: float) -> Identification:
    """Decide which log-parameters the data determine (see the module docstring)."""
    n_par = len(names)
    if n_par == 0:
        return Identification((), np.zeros((0, 0)), (), [], chi2_red, ())
    scale = math.sqrt(max(chi2_red, 1e-300))
    _, s, vt = np.linalg.svd(jac, full_matrices=False)
    smax = float(s[0]) if s.size else 0.0
    cov = np.zeros((n_par, n_par))
    null: list[np.ndarray] = []
    sigmas: list[float] = []
    for i in range(n_par):
        si = float(s[i]) if i < s.size else 0.0
        sigma = scale / si if si > 1e-12 * max(smax, 1e-300) else math.inf
        if sigma > _SIGMA_LIMIT:
            null.append(vt[i])
            sigmas.append(sigma)
        else:
            cov += sigma ** 2 * np.outer(vt[i], vt[i])
    bad = set()
    for v in null:
        for j, name in enumerate(names):
            if abs(v[j]) > _COMPONENT_FLOOR:
                bad.add(name)
    und = tuple(n for n in names if n in bad)
    return Identification(tuple(names), cov, und, null, chi2_red, tuple(sigmas))


def fit_log_parameters(residual: Callable[[dict[str, float]], np.ndarray],
                       start: Mapping[str, float], free: tuple[str, ...],
                       fixed: Mapping[str, float],
                       extra: Mapping[str, tuple[float, float, float]] | None = None,
                       max_nfev: int = 4000, tol: float = 1e-12, quick: bool = False):
    """Least-squares fit of ``residual(values)`` over the log of the ``free`` parts.

    Parameters
    ----------
    residual : callable
        Maps a dict of all values (parts in SI units, extras as given) to the whitened
        residual vector.
    start : mapping
        Start values of the free parts (SI units, positive).
    free, fixed
        Names of parts to fit (as logarithms), and values held constant.
    extra : mapping name → (start, min, max), optional
        Further parameters fitted directly (not as logarithms), e.g. a duty cycle or a phase.
    tol : float
        The optimiser's relative tolerances on the cost, the step and the gradient (xtol, ftol,
        gtol); a grid of refits that only needs each point's χ² to a small fraction of 1 may
        loosen it.
    quick : bool
        Try :func:`levenberg_marquardt` first when the residual offers its own Jacobian (scipy's bounded
        solver otherwise, or when it gives up): for refits whose parameters the data determine or drive
        to 0, such as a marginal grid's points with the nuisances held. Left off for a fit that may have
        a direction the data do not see, where the two solvers stop at different places along it.

    Returns
    -------
    (values, names, jac, chi2_red, success, message)
        Fitted values (all, SI), the fitted names (parts then extras), the whitened Jacobian
        (log-parts, raw extras) at the solution, reduced χ², the optimiser's success flag and message.
    """
    from scipy.optimize import least_squares

    extra = dict(extra or {})
    names = tuple(free) + tuple(extra)

    n_free = len(free)

    def values_from(z: np.ndarray) -> dict[str, float]:
        out = dict(fixed)
        zs = z.tolist()  # Python floats, the same numbers
        out.update(zip(free, map(math.exp, zs[:n_free])))
        out.update(zip(extra, zs[n_free:]))
        return out

    x0 = np.array([math.log(start[n]) for n in free] + [extra[n][0] for n in extra])
    n_res = residual(values_from(x0)).size
    if n_res <= len(names):
        from benchfit.errors import FitError

        raise FitError(f"fit: the data give only {n_res} numbers for {len(names)} unknowns "
                       f"({', '.join(names)}) — give the known parts in fix={{'L': …}}, or capture a drive "
                       "whose harmonics reach further above the noise")
    if names:
        # trust-region reflective least squares: the log-parts may move e^25 either way (a
        # guard, never reached by a sane fit), the extras keep their own bounds
        lo = np.array([v - 25.0 for v in x0[:len(free)]] + [extra[n][1] for n in extra])
        hi = np.array([v + 25.0 for v in x0[:len(free)]] + [extra[n][2] for n in extra])

        def fcn(z: np.ndarray) -> np.ndarray:
            r = residual(values_from(z))
            return np.where(np.isfinite(r), r, 1e150)

        x_start = np.clip(x0, lo, hi)
        closed = _closed_jacobian(residual, names, values_from, x0)
        done = False
        if closed is not None and quick:
            x_start, done = levenberg_marquardt(fcn, closed, x_start, lo, hi, tol, max_nfev,
                                                floor=np.arange(len(names)) < len(free))
        if done:
            xs, success, message = x_start, True, "converged (Levenberg–Marquardt)"
        else:
            out = least_squares(fcn, x_start, jac=closed or "2-point", bounds=(lo, hi), method="trf",
                                x_scale="jac", max_nfev=max_nfev, xtol=tol, ftol=tol, gtol=tol)
            xs = np.asarray(out.x, dtype=float)
            success, message = bool(out.success), str(out.message)
    else:
        xs, success, message = x0, True, "no free parameters"
    r = residual(values_from(xs))
    dof = max(r.size - len(names), 1)
    chi2_red = float(r @ r) / dof
    closed = _closed_jacobian(residual, names, values_from, xs)
    jac = closed(xs) if closed else numeric_jacobian(lambda z: residual(values_from(z)), xs)
    return values_from(xs), names, jac, chi2_red, success, message


#: Levenberg–Marquardt's damping: its start (relative to diag(JᵀJ)), and its factors after a good and a bad step
_LM_DAMPING = (1e-3, 1.0 / 3.0, 4.0)
#: damping beyond which no step lowers χ² any more: the iteration hands over to scipy's solver
_LM_DAMPING_MAX = 1e12


def levenberg_marquardt(fcn: Callable[[np.ndarray], np.ndarray], jac: Callable[[np.ndarray], np.ndarray],
                        x0: np.ndarray, lo: np.ndarray, hi: np.ndarray, tol: float,
                        max_nfev: int, floor: np.ndarray | None = None) -> tuple[np.ndarray, bool]:
    """Minimise |fcn(x)|² from ``x0`` inside the box ``lo``…``hi`` by Levenberg–Marquardt steps.

    The damped Gauss–Newton step (JᵀJ + λ·diag(JᵀJ))·δ = −Jᵀr (Marquardt's scaling, which makes the step
    independent of the variables' units as scipy's x_scale="jac" does; e.g. Press et al., *Numerical
    Recipes*, §15.5, from memory), λ lowered after a step that lowers χ² and raised after one that does
    not. It stops on scipy's own tests at the same ``tol``: the cost falling by less than tol·cost, or
    the step shorter than tol·(tol + |x|). For the few-parameter refits of a marginal grid it needs none
    of the trust-region machinery, which costs more than the model itself there.

    The variables marked in ``floor`` (the fit's log-parts) may come to rest on their lower bound: a part the
    data drive towards 0 (an Rs whose loss the load takes over) is held there, e^−25 of its start, which is
    0 for every figure, while the others converge; its derivative vanishes as it shrinks, so a solver that
    does not rest on the bound crawls towards the same limit for dozens of steps (scipy's, from the same
    start, stopped anywhere from e^−14 to e^−25 on the sample capture hc02).

    Returns (x, converged). Not converged, the caller goes on with scipy's bounded trust-region solver from
    x, the last point reached: when a step would leave the box elsewhere (a part running off to infinity,
    where that solver's own stopping rule is the reference: projecting onto the box there ran a core loss
    the data leave open to Rp = 1e81 Ω, warm start after warm start, and moved the marginal), when no
    damping lowers χ², or when it has not converged within ``max_nfev`` evaluations.
    """
    lam0, down, up = _LM_DAMPING
    x = np.asarray(x0, dtype=float)
    rest = np.zeros(x.size, dtype=bool) if floor is None else np.asarray(floor, dtype=bool)
    resting = bool(np.any(rest))
    r = fcn(x)
    cost = float(r @ r)
    j = jac(x)
    lam = lam0
    nfev = 1
    fresh = True  # the normal equations are those of the current x (they change only with an accepted step)
    while nfev < max_nfev:
        if fresh:
            g = j.T @ r
            move = ~(rest & (x <= lo) & (g > 0))  # held on its lower bound while χ² falls towards it
            if not move.any():
                return x, True
            every = bool(move.all())
            jm = j if every else j[:, move]
            a = jm.T @ jm
            scale = np.diag(np.maximum(np.diag(a), 1e-300))
            fresh = False
        try:
            solved = np.linalg.solve(a + lam * scale, -(g if every else g[move]))
        except np.linalg.LinAlgError:
            return x, False
        if every:
            step = solved
        else:
            step = np.zeros_like(x)
            step[move] = solved
        xn = np.where(rest, np.maximum(x + step, lo), x + step) if resting else x + step
        if (xn < lo).any() or (xn > hi).any():
            return x, False
        step = xn - x
        small = math.sqrt(float(step @ step)) <= tol * (tol + math.sqrt(float(x @ x)))
        rn = fcn(xn)
        nfev += 1
        cost_n = float(rn @ rn)
        if cost_n <= cost:
            done = small or cost - cost_n <= tol * cost
            x, r, cost = xn, rn, cost_n
            if done:
                return x, True
            j = jac(x)
            fresh = True
            lam *= down
        else:
            if small:
                return x, True  # no shorter step lowers χ²: the minimum to rounding
            lam *= up
            if lam > _LM_DAMPING_MAX:
                return x, False
    return x, False


def _closed_jacobian(residual, names: tuple[str, ...], values_from,
                     x: np.ndarray) -> Callable[[np.ndarray], np.ndarray] | None:
    """The Jacobian over the fit's variables from ``residual`` itself, when it offers one for them.

    A residual with a ``log_jacobian(values, names)`` method (∂r/∂ln part, ∂r/∂extra; None for names it does
    not cover, judged at ``x``) spares the optimiser its finite differences of the whole residual, several
    residual calls per step. Entries that come out non-finite (a residual the fit replaces by a large constant there) are 0.
    """
    of = getattr(residual, "log_jacobian", None)
    if of is None or not names:
        return None

    def jac(z: np.ndarray) -> np.ndarray:
        j = of(values_from(z), names)
        return np.where(np.isfinite(j), j, 0.0)

    return jac if of(values_from(x), names) is not None else None


def parameter_table(values: Mapping[str, float], ident: Identification,
                    fixed: Mapping[str, float]) -> dict[str, FitParameter]:
    """FitParameter for every model part: fixed, fitted (with stderr), or not determined."""
    out: dict[str, FitParameter] = {}
    for name in PARAMETER_NAMES + (("Rp",) if "Rp" in values or "Rp" in fixed else ()):
        unit = PARAMETER_UNITS[name]
        if name in fixed:
            out[name] = FitParameter(float(fixed[name]), None, True, unit)
            continue
        v = float(values[name])
        if name in ident.undetermined or name not in ident.names:
            out[name] = FitParameter(v, None, False, unit)
            continue
        j = ident.names.index(name)
        var = float(ident.cov_log[j, j])
        out[name] = FitParameter(v, v * math.sqrt(var) if var >= 0 else None, False, unit)
    return out


def correlations(ident: Identification) -> dict[str, float]:
    """Correlation coefficient of each pair of determined fitted parameters ("C,Rs": r)."""
    out: dict[str, float] = {}
    names = ident.names
    d = np.sqrt(np.clip(np.diag(ident.cov_log), 0, None))
    for i in range(len(names)):
        for j in range(i + 1, len(names)):
            if names[i] in ident.undetermined or names[j] in ident.undetermined:
                continue
            if names[i] not in PART_NAMES or names[j] not in PART_NAMES:
                continue
            if d[i] > 0 and d[j] > 0:
                out[f"{names[i]},{names[j]}"] = float(ident.cov_log[i, j] / (d[i] * d[j]))
    return out


def derived_values(values: Mapping[str, float], ident: Identification) -> dict[str, DerivedValue]:
    """Resonance figures with delta-method uncertainties (None when not determined)."""

    def figures(z: np.ndarray) -> np.ndarray:
        v = {n: values[n] for n in PART_NAMES if n in values}
        v.update({n: float(math.exp(x)) for n, x in zip(ident.names, z) if n in PART_NAMES})
        fig = second_order(LowpassParts(**v))
        return np.array([fig[k] for k in DERIVED_NAMES])

    # parts enter as logarithms, extras (duty, phase) as themselves; the latter do not move
    # the resonance figures
    x = np.array([math.log(values[n]) if n in PART_NAMES else float(values[n])
                  for n in ident.names])
    base = figures(x)
    grad = numeric_jacobian(figures, x, step=1e-6) if x.size else np.zeros((base.size, 0))
    out: dict[str, DerivedValue] = {}
    for i, name in enumerate(DERIVED_NAMES):
        val = float(base[i])
        if not math.isfinite(val):
            out[name] = DerivedValue(None, None)
            continue
        g = grad[i]
        if not np.all(np.isfinite(g)):
            out[name] = DerivedValue(val, None)
            continue
        # undetermined directions: a numerically singular one makes the value undetermined
        # if the value moves along it (> 1 % per unit log change); a merely poorly determined
        # one adds its share (g·v)²σ² to the variance
        var = float(g @ ident.cov_log @ g) if g.size else 0.0
        moves = False
        for v, sig in zip(ident.null_directions, ident.null_sigmas or (math.inf,) * len(ident.null_directions)):
            gv = float(g @ v)
            if math.isinf(sig):
                moves = moves or abs(gv) > 1e-2 * abs(val)
            else:
                var += (gv * sig) ** 2
        u = math.sqrt(max(var, 0.0))
        if u > 0.5 * abs(val):  # the same 50 % limit as for the parts
            moves = True
        out[name] = DerivedValue(val, None if moves else u)
    return out


def undetermined_warning(undetermined: tuple[str, ...], high_impedance: bool) -> list[str]:
    """One-line warnings that say which part to measure and fix."""
    und = [n for n in PART_NAMES if n in set(undetermined)]
    msgs: list[str] = []
    if "L" in und and "C" in und:
        combos = "L·C, Rs·C and Resr·C" if high_impedance else "L·C and the resistances relative to √(L/C)"
        rest = [n for n in und if n not in ("L", "C")]
        tail = f" ({', '.join(rest)} also follow only once one part is known)" if rest else ""
        msgs.append(f"L, C: L and C are not separately determined: the data fix {combos}{tail} — "
                    "measure L (or C) and pass fix={'L': …} (or fix={'C': …})")
        return msgs
    for name in und:
        why = " (the load is too light to show in the response)" if name == "Rload" else ""
        msgs.append(f"{name}: not determined by these data{why} — measure it and pass fix={{'{name}': …}}")
    return msgs


def display_unit(name: str) -> str:
    """Unit of a part for people (Ω rather than the JSON contract's "ohm")."""
    u = PARAMETER_UNITS[name]
    return "Ω" if u == "ohm" else u


def solve(residual, start: dict[str, float], fix: Mapping[str, float],
          extra: Mapping[str, tuple[float, float, float]] | None = None,
          parts: tuple[str, ...] = PARAMETER_NAMES, max_nfev: int = 4000):
    """Fit the free parts (and extras); fold an undetermined ESR into Rs and refit; look for a
    second, equally good solution.

    Returns (values, ident, fixed, folded, warnings, success, message, alternatives) where
    ``alternatives`` lists other solutions whose χ² is within 4 of the best (a two-fold
    ambiguity that a local analysis cannot see, e.g. losses in Rs versus in Rload).
    """
    fixed = dict(fix)
    folded: list[str] = []
    warnings: list[str] = []
    start = dict(start)
    # with no part known the impedance scale is free: pin L at its start value so the
    # optimiser does not wander along that direction, then analyse with L free again
    scale_known = bool({"L", "C", "Rs", "Rload"} & set(fix)) or fix.get("Resr", 0.0) > 0.0
    pin = "L" if not scale_known else None
    while True:
        free = tuple(n for n in parts if n not in fixed and n != pin)
        pinned = {**fixed, pin: start[pin]} if pin else fixed
        values, names, jac, chi2, ok, msg = fit_log_parameters(residual, start, free, pinned, extra, max_nfev)
        if pin:
            names, jac = _unpinned_jacobian(residual, values, pin, names, extra)
            dof = max(residual(values).size - len(names), 1)
            r0 = residual(values)
            chi2 = float(r0 @ r0) / dof
        ident = identify(jac, names, chi2)
        only_scale = {"L", "C"} <= set(ident.undetermined)
        if "Resr" in ident.undetermined and "Resr" not in fixed and not only_scale:
            # marginalised, not silently zeroed: the best fit has the ESR at (nearly) 0, and the
            # data bound it only from above. It is held at 0 and its plausible range 0…a is
            # propagated into every other part (fit/propagate.py) as u = a/√3: the rms distance
            # from 0 of a value spread evenly over 0…a, so the budget covers the bias of
            # holding it at 0. a is the smaller of the total series loss Rs + Resr and twice
            # the data's own absolute uncertainty of Resr
            total = values["Rs"] + values["Resr"]
            upper = min(total, 2.0 * _linear_u(jac, names, "Resr", values["Resr"], chi2))
            fixed["Resr"] = 0.0
            fixed["Resr_bound"] = upper
            folded.append("Resr")
            start = dict(values)
            start["Rs"] = total
            if extra:
                extra = {n: (values[n], lo, hi) for n, (_, lo, hi) in extra.items()}
            warnings.append(f"Resr: the capacitor's ESR is not separated from Rs by these data, so Rs holds "
                            f"Rs + ESR (also given as series_loss_ohm); the ESR may be anywhere in 0…{upper:.3g} Ω "
                            "(the smaller of Rs + ESR and twice the data's own bound) and that range is included "
                            "in the other parts' uncertainties — an ESR meter on the capacitor would split them "
                            "(then fix={'Resr': …})")
            continue
        break
    alternatives: list[dict[str, float]] = []
    if {"Rs", "Rload"} <= set(free) and not {"L", "C"} <= set(ident.undetermined):
        dof = max(residual(values).size - len(names), 1)
        best_total = ident.chi2_red * dof
        for factor in (0.02, 50.0):
            st = dict(values)
            # move the losses between the load and Rs, keeping the damping term
            # a1 ≈ L/Rload + C·(Rs + Resr) unchanged
            st["Rload"] = values["Rload"] * factor
            z2 = values["L"] / values["C"]
            rs = values["Rs"] + z2 * (1.0 / values["Rload"] - 1.0 / st["Rload"])
            st["Rs"] = max(rs, 1e-3 * math.sqrt(z2))
            ex = {n: (values[n], lo, hi) for n, (_, lo, hi) in extra.items()} if extra else None
            v2, n2, j2, c2, ok2, msg2 = fit_log_parameters(residual, st, free, fixed, ex, max_nfev)
            total2 = c2 * dof
            if total2 < best_total - 1e-6 * max(best_total, 1.0):
                alternatives.append(values)
                values, ident, ok, msg, best_total = v2, identify(j2, n2, c2), ok2, msg2, total2
            elif total2 - best_total < 4.0:
                alternatives.append(v2)
        alternatives = [a for a in alternatives if _distinct(a, values, ident)]
    return values, ident, fixed, folded, warnings, ok, msg, alternatives


def _linear_u(jac: np.ndarray, names: tuple[str, ...], name: str, value: float, chi2_red: float) -> float:
    """Standard uncertainty of one part in its own unit (not log), the others profiled out.

    A part near zero is undetermined in relative (log) terms yet bounded in absolute terms:
    with j = ∂r/∂x (the log column divided by x) and the other columns O, the information
    left for x is |j − O·O⁺j|², so u(x) = √(max(χ²_red, 1)/that).
    """
    if name not in names or value <= 0:
        return math.inf
    k = names.index(name)
    col = jac[:, k] / value
    others = np.delete(jac, k, axis=1)
    if others.size:
        coef, *_ = np.linalg.lstsq(others, col, rcond=1e-10)
        col = col - others @ coef
    info = float(col @ col)
    return math.sqrt(max(chi2_red, 1.0) / info) if info > 0 else math.inf


def _unpinned_jacobian(residual, values, pin, names, extra):
    """Jacobian in (pin, names…) at the solution: log-parts, raw extras."""
    all_names = (pin,) + tuple(names)
    extra = extra or {}

    def at(z):
        v = dict(values)
        for n, x in zip(all_names, z):
            v[n] = float(x) if n in extra else float(math.exp(x))
        return residual(v)

    z0 = np.array([float(values[n]) if n in extra else math.log(values[n]) for n in all_names])
    return all_names, numeric_jacobian(at, z0)


def _distinct(a: Mapping[str, float], b: Mapping[str, float], ident: Identification) -> bool:
    """True when two solutions differ by more than 3 standard errors (or 5 %) in some part."""
    for j, n in enumerate(ident.names):
        if n not in PART_NAMES:
            continue
        sd = math.sqrt(max(float(ident.cov_log[j, j]), 0.0))
        if abs(math.log(a[n]) - math.log(b[n])) > max(3 * sd, 0.05):
            return True
    return False


def ambiguity(values: Mapping[str, float], ident: Identification,
              alternatives: list[dict[str, float]]) -> tuple[Identification, list[str]]:
    """Mark the parts that differ between equally good solutions as undetermined; warn."""
    from dataclasses import replace

    from benchfit.units import format_quantity

    if not alternatives:
        return ident, []
    bad: list[str] = []
    cov = ident.cov_log.copy()
    for j, n in enumerate(ident.names):
        if n not in PART_NAMES:
            continue
        sd = math.sqrt(max(float(ident.cov_log[j, j]), 0.0))
        spread = max(abs(math.log(a[n]) - math.log(values[n])) for a in alternatives)
        if spread > max(3 * sd, 0.05):
            bad.append(n)
        elif spread > 3 * sd:  # a small but significant difference: widen the uncertainty
            cov[j, j] += (spread / 2) ** 2
    ident = replace(ident, cov_log=cov)
    if not bad:
        return ident, []
    alt = alternatives[0]

    def describe(v):
        return ", ".join(f"{n} = {format_quantity(v[n], display_unit(n), 3)}" for n in bad)

    target = "Rload" if "Rload" in bad else bad[-1]
    msg = (f"{', '.join(bad)}: quite different values fit these data equally well ({describe(values)}; or "
           f"{describe(alt)}) — measure {target} and pass fix={{'{target}': …}}")
    und = tuple(n for n in ident.names if n in set(ident.undetermined) | set(bad))
    return replace(ident, undetermined=und), [msg]
