"""Combining the blocks of a long record (pure): weighted means with an honest u, exact tails
for the percentiles, and the pooled IEEE 181 pulse values of :mod:`benchfit.measurement.long_record`."""

from __future__ import annotations

import math
from typing import Any, Sequence

import numpy as np

from benchfit.measurement.chain import birge_factor
from benchfit.measurement.levels import VPP_PERCENTILE
from benchfit.measurement.pulse import PulseResult

__all__ = ["weighted_mean", "ExactTails", "HistogramTails", "percentile_tails", "TAIL_CAP", "pool_pulses"]

#: samples kept per tail for exact percentiles; a longer record (more than about 1e9 samples a
#: channel, ~6 h at 48 kHz) uses a fixed histogram instead, so memory does not grow with length
TAIL_CAP = 2 ** 20
#: bins of that histogram (2 MiB a channel): finer than a 16-bit code over the signal's range
HISTOGRAM_BINS = 2 ** 18


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

    #: the percentiles are exact (no resolution term in the peak-to-peak's u)
    resolution = 0.0

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


class HistogramTails:
    """The 0.1th and 99.9th percentiles of a record too long to keep its tails, from a histogram
    of fixed size (:data:`HISTOGRAM_BINS` bins), so memory stays the same for any length.

    The bins span the first block's range widened by that range on each side; a later sample
    outside doubles the span on its side and merges neighbouring bins in pairs, so the bin edges
    stay aligned and no count is lost. A percentile is interpolated within its bin (numpy's
    linear rule on the ranks, samples spread evenly in the bin) and lies within one bin width
    (:attr:`resolution`) of the exact value.
    """

    def __init__(self, bins: int = HISTOGRAM_BINS) -> None:
        if bins < 2 or bins % 2:
            raise ValueError(f"bins: {bins!r} must be an even number ≥ 2")
        self.bins = int(bins)
        self.counts = np.zeros(self.bins, dtype=np.int64)
        self.lo = math.nan
        self.width = math.nan

    @property
    def resolution(self) -> float:
        """The bin width: the percentiles' largest error."""
        return 0.0 if not math.isfinite(self.width) else float(self.width)

    def _grow(self, lo: float, hi: float) -> None:
        """Double the span towards ``lo``/``hi`` until both lie inside, merging bins in pairs."""
        while lo < self.lo or hi >= self.lo + self.bins * self.width:
            pairs = self.counts.reshape(-1, 2).sum(axis=1)
            merged = np.zeros(self.bins, dtype=np.int64)
            if lo < self.lo:  # the old span becomes the upper half
                merged[self.bins // 2:] = pairs
                self.lo -= self.bins * self.width
            else:             # the old span becomes the lower half
                merged[: self.bins // 2] = pairs
            self.counts = merged
            self.width *= 2.0

    def push(self, x: np.ndarray) -> None:
        """Count the samples of ``x``."""
        x = np.asarray(x, dtype=np.float64)
        if x.size == 0:
            return
        lo, hi = float(x.min()), float(x.max())
        if not math.isfinite(self.lo):
            span = max(hi - lo, abs(hi) * 1e-9, 1e-300)
            self.lo = lo - span
            self.width = 3.0 * span / self.bins
        self._grow(lo, hi)
        idx = np.floor((x - self.lo) / self.width).astype(np.int64)
        np.clip(idx, 0, self.bins - 1, out=idx)
        self.counts += np.bincount(idx, minlength=self.bins)

    def percentiles(self, n: int) -> tuple[float, float]:
        """The record's 0.1th and 99.9th percentiles, each within :attr:`resolution`."""
        cum = np.cumsum(self.counts)
        total = int(cum[-1])
        out = []
        for p in (VPP_PERCENTILE, 100.0 - VPP_PERCENTILE):
            pos = p / 100.0 * (total - 1)  # 0-based rank, numpy's linear rule
            b = int(np.searchsorted(cum, pos, side="right"))
            before = int(cum[b - 1]) if b > 0 else 0
            inside = max(int(self.counts[b]), 1)
            out.append(float(self.lo + (b + (pos - before + 0.5) / inside) * self.width))
        return out[0], out[1]


def percentile_tails(n_max: int, cap: int | None = None) -> ExactTails | HistogramTails:
    """Exact tails when they hold at most ``cap`` (default :data:`TAIL_CAP`) samples each, else a
    fixed histogram."""
    exact = ExactTails(n_max)
    return exact if exact.k <= (TAIL_CAP if cap is None else cap) else HistogramTails()
