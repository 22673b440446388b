"""Signal levels and clipping checks: DC, RMS, robust peak-to-peak, full-scale runs.

Pure functions of sample arrays; no I/O.

* DC and RMS are taken over a whole number of periods when the period is known, so a
  partial last period does not bias them (a record of 2.3 periods of a sine would otherwise
  carry up to 1/(2·2.3) of a half-wave's excess).
* Peak-to-peak is *robust*: the difference of the 99.9th and 0.1th percentiles of the samples,
  so one noisy sample or a short spike does not set it. For a sine the 0.1 % tails cost only
  ``1 − cos(0.001·π) ≈ 5·10⁻⁶`` of the true value (the sine's sample distribution is the
  arcsine law); for a square the percentiles land on the flat tops.
* The noise uncertainty of a percentile (:func:`percentile_noise_u`) follows the
  linearisation of a sample quantile around the level it estimates (the Bahadur
  representation of order statistics), with the *noise* as the only random part: the
  samples are ``x_i = s_i + w_i`` with a known waveform ``s`` (the harmonic fit, or the two
  states of a pulse wave) and white Gaussian noise of standard deviation σ.
* Clipping: runs of at least 3 samples at or beyond ±0.999 of full scale (audio), or long
  flat runs at the channel's exact extreme value that pile up far more samples than the
  next value (rails of a recorder that saturates, not the top code of a quantised peak).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = ["Levels", "ClipReport", "signal_levels", "whole_period_span", "find_clipping", "stuck_runs",
           "clipped_sample_count",
           "percentile_noise_u", "vpp_noise_u", "quantisation_step", "VPP_PERCENTILE"]

#: lower/upper percentile used for the robust peak-to-peak value (%)
VPP_PERCENTILE = 0.1

#: shortest run of full-scale samples reported as clipping (samples)
_FS_MIN_RUN = 3
#: shortest run at the channel's exact extreme reported as rail clipping (samples)
_RAIL_MIN_RUN = 5
#: samples at a rail must outnumber those at the next value by this factor
_RAIL_PILEUP = 5
#: full-scale threshold as a fraction of full scale (audio)
_FS_LEVEL = 0.999


@dataclass(frozen=True)
class Levels:
    """DC, RMS and robust peak-to-peak of one channel (sample units, V or FS).

    Attributes
    ----------
    vdc : float
        Mean over the analysed span.
    vrms : float
        Root mean square (including DC) over the analysed span.
    vac_rms : float
        RMS after removing the DC (standard deviation over the span).
    vpp : float
        Robust peak-to-peak: 99.9th minus 0.1th percentile of all samples.
    vmax, vmin : float
        Plain extreme samples (not robust; for clipping and display).
    span_samples : int
        Number of samples the DC and RMS were taken over.
    whole_periods : int
        Whole periods in that span (0 when no period was given).
    vpp_low, vpp_high : float
        The two percentiles (0.1th and 99.9th) whose difference is ``vpp``.
    """

    vdc: float
    vrms: float
    vac_rms: float
    vpp: float
    vmax: float
    vmin: float
    span_samples: int
    whole_periods: int
    vpp_low: float = math.nan
    vpp_high: float = math.nan


@dataclass(frozen=True)
class ClipReport:
    """Result of the clipping check.

    Attributes
    ----------
    clipped : bool
        True when at least one qualifying flat run was found.
    n_runs : int
        Number of qualifying runs.
    n_samples : int
        Samples inside those runs.
    level : float or None
        The level the runs sit at (sample units), or None.
    kind : str
        ``"full-scale"`` (audio ±1 FS), ``"rail"`` (exact repeated extreme) or ``""``.
    """

    clipped: bool
    n_runs: int = 0
    n_samples: int = 0
    level: float | None = None
    kind: str = ""


def whole_period_span(n_samples: int, sample_rate: float, frequency_hz: float | None) -> tuple[int, int]:
    """Number of samples covering the most whole periods from the first sample, and that count.

    Parameters
    ----------
    n_samples : int
        Record length (samples).
    sample_rate : float
        Sample rate (Hz).
    frequency_hz : float or None
        Fundamental frequency (Hz); None or a period longer than the record gives the
        whole record and 0 periods.

    Returns
    -------
    (span, periods) : tuple of int
    """
    if frequency_hz is None or not math.isfinite(frequency_hz) or frequency_hz <= 0:
        return n_samples, 0
    periods = int(math.floor(n_samples * frequency_hz / sample_rate + 1e-9))
    if periods < 1:
        return n_samples, 0
    span = int(round(periods * sample_rate / frequency_hz))
    return max(2, min(span, n_samples)), periods


#: records at least this long take their tail percentiles from the tails alone (see _tail_order_stats)
_TAIL_MIN_SAMPLES = 8192


def _tail_order_stats(x: np.ndarray, ranks: np.ndarray, low: bool) -> np.ndarray | None:
    """The order statistics of ``x`` at ``ranks`` (0-based, ascending), all in one tail.

    A strided subset gives a threshold a little beyond the deepest rank; the samples on the
    tail's side of it are exactly the smallest (or largest) ones of the record, so the
    ranks are found by a partial sort of that small set alone. None when the threshold
    turns out not to reach the ranks (then the caller sorts the whole record).
    """
    n = x.size
    sub = x[:: max(1, n // 4096)]
    m = sub.size
    if low:
        deepest = int(ranks.max())
        k = min(m - 1, int(math.ceil(2.0 * (deepest + 1) * m / n)) + 8)
        threshold = np.partition(sub, k)[k]
        tail = x[x <= threshold]
        if tail.size <= deepest:
            return None
        offset = 0
    else:
        deepest = int(n - 1 - ranks.min())  # distance of the shallowest rank from the top
        k = max(0, m - 1 - (int(math.ceil(2.0 * (deepest + 1) * m / n)) + 8))
        threshold = np.partition(sub, k)[k]
        tail = x[x >= threshold]
        offset = n - tail.size
        if offset > int(ranks.min()):
            return None
    return np.partition(tail, np.unique(ranks - offset))[ranks - offset]


def _percentiles(x: np.ndarray, p_lo: float, p_hi: float) -> tuple[float, float]:
    """Two percentiles (%), linear interpolation between order statistics (numpy's default
    method). A long record with both in the tails (e.g. 0.1 % and 99.9 %) partially sorts only
    its two tails; otherwise one partial sort of one copy. Same values either way."""
    n = x.size
    pos = np.array([p_lo, p_hi]) / 100.0 * (n - 1)
    lo_i = np.floor(pos).astype(np.int64)
    hi_i = np.minimum(lo_i + 1, n - 1)
    frac = pos - lo_i
    if n >= _TAIL_MIN_SAMPLES and p_lo <= 5.0 and p_hi >= 95.0:
        low = _tail_order_stats(x, np.array([lo_i[0], hi_i[0]]), low=True)
        high = _tail_order_stats(x, np.array([lo_i[1], hi_i[1]]), low=False)
        if low is not None and high is not None:
            return (float(low[0] + frac[0] * (low[1] - low[0])),
                    float(high[0] + frac[1] * (high[1] - high[0])))
    kth = np.unique(np.concatenate([lo_i, hi_i]))
    part = np.partition(x, kth)
    vals = part[lo_i] + frac * (part[hi_i] - part[lo_i])
    return float(vals[0]), float(vals[1])


def signal_levels(x: np.ndarray, sample_rate: float, frequency_hz: float | None = None) -> Levels:
    """DC, RMS and robust peak-to-peak of a channel.

    Parameters
    ----------
    x : ndarray
        Samples (V or FS).
    sample_rate : float
        Sample rate (Hz).
    frequency_hz : float, optional
        Fundamental (Hz). When given, DC and RMS use the longest whole number of periods
        from the first sample; otherwise the whole record.

    Returns
    -------
    Levels
        ``vpp`` is the 99.9th minus the 0.1th percentile (linear interpolation between
        order statistics), never a single extreme sample.
    """
    x = np.asarray(x, dtype=np.float64)
    span, periods = whole_period_span(x.size, sample_rate, frequency_hz)
    seg = x[:span]
    vdc = float(np.mean(seg))
    vrms = float(math.sqrt(float(seg @ seg) / seg.size))
    vac = float(np.std(seg))
    lo, hi = _percentiles(x, VPP_PERCENTILE, 100.0 - VPP_PERCENTILE)
    return Levels(vdc=vdc, vrms=vrms, vac_rms=vac, vpp=float(hi - lo), vmax=float(x.max()),
                  vmin=float(x.min()), span_samples=int(span), whole_periods=int(periods),
                  vpp_low=lo, vpp_high=hi)


def _ndtr(z: np.ndarray) -> np.ndarray:
    """The standard normal CDF Φ(z) = erfc(−z/√2)/2, with erfc by the Chebyshev fit of
    Numerical Recipes in C, 2nd ed., §6.2 ``erfcc`` (fractional error below 1.2·10⁻⁷ for every
    argument; from memory). Vectorised numpy, so a measurement needs no scipy.special import:
    the uncertainty it feeds moves by about 10⁻⁷ of itself at most."""
    x = -np.asarray(z, dtype=np.float64) / math.sqrt(2.0)
    a = np.abs(x)
    t = 1.0 / (1.0 + 0.5 * a)
    poly = -1.26551223 + t * (1.00002368 + t * (0.37409196 + t * (0.09678418 + t * (
        -0.18628806 + t * (0.27886807 + t * (-1.13520398 + t * (1.48851587 + t * (
            -0.82215223 + t * 0.17087277))))))))
    erfc = t * np.exp(-a * a + poly)
    return 0.5 * np.where(x >= 0.0, erfc, 2.0 - erfc)


def percentile_noise_u(model: np.ndarray, sigma: float, level: float, n_total: int | None = None,
                       weights: np.ndarray | None = None) -> float:
    """Standard uncertainty, from white noise, of a sample percentile found at ``level``.

    The samples are ``x_i = s_i + w_i``: a known waveform ``s`` (``model``) plus independent
    Gaussian noise of standard deviation ``sigma``. A sample quantile q̂ moves with the
    fraction of samples below the level, ``F_N(q) = (1/N)·Σ 1{x_i ≤ q}``, as
    ``q̂ − q ≈ −(F_N(q) − E F_N(q)) / f(q)`` (the Bahadur linearisation of a sample
    quantile), with ``var F_N(q) = Σ P_i(1 − P_i)/N²``, ``P_i = Φ((q − s_i)/σ)`` and the
    density of the samples at q ``f(q) = Σ φ((q − s_i)/σ)/(N·σ)``. Only samples within a
    few σ of the level contribute, so a noise-free record gives 0.

    Parameters
    ----------
    model : ndarray
        The noise-free waveform at the sample instants (sample units, V or FS).
    sigma : float
        Standard deviation of the noise (sample units).
    level : float
        Where the percentile was found (sample units).
    n_total : int, optional
        Number of samples in the record when ``model`` is a representative subset of it (a
        regular stride through a long record): the sums above are then taken as means over the
        subset times ``n_total``. Default: ``model.size``.
    weights : ndarray, optional
        How many samples each entry of ``model`` stands for (a two-level wave's model is its two
        states with their sample counts): every sum above is then weighted. Default: 1 each.

    Returns
    -------
    float
        Standard uncertainty of the percentile (sample units), at most ``sigma``: an
        extreme order statistic of noisy samples scatters less than a single sample does
        (the spread of the largest of m normal draws falls as m grows; from memory). The
        cap also covers a poor model that puts no sample near ``level``.
    """
    s = np.asarray(model, dtype=np.float64)
    if not (sigma > 0) or s.size == 0 or not math.isfinite(level):
        return 0.0
    z = (level - s) / sigma
    near = np.abs(z) < 8.0  # Φ(−8) ≈ 6e-16: samples farther away contribute nothing
    if not near.any():
        return float(sigma)
    zn = z[near]
    p = _ndtr(zn)
    wn = None if weights is None else np.asarray(weights, dtype=np.float64)[near]
    m = float(s.size) if weights is None else float(np.sum(weights))
    n = m if n_total is None else int(n_total)
    # Σ over the record ≈ (n / subset size)·Σ over the subset, so var F_N = mean(P(1−P))/n
    var_f = float(np.dot(p * (1.0 - p), wn) if wn is not None else np.sum(p * (1.0 - p))) / (m * n)
    dens_terms = np.exp(-0.5 * zn * zn)
    dens = float(np.dot(dens_terms, wn) if wn is not None else np.sum(dens_terms)) / (
        math.sqrt(2.0 * math.pi) * sigma * m)
    if dens <= 0.0:
        return float(sigma)
    return float(min(math.sqrt(var_f) / dens, sigma))


def vpp_noise_u(model: np.ndarray, sigma: float, low: float, high: float, n_total: int | None = None,
                weights: np.ndarray | None = None) -> float:
    """Noise part of the standard uncertainty of the robust peak-to-peak value ``high − low``.

    The two percentiles (:func:`percentile_noise_u`) are set by disjoint groups of samples
    (those near the bottom and those near the top of the wave) when the wave is much
    larger than the noise, so their uncertainties add in quadrature (GUM, JCGM 100:2008
    5.1.2, uncorrelated inputs).

    Parameters
    ----------
    model : ndarray
        Noise-free waveform at the sample instants (sample units).
    sigma : float
        Noise standard deviation (sample units).
    low, high : float
        The 0.1th and 99.9th percentiles (:attr:`Levels.vpp_low`, :attr:`Levels.vpp_high`).
    n_total : int, optional
        Samples in the record when ``model`` is a strided subset (see :func:`percentile_noise_u`).
    weights : ndarray, optional
        Samples each model entry stands for (see :func:`percentile_noise_u`).

    Returns
    -------
    float
        Standard uncertainty (sample units).
    """
    return math.hypot(percentile_noise_u(model, sigma, low, n_total, weights),
                      percentile_noise_u(model, sigma, high, n_total, weights))


def _runs(mask: np.ndarray, min_run: int) -> tuple[int, int]:
    """Count runs of True of length ≥ min_run and the samples in them."""
    if np.count_nonzero(mask) < max(min_run, 1):  # too few True for one qualifying run
        return 0, 0
    edges = np.diff(np.concatenate(([0], mask.view(np.int8), [0])))
    starts = np.flatnonzero(edges == 1)
    stops = np.flatnonzero(edges == -1)
    lengths = stops - starts
    long_runs = lengths[lengths >= min_run]
    return int(long_runs.size), int(long_runs.sum())


def stuck_runs(x: np.ndarray, threshold: float, min_run: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Runs of ≥ ``min_run`` consecutive *identical* samples with ``|x| ≥ threshold``.

    A converter driven past its range returns its end code again and again (IEEE 1241 and
    IEEE 1057 treat samples at the ADC's range limits as clipped; clause numbers from memory):
    the samples are stuck at one value. A wave that only comes near full scale — the sagging
    top of an AC-coupled square, a hot sine's crest — passes through the top codes without
    repeating them. Returns (first index, length, value) of each run, as arrays.
    """
    x = np.asarray(x, dtype=np.float64).ravel()
    idx = np.flatnonzero(np.abs(x) >= threshold)
    if idx.size < max(min_run, 1):
        empty = np.zeros(0, dtype=np.int64)
        return empty, empty, np.zeros(0)
    xs = x[idx]
    brk = np.flatnonzero((np.diff(idx) != 1) | (np.diff(xs) != 0)) + 1
    starts = np.concatenate(([0], brk))
    lengths = np.diff(np.concatenate((starts, [idx.size])))
    keep = lengths >= min_run
    return idx[starts[keep]], lengths[keep], xs[starts[keep]]


def _piles_up(x: np.ndarray, level: float) -> bool:
    """True when ``level`` holds at least :data:`_RAIL_PILEUP` times as many samples as the next
    value inside it: a rail or an end code piles samples up, while a quantised peak (the crest of
    a slow sine, ≤ 2.4× by the arcsine law) or a sagging top spreads over neighbouring codes."""
    n_at = int(np.count_nonzero(x == level))
    inside = x[x < level] if level > 0 else x[x > level]
    if inside.size == 0:
        return n_at >= _RAIL_PILEUP
    neighbour = inside.max() if level > 0 else inside.min()
    return n_at >= _RAIL_PILEUP * max(int(np.count_nonzero(inside == neighbour)), 1)


def find_clipping(x: np.ndarray, unit: str, full_scale: float | None = None,
                  rails: bool = True) -> ClipReport:
    """Look for clipping: samples stuck flat at full scale (audio) or at the channel's rails.

    Parameters
    ----------
    x : ndarray
        Samples.
    unit : str
        ``"FS"`` for uncalibrated audio (full scale is 1.0) or ``"V"``.
    full_scale : float, optional
        Full scale in sample units when known (for volts from a calibrated sound card:
        the gain in V per FS). Runs of ≥ 3 identical samples with ``|x| ≥ 0.999·full_scale``
        count (:func:`stuck_runs`), provided that value piles samples up against the next one
        inside it (see below): nearing full scale without sticking there (the sag of an
        AC-coupled square, a crest at −0.01 dBFS) is not clipping.
    rails : bool
        When no full scale is known, count runs of ≥ 5 samples that equal the channel's
        exact maximum or minimum (a saturating recorder repeats its last code), provided
        that value holds at least 5 times as many samples as the next value inside it (a
        quantised but unclipped peak spreads over neighbouring codes). Pass False for
        waveforms whose flat tops are legitimately the extremes (a clean square).

    Returns
    -------
    ClipReport
    """
    x = np.asarray(x, dtype=np.float64)
    fs_level = 1.0 if unit == "FS" else full_scale
    if fs_level is not None and fs_level > 0:
        _, lengths, values = stuck_runs(x, _FS_LEVEL * fs_level, _FS_MIN_RUN)
        piled = {float(v) for v in np.unique(values) if _piles_up(x, float(v))}
        sel = np.asarray([float(v) in piled for v in values], dtype=bool)
        if sel.any():
            return ClipReport(True, int(sel.sum()), int(lengths[sel].sum()),
                              float(np.max(np.abs(values[sel]))), "full-scale")
        return ClipReport(False)
    if not rails:
        return ClipReport(False)
    vmax, vmin = float(x.max()), float(x.min())
    if vmax == vmin:
        return ClipReport(False)
    best = ClipReport(False)
    for level in (vmax, vmin):
        runs, count = _runs(x == level, _RAIL_MIN_RUN)
        if runs and count > best.n_samples and _piles_up(x, level):
            best = ClipReport(True, runs, count, level, "rail")
    return best


def clipped_sample_count(block: np.ndarray, threshold: float, full_scale: float = 1.0) -> int:
    """Samples of a recorded block (frames × channels, or one channel) that clipped: those stuck
    in runs of ≥ 3 identical values at ``|x| ≥ threshold`` (:func:`stuck_runs`), and any beyond
    ``full_scale`` (a float stream's overshoot, limited to full scale when written as integers).
    A live count, block by block: the record-wide pile-up test of :func:`find_clipping` is not
    applied."""
    b = np.asarray(block, dtype=np.float64)
    cols = b.T if b.ndim == 2 else b[np.newaxis, :]
    total = 0
    for col in cols:
        mask = np.abs(col) > full_scale
        starts, lengths, _ = stuck_runs(col, threshold, _FS_MIN_RUN)
        for s0, n0 in zip(starts, lengths):
            mask[s0:s0 + n0] = True
        total += int(np.count_nonzero(mask))
    return total


def quantisation_step(x: np.ndarray) -> float:
    """Smallest positive difference between distinct sample values (sample units).

    For a quantised record (PCM audio, an 8-bit scope, a CSV printed to a few digits) this
    is the code step q; for unquantised data it is tiny. A level read at one code then has
    the resolution uncertainty ``q/√12`` (rectangular distribution of half-width q/2; GUM,
    JCGM 100:2008 F.2.2.1 and 4.3.7, clause numbers from memory). Returns 0 when the record
    shows no code grid: fewer than two distinct values, or a smallest gap above 1 % of the
    record's span (a noise-free two-level trace has only its two levels, whose distance is
    not a resolution).

    The code grid shows in any stretch of the record, so the first 2¹⁶ samples are read, and the
    first :data:`_Q_PROBE` of them are sorted for a candidate step q̂ (their smallest gap):

    * every read sample on the grid of q̂ (through the probe's lowest value): no two distinct values
      are closer than q̂ and the probe holds a pair that close, so q̂ is the smallest gap exactly;
    * q̂ below :data:`_Q_NEGLIGIBLE` of the span: q̂ bounds the smallest gap from above, and a
      resolution that fine is far below any capture's noise (a 24-bit converter's code is 1.2e-7 of
      full scale), so the bound is returned instead of sorting the whole stretch;
    * otherwise the whole stretch is sorted (exact).
    """
    x = np.asarray(x, dtype=np.float64)
    v = x[: 1 << 16] if x.size > (1 << 16) else x
    if v.size < 2:
        return 0.0
    span = float(np.max(v) - np.min(v))
    probe = np.sort(v[:_Q_PROBE])
    gaps = np.diff(probe)
    gaps = gaps[gaps > 0]  # the gaps between distinct values
    if gaps.size:
        q = float(gaps.min())
        if q <= _Q_NEGLIGIBLE * span:
            return q
        steps = (v - probe[0]) / q
        if float(np.max(np.abs(steps - np.rint(steps)))) <= 1e-6:  # float rounding of the codes only
            return q if q <= 0.01 * span else 0.0
    if v.size > probe.size:  # the probe is one value (leading silence) or off the grid: sort it all
        probe = np.sort(v)
        gaps = np.diff(probe)
        gaps = gaps[gaps > 0]
    if gaps.size == 0:
        return 0.0
    q = float(gaps.min())
    return q if q <= 0.01 * span else 0.0


#: samples sorted for the candidate code step of :func:`quantisation_step`
_Q_PROBE = 4096
#: a code step below this fraction of the span counts for nothing next to a capture's noise
_Q_NEGLIGIBLE = 1e-6
