"""Parts the data cannot determine, marginalised over a stated plausible range.

A part that the data do not determine (or determine only through second-order effects, so
that its linearised standard error is meaningless) must not be held at one value as if it
were known: the other parts and every derived value depend on it. Instead it is treated as
a nuisance parameter with a stated prior range (rectangular) and integrated out:

* on a grid over the range(s) the other parameters are refitted with the nuisance parts held
  at each grid point (a profile); each point i gives χ²_i, estimates q_i and their fit
  covariance (from the whitened Jacobian);
* the points are weighted by the likelihood, w_i ∝ exp(−(χ²_i − χ²_min)/(2·s)), s = max(1, χ²ᵣ)
  of the best point (the Birge ratio, so an imperfect model does not make the weights overconfident),
  times the rectangular prior (uniform on the grid variable);
* every quantity is reported as the mixture mean q̄ = Σ w_i q_i with variance
  Σ w_i u_i² + Σ w_i (q_i − q̄)²: the fit's own part and the spread the nuisance causes.

This is the usual marginal posterior of a linear-Gaussian model mixed over a low-dimensional
nuisance (e.g. Gelman et al., *Bayesian Data Analysis*, ch. 3, from memory), evaluated on a grid
instead of linearised, because the ESR's information grows as ESR² (it shows mainly through the
magnitude of the zero 1 + jωC·ESR) and the linearised error is far too small wherever the
estimate lands high.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import Callable, Mapping

import numpy as np

from benchfit.fit.identify import fit_log_parameters, numeric_jacobian
from benchfit.model.filter import PART_NAMES, LowpassParts, second_order

__all__ = ["Nuisance", "Marginal", "marginalise", "figures_of", "point_parts", "load_nuisance", "scale_input",
           "FIGURE_NAMES"]

#: grid points per nuisance axis (a second pass refines an axis whose posterior is narrow); a
#: nuisance may set its own count (``Nuisance.points``, e.g. a share the data hardly see)
_POINTS = {1: 15, 2: 7, 3: 7}
#: grid passes at most (each later one refines the axes whose posterior is narrower than its steps; each
#: halves the step at least, and a posterior conditional on one share cell can be 1/10 of the first step:
#: with 3 the output-only ngspice units' Q came out up to 0.8 u off a dense grid, with 5 within 0.05 u)
_ROUNDS = 5
#: the optimiser's relative tolerances for each grid point's refit (fit_log_parameters' tol): a point's
#: weight needs its χ² (≈ n, tens) to a small fraction of 1, which 1e-10 of the cost gives a billion times
#: over; from 1e-12 it cut the one-channel fit of the sample captures hc01, hc02 (L fixed) by 12–14 % of its
#: time, every reported value and u the same to 8 digits
_POINT_TOL = 1e-10
#: the figures reported from a marginalised fit besides the parts
FIGURE_NAMES: tuple[str, ...] = ("resonant_frequency_hz", "natural_frequency_hz", "q_factor",
                                 "damped_frequency_hz", "decay_rate_per_s", "total_loss_ohm")


@dataclass(frozen=True)
class Nuisance:
    """A part integrated out over a rectangular prior on ``lo … hi`` of its grid variable.

    ``variable`` is "value" (the part in its own unit, e.g. ESR in ohm) or "conductance"
    (1/part in siemens, for a load whose plausible range includes "no load", 1/Rload = 0), or
    "share": the grid variable θ (0…1) splits the axis of the nuisance named ``share_of`` (a
    loss x in ohm) between that part, which gets (1 − θ)·x, and this one, a conductance
    θ·x·``scale`` (for a core loss, scale = C/L: its series equivalent at the L-C resonance,
    (L/C)/Rp, is the share θ·x). Two losses the data see only through one combination are
    so gridded along and across the direction the data do see, not diagonally.
    """

    name: str
    lo: float
    hi: float
    variable: str
    range_text: str
    source: str
    measure: str
    #: False: never reported as a value even where its posterior is narrow (another loss it cannot be
    #: told from is not in the model, e.g. an ESR versus a choke's core loss seen from the output alone)
    reportable: bool = True
    why: str = ""
    share_of: str = ""
    scale: float = 0.0
    #: grid points on this axis (0: the default for the number of nuisances, _POINTS); a "share"
    #: axis uses the cells' midpoints, so θ = 0 (a conductance 0, an infinite part) is never a point; its
    #: edge cells are cut toward θ = 0 and θ = 1 where the posterior lies there (_edge_refined)
    points: int = 0

    def part(self, x: float) -> float:
        if self.variable == "conductance":
            return math.inf if x <= 0 else 1.0 / x
        return float(x)

    def coordinate(self, part_value: float) -> float:
        if self.variable == "conductance":
            return 0.0 if math.isinf(part_value) else 1.0 / part_value
        return float(part_value)


def load_nuisance(values: Mapping[str, float], total: float) -> Nuisance:
    """The load as a nuisance over the data's own bound: from none (open) to all of the damping the
    response shows, ``total`` ohm of series loss (as a conductance 1/Rload, rectangular)."""
    l_over_c = float(values["L"]) / float(values["C"])
    g_max = total / l_over_c
    return Nuisance("Rload", 0.0, g_max, "conductance",
                    f"{l_over_c / total:.3g} Ω … open (1/Rload rectangular on 0…{g_max:.3g} S)",
                    "the data's own bound: the load takes anywhere from none to all of the damping "
                    "the response shows", "measuring the load resistance (then fix={'Rload': …}) "
                    "would split Rs from it")


def point_parts(nuis: tuple[Nuisance, ...], pt) -> dict[str, float]:
    """The nuisance parts' values at one grid point (see :class:`Nuisance` for "share")."""
    x = {q.name: float(v) for q, v in zip(nuis, pt)}
    out = {q.name: q.part(x[q.name]) for q in nuis if q.variable != "share"}
    for q in nuis:
        if q.variable == "share":
            loss, theta = x[q.share_of], x[q.name]
            out[q.share_of] = (1.0 - theta) * loss
            g = theta * loss * q.scale
            out[q.name] = math.inf if g <= 0 else 1.0 / g
    return out


def figures_of(v: Mapping[str, float]) -> dict[str, float]:
    """Resonance figures of a set of parts, and the total loss as a series resistance.

    ``total_loss_ohm`` = 2·L·α = L·a1/a2 (α the decay rate, a1, a2 the characteristic polynomial's
    coefficients, :func:`benchfit.model.filter.coefficients_full`) is the one series resistance
    that, with the same L, damps the resonance at the same rate as all the losses together. Without
    a core loss it is Rs + ESR + L/(C·Rload) divided by 1 + ESR/Rload (a parallel loss counts as its
    series equivalent at ω = 1/√(LC), (ωL)²/R = L/(C·R), for R ≫ ωL: common practice, no source).
    A core loss Rp across L adds its own series equivalent L/(C·Rp), but the current through Rp
    also flows through Rs, so the losses no longer add: to first order the total is
    (Rs + ESR + L/(C·Rp))/(1 + Rs/Rp) + L/(C·Rload) — about 0.3 % below the plain sum for
    Rs = 12 Ω and Rp = 2 kΩ, several standard uncertainties of an output-only fit. The decay rate
    is what the response shows, so this is what an output-only capture determines when it cannot
    split the losses (α and the natural frequency are functions of a1/a2 and a0/a2 alone).
    """
    p = LowpassParts(v["L"], v["C"], v["Rs"], v["Resr"], v["Rload"], v.get("Rp", math.inf))
    fig = dict(second_order(p))
    fig["total_loss_ohm"] = 2.0 * p.L * fig["decay_rate_per_s"]
    return fig


@dataclass(frozen=True, eq=False)
class Marginal:
    """The grid, its weights and the mixture moments of every quantity."""

    nuisances: tuple[Nuisance, ...]
    points: np.ndarray  # (n, m) grid coordinates
    weights: np.ndarray  # (n,)
    chi2: np.ndarray  # (n,) χ² of each point
    best: dict[str, float]  # values at the most likely point
    mean: dict[str, float]  # mixture mean of every part and figure
    u_fit: dict[str, float]  # √Σ w u_i²: the fit's own part (nan: not available at some points)
    u_spread: dict[str, float]  # √Σ w (q_i − q̄)²: what the nuisances add
    chi2_red: float  # of the best point
    dof: int

    def u(self, name: str) -> float:
        return math.hypot(self.u_fit.get(name, 0.0), self.u_spread.get(name, 0.0))


def _fit_point(residual, start, free, fixed, extra):
    values, names, jac, chi2_red, ok, _ = fit_log_parameters(residual, start, free, fixed, extra, max_nfev=600,
                                                                 tol=_POINT_TOL, quick=True)
    r = residual(values)
    return values, names, jac, float(r @ r), r.size


def _quantities(values: dict[str, float], names: tuple[str, ...], jac: np.ndarray, scale: float,
                keys: tuple[str, ...], more: Mapping[str, Callable[[Mapping[str, float]], float]] | None = None
                ) -> tuple[dict[str, float], dict[str, float]]:
    """Estimates and their fit standard uncertainties (delta method on the full inverse JᵀJ)."""
    info = jac.T @ jac
    try:
        cov = np.linalg.pinv(info, rcond=1e-12) * scale
    except np.linalg.LinAlgError:
        cov = np.full_like(info, np.nan)
    is_log = np.array([n in PART_NAMES for n in names])
    x0 = np.array([math.log(values[n]) if lg else float(values[n]) for n, lg in zip(names, is_log)])

    def all_of(z: np.ndarray) -> np.ndarray:
        v = dict(values)
        for n, lg, x in zip(names, is_log, z):
            v[n] = float(math.exp(x)) if lg else float(x)
        fig = figures_of(v)
        fig.update({k: f(v) for k, f in (more or {}).items()})
        return np.array([v[k] if k in v and k not in fig else fig[k] for k in keys])

    base = all_of(x0)
    # a held infinite part (no load) does not move with the fitted ones: numeric_jacobian gives it 0. So does
    # every extra that is not itself a key (the phase, the duty) when no further figure reads it: the parts
    # and figures depend on the parts alone, so those columns are exactly 0 and are not differenced
    moving = np.array([lg or n in keys or bool(more) for n, lg in zip(names, is_log)], dtype=bool)
    grad = np.zeros((len(keys), x0.size))
    if np.any(moving):
        def moved(zm: np.ndarray) -> np.ndarray:
            z = x0.copy()
            z[moving] = zm
            return all_of(z)

        grad[:, moving] = numeric_jacobian(moved, x0[moving], step=1e-6)
    var = np.einsum("ij,jk,ik->i", grad, cov, grad) if x0.size else np.zeros(len(keys))
    return ({k: float(b) for k, b in zip(keys, base)},
            {k: float(math.sqrt(max(s, 0.0))) if math.isfinite(s) else math.nan for k, s in zip(keys, var)})


def _count(q: Nuisance, n_nuis: int) -> int:
    return q.points or _POINTS[n_nuis]


def _step(q: Nuisance, n_nuis: int, lo: float, hi: float) -> float:
    n = _count(q, n_nuis)
    return (hi - lo) / (n if q.variable == "share" else n - 1)


def _axis(q: Nuisance, n_nuis: int, lo: float, hi: float) -> np.ndarray:
    n = _count(q, n_nuis)
    if q.variable == "share":  # the cells' midpoints (see Nuisance.points)
        return lo + (np.arange(n) + 0.5) * (hi - lo) / n
    return np.linspace(lo, hi, n)


def _grid(nuis: tuple[Nuisance, ...], spans: list[tuple[float, float]]) -> np.ndarray:
    axes = [_axis(q, len(nuis), lo, hi) for q, (lo, hi) in zip(nuis, spans)]
    # serpentine order (the last axis runs back and forth, then the one before it, ...): each fit
    # starts next to the previous one
    pts = [np.zeros(0)]
    for ax in axes:
        nxt = []
        for i, p in enumerate(pts):
            for x in (ax if i % 2 == 0 else ax[::-1]):
                nxt.append(np.append(p, x))
        pts = nxt
    return np.array(pts)


def marginalise(residual: Callable[[dict[str, float]], np.ndarray], values: Mapping[str, float],
                fixed: Mapping[str, float], nuisances: tuple[Nuisance, ...],
                extra: Mapping[str, tuple[float, float, float]] | None, part_names: tuple[str, ...],
                more: Mapping[str, Callable[[Mapping[str, float]], float]] | None = None,
                start_for: Callable[[Mapping[str, float]], Mapping[str, float]] | None = None) -> Marginal:
    """Integrate the ``nuisances`` out (module docstring); the other parts of ``part_names`` are fitted.

    ``more`` are further figures (name → function of the fitted values) to mix like the others.
    ``start_for`` (optional) maps a grid point's held parts to start values of some free parts, for a
    valley the previous point's solution does not lead into (it overrides those parts' start).
    """
    nuis = tuple(nuisances)
    fixed = {k: v for k, v in fixed.items() if k not in {n.name for n in nuis}}
    free = tuple(n for n in part_names if n not in fixed and n not in {q.name for q in nuis})
    keys = tuple(free) + tuple(q.name for q in nuis) + FIGURE_NAMES + tuple(more or {})
    # a share axis (how one loss splits between two parts) bends the posterior of the loss axis: at each
    # split the data favour another loss, so one box refined across all splits missed the ridge (on the
    # core-loss output-only ngspice unit Q came out 0.8 u off with a u 31 % small against a dense grid,
    # scripts/coverage_units.py --converge). Each of its cells is refined on its own, then all are mixed.
    cells = _share_cells(nuis)
    runs = [_refined(residual, values, fixed, cell, free, keys, extra, more, start_for) for cell in cells]
    cells, runs = _edge_refined(residual, values, fixed, cells, runs, free, keys, extra, more, start_for)
    rows = [r for run, _ in runs for r in run]
    chi = np.array([r[1] for r in rows])
    ib = int(np.argmin(chi))
    w = _weights(rows)
    # each run's unresolved axes (sd below half its step), weighted by the run's posterior mass
    ends = np.cumsum([0] + [len(run) for run, _ in runs])
    resolution = [(float(w[a:b].sum()), run, _unresolved_axes(run, cell, sp), int(np.argmin([r[1] for r in run])))
                  for a, b, (run, sp), cell in zip(ends[:-1], ends[1:], runs, cells)]
    dof = max(int(rows[ib][5]), 1)
    chi2_red = float(chi[ib] / dof)
    s = max(1.0, chi2_red)
    mean: dict[str, float] = {}
    u_fit: dict[str, float] = {}
    u_spread: dict[str, float] = {}
    for k in keys:
        q = np.array([r[3][k] for r in rows])
        uq = np.array([r[4][k] for r in rows])
        if not np.all(np.isfinite(q)):  # a held part that is infinite at some points: apply uses its coordinate
            mean[k], u_fit[k], u_spread[k] = math.nan, math.nan, math.nan
            continue
        m = float(w @ q)
        mean[k] = m
        u_spread[k] = math.sqrt(max(float(w @ (q - m) ** 2), 0.0) + sum(m * _resolution_var(run, axes, b, k)
                                                                   for m, run, axes, b in resolution))
        u_fit[k] = math.sqrt(float(w @ np.nan_to_num(uq, nan=0.0) ** 2)) if np.all(np.isfinite(uq)) else math.nan
    # the fit covariance above is unscaled (noise known from the phasors): Birge-scale it here
    u_fit = {k: v * math.sqrt(s) for k, v in u_fit.items()}
    return Marginal(nuis, np.array([r[0] for r in rows]), w, chi, dict(rows[ib][2]), mean, u_fit, u_spread,
                    chi2_red, dof)


def _share_cells(nuis: tuple[Nuisance, ...]) -> list[tuple[Nuisance, ...]]:
    """The nuisances with the first share axis cut into its cells (one point each), or as they are."""
    for a, q in enumerate(nuis):
        n = _count(q, len(nuis))
        if q.variable == "share" and n > 1:
            width = (q.hi - q.lo) / n
            return [nuis[:a] + (replace(q, lo=q.lo + j * width, hi=q.lo + (j + 1) * width, points=1),) + nuis[a + 1:]
                    for j in range(n)]
    return [nuis]


#: the share axis's two edge cells are cut in thirds toward θ = 0 and θ = 1 (_edge_refined) at most this often
#: (an edge cell of 1/3 ends 1/3⁷ ≈ 5e-4 wide), while the edge is more likely than the cell's point by more
#: than _EDGE_TOL in ln p: a density falling by 0.5 in ln p from a cell's middle to its edge (exponentially)
#: leaves the midpoint rule (x/sinh x, x = 0.5) 4 % low on that cell's mass
_EDGE_LEVELS = 6
_EDGE_TOL = 0.5
#: an edge cell holding more of the posterior than this is cut again: its one point does not show how the
#: other quantities move across it (on the ESR/core-loss unit below, L moved by 3 of its u between θ = 0 and
#: the point 1/54 of the last cell, with the density flat within 0.35 in ln p), so at least two cells share it
_EDGE_MASS = 0.5
#: an edge (or a third) whose profile lies this far below the best point in ln p (1/1000) carries no mass
_EDGE_NEGLIGIBLE = math.log(1e3)


def _share_axis(nuis: tuple[Nuisance, ...]) -> int | None:
    return next((a for a, q in enumerate(nuis) if q.variable == "share"), None)


def _profile_chi2(residual, values, fixed, cell: tuple[Nuisance, ...], a: int, theta: float, best: tuple,
                  free, extra) -> float:
    """χ² of the profile at the share θ = ``theta``: the loss it splits and the cell's other nuisances
    fitted, not gridded (θ held).

    Started from the cell's best point, its shared loss at no less than 5 % of its range (the loss the edge
    hands to one part alone may be far above the best point's); a nuisance at 0 or infinity there (no load)
    stays held. inf where the fit fails.
    """
    share = cell[a]
    b = next(i for i, q in enumerate(cell) if q.name == share.share_of)
    x_name = cell[b].name
    held = dict(fixed)
    start = {k: float(best[2][k]) for k in free}
    start[x_name] = max(float(best[0][b]), cell[b].lo + 0.05 * (cell[b].hi - cell[b].lo))
    loose = [x_name]
    pt = np.array(best[0], dtype=float)
    pt[a] = theta
    for name, v in point_parts(cell, pt).items():
        if name in (x_name, share.name):
            continue
        if v <= 0 or math.isinf(v):
            held[name] = v
        else:
            start[name] = v
            loose.append(name)

    def split(v: dict[str, float]) -> np.ndarray:  # the fitted loss x shared as the grid shares it
        v = dict(v)
        v.update(point_parts((cell[b], share), (v[x_name], theta)))
        return residual(v)

    try:
        _, _, _, chi2, _ = _fit_point(split, {**values, **start}, tuple(free) + tuple(loose), held,
                                      {k: (best[2][k], lo, hi) for k, (_, lo, hi) in (extra or {}).items()})
    except Exception:  # no profile: an edge cell stays as it is
        return math.inf
    return chi2 if math.isfinite(chi2) else math.inf


def _mass_share(rows, others) -> float:
    """The posterior mass of ``rows`` among them and the row lists ``others`` (:func:`_weights`)."""
    w = _weights(list(rows) + [r for rs in others for r in rs])
    return float(w[:len(rows)].sum())


def _edge_refined(residual, values, fixed, cells, runs, free, keys, extra, more, start_for):
    """The share axis's edge cells cut toward θ = 0 and θ = 1 where the posterior's mass lies at the edge.

    The share cells' midpoints never reach the axis's ends ("no core loss", "no ESR"). Where the data see a
    core loss the posterior in θ can sit within 1/100 of the end (the ESR/core-loss unit of
    tests/fit/test_onechannel_basins.py: every point with an ESR carried a core loss the data reject, so the
    posterior sat at ESR 0 and Rs took the ESR, z ≈ 13). Each cell's mass is the composite midpoint rule
    (its width × the x-integral at its point, the rows' prior mass r[6]); an edge cell is cut in thirds,
    which keeps its point as the middle third's (the nested tripling of the midpoint rule, Press et al.,
    *Numerical Recipes*, §4.4 "midpnt", from memory): its rows are reused with a third of their mass, the
    outer third gets a run of its own and the third at the edge is refined again, until the edge's profile
    χ² (:func:`_profile_chi2`, its density up to the x-width, a Laplace approximation) is no more likely than
    the edge cell's point by _EDGE_TOL, or is negligible. The cells stay a partition of 0…1, so the weights
    stay a midpoint quadrature of the posterior, only finer where it changes fast. The outer third is left
    out (no mass) when the middle third's point is already negligible: the density falls away from the edge
    there (that is why the cell is cut), so the outer third holds less still.
    """
    a = _share_axis(cells[0])
    if a is None or len(cells) < 2:
        return cells, runs
    cells, runs = list(cells), list(runs)
    for side in (0, len(cells) - 1):
        cell, (rows, spans) = cells[side], runs[side]
        if not rows:
            continue
        lo, hi = cell[a].lo, cell[a].hi
        edge = lo if side == 0 else hi
        best = min(rows, key=lambda r: r[1])
        chi_edge = _profile_chi2(residual, values, fixed, cell, a, edge, best, free, extra)
        done: list = []
        for _ in range(_EDGE_LEVELS):
            chi_all = min([chi_edge] + [r[1] for _, (rs, _) in zip(cells, runs) for r in rs]
                          + [r[1] for _, (rs, _) in done for r in rs])
            # the cell's point's profile likewise fitted: its grid's best point lies above it by the grid's
            # own coarseness (Δχ² 1.6 on the bench's one-channel capture, where the two agree to 0.01)
            chi_mid = min([r[1] for r in rows] + [_profile_chi2(residual, values, fixed, cell, a, 0.5 * (lo + hi),
                                                                best, free, extra)])
            s = 2.0 * max(1.0, chi_all / max(best[5], 1))
            share = _mass_share(rows, [rs for i, (rs, _) in enumerate(runs) if i != side] + [rs for _, (rs, _) in done])
            flat = (chi_mid - chi_edge) / s <= _EDGE_TOL and share <= _EDGE_MASS
            if flat or (chi_edge - chi_all) / s > _EDGE_NEGLIGIBLE:
                break
            third = (hi - lo) / 3.0
            near, far = ((lo, lo + third), (hi - third, hi)) if side == 0 else ((hi - third, hi), (lo, lo + third))
            middle = replace(cell[a], lo=lo + third, hi=hi - third)
            done.append((cell[:a] + (middle,) + cell[a + 1:],
                         ([r[:6] + (r[6] / 3.0,) for r in rows], spans[:a] + [(middle.lo, middle.hi)] + spans[a + 1:])))
            if (chi_mid - chi_all) / s <= _EDGE_NEGLIGIBLE:
                out = cell[:a] + (replace(cell[a], lo=far[0], hi=far[1]),) + cell[a + 1:]
                done.append((out, _refined(residual, values, fixed, out, free, keys, extra, more, start_for)))
            cell = cell[:a] + (replace(cell[a], lo=near[0], hi=near[1]),) + cell[a + 1:]
            lo, hi = near
            rows, spans = _refined(residual, values, fixed, cell, free, keys, extra, more, start_for)
            if not rows:
                break
            best = min(rows, key=lambda r: r[1])
        cells[side], runs[side] = cell, (rows, spans)
        cells += [c for c, _ in done]
        runs += [r for _, r in done]
    return cells, runs


def _refined(residual, values, fixed, nuis: tuple[Nuisance, ...], free, keys, extra, more, start_for):
    """The grid rows over the nuisances' ranges, refined where the posterior is narrower than the grid."""
    held_names = {q.name for q in nuis}
    spans = [(q.lo, q.hi) for q in nuis]
    n_nuis = len(nuis)
    rows: list[tuple] = []  # (point, χ², values, estimates, fit u, dof, prior mass of its cell)
    start = {k: (v if v > 0 else 1e-3) for k, v in values.items() if k in free}
    ex = dict(extra or {})
    for _ in range(_ROUNDS):
        cell = float(np.prod([_step(q, n_nuis, lo, hi) for q, (lo, hi) in zip(nuis, spans)]))
        prev, prev_ex = dict(start), dict(ex)
        fresh = []
        for pt in _grid(nuis, spans):
            fx = dict(fixed)
            fx.update(point_parts(nuis, pt))
            st = {**values, **prev}
            if start_for is not None:
                st.update({k: x for k, x in start_for(fx).items() if k in free and math.isfinite(x) and x > 0})
            try:
                v, names, jac, chi2, n_res = _fit_point(residual, st, free, fx, prev_ex)
            except Exception:  # a point where the fit fails carries no weight
                continue
            if not math.isfinite(chi2):
                continue
            # the next start: this point's values, but never far below the first fit's (a part driven
            # to its lower bound here would otherwise stay stuck there, its log bounds being relative)
            prev = {k: max(v[k], 1e-2 * float(values[k])) for k in free}
            prev_ex = {k: (v[k], lo, hi) for k, (_, lo, hi) in ex.items()}
            est, uest = _quantities(v, names, jac, 1.0, keys, more)
            # a nuisance held at conductance 0 is an infinite part (no load, no core loss): a valid point,
            # whose own value is never averaged (apply reads the grid coordinates for those)
            if not all(math.isfinite(x) for k, x in est.items() if k not in held_names):
                continue
            fresh.append((pt, chi2, v, est, uest, n_res - len(names), cell))
        # the new points replace the earlier (coarser) ones inside their spans
        rows = [r for r in rows if not all(lo <= x <= hi for x, (lo, hi) in zip(r[0], spans))] + fresh
        if not rows:
            raise ValueError("no grid point could be fitted")
        w = _weights(rows)
        pts = np.array([r[0] for r in rows])
        best: tuple = rows[int(np.argmax(w))]
        new_spans, refine = [], False
        for a, (lo, hi) in enumerate(spans):
            m = float(w @ pts[:, a])
            sd = math.sqrt(max(float(w @ (pts[:, a] - m) ** 2), 0.0))
            step = _step(nuis[a], n_nuis, lo, hi)
            if _count(nuis[a], n_nuis) > 1 and sd < 2 * step and step > 1e-9 * max(abs(m), 1e-300):  # narrower than the grid: refine
                refine = True
                half = max(5 * sd, 1.5 * step)
                new_spans.append((max(nuis[a].lo, m - half), min(nuis[a].hi, m + half)))
            else:
                new_spans.append((lo, hi))
        if not refine:
            break
        spans = new_spans
        start = {k: best[2][k] for k in free}
        ex = {k: (best[2][k], lo, hi) for k, (_, lo, hi) in ex.items()}
    return rows, spans


def _unresolved_axes(rows, nuis: tuple[Nuisance, ...], spans: list[tuple[float, float]]) -> list[int]:
    """Axes whose posterior still sits on about one grid point (sd < half a step) after every round."""
    w = _weights(rows)
    pts = np.array([r[0] for r in rows])
    out = []
    for a, (lo, hi) in enumerate(spans):
        m = float(w @ pts[:, a])
        sd = math.sqrt(max(float(w @ (pts[:, a] - m) ** 2), 0.0))
        if _count(nuis[a], len(nuis)) > 1 and sd < 0.5 * _step(nuis[a], len(nuis), lo, hi):
            out.append(a)
    return out


def _resolution_var(rows, axes: list[int], ib: int, key: str) -> float:
    """Variance the grid cannot resolve along ``axes`` where the posterior sits on one point: the
    quantity is taken as anywhere between its values at the best point's neighbours on that axis
    (rectangular, half-width half their difference; GUM 4.3.7). Before this, a part the data pin
    far more tightly than the grid came out ± 0 (a load of 10 kΩ ± 0.0 Ω)."""
    var = 0.0
    best = rows[ib]
    for a in axes:
        others = [i for i in range(len(best[0])) if i != a]
        line = [r for r in rows if all(math.isclose(float(r[0][i]), float(best[0][i]), rel_tol=1e-9, abs_tol=1e-300)
                                       for i in others)]
        x0 = float(best[0][a])
        lower = [r for r in line if float(r[0][a]) < x0]
        upper = [r for r in line if float(r[0][a]) > x0]
        near = [max(lower, key=lambda r: float(r[0][a]))] if lower else []
        near += [min(upper, key=lambda r: float(r[0][a]))] if upper else []
        vals = [float(r[3][key]) for r in near if math.isfinite(float(r[3][key]))]
        if vals:
            half = 0.5 * (max(vals + [float(best[3][key])]) - min(vals + [float(best[3][key])]))
            var += half ** 2 / 3.0
    return var


def _weights(rows) -> np.ndarray:
    """Posterior weights: likelihood (Birge-scaled Δχ², module docstring) times the prior mass of each cell."""
    chi = np.array([r[1] for r in rows])
    dens = np.array([r[6] for r in rows])
    b = int(np.argmin(chi))
    s = max(1.0, float(chi[b]) / max(rows[b][5], 1))
    w = dens * np.exp(-(chi - chi[b]) / (2 * s))
    return w / w.sum()


#: a part (or figure) whose marginal standard uncertainty exceeds this fraction of its value is not
#: determined: the same 50 % limit as the identifiability analysis (fit.identify._SIGMA_LIMIT)
_REL_LIMIT = 0.5
#: a nuisance counts as pinned by the data when its posterior sd is below this fraction of its prior sd
_PINNED = 0.5


#: the power of the impedance scale a in each unit when every impedance is multiplied by a at the same
#: frequencies: ohm, henry (Ω·s) as a, farad (s/Ω) and siemens as 1/a; frequencies, rates and ratios not
_IMPEDANCE_POWER = {"ohm": 1, "H": 1, "F": -1, "S": -1, "Hz": 0, "1/s": 0, "1": 0}


def scale_input(result) -> str | None:
    """The part that alone sets the fit's impedance scale: the only part held fixed (None: none or several).

    A voltage ratio of impedances (the filter's H, and so both captures' phasors up to the drive's level) is
    unchanged when every impedance is multiplied by the same factor a (L → a·L, C → C/a, each R → a·R;
    impedance scaling, common practice, no source), and every nuisance range here is a share of the fit's
    own total loss or of its L/C (:func:`load_nuisance`, fit.onechannel), which scale alike. So with one part
    held, the marginal of each quantity y is exactly y(a) = a^p·y with p the power of its unit
    (``_IMPEDANCE_POWER``): Q, the frequencies and the decay rate do not depend on it at all.
    """
    held = [n for n, d in result.inputs.items() if d.get("role", "fixed") == "fixed" and n in PART_NAMES]
    return held[0] if len(held) == 1 else None


def _scaled_row(c, scale: str | None, value: float, unit: str, marg: Marginal):
    """A held scale part's row with its exact sensitivity p·y/(p_φ·φ) (:func:`scale_input`).

    The base fit's linearised sensitivity holds the nuisances at their best point in ohms, so it moves the
    shape when the scale part moves: on the core-loss output-only unit it gave Q a fixed-L row of 0.0060
    (∂Q/∂L = −0.35 /H) against a marginal Q that changed by 3e-9 with L 1 % higher (scripts/coverage_units.py).
    """
    from benchfit.fit.result import PARAMETER_UNITS

    if scale is None or not (c.name.startswith(f"fixed {scale} ") and c.input_unit == PARAMETER_UNITS[scale]):
        return c
    p, p_in, phi = _IMPEDANCE_POWER.get(unit), _IMPEDANCE_POWER.get(c.input_unit), marg.best.get(scale)
    if p is None or not p_in or phi is None or not math.isfinite(phi) or phi <= 0:
        return c
    return replace(c, sensitivity=p / p_in * float(value) / float(phi))


def _budget(name: str, value: float, unit: str, marg: Marginal, base_budget, label: str,
            scale: str | None = None):
    from benchfit.fit.propagate import fit_row
    from benchfit.uncertainty import Budget, Contribution

    rows = [fit_row(marg.u_fit[name], unit, marg.chi2_red, marg.dof),
            Contribution(label, "B", "posterior over the stated range", marg.u_spread[name], unit, 1.0, math.inf,
                         "grid marginalisation over the stated prior range (fit.marginal)")]
    cond: tuple[str, ...] = ()
    if base_budget is not None:
        # the inputs the fit held (fixed parts' tolerances, a channel gain ratio) keep their rows; the fit's
        # own row and any linearised prior are replaced by the two rows above
        rows += [_scaled_row(c, scale, value, unit, marg) for c in base_budget.contributions
                 if not (c.name.startswith("noise") or c.name.startswith("undetermined"))]
        cond = base_budget.conditional_on
    return Budget(name, float(value), unit, tuple(rows), conditional_on=cond)


def _total_loss_inputs(marg: Marginal, decay):
    """The held inputs' rows of total_loss_ohm = 2·L·α, from those of the decay rate α.

    Each input x moves the total by 2L·∂α/∂x, and a fixed L also directly by 2α: the output's shape
    gives α, but turning it into ohms takes the impedance scale, so L's tolerance carries over in full.
    """
    from dataclasses import replace

    if decay is None or decay.budget is None:
        return None
    big_l, alpha = marg.mean["L"] if "L" in marg.mean else marg.best["L"], decay.budget.value
    rows = []
    for c in decay.budget.contributions:
        s = 2.0 * big_l * c.sensitivity
        if c.name.startswith("fixed L ") and c.input_unit == "H":
            s += 2.0 * alpha
        rows.append(replace(c, sensitivity=s))
    return replace(decay.budget, quantity="total_loss_ohm", value=2.0 * big_l * alpha, unit="ohm",
                   contributions=tuple(rows))


def apply(result, marg: Marginal):
    """The FitResult with every part and figure replaced by its marginal value and uncertainty."""
    from dataclasses import replace

    from benchfit.fit.identify import display_unit
    from benchfit.fit.result import DERIVED_UNITS, PARAMETER_UNITS, DerivedValue, FitParameter
    from benchfit.units import format_quantity

    handled = {q.name for q in marg.nuisances} | set(marg.mean)
    scale = scale_input(result)
    names = ", ".join(q.name for q in marg.nuisances)
    label = f"undetermined {names}, marginalised over the stated range (spread over the posterior)"
    params = dict(result.parameters)
    # the base fit's own "not determined" lines are replaced by the marginal's
    warn = [w for w in result.warnings
            if not (w.split(":")[0].strip() in handled and "not determined by these data" in w)]
    notes = []
    for q in marg.nuisances:
        m, sd = marg.mean[q.name], marg.u_spread[q.name]
        coord = np.array([float(x) for x in marg.points[:, marg.nuisances.index(q)]])
        cm = float(marg.weights @ coord)
        csd = math.sqrt(max(float(marg.weights @ (coord - cm) ** 2), 0.0))
        prior_sd = (q.hi - q.lo) / math.sqrt(12.0)
        unit = PARAMETER_UNITS[q.name]
        pinned = csd < _PINNED * prior_sd and (q.variable != "conductance" or cm > 2 * csd)
        if q.variable == "conductance":
            value = q.part(cm)
            u = csd / cm ** 2 if cm > 0 else math.inf
            floor = marg.u_spread.get(q.name, math.nan)  # with the grid's resolution (_resolution_var)
            u = max(u, floor) if math.isfinite(floor) else u
        elif q.variable == "share":  # the part at the posterior mean of its conductance
            gq = np.array([1.0 / point_parts(marg.nuisances, p)[q.name] for p in marg.points])
            gm = float(marg.weights @ gq)
            value = 1.0 / gm if gm > 1e-300 else math.inf
            sdg = math.sqrt(max(float(marg.weights @ (gq - gm) ** 2), 0.0))
            u = value * (sdg / gm) if math.isfinite(value) else math.inf
            pinned = False  # θ says how the loss is split, not how well the part is known
        else:
            value, u = m, sd
        from benchfit.uncertainty import Budget, Contribution

        b = Budget(q.name, float(value) if math.isfinite(value) else 0.0, unit,
                   (Contribution(f"posterior of {q.name} over {q.range_text}", "B", "posterior over the stated range",
                                 float(u) if math.isfinite(u) else 0.0, unit, 1.0, math.inf, q.source),))
        if q.reportable and pinned and math.isfinite(u) and u < _REL_LIMIT * abs(value):
            params[q.name] = FitParameter(float(value), float(u), False, unit, float(u), b)
        else:
            params[q.name] = FitParameter(float(value) if math.isfinite(value) else None, None, False, unit, None, b)
            notes.append(q)
    undetermined = []
    for name, p in list(params.items()):
        if p.fixed or name in {q.name for q in marg.nuisances} or name not in marg.mean:
            continue
        value = marg.mean[name]
        b = _budget(name, value, p.unit, marg, p.budget, label, scale)
        if not math.isfinite(b.u) or b.u > _REL_LIMIT * abs(value):
            params[name] = FitParameter(float(value), None, False, p.unit, None, b)
            undetermined.append(name)
        else:
            params[name] = FitParameter(float(value), b.u, False, p.unit, marg.u_fit[name], b, b.conditional_on)
    derived = dict(result.derived)
    for name in FIGURE_NAMES:
        value = marg.mean[name]
        base = derived.get(name)
        base_budget = None if base is None else base.budget
        if name == "total_loss_ohm" and base_budget is None:
            base_budget = _total_loss_inputs(marg, derived.get("decay_rate_per_s"))
        b = _budget(name, value, DERIVED_UNITS[name], marg, base_budget, label, scale)
        if not math.isfinite(b.u) or b.u > _REL_LIMIT * abs(value):
            derived[name] = DerivedValue(float(value), None, None, b)
        else:
            derived[name] = DerivedValue(float(value), b.u, marg.u_fit[name], b, b.conditional_on)
    derived.pop("series_loss_ohm", None)
    for q in notes:
        why = q.why or "not determined by these data"
        warn.append(f"{q.name}: {why}; it is marginalised over {q.range_text} ({q.source}) "
                    f"into the other values' uncertainties — {q.measure}")
    if undetermined:
        tl = derived["total_loss_ohm"]
        shown = format_quantity(tl.value, display_unit("Rs"), 3) if tl.value is not None else "—"
        terms = ("2·L·α, the series resistance of the same damping: Rs + ESR + L/(C·Rload)"
                 + (" with the core loss's L/(C·Rp)" if any(q.name == "Rp" for q in marg.nuisances) else ""))
        warn.append(f"{', '.join(undetermined)}: not separated from {', '.join(q.name for q in notes) or 'the others'} "
                    f"by these data; the total loss they make together is determined: total_loss_ohm = {shown} "
                    f"({terms}) — {notes[0].measure if notes else 'measure one of them'}")
    info = {q.name: {"range": [q.lo, q.hi], "variable": q.variable, "range_text": q.range_text, "source": q.source,
                     "points": int(marg.points.shape[0])} for q in marg.nuisances}
    return replace(result, parameters=params, derived=derived, warnings=tuple(warn),
                   adequacy={**result.adequacy, "marginalised": info})
