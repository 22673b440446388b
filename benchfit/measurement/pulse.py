"""Pulse and transition parameters of two-level waveforms (IEEE Std 181), with AC-coupling droop.

Pure functions of ``(samples, sample_rate)``; results are frozen dataclasses.

Method (IEEE Std 181-2003, state levels by histogram; reference-level instants by linear
interpolation):

1. **State levels.** Histogram all samples between the lowest and highest; split it at the
   middle; the low and high state levels are the *modes* of the two halves, refined to the
   median of the samples within ±2 % of the amplitude of each mode (so the bin width does
   not quantise the level). The wave is called *two-level* when at least 75 % of the samples
   lie within ±10 % of the amplitude of one of the two states and each state holds at least
   1 % of them (a sine has about 41 % there, a triangle 20 %).
2. **Transitions.** A Schmitt trigger at 30 % and 70 % of the amplitude finds the
   transitions; the 50 % instant is the last crossing of the 50 % level before the wave enters
   the new state, the 10 % and 90 % instants are the crossings of those levels nearest to it
   on the same edge, all by linear interpolation between the bracketing samples.
3. **Duty cycle** = high time (rising 50 % to falling 50 %) / period (rising 50 % to the next
   rising 50 %), summed over *complete* periods only: a partial period at either end of the
   record is not used. Its standard uncertainty is the spread of the per-period ratios over
   √n.
4. **Rise and fall time** = t₉₀ − t₁₀ of each edge, averaged. **Overshoot** = mean over rising
   edges of the largest sample between that edge and the next, above the high state, in % of
   the amplitude; **undershoot** the same below the low state after falling edges (post-
   transition aberrations, clipped at 0).

AC coupling (a sound-card input is a first-order high-pass with time constant τ) makes flat
tops droop exponentially: during a flat input the recorded value decays as ``y' = −y/τ``.
:func:`compensate_coupling` inverts the high-pass, ``x̂ = y + (1/τ)·∫y dt``, with the mean
removed before integrating and the integral detrended, then the recorded mean added back
(the "DC fix": the true DC is lost by the coupling). :func:`fit_coupling` estimates 1/τ by
least squares as the value that makes every flat segment of the compensated wave flattest,
which is linear in 1/τ and so has a closed form.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

__all__ = ["StateLevels", "CouplingFit", "PulseResult", "state_levels", "fit_coupling",
           "estimate_coupling_tau", "compensate_coupling", "pulse_parameters"]

#: band around each state level (fraction of the amplitude) used for the two-level decision
_STATE_BAND = 0.10
#: minimum fraction of samples inside the state bands for a two-level wave
_TWO_LEVEL_FRACTION = 0.75
#: band used to refine each histogram mode to a median (fraction of the amplitude)
_REFINE_BAND = 0.02
#: Schmitt-trigger thresholds (fractions of the amplitude above the low state)
_SCHMITT_LO, _SCHMITT_HI = 0.30, 0.70
#: state levels are found on a regular subset of at most this many samples
_LEVEL_SAMPLES = 1 << 17
#: the droop fit uses a regular subset of at most about this many flat-top samples
_COUPLING_SAMPLES = 1 << 16
#: a heavily drooped square smears its states: below this fraction in the state bands no
#: droop fit is tried (a square drooping 70 % per half period still has 0.2, at 95 % 0.06)
_TRY_DROOP_FRACTION = 0.05
#: a droop estimate is used only when 1/τ exceeds this many standard uncertainties
_DROOP_SIGNIFICANCE = 5.0


@dataclass(frozen=True)
class StateLevels:
    """Low and high state levels (IEEE 181 histogram method), sample units.

    Attributes
    ----------
    low, high : float
        State levels s₁ and s₂.
    fraction_in_states : float
        Fraction of samples within ±10 % of the amplitude of either state.
    fraction_low, fraction_high : float
        Fraction of samples in each band.
    noise_rms : float
        Robust standard deviation of the samples in the state bands around their levels
        (median absolute deviation × 1.4826).
    """

    low: float
    high: float
    fraction_in_states: float
    fraction_low: float
    fraction_high: float
    noise_rms: float

    @property
    def amplitude(self) -> float:
        """s₂ − s₁."""
        return self.high - self.low

    @property
    def two_level(self) -> bool:
        """True for a bimodal (pulse-like) wave, by the rule in the module docstring."""
        return (self.amplitude > 0 and self.fraction_in_states >= _TWO_LEVEL_FRACTION
                and self.fraction_low >= 0.01 and self.fraction_high >= 0.01)

    def level(self, percent: float) -> float:
        """Reference level y(x %) = s₁ + (x/100)(s₂ − s₁)."""
        return self.low + percent / 100.0 * self.amplitude


@dataclass(frozen=True)
class CouplingFit:
    """Estimated AC-coupling time constant from the droop of a two-level wave.

    Attributes
    ----------
    tau_s : float
        Time constant τ of the first-order high-pass (s).
    tau_u_s : float
        Its standard uncertainty (s), from the least-squares residual.
    droop_pct : float
        Droop over the mean flat-segment length, ``100·(1 − exp(−t_flat/τ))`` (%).
    n_segments : int
        Flat segments used.
    """

    tau_s: float
    tau_u_s: float
    droop_pct: float
    n_segments: int


@dataclass(frozen=True)
class PulseResult:
    """IEEE 181 parameters of a two-level wave. Times in seconds, levels in sample units.

    ``None`` marks a value that could not be determined (the reason is in ``warnings``).
    """

    two_level: bool
    state_low: float | None = None
    state_high: float | None = None
    duty_cycle_pct: float | None = None
    duty_cycle_u_pct: float | None = None
    rise_time_s: float | None = None
    rise_time_u_s: float | None = None
    fall_time_s: float | None = None
    fall_time_u_s: float | None = None
    overshoot_pct: float | None = None
    undershoot_pct: float | None = None
    period_s: float | None = None
    n_periods: int = 0
    #: period from a least-squares line through every 50 % instant (rising and falling edges
    #: share the slope), and its standard uncertainty from the residual scatter; None with
    #: fewer than two whole periods
    edge_period_s: float | None = None
    edge_period_u_s: float | None = None
    #: the edge line's centre (:func:`edge_line`): time of rising edge number ``edge_center_cycle``
    #: (counted from the first rising instant) from the record's first sample, and its u (s)
    edge_center_s: float | None = None
    edge_center_u_s: float | None = None
    edge_center_cycle: float | None = None
    n_rising: int = 0
    n_falling: int = 0
    noise_rms: float | None = None
    coupling_tau_s: float | None = None
    coupling_source: str | None = None
    droop_pct: float | None = None
    warnings: tuple[str, ...] = field(default_factory=tuple)


def _median_in_place(v: np.ndarray) -> float:
    """``np.median`` of a 1-D array of finite values, which it reorders: one partition at the upper
    middle rank, the lower middle being the largest value below it (numpy partitions at both
    ranks, several times slower). The same value: the middle sample, or the two middles' mean."""
    k = v.size // 2
    v.partition(k)
    upper = float(v[k])
    return upper if v.size % 2 else (float(v[:k].max()) + upper) / 2.0


def state_levels(x: np.ndarray, n_bins: int | None = None) -> StateLevels:
    """State levels by the histogram-mode method (IEEE Std 181).

    Parameters
    ----------
    x : ndarray
        Samples.
    n_bins : int, optional
        Histogram bins between the lowest and highest sample; default ``clip(√N, 32, 512)``.
        Records longer than 131072 samples are analysed on a regular subset of that size.

    Returns
    -------
    StateLevels
    """
    x = np.asarray(x, dtype=np.float64)
    if x.size > _LEVEL_SAMPLES:  # a regular subset is plenty for levels and fractions
        x = x[::int(math.ceil(x.size / _LEVEL_SAMPLES))]
    vmin, vmax = float(x.min()), float(x.max())
    if not vmax > vmin:
        return StateLevels(vmin, vmax, 0.0, 0.0, 0.0, 0.0)
    bins = int(n_bins or min(max(int(math.sqrt(x.size)), 32), 512))
    width_bin = (vmax - vmin) / bins
    ib = np.minimum(((x - vmin) / width_bin).astype(np.int64), bins - 1)
    counts = np.bincount(ib, minlength=bins)
    half = bins // 2
    low = vmin + (int(np.argmax(counts[:half])) + 0.5) * width_bin
    high = vmin + (half + int(np.argmax(counts[half:])) + 0.5) * width_bin
    amp = high - low
    if amp <= 0:
        return StateLevels(low, high, 0.0, 0.0, 0.0, 0.0)
    width = max(_REFINE_BAND * amp, 2.0 * width_bin)
    near_low = x[np.abs(x - low) <= width]
    near_high = x[np.abs(x - high) <= width]
    # (the selections are copies already: their medians may partition them in place)
    if near_low.size:
        low = _median_in_place(near_low)
    if near_high.size:
        high = _median_in_place(near_high)
    amp = high - low
    if amp <= 0:
        return StateLevels(low, high, 0.0, 0.0, 0.0, 0.0)
    band = _STATE_BAND * amp
    d_low = x - low
    d_high = x - high
    in_low = np.abs(d_low) <= band
    in_high = np.abs(d_high) <= band
    dev = np.concatenate([d_low[in_low], d_high[in_high]])
    noise = 1.4826 * _median_in_place(np.abs(dev, out=dev)) if dev.size else 0.0
    f_low = float(np.count_nonzero(in_low)) / x.size
    f_high = float(np.count_nonzero(in_high)) / x.size
    return StateLevels(low, high, f_low + f_high, f_low, f_high, noise)


def _crossings(z: np.ndarray, level: float) -> np.ndarray:
    """Indices k where the wave crosses ``level`` between samples k and k+1."""
    above = z >= level
    return np.flatnonzero(above[1:] != above[:-1])


def _interp(z: np.ndarray, k: np.ndarray, level: float) -> np.ndarray:
    """Fractional sample index of the crossing of ``level`` between k and k+1 (NaN for k < 0)."""
    out = np.full(k.shape, np.nan)
    ok = k >= 0
    kk = k[ok]
    z0, z1 = z[kk], z[kk + 1]
    dz = z1 - z0
    frac = np.where(dz != 0, (level - z0) / np.where(dz != 0, dz, 1.0), 0.5)
    out[ok] = kk + frac
    return out


@dataclass(frozen=True)
class _Edges:
    t50: np.ndarray  # fractional sample index of each transition's 50 % instant
    rising: np.ndarray  # bool per transition
    t10: np.ndarray
    t90: np.ndarray
    k50: np.ndarray  # integer sample index before each 50 % instant


def _find_edges(z: np.ndarray, s: StateLevels) -> _Edges:
    """Transitions by a 30/70 % Schmitt trigger and their 10/50/90 % instants."""
    empty = np.zeros(0)
    lo_thr, hi_thr = s.level(100 * _SCHMITT_LO), s.level(100 * _SCHMITT_HI)
    # the runs of samples above the upper and below the lower threshold, merged in time order; the
    # trigger changes state where a run of one kind follows one of the other (runs of the same kind
    # with only in-between samples between them are one stay in that state)
    starts, ends, kinds = [], [], []
    for kind, mask in ((True, z > hi_thr), (False, z < lo_thr)):
        step = np.diff(mask.view(np.int8))
        first = np.flatnonzero(step == 1) + 1
        last = np.flatnonzero(step == -1)
        if mask[0]:
            first = np.concatenate(([0], first))
        if mask[-1]:
            last = np.concatenate((last, [z.size - 1]))
        starts.append(first)
        ends.append(last)
        kinds.append(np.full(first.size, kind))
    run_start, run_end, run_kind = np.concatenate(starts), np.concatenate(ends), np.concatenate(kinds)
    order = np.argsort(run_start, kind="stable")
    run_start, run_end, run_kind = run_start[order], run_end[order], run_kind[order]
    if run_start.size == 0 or (run_start.size == 1 and run_start[0] == run_end[0]):
        return _Edges(empty, np.zeros(0, bool), empty, empty, np.zeros(0, int))
    change = np.flatnonzero(run_kind[1:] != run_kind[:-1])
    enter = run_start[change + 1]  # first sample in the new state
    leave = run_end[change]  # last sample in the old state
    rising = run_kind[change + 1]
    y50 = s.level(50)
    c50 = _crossings(z, y50)
    pos = np.searchsorted(c50, enter, side="left") - 1
    k50 = np.where(pos >= 0, c50[np.maximum(pos, 0)], -1)
    k50 = np.where(k50 >= leave, k50, -1)  # the crossing must lie inside this transition
    keep = k50 >= 0
    k50, rising = k50[keep], rising[keep]
    t50 = _interp(z, k50, y50)
    n = k50.size
    prev_b = np.concatenate(([-1], k50[:-1]))  # previous transition's crossing sample
    next_b = np.concatenate((k50[1:], [z.size]))
    t10 = np.full(n, np.nan)
    t90 = np.full(n, np.nan)
    for level, arr, before_on_rise in ((s.level(10), t10, True), (s.level(90), t90, False)):
        c = _crossings(z, level)
        if c.size == 0:
            continue
        before = np.searchsorted(c, k50, side="right") - 1  # last crossing at or before k50
        after = np.searchsorted(c, k50, side="left")  # first crossing at or after k50
        kb = np.where(before >= 0, c[np.maximum(before, 0)], -1)
        ka = np.where(after < c.size, c[np.minimum(after, c.size - 1)], -1)
        kb = np.where(kb > prev_b, kb, -1)
        ka = np.where((ka >= 0) & (ka < next_b), ka, -1)
        use_before = rising if before_on_rise else ~rising
        k = np.where(use_before, kb, ka)
        arr[:] = _interp(z, k, level)
    return _Edges(t50, rising, t10, t90, k50)


def _integral(y: np.ndarray, sample_rate: float) -> np.ndarray:
    """Running integral ∫y dt by the trapezoidal rule, 0 at the first sample (s·unit).

    The trapezoidal rule is the exact inverse of a first-order high-pass discretised by the
    bilinear transform, and second-order accurate for the analogue one.
    """
    c = np.cumsum(y)
    return (c - 0.5 * (y + y[0])) / sample_rate


def compensate_coupling(x: np.ndarray, sample_rate: float, tau_s: float,
                        span: int | None = None) -> np.ndarray:
    """Undo a first-order high-pass (AC coupling) of time constant ``tau_s``.

    ``x̂[n] = (x[n] − m) + (1/τ)·S[n] + m`` with ``S = ∫(x − m) dt`` (trapezoidal rule, 0 at
    the first sample) and ``m`` the mean over ``x[:span]``. The "DC fix": in steady state the
    high-pass output has no DC, so the recorded mean ``m`` is an offset of the recorder; taken
    over a whole number of periods it makes S periodic (no ramp). The result keeps the
    recorded mean, since the true DC before the coupling cannot be known.

    Parameters
    ----------
    x : ndarray
        Recorded samples.
    sample_rate : float
        Sample rate (Hz).
    tau_s : float
        Coupling time constant (s), > 0.
    span : int, optional
        Samples over which to take the mean: a whole number of periods (default: all, which
        leaves a small ramp when the record ends inside a period).

    Returns
    -------
    ndarray
        The compensated waveform, same shape and unit.
    """
    x = np.asarray(x, dtype=np.float64)
    n = x.size
    span = n if span is None else max(2, min(int(span), n))
    m = float(np.mean(x[:span]))
    y = x - m
    s = _integral(y, sample_rate)
    return y + s / tau_s + m


def _whole_period_span(edges: _Edges, n: int) -> int:
    """Samples up to the last rising 50 % crossing after the first (whole periods), or n."""
    rise = edges.k50[edges.rising]
    if rise.size >= 2:
        return int(rise[-1] - rise[0])
    return n


def fit_coupling(x: np.ndarray, sample_rate: float) -> CouplingFit | None:
    """Estimate an AC-coupling time constant from the droop of a two-level wave.

    Finds the flat segments between transitions (trimmed by 10 % of their length, at least
    3 samples, at each end to skip the edges), forms ``S = ∫(x − m) dt`` and solves
    ``min_β Σ_segments Σ (x̃ + β·S̃)²`` where ~ removes each segment's mean: β = 1/τ.

    Parameters
    ----------
    x : ndarray
        Recorded samples of a square or pulse wave.
    sample_rate : float
        Sample rate (Hz).

    Returns
    -------
    CouplingFit or None
        None when the wave is not two-level enough to find flats, or the droop is not
        significant (1/τ below 5 standard uncertainties, or negative).
    """
    x = np.asarray(x, dtype=np.float64)
    s = state_levels(x)
    if s.amplitude <= 0:
        return None
    return _fit_coupling(x, float(sample_rate), _find_edges(x, s))


def _fit_coupling(x: np.ndarray, sample_rate: float, edges: _Edges) -> CouplingFit | None:
    if edges.k50.size < 3:
        return None
    start = edges.k50[:-1] + 1
    stop = edges.k50[1:] + 1
    trim = np.maximum(3, ((stop - start) * 0.10).astype(np.int64))
    a, b = start + trim, stop - trim
    ok = (b - a) >= 8
    a, b = a[ok], b[ok]
    if a.size < 2:
        return None
    span = _whole_period_span(edges, x.size)
    first = int(edges.k50[edges.rising][0]) + 1 if np.any(edges.rising) else 0
    m = float(np.mean(x[first:first + span])) if span < x.size else float(np.mean(x))
    # work on a regular subset of the flats' samples (enough for 1/τ; keeps long records fast)
    step = max(1, int(math.ceil(float(np.sum(b - a)) / _COUPLING_SAMPLES)))
    a_d = -(-a // step)  # first multiple of step at or after a
    b_d = -(-b // step)
    keep = (b_d - a_d) >= 3
    if np.count_nonzero(keep) < 2:
        return None
    a_d, b_d = a_d[keep], b_d[keep]
    lengths = b_d - a_d
    # indices of every (subset) sample inside the trimmed flats, and the flat each belongs to
    lab = np.repeat(np.arange(a_d.size), lengths)
    offsets = np.arange(lab.size) - np.repeat(np.cumsum(lengths) - lengths, lengths)
    idx = (a_d[lab] + offsets) * step
    # ∫(x − m) dt (trapezoidal, 0 at the first sample; see _integral) at those samples only: the
    # record's running sum at idx, the mean and the trapezoid's half end-samples taken out there
    x_idx = x[idx]
    ys = x_idx - m
    ss = (_running_sum_at(x, idx, x_idx) - m * (idx + 1) - 0.5 * (ys + (x[0] - m))) / sample_rate
    ym = np.bincount(lab, ys) / lengths
    sm = np.bincount(lab, ss) / lengths
    yt = ys - ym[lab]
    st = ss - sm[lab]
    sxx = float(st @ st)
    if sxx <= 0:
        return None
    beta = -float(yt @ st) / sxx
    resid = yt + beta * st
    dof = max(ys.size - a_d.size - 1, 1)
    u_beta = math.sqrt(float(resid @ resid) / dof / sxx)
    if not beta > 0 or (u_beta > 0 and beta < _DROOP_SIGNIFICANCE * u_beta):
        return None
    tau = 1.0 / beta
    t_flat = float(np.mean(stop - start)) / sample_rate
    return CouplingFit(tau_s=tau, tau_u_s=u_beta / beta ** 2,
                       droop_pct=100.0 * (1.0 - math.exp(-t_flat / tau)), n_segments=int(a.size))


def _running_sum_at(x: np.ndarray, idx: np.ndarray, x_idx: np.ndarray) -> np.ndarray:
    """``np.cumsum(x)[idx]`` for strictly increasing ``idx`` (``x_idx`` = ``x[idx]``), without the
    record-long running sum: the sums between consecutive indices (one read of the record, no
    record-long array written), accumulated over the indices only."""
    between = np.add.reduceat(x, idx)[:-1]  # x[idx[j]] + … + x[idx[j+1] − 1]
    out = np.empty(idx.size)
    out[0] = 0.0
    np.cumsum(between, out=out[1:])
    out += float(np.sum(x[:idx[0]]))  # now the sums up to idx[j] − 1
    out += x_idx
    return out


def estimate_coupling_tau(x: np.ndarray, sample_rate: float) -> float | None:
    """AC-coupling time constant (s) from a recorded square wave, or None when none is seen.

    A convenience over :func:`fit_coupling` for calibration: feed a recording of a clean,
    DC-coupled square wave (tens of Hz, well below the card's corner is best) taken through
    the input to be characterised.
    """
    fit = fit_coupling(x, sample_rate)
    return None if fit is None else fit.tau_s


def _mean_u(v: np.ndarray) -> tuple[float | None, float | None]:
    v = v[np.isfinite(v)]
    if v.size == 0:
        return None, None
    u = float(np.std(v, ddof=1) / math.sqrt(v.size)) if v.size > 1 else None
    return float(np.mean(v)), u


def edge_period(rising: np.ndarray, falling: np.ndarray) -> tuple[float, float] | None:
    """(T, u(T)) of :func:`edge_line` (in samples), or None."""
    line = edge_line(rising, falling)
    return None if line is None else (line[0], line[1])


def edge_line(rising: np.ndarray, falling: np.ndarray) -> tuple[float, float, float, float, float] | None:
    """Period from the 50 % instants of a two-level wave, with its standard uncertainty.

    Fits ``t = a_rise·[rising] + a_fall·[falling] + T·j`` by least squares, j being the cycle
    index of each instant: the IEEE 181 period (interval between same-polarity 50 % instants)
    estimated from every edge at once. The uncertainty comes from the residual scatter, so it
    includes edge jitter and the sampling grid's quantisation of sharp edges, which a harmonic
    model of a square cannot see. Instants in samples; returns (T, u(T), c, u(c), j_c) in
    samples, or None with fewer than 2 rising and 2 falling instants (no residual degree of
    freedom). ``c`` is the fitted time of rising edge number ``j_c`` (a fractional cycle index
    counted from the first rising instant), chosen so that ``c`` and ``T`` are uncorrelated:
    j_c = −cov(a_rise, T)/var(T). A long record measured in blocks chains these centres.
    """
    rising = np.asarray(rising, dtype=float)
    falling = np.asarray(falling, dtype=float)
    if rising.size < 2 or falling.size < 2 or rising.size + falling.size < 5:
        return None
    t = np.concatenate([rising, falling])
    d = np.zeros((t.size, 3))
    d[:rising.size, 0] = 1.0
    d[rising.size:, 1] = 1.0
    d[:rising.size, 2] = np.arange(rising.size)
    d[rising.size:, 2] = np.arange(falling.size)
    beta, *_ = np.linalg.lstsq(d, t, rcond=None)
    resid = t - d @ beta
    dof = t.size - 3
    s2 = float(resid @ resid) / dof
    cov = s2 * np.linalg.inv(d.T @ d)
    var_t = max(float(cov[2, 2]), 0.0)
    j_c = -float(cov[0, 2]) / var_t if var_t > 0 else 0.5 * (rising.size - 1)
    c = float(beta[0]) + float(beta[2]) * j_c
    var_c = float(cov[0, 0]) + 2.0 * j_c * float(cov[0, 2]) + j_c * j_c * var_t
    return float(beta[2]), math.sqrt(var_t), c, math.sqrt(max(var_c, 0.0)), j_c


def pulse_parameters(x: np.ndarray, sample_rate: float, coupling_tau_s: float | None = None,
                     compensate: bool = True, force: bool = False,
                     levels: StateLevels | None = None) -> PulseResult:
    """IEEE 181 pulse parameters of a two-level wave, compensating AC-coupling droop.

    Parameters
    ----------
    x : ndarray
        Samples (V or FS).
    sample_rate : float
        Sample rate (Hz).
    coupling_tau_s : float, optional
        Known coupling time constant (s), e.g. from a sound-card calibration. When None and
        ``compensate`` is True, the droop is estimated from the wave itself and compensated
        when significant.
    compensate : bool
        Set False to analyse the samples as recorded.
    force : bool
        Analyse the wave as a pulse even when its histogram is not two-level (slow edges): the
        states are still the histogram's low and high modes (IEEE 181), read with that caveat.
    levels : StateLevels, optional
        ``state_levels(x)`` when the caller has it already (it is not computed again).

    Returns
    -------
    PulseResult
        ``two_level`` False (all parameters None) when the wave is not bimodal.
    """
    x = np.asarray(x, dtype=np.float64)
    fs = float(sample_rate)
    warnings: list[str] = []
    raw = state_levels(x) if levels is None else levels
    # a drooped square is smeared: test bimodality loosely before deciding to compensate
    tau, source, droop = None, None, None
    raw_edges = None
    if compensate and coupling_tau_s is not None and coupling_tau_s > 0:
        tau, source = float(coupling_tau_s), "calibration"
    elif compensate and raw.amplitude > 0 and raw.fraction_in_states >= _TRY_DROOP_FRACTION:
        raw_edges = _find_edges(x, raw)
        cf = _fit_coupling(x, fs, raw_edges)
        if cf is not None:
            tau, source, droop = cf.tau_s, "estimated", cf.droop_pct
    z = x
    if tau is not None:
        if raw_edges is None and raw.amplitude > 0:
            raw_edges = _find_edges(x, raw)
        span = _whole_period_span(raw_edges, x.size) if raw_edges is not None else x.size
        z = compensate_coupling(x, fs, tau, span)
    s = state_levels(z) if tau is not None else raw
    if not s.two_level and not (force and s.amplitude > 0):
        return PulseResult(two_level=False, coupling_tau_s=tau, coupling_source=source,
                           droop_pct=droop)
    e = raw_edges if (tau is None and raw_edges is not None) else _find_edges(z, s)
    amp = s.amplitude
    rise_idx = np.flatnonzero(e.rising)
    fall_idx = np.flatnonzero(~e.rising)
    rise, rise_u = _mean_u((e.t90[rise_idx] - e.t10[rise_idx]) / fs)
    fall, fall_u = _mean_u((e.t10[fall_idx] - e.t90[fall_idx]) / fs)
    # A transition within a few samples is resolved no better than the sampling grid: each
    # 10 % and 90 % instant then carries a rectangular error of ±Ts/2 that repeats from edge
    # to edge (so it does not average out); GUM 4.3.7 gives u = Ts/√12 per instant, √2 of it
    # for their difference.
    u_grid = math.sqrt(2.0) / (fs * math.sqrt(12.0))
    if rise is not None and rise < 3.0 / fs:
        rise_u = math.hypot(rise_u or 0.0, u_grid)
    if fall is not None and fall < 3.0 / fs:
        fall_u = math.hypot(fall_u or 0.0, u_grid)
    duty = duty_u = period = None
    edge_t = edge_u = None
    centre: tuple[float | None, float | None, float | None] = (None, None, None)
    n_periods = 0
    if rise_idx.size and rise_idx[0] + 2 < e.t50.size:
        seq = e.t50[rise_idx[0]:]
        r, f = seq[0::2], seq[1::2]
        n_periods = min(r.size - 1, f.size)
        if n_periods >= 1:
            per = r[1:n_periods + 1] - r[:n_periods]
            high = f[:n_periods] - r[:n_periods]
            duty = 100.0 * float(np.sum(high) / np.sum(per))
            if n_periods > 1:
                duty_u = 100.0 * float(np.std(high / per, ddof=1) / math.sqrt(n_periods))
            period = float(np.sum(per)) / n_periods / fs
        if n_periods >= 2:
            ep = edge_line(r, f)
            if ep is not None:
                edge_t, edge_u = ep[0] / fs, ep[1] / fs
                centre = (ep[2] / fs, ep[3] / fs, ep[4])
                edges_s = [v for v in (rise, fall) if v is not None]
                if edges_s and min(edges_s) < 2.0 / fs:
                    # Edges within two samples: each 50 % instant is quantised by up to ±Ts/2
                    # by the sampling grid. When the wave is nearly coherent with the grid that
                    # error drifts slowly and hides in the slope, not the scatter: bound it as
                    # a rectangular slope error of half-width Ts/n (GUM 4.3.7, Type B).
                    u_grid = (1.0 / fs) / (n_periods * math.sqrt(3.0))
                    edge_u = math.sqrt(edge_u ** 2 + u_grid ** 2)
    if n_periods < 1:
        warnings.append("no complete period between two rising edges — duty cycle not determined")
    over = under = None
    if e.k50.size >= 2:
        bounds = e.k50 + 1
        seg_max = np.maximum.reduceat(z, bounds)[:-1]
        seg_min = np.minimum.reduceat(z, bounds)[:-1]
        after_rise = e.rising[:-1]
        if np.any(after_rise):
            over = max(0.0, 100.0 * float(np.mean(seg_max[after_rise] - s.high)) / amp)
        if np.any(~after_rise):
            under = max(0.0, 100.0 * float(np.mean(s.low - seg_min[~after_rise])) / amp)
    for name, value in (("rise", rise), ("fall", fall)):
        if value is not None and value < 3.0 / fs:
            warnings.append(f"{name} time {value * 1e6:.3g} µs is within 3 sample intervals — it shows "
                            "the recorder's bandwidth, not the source; use a faster sample rate")
    return PulseResult(
        two_level=True, state_low=s.low, state_high=s.high, duty_cycle_pct=duty,
        duty_cycle_u_pct=duty_u, rise_time_s=rise, rise_time_u_s=rise_u, fall_time_s=fall,
        fall_time_u_s=fall_u, overshoot_pct=over, undershoot_pct=under, period_s=period,
        edge_period_s=edge_t, edge_period_u_s=edge_u, edge_center_s=centre[0], edge_center_u_s=centre[1],
        edge_center_cycle=centre[2], n_periods=int(n_periods), n_rising=int(rise_idx.size), n_falling=int(fall_idx.size),
        noise_rms=s.noise_rms, coupling_tau_s=tau, coupling_source=source, droop_pct=droop,
        warnings=tuple(warnings),
    )
