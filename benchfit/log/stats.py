"""Batch statistics of one logged quantity: n, mean, standard deviation, Cp and Cpk.

Process capability as defined in the NIST/SEMATECH e-Handbook of Statistical Methods,
section 6.1.6 "What is Process Capability?":

    Cp  = (USL − LSL) / (6 σ)
    Cpk = min(USL − μ, μ − LSL) / (3 σ)

with μ the mean and σ the standard deviation of the batch. benchfit estimates σ by the
sample standard deviation s (ddof = 1). With a one-sided limit Cp is undefined (None) and
Cpk is the one-sided index, (USL − μ)/(3σ) or (μ − LSL)/(3σ).

This is the log's own arithmetic; the measurement values themselves are never recomputed.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Sequence

import numpy as np

from benchfit.errors import LogError

__all__ = ["Capability", "GroupStats", "capability", "by_group", "histogram_svg"]


@dataclass(frozen=True)
class Capability:
    """Summary of a batch of values (all in the quantity's unit; Cp, Cpk dimensionless).

    ``std`` is the sample standard deviation (ddof = 1); ``cp``/``cpk`` are None when a
    limit is missing, σ is zero or fewer than two values are given.
    """

    n: int
    mean: float
    std: float | None
    min: float
    max: float
    lower: float | None
    upper: float | None
    cp: float | None
    cpk: float | None

    def to_dict(self) -> dict[str, Any]:
        return {"n": self.n, "mean": self.mean, "std": self.std, "min": self.min, "max": self.max,
                "lower": self.lower, "upper": self.upper, "cp": self.cp, "cpk": self.cpk}


def capability(values: Sequence[float], lower: float | None = None, upper: float | None = None,
               quantity: str = "values") -> Capability:
    """n, mean, sample standard deviation, extremes, Cp and Cpk of ``values``.

    Parameters
    ----------
    values : sequence of float
        One value per unit (finite numbers; the quantity's SI unit).
    lower, upper : float, optional
        Lower and upper spec limits (LSL, USL), same unit.
    quantity : str
        Name used in error messages.

    Raises
    ------
    LogError
        No finite values.
    """
    x = np.asarray([v for v in values if v is not None], dtype=float)
    x = x[np.isfinite(x)]
    if x.size == 0:
        raise LogError(f"{quantity}: no logged values — check the quantity name with `benchfit log export`")
    mean = float(np.mean(x))
    std = float(np.std(x, ddof=1)) if x.size >= 2 else None
    cp = cpk = None
    if std is not None and std > 0:
        if lower is not None and upper is not None:
            cp = (upper - lower) / (6.0 * std)
        sides = []
        if upper is not None:
            sides.append(upper - mean)
        if lower is not None:
            sides.append(mean - lower)
        if sides:
            cpk = min(sides) / (3.0 * std)
    return Capability(n=int(x.size), mean=mean, std=std, min=float(np.min(x)), max=float(np.max(x)),
                      lower=lower, upper=upper, cp=cp, cpk=cpk)


@dataclass(frozen=True)
class GroupStats:
    """The batch statistics of one group (e.g. one bench) of a batch.

    ``u_mean`` = s/√n is the standard uncertainty of the group's mean from its own scatter
    (None below two values); ``offset`` = group mean − mean of all values, in the
    quantity's unit. An offset many times ``u_mean`` points at the bench, not at the units.
    """

    name: str | None
    capability: Capability
    u_mean: float | None
    offset: float


def by_group(rows: Sequence[dict[str, Any]], key: str, lower: float | None = None,
             upper: float | None = None, quantity: str = "values") -> list[GroupStats]:
    """:func:`capability` of each group of ``rows`` (dicts with ``"value"``) by ``row[key]``, by name."""
    groups: dict[Any, list[float]] = {}
    for r in rows:
        groups.setdefault(r.get(key), []).append(r["value"])
    overall = capability([v for vs in groups.values() for v in vs], lower, upper, quantity)
    out = []
    for name in sorted(groups, key=lambda n: (n is None, str(n))):
        c = capability(groups[name], lower, upper, quantity)
        u = None if c.std is None else c.std / math.sqrt(c.n)
        out.append(GroupStats(name=name, capability=c, u_mean=u, offset=c.mean - overall.mean))
    return out


def histogram_svg(values: Sequence[float], cap: Capability, quantity: str, unit: str = "") -> str:
    """Histogram of the batch with the spec limits and the mean marked; SVG text.

    Uses matplotlib (imported here) without pyplot state; the SVG has no external
    references and no time stamp.
    """
    import io

    import matplotlib
    from matplotlib.figure import Figure

    x = np.asarray([v for v in values if v is not None and math.isfinite(v)], dtype=float)
    rc: dict[Any, Any] = {"svg.fonttype": "path", "svg.hashsalt": "benchfit-log", "font.size": 8.5,
                          "axes.grid": True, "grid.color": "#d5dbe0", "axes.edgecolor": "#7a8793"}
    with matplotlib.rc_context(rc):
        fig = Figure(figsize=(6.0, 3.0), dpi=100, layout="constrained")
        ax = fig.add_subplot(1, 1, 1)
        bins = max(5, min(30, int(math.ceil(math.sqrt(x.size)))))
        ax.hist(x, bins=bins, color="#6b8aa6", edgecolor="#22313f", linewidth=0.6, label="units")
        for lim, name in ((cap.lower, "LSL"), (cap.upper, "USL")):
            if lim is not None:
                ax.axvline(lim, color="#b5523b", lw=1.4, ls="--")
                # x in data, y in axes fraction (the blended transform of ("data", "axes fraction"))
                ax.annotate(name, (lim, 1.0), xycoords=ax.get_xaxis_transform(), ha="center",
                            va="bottom", color="#b5523b", fontsize=8)
        ax.axvline(cap.mean, color="#22313f", lw=1.0, label="mean")
        ax.set_xlabel(f"{quantity} ({unit})" if unit else quantity)
        ax.set_ylabel("count")
        parts = [f"n = {cap.n}"]
        if cap.cp is not None:
            parts.append(f"Cp = {cap.cp:.2f}")
        if cap.cpk is not None:
            parts.append(f"Cpk = {cap.cpk:.2f}")
        ax.set_title(", ".join(parts), loc="left", fontsize=9)
        ax.legend(loc="upper left", frameon=False, fontsize=7.5)
        buf = io.StringIO()
        fig.savefig(buf, format="svg", metadata={"Date": None, "Creator": "benchfit"})
    return buf.getvalue()
