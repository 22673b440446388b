"""One frequency (or period) from the pieces of a long record: chained points and slopes (pure).

A record measured in consecutive blocks gives, for every block *i*, two statistically
independent readings of the same straight line:

* a **point** ``(x_i, y_i ± u_i)`` — the fundamental's phase (in cycles) at the block's
  midpoint (x = time, y = cycles, the slope is the frequency), or the time of the centre of
  the block's edge line (x = edge count, y = time, the slope is the period);
* a **slope** ``s_i ± u_s,i`` — the block's own frequency (or period) from its fit.

With time centred on the block the two are uncorrelated to first order (for the phase: the
IEEE 1057 fit with centred time; for the edges: :func:`benchfit.measurement.pulse.edge_line`
chooses the centre so that they are). The points are only known modulo one cycle; they are
**chained** by predicting the whole number of cycles between neighbours from the slopes, and
a prediction more than a quarter cycle off starts a new segment (a gap or a step).

The weighted least-squares line through all points of all segments (one intercept per
segment, one common slope) together with the slopes as direct observations of the slope
carries all the information of the whole record: for M blocks of N samples of a tone in white
noise the points give ``M(M² − 1)·N³`` and the slopes ``M·N³`` of the Fisher information
(in units of the per-sample information), which add to ``M³N³``, the whole-record Cramér–Rao
bound's ``N_total(N_total² − 1)`` to leading order (Rife & Boorstyn 1974 for the bound; the
sum is exact algebra of the straight-line fit, common practice, no source). So the combined
u keeps the accuracy of one fit of the whole record.

When χ² of the fit exceeds its 99th percentile the points scatter more than their stated
u (frequency wander, correlated noise): u is widened by the Birge ratio √(χ²/ν)
(common practice in combining measurements, e.g. CODATA adjustments; no single source).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = ["ChainedLine", "chain_points", "fit_chained_line", "birge_factor"]

#: a chaining prediction more than this many cycles off starts a new segment
_CHAIN_LIMIT_CYCLES = 0.25


@dataclass(frozen=True)
class ChainedLine:
    """The common slope of the chained points (and the blocks' own slopes).

    Attributes
    ----------
    slope, slope_u : float
        The slope (frequency in Hz, or period in s) and its standard uncertainty (k = 1),
        already widened by ``birge`` when that is above 1.
    slope_u_stated : float
        The uncertainty from the stated u of the inputs alone.
    chi2 : float
        χ² of the fit; ``dof`` its degrees of freedom.
    birge : float
        Factor applied to the uncertainty (1 unless χ² exceeded its 99th percentile).
    n_segments : int
        Chain segments (1 = unbroken).
    """

    slope: float
    slope_u: float
    slope_u_stated: float
    chi2: float
    dof: int
    birge: float
    n_segments: int


def chain_points(x: np.ndarray, y_frac: np.ndarray, offset: np.ndarray, slopes: np.ndarray,
                 slopes_u: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Unwrap points known modulo one cycle into chained values, and their segment numbers.

    Parameters
    ----------
    x : ndarray
        Abscissa of each point (ascending).
    y_frac : ndarray
        Ordinate of each point known only up to a whole number of cycles:
        ``y_true = y_frac + offset·n`` for an unknown integer n (for phases in cycles
        ``offset = 1`` on the ordinate; for edge times ``offset = slope``, one period).
    offset : ndarray
        Size of one cycle on the ordinate, per point.
    slopes, slopes_u : ndarray
        Each point's own slope and its u, used to predict the next point.

    Returns
    -------
    (y, segment) : chained ordinates and integer segment numbers (0, 1, …).
    """
    y = np.array(y_frac, dtype=np.float64)
    seg = np.zeros(y.size, dtype=np.int64)
    for i in range(1, y.size):
        dx = x[i] - x[i - 1]
        slope = 0.5 * (slopes[i] + slopes[i - 1])
        predicted = y[i - 1] + slope * dx
        turns = round((predicted - y[i]) / offset[i])
        y[i] = y[i] + turns * offset[i]
        # the prediction's own spread (the slopes' u over dx) must be well inside a quarter cycle
        spread = math.hypot(slopes_u[i], slopes_u[i - 1]) * abs(dx) / offset[i]
        if abs(y[i] - predicted) / offset[i] > _CHAIN_LIMIT_CYCLES or spread > 0.5 * _CHAIN_LIMIT_CYCLES:
            y[i] = y_frac[i]
            seg[i] = seg[i - 1] + 1
        else:
            seg[i] = seg[i - 1]
    return y, seg


def birge_factor(chi2: float, dof: int) -> float:
    """√(χ²/ν) when χ² exceeds the 99th percentile of the χ²(ν) distribution, else 1."""
    if dof < 1 or not math.isfinite(chi2):
        return 1.0
    from scipy.special import chdtri  # inverse survival function of χ²: chdtri(ν, 0.01) = 99th percentile

    if chi2 > float(chdtri(dof, 0.01)):
        return math.sqrt(chi2 / dof)
    return 1.0


def fit_chained_line(x: np.ndarray, y: np.ndarray, y_u: np.ndarray, segment: np.ndarray,
                     slopes: np.ndarray, slopes_u: np.ndarray) -> ChainedLine:
    """Weighted least squares: ``y_i = c_seg(i) + s·x_i`` (weights 1/u²) and ``slopes_i = s``.

    Points or slopes with a non-finite or negative u are left out; a u of exactly 0 (a block
    without noise, e.g. a synthetic file) is taken as the rounding floor of the value, so such
    points weigh equally and most.
    """
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    eps = np.finfo(np.float64).eps
    y_u = np.asarray(y_u, dtype=np.float64)
    slopes = np.asarray(slopes, dtype=np.float64)
    slopes_u = np.asarray(slopes_u, dtype=np.float64)
    y_u = np.where(y_u == 0, eps * np.maximum(np.abs(y), 1.0), y_u)
    slopes_u = np.where(slopes_u == 0, eps * np.maximum(np.abs(slopes), 1.0), slopes_u)
    segs = np.unique(segment)
    n_seg = segs.size
    index = {int(s): j for j, s in enumerate(segs)}
    ok_p = np.isfinite(y_u) & (y_u > 0)
    ok_s = np.isfinite(slopes_u) & (slopes_u > 0)
    rows_p = int(np.count_nonzero(ok_p))
    rows_s = int(np.count_nonzero(ok_s))
    a = np.zeros((rows_p + rows_s, 1 + n_seg))
    b = np.zeros(rows_p + rows_s)
    w = np.zeros(rows_p + rows_s)
    # centre x within the fit for conditioning (a shift only moves the intercepts)
    x0 = float(np.mean(x[ok_p])) if rows_p else 0.0
    r = 0
    for i in np.flatnonzero(ok_p):
        a[r, 0] = x[i] - x0
        a[r, 1 + index[int(segment[i])]] = 1.0
        b[r], w[r] = y[i], 1.0 / y_u[i] ** 2
        r += 1
    for i in np.flatnonzero(ok_s):
        a[r, 0] = 1.0
        b[r], w[r] = slopes[i], 1.0 / slopes_u[i] ** 2
        r += 1
    # a segment with no point has no intercept to fit: drop its column
    used = np.concatenate(([True], np.any(a[:, 1:] != 0, axis=0)))
    a = a[:, used]
    sw = np.sqrt(w)
    aw = a * sw[:, None]
    bw = b * sw
    # solve by QR-free normal equations with column scaling (a few hundred rows at most per hour)
    g = aw.T @ aw
    scale = np.sqrt(np.clip(np.diag(g), 1e-300, None))
    ginv = np.linalg.pinv(g / np.outer(scale, scale)) / np.outer(scale, scale)
    beta = ginv @ (aw.T @ bw)
    resid = bw - aw @ beta
    chi2 = float(resid @ resid)
    dof = a.shape[0] - a.shape[1]
    u_stated = math.sqrt(max(float(ginv[0, 0]), 0.0))
    k = birge_factor(chi2, dof)
    return ChainedLine(slope=float(beta[0]), slope_u=u_stated * k, slope_u_stated=u_stated, chi2=chi2,
                       dof=int(dof), birge=k, n_segments=int(n_seg))
