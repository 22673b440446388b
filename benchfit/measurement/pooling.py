"""Combining the blocks of a long record (pure): weighted means with an honest u, exact tails
for the percentiles, and the pooled IEEE 181 pulse values of :mod:`benchfit.measurement.long_record`."""

from __future__ import annotations

import math
from typing import Any, Sequence

import numpy as np

from benchfit.measurement.chain import birge_factor
from benchfit.measurement.levels import VPP_PERCENTILE
from benchfit.measurement.pulse import PulseResult

__all__ = ["weighted_mean", "ExactTails", "pool_pulses"]


def weighted_mean(values: Sequence[float], us: Sequence[float | None], weights: Sequence[float]) -> tuple[float, float | None]:
    """Weighted mean and its u: the stated u combined (Σw²u²)^½/Σw, widened by the Birge ratio
    when the values scatter significantly more than their u say."""
    v = np.asarray(values, dtype=np.float64)
    w = np.asarray(weights, dtype=np.float64)
    mean = float(np.sum(w * v) / np.sum(w))
    uu = np.array([math.nan if u is None else float(u) for u in us])
    if v.size == 0 or not np.all(np.isfinite(uu)):
        if v.size >= 2:  # no stated u: the scatter alone
            return mean, float(np.std(v, ddof=1) / math.sqrt(v.size))
        return mean, None
    u = float(math.sqrt(np.sum((w * uu) ** 2)) / np.sum(w))
    if v.size >= 2 and np.all(uu > 0):
        wi = 1.0 / uu ** 2
        m_opt = float(np.sum(wi * v) / np.sum(wi))
        chi2 = float(np.sum(wi * (v - m_opt) ** 2))
        u *= birge_factor(chi2, v.size - 1)
    return mean, u


class ExactTails:
    """The smallest and largest ⌈0.001·n_max⌉ + 3 samples seen, so that the 0.1th and 99.9th
    percentiles of the whole record (numpy's linear rule) come out exact from blocks.

    ``n_max`` bounds the record's samples (a text export's length is known only as a bound: the
    tails are then longer than needed, still exact).
    """

    def __init__(self, n_max: int) -> None:
        self.k = int(math.ceil(VPP_PERCENTILE / 100.0 * max(int(n_max), 2))) + 3
        self._low = np.empty(0)
        self._high = np.empty(0)

    def push(self, x: np.ndarray) -> None:
        """Keep what ``x`` adds to either tail."""
        k = self.k
        lo = x if self._low.size < k else x[x < self._low.max()]
        if lo.size:
            both = np.concatenate([self._low, lo])
            # a copy: the slice of the partitioned array would keep all of it alive
            self._low = np.partition(both, k - 1)[:k].copy() if both.size > k else both
        hi = x if self._high.size < k else x[x > self._high.min()]
        if hi.size:
            both = np.concatenate([self._high, hi])
            self._high = np.partition(both, both.size - k)[both.size - k:].copy() if both.size > k else both

    def percentiles(self, n: int) -> tuple[float, float]:
        """The whole record's 0.1th and 99.9th percentiles (numpy's linear rule) from the kept tails."""
        low, high = np.sort(self._low), np.sort(self._high)
        out = []
        for p in (VPP_PERCENTILE, 100.0 - VPP_PERCENTILE):
            pos = p / 100.0 * (n - 1)
            i = int(math.floor(pos))
            j = min(i + 1, n - 1)
            frac = pos - i
            if p < 50:
                a, b = low[min(i, low.size - 1)], low[min(j, low.size - 1)]
            else:
                off = n - high.size
                a, b = high[max(i - off, 0)], high[max(j - off, 0)]
            out.append(float(a + frac * (b - a)))
        return out[0], out[1]


def pool_pulses(pp: Sequence[PulseResult], fs: float, q_step: float) -> dict[str, Any]:
    """The blocks' two-level results pooled, weighted by their periods: duty, rise and fall (value,
    u), states, noise (rms), period, periods, coupling τ and droop, overshoot and undershoot (one
    quantisation step counts as none, as for one capture)."""
    pooled: dict[str, Any] = {}
    pw = [max(p.n_periods, 1) for p in pp]

    def pool(values: list[float | None], us: list[float | None]) -> tuple[float | None, float | None]:
        pick = [(v, u, wt) for v, u, wt in zip(values, us, pw) if v is not None]
        if not pick:
            return None, None
        return weighted_mean([v for v, _, _ in pick], [u for _, u, _ in pick], [wt for _, _, wt in pick])

    pooled["duty"] = pool([p.duty_cycle_pct for p in pp], [p.duty_cycle_u_pct for p in pp])
    # an edge within 3 samples carries the grid's ±Ts/2 at its 10 % and 90 % instants in every
    # block alike (pulse_parameters adds √2·Ts/√12): only the rest averages over the blocks
    u_grid = math.sqrt(2.0) / (fs * math.sqrt(12.0))
    for key, vals, us in (("rise", [p.rise_time_s for p in pp], [p.rise_time_u_s for p in pp]),
                          ("fall", [p.fall_time_s for p in pp], [p.fall_time_u_s for p in pp])):
        sharp = [v is not None and v < 3.0 / fs for v in vals]
        rand = [None if u is None else (math.sqrt(max(u * u - u_grid * u_grid, 0.0)) if sh else u)
                for u, sh in zip(us, sharp)]
        value, u_pooled = pool(vals, rand)
        if value is not None and value < 3.0 / fs:
            u_pooled = math.hypot(u_pooled or 0.0, u_grid)
        pooled[key] = (value, u_pooled)
    pooled["low"] = pool([p.state_low for p in pp], [None] * len(pp))[0]
    pooled["high"] = pool([p.state_high for p in pp], [None] * len(pp))[0]
    noise = [p.noise_rms for p in pp if p.noise_rms is not None]
    pooled["noise"] = math.sqrt(float(np.mean(np.square(noise)))) if noise else None
    pooled["period"] = pool([p.period_s for p in pp], [None] * len(pp))[0]
    pooled["periods"] = int(sum(p.n_periods for p in pp))
    pooled["tau"] = pool([p.coupling_tau_s for p in pp], [None] * len(pp))[0]
    pooled["droop"] = pool([p.droop_pct for p in pp], [None] * len(pp))[0]
    pooled["source"] = pp[0].coupling_source
    over: list[float] = []
    under: list[float] = []
    for p in pp:
        amp_p = (p.state_high or 0.0) - (p.state_low or 0.0)
        for pct, into in ((p.overshoot_pct, over), (p.undershoot_pct, under)):
            if pct is not None:
                into.append(0.0 if amp_p > 0 and q_step > 0 and pct * amp_p / 100 <= q_step * (1 + 1e-9)
                            else pct)
    pooled["over"] = float(np.mean(over)) if over else None
    pooled["under"] = float(np.mean(under)) if under else None
    return pooled
