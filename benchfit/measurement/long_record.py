"""Measure a long record block by block in constant memory: :func:`measure_blocks` (pure).

A file with more samples than :data:`benchfit.capture.blocks.BLOCK_THRESHOLD_SAMPLES`
(all channels together) is not loaded whole: :class:`~benchfit.capture.blocks.BlockReader`
hands out consecutive blocks (ordinary :class:`~benchfit.capture.capture.Capture` objects)
and every channel keeps a small accumulator (:class:`BlockChannel`). What each result is:

* **frequency** — from the whole record, not an average: every block gets the same
  multi-harmonic IEEE 1057 fit as a short capture (:func:`~benchfit.measurement.tone.fit_tone`)
  and gives its fundamental's midpoint phase and its own frequency; the phases are chained
  across blocks and one weighted line (:mod:`benchfit.measurement.chain`) gives the frequency
  with the whole record's Cramér–Rao-bound accuracy. A two-level wave (whose harmonic-fit u
  is too small, see :func:`benchfit.measurement.summary.measure_channel`) chains the centres
  of the blocks' IEEE 181 edge lines the same way;
* **levels** — exact: DC and RMS from sums and sums of squares over the whole periods of the
  whole record, vmin/vmax from the extremes, and the robust peak-to-peak from the exact 0.1th
  and 99.9th percentiles of all samples (each tail's smallest/largest ⌈0.001·N⌉ + 3 samples are
  kept across blocks, so the order statistics are the whole record's). Past
  :data:`~benchfit.measurement.pooling.TAIL_CAP` samples a tail (about 1e9 samples a channel)
  a fixed histogram takes their place, so memory does not grow with length; its percentiles lie
  within one bin (a quarter-millionth of the range) and the bin enters the peak-to-peak's u;
* **fundamental amplitude, harmonic table, THD** — coherent averages over the blocks: each
  block's harmonic phasors are referred to its own fundamental's phase
  (``Q_k = P_k·(P̄_1/|P_1|)^k``, which does not depend on where the block starts), averaged
  with the blocks' lengths as weights, so noise does not add the bias an average of
  magnitudes would. Their u is the blocks' stated u combined, widened by the blocks' scatter
  when it is significantly larger (Birge ratio, :func:`~benchfit.measurement.chain.birge_factor`);
* **THD+N** — the residual power of every block over the whole record's fundamental;
* **duty cycle, edges, states** — IEEE 181 per block, pooled (weighted by periods) with u as above.

The result says so in each channel's warnings: "measured in N blocks of T s …".
"""

from __future__ import annotations

import math
import os
from collections import deque
from collections.abc import Callable, Iterable
from dataclasses import dataclass
from typing import Any, Sequence

import numpy as np

from benchfit.errors import MeasureError
from benchfit.measurement.chain import chain_points, fit_chained_line
from benchfit.measurement.distortion import analyse_distortion, max_harmonic_order
from benchfit.measurement.drift import midpoint_phase
from benchfit.measurement.levels import find_clipping, quantisation_step, vpp_noise_u, whole_period_span
from benchfit.measurement.pooling import percentile_tails, pool_pulses, weighted_mean
from benchfit.measurement.pulse import PulseResult, pulse_parameters, state_levels
from benchfit.measurement.result import ChannelMeasurement, Harmonic, Measurement
from benchfit.measurement.threads import one_blas_thread
from benchfit.measurement.tone import fit_harmonics, fit_tone, synthesize

__all__ = ["BlockChannel", "measure_blocks", "measure_long_file", "is_long_file"]

#: samples of the record kept (at a regular stride) for the peak-to-peak's noise model, as measure does
_MODEL_SAMPLES = 1 << 16


@dataclass
class _Block:
    """What one periodic block of one channel contributes."""

    start: int
    n: int
    span: int
    fit_orders: np.ndarray
    q: np.ndarray            # coherent (phase-referred) harmonic phasors
    amps_u: np.ndarray
    p1_start: complex        # fundamental phasor at the block's first sample
    t_mid: float
    psi: float
    psi_u: float
    f: float
    f_u: float | None
    dc_u: float
    rss: float
    n_params: int
    thd: float | None
    thd_u: float | None
    rest_power: float        # mean square of x − dc − fundamental over the block's whole periods
    iterations: int
    converged: bool
    pulse: PulseResult | None


class BlockChannel:
    """Accumulate one channel's blocks; :meth:`finish` gives its :class:`ChannelMeasurement`.

    Parameters
    ----------
    sample_rate : float
        Samples per second (Hz), after the timebase correction.
    n_max : int
        An upper bound of the record's samples (the file header's frame count, or for a text
        file its size in bytes / 2): it sets how much of each tail is kept for the exact
        percentiles, ⌈0.001·n_max⌉ + 3 samples per tail.
    options : dict
        The keyword arguments of :func:`benchfit.measurement.summary.measure_channel` that come
        from the calibration (:func:`benchfit.measurement.summary.channel_options`).
    harmonics : int
        Highest harmonic order H.
    force_pulse : bool
        As for :func:`~benchfit.measurement.summary.measure_channel`.
    """

    def __init__(self, sample_rate: float, n_max: int, options: dict[str, Any], *, harmonics: int = 10,
                 force_pulse: bool = False) -> None:
        self.fs = float(sample_rate)
        self.opts = dict(options)
        self.unit = str(self.opts.get("unit", "FS"))
        self.harmonics = max(1, int(harmonics))
        self.force_pulse = force_pulse
        self.n_max = max(int(n_max), 2)
        self._stride = max(1, -(-self.n_max // _MODEL_SAMPLES))
        self.n = 0
        self.n_blocks = 0
        self.block_frames = 0
        self._sums: list[tuple[int, int, float, float]] = []
        self._recent: deque[tuple[int, np.ndarray]] = deque(maxlen=2)
        self._tails = percentile_tails(self.n_max)
        self._strided: list[np.ndarray] = []
        self.vmin, self.vmax = math.inf, -math.inf
        self._crossings = 0
        self._blocks: list[_Block] = []
        self._q_step: float | None = None
        self._clip_runs = self._clip_samples = 0
        self._clip_level: float | None = None
        self._clip_kind = ""
        self._clip2_runs = self._clip2_samples = 0
        self._clip2_level: float | None = None
        self._clip2_kind = ""
        self._snr_noise: float | None = None
        self._notes: list[str] = []
        self._pulse_not_given: str | None = None
        self._few_samples = False

    # --- accumulation ---------------------------------------------------------------------
    def push(self, x: np.ndarray, start: int) -> None:
        """Add the block ``x`` (1-D samples) that starts at sample ``start`` of the record."""
        from benchfit.measurement.summary import _DETECT_RATIO, _middle_crossings

        x = np.asarray(x, dtype=np.float64)
        n = x.size
        if n < 2:
            return
        self.n_blocks += 1
        self.block_frames = max(self.block_frames, n)
        self.n = max(self.n, start + n)
        self._sums.append((start, n, float(np.sum(x)), float(x @ x)))
        self._recent.append((start, x))
        self.vmin, self.vmax = min(self.vmin, float(x.min())), max(self.vmax, float(x.max()))
        self._tails.push(x)
        first = (-start) % self._stride
        self._strided.append(x[first::self._stride].copy())
        if self._q_step is None:
            self._q_step = quantisation_step(x)  # the code grid shows in any stretch (as measure reads it)
        flat = float(np.ptp(x)) <= 1e-12 * max(1.0, float(np.max(np.abs(x))))
        clip = find_clipping(x, self.unit, self.opts.get("full_scale"), rails=True)
        if clip.clipped:
            self._clip_runs += clip.n_runs
            self._clip_samples += clip.n_samples
            self._clip_level = clip.level if self._clip_level is None else self._clip_level
            self._clip_kind = self._clip_kind or clip.kind
        if flat:
            return
        crossings = _middle_crossings(x)
        self._crossings += crossings
        if crossings < 2:
            return
        fit = fit_tone(x, self.fs, n_harmonics=self.harmonics)
        if fit is None or not fit.phasors.size:
            return
        amp, amp_u = float(fit.amplitudes[0]), float(fit.amplitudes_u[0])
        if not (amp > 0 and (amp_u == 0 or amp >= _DETECT_RATIO * amp_u)):
            return
        self._periodic_block(x, start, fit, clip.kind == "rail")

    def _periodic_block(self, x: np.ndarray, start: int, fit: Any, rail: bool) -> None:
        from benchfit.measurement.summary import _MIN_PULSE_SAMPLES_PER_PERIOD, _MIN_PULSE_THD, _snr_without_harmonics

        fs, n = self.fs, x.size
        f = float(fit.frequency_hz)
        f_u = None if fit.frequency_u_hz is None else float(fit.frequency_u_hz)
        psi, psi_u = midpoint_phase(complex(fit.phasors[0]), fit.phasor_cov[0], f, n, fs)
        dist = analyse_distortion(x, fs, fit)
        pulse: PulseResult | None = None
        if not self.force_pulse and fit.orders.size >= 3 and dist.thd is not None and dist.thd < _MIN_PULSE_THD:
            pulse = None
        elif fs / f < _MIN_PULSE_SAMPLES_PER_PERIOD:
            self._few_samples = True
        else:
            res = pulse_parameters(x, fs, self.opts.get("coupling_tau_s"), force=self.force_pulse)
            if res.two_level:
                pulse = res
                if self.force_pulse and not state_levels(x).two_level and not any("forced" in s for s in self._notes):
                    self._notes.append("pulse analysis forced: the wave is not two-level, so duty cycle and edge "
                                       "times use its histogram's low and high modes as states — read them as "
                                       "indications")
                if res.edge_period_s:
                    # the harmonic table at k × the edge frequency, as measure does for a two-level wave
                    fit = fit_harmonics(x, fs, 1.0 / res.edge_period_s, orders=fit.orders)
                    dist = analyse_distortion(x, fs, fit)
                if rail:
                    clip2 = find_clipping(x, self.unit, self.opts.get("full_scale"), rails=False)
                    self._clip2_runs += clip2.n_runs
                    self._clip2_samples += clip2.n_samples
                    if clip2.clipped:
                        self._clip2_level = clip2.level if self._clip2_level is None else self._clip2_level
                        self._clip2_kind = self._clip2_kind or clip2.kind
            elif self._pulse_not_given is None:
                frac = state_levels(x).fraction_in_states
                self._pulse_not_given = (f"not a two-level wave: {100 * frac:.0f} % of the samples lie near two "
                                         "levels, 75 % are needed (slow edges, or not a pulse; force_pulse=True gives "
                                         "them anyway)")
        if self._snr_noise is None:
            self._snr_noise = _snr_without_harmonics(x, fs, float(fit.frequency_hz), fit.orders)
        p = fit.phasors
        p1 = complex(p[0])
        rot = np.conj(p1) / abs(p1)
        q = p * rot ** fit.orders
        span, _ = whole_period_span(n, fs, float(fit.frequency_hz))
        rest = (dist.thd_n * abs(p1) / math.sqrt(2.0)) ** 2 if math.isfinite(dist.thd_n) else math.nan
        self._blocks.append(_Block(
            start=start, n=n, span=span, fit_orders=fit.orders.copy(), q=q, amps_u=np.asarray(fit.amplitudes_u),
            p1_start=p1, t_mid=(start + (n - 1) / 2.0) / fs, psi=psi, psi_u=psi_u, f=f, f_u=f_u,
            dc_u=float(fit.dc_u), rss=float(fit.rss), n_params=int(fit.n_params), thd=dist.thd, thd_u=dist.thd_u,
            rest_power=rest, iterations=int(fit.iterations), converged=bool(fit.converged), pulse=pulse))

    # --- results ------------------------------------------------------------------------------
    def _span_sums(self, span: int) -> tuple[float, float] | None:
        """Σx and Σx² over the first ``span`` samples (None when those samples are no longer held)."""
        s1 = s2 = 0.0
        for start, n, a, b in self._sums:
            if start + n <= span:
                s1, s2 = s1 + a, s2 + b
            elif start < span:
                kept = [x for st, x in self._recent if st == start]
                if not kept:
                    return None
                part = kept[0][: span - start]
                s1, s2 = s1 + float(np.sum(part)), s2 + float(part @ part)
        return s1, s2

    def _levels(self, f: float | None) -> tuple[float, float, float, int, int]:
        span, periods = whole_period_span(self.n, self.fs, f)
        sums = self._span_sums(span)
        if sums is None:
            span, periods = self.n, 0
            sums = self._span_sums(span)
        assert sums is not None
        vdc = sums[0] / span
        vrms = math.sqrt(max(sums[1], 0.0) / span)
        vac = math.sqrt(max(sums[1] / span - vdc * vdc, 0.0))
        return vdc, vrms, vac, span, periods

    def finish(self, block_note: str, late_warnings: Sequence[str] = ()) -> ChannelMeasurement:
        from benchfit.measurement.summary import _clip_warning, _fmt
        from benchfit.measurement.levels import ClipReport

        if self.n < 2:
            raise MeasureError("the record holds no samples — record or export it again")
        warnings = list(self.opts.get("extra_warnings", ())) + list(late_warnings) + [block_note]
        lo_pct, hi_pct = self._tails.percentiles(self.n)
        vpp = hi_pct - lo_pct
        extra: dict[str, Any] = {"harmonics_h_requested": self.harmonics,
                                 "timebase_ppm": float(self.opts.get("timebase_ppm", 0.0)),
                                 "timebase_u_ppm": float(self.opts.get("timebase_u_ppm", 0.0)),
                                 "gain_u_rel": self.opts.get("gain_u_rel"),
                                 "blocks": self.n_blocks, "block_s": self.block_frames / self.fs,
                                 "vmax": self.vmax, "vmin": self.vmin}
        clip = ClipReport(self._clip_runs > 0, self._clip_runs, self._clip_samples, self._clip_level, self._clip_kind)
        usable = self._blocks
        if len(usable) * 2 <= self.n_blocks:
            vdc, vrms, _, _, _ = self._levels(None)
            flat = self.vmax - self.vmin <= 1e-12 * max(1.0, abs(self.vmax), abs(self.vmin))
            if not flat and self._crossings < 2:
                warnings.append(f"the record ({_fmt(self.n / self.fs, 's')}) holds less than one period of the "
                                "signal (it crosses its middle level fewer than twice) — frequency, distortion and "
                                "pulse values are not given; record at least 3 periods")
            else:
                what = "silence: all samples equal" if flat else "no periodic signal found"
                if usable:
                    what += f" in {self.n_blocks - len(usable)} of {self.n_blocks} blocks"
                warnings.append(f"{what} — frequency, distortion and pulse values are not given; "
                                "check the connection and the input level")
            if clip.clipped:
                warnings.append(_clip_warning(clip))
            return ChannelMeasurement(
                name=str(self.opts.get("name", "ch1")), unit=self.unit, frequency_hz=None, frequency_u_hz=None,
                amplitude=None, vdc=vdc, vrms=vrms, vpp=vpp, duty_cycle_pct=None, rise_time_s=None,
                fall_time_s=None, thd_pct=None, thd_n_pct=None, sinad_db=None, harmonics=(),
                clipped=bool(clip.clipped), warnings=tuple(warnings), extra=extra)
        if len(usable) < self.n_blocks:
            warnings.append(f"{self.n_blocks - len(usable)} of {self.n_blocks} blocks hold no periodic signal — "
                            "frequency, distortion and pulse values come from the other blocks; check the "
                            "recording for dropouts")
        return self._periodic_result(usable, warnings, extra, clip, lo_pct, hi_pct, vpp)

    def _periodic_result(self, blocks: list[_Block], warnings: list[str], extra: dict[str, Any], clip: Any,
                         lo_pct: float, hi_pct: float, vpp: float) -> ChannelMeasurement:
        from benchfit.measurement.budgets import channel_budgets
        from benchfit.measurement.levels import ClipReport
        from benchfit.measurement.summary import (_DROOP_WARN_PCT, _LOW_SNR_DB, _clip_warning, _f, _fmt,
                                                  _snr_warning, _vrms_u, _with_gain)

        fs = self.fs
        opts = self.opts
        gain_u_rel = opts.get("gain_u_rel")
        tb_u_ppm = float(opts.get("timebase_u_ppm", 0.0))
        pulses = [b for b in blocks if b.pulse is not None]
        two_level = 2 * len(pulses) > len(blocks)
        edge_blocks = [b for b in pulses if b.pulse is not None and b.pulse.edge_center_s is not None
                       and b.pulse.edge_period_s and b.pulse.edge_period_u_s]
        edge_mode = two_level and len(edge_blocks) * 2 > len(pulses)
        if edge_mode:
            x = np.array([b.start / fs + (b.pulse.edge_center_s or 0.0) for b in edge_blocks if b.pulse is not None])
            per = np.array([b.pulse.edge_period_s for b in edge_blocks if b.pulse is not None], dtype=float)
            per_u = np.array([b.pulse.edge_period_u_s for b in edge_blocks if b.pulse is not None], dtype=float)
            y_frac = np.array([b.pulse.edge_center_cycle for b in edge_blocks if b.pulse is not None], dtype=float)
            y_u = np.array([b.pulse.edge_center_u_s for b in edge_blocks if b.pulse is not None], dtype=float) / per
            slopes, slopes_u = 1.0 / per, per_u / per ** 2
            method = f"edge regression (IEEE 181 period), edge lines of {len(edge_blocks)} blocks chained"
        else:
            two_level = two_level and bool(pulses)
            ok = [b for b in blocks if b.f_u is not None]
            if not ok:
                ok = blocks
            x = np.array([b.t_mid for b in ok])
            y_frac = np.array([b.psi / (2 * math.pi) for b in ok])
            y_u = np.array([b.psi_u / (2 * math.pi) for b in ok])
            slopes = np.array([b.f for b in ok])
            slopes_u = np.array([math.nan if b.f_u is None else b.f_u for b in ok])
            method = f"multi-harmonic fit, phases of {len(ok)} blocks chained"
        y, seg = chain_points(x, y_frac, np.ones_like(x), slopes, np.nan_to_num(slopes_u, nan=np.inf))
        line = fit_chained_line(x, y, y_u, seg, slopes, slopes_u)
        f = line.slope
        u_fit = line.slope_u
        if edge_mode:
            edges = [v for b in edge_blocks if b.pulse is not None
                     for v in (b.pulse.rise_time_s, b.pulse.fall_time_s) if v is not None]
            periods_all = sum(b.pulse.n_periods for b in edge_blocks if b.pulse is not None)
            if edges and min(edges) < 2.0 / fs and periods_all > 0:
                # edges within two samples: every 50 % instant is quantised by up to ±Ts/2, an error that
                # drifts slowly along the record and so is not in the blocks' scatter; over the whole
                # record it bounds the period's slope at ±Ts/n (GUM 4.3.7, Type B), as for one capture
                u_grid_t = (1.0 / fs) / (periods_all * math.sqrt(3.0))
                u_fit = math.hypot(u_fit, f * f * u_grid_t)
        u_f = math.hypot(u_fit, abs(f) * tb_u_ppm * 1e-6)
        if line.n_segments > 1:
            warnings.append(f"the phase chain broke {line.n_segments - 1} time(s) (a gap, a glitch or a frequency "
                            "step between blocks): each stretch has its own phase, the frequency is their common "
                            "slope")
        if line.birge > 1:
            warnings.append(f"the blocks' phases scatter {line.birge:.2g}× more than their noise explains "
                            "(frequency wander or drift): the frequency u is widened by that factor")
        if not all(b.converged for b in blocks):
            bad = sum(not b.converged for b in blocks)
            warnings.append(f"the frequency fit did not settle in {bad} of {len(blocks)} blocks — the frequency "
                            "may be off; record a longer, steadier signal")
        vdc, vrms, vac, span, periods = self._levels(f)
        # coherent harmonic table over the blocks with the same orders as the first
        orders = blocks[0].fit_orders
        same = [b for b in blocks if b.fit_orders.size == orders.size and np.array_equal(b.fit_orders, orders)]
        w = np.array([b.n for b in same], dtype=float)
        qs = np.array([b.q for b in same])
        q_mean = (w[:, None] * qs).sum(axis=0) / w.sum()
        amps = np.abs(q_mean)
        amps_u = []
        for k in range(orders.size):
            _, uk = weighted_mean(np.abs(qs[:, k]).tolist(), [float(b.amps_u[k]) for b in same], w.tolist())
            amps_u.append(uk if uk is not None else math.nan)
        first = same[0]
        p1_rec = first.p1_start * np.exp(-2j * math.pi * f * first.start / fs)  # fundamental at the record start
        phases = np.degrees(np.angle(q_mean * (p1_rec / abs(p1_rec)) ** orders))
        amplitude = float(amps[0])
        amplitude_u = amps_u[0]
        rss = float(sum(b.rss for b in blocks))
        n_all = sum(b.n for b in blocks)
        dof = max(n_all - sum(b.n_params for b in blocks), 1)
        _, dc_u = weighted_mean([0.0] * len(blocks), [b.dc_u for b in blocks], [b.n for b in blocks])
        dc_u = float(dc_u or 0.0)
        h_eff = max_harmonic_order(f, fs, self.harmonics)
        thd = thd_u = None
        if orders.size >= 2 and amplitude > 0 and h_eff >= 2:
            thd = float(math.sqrt(float(np.sum(amps[1:] ** 2))) / amplitude)
            tb = [b for b in same if b.thd is not None]
            if tb:
                _, thd_u = weighted_mean([float(b.thd or 0.0) for b in tb], [b.thd_u for b in tb], [b.n for b in tb])
        if self.harmonics >= 2 and h_eff < 2:
            warnings.append(f"no harmonic lies below Nyquist ({_fmt(fs / 2, 'Hz')}) — THD not given")
        rest = [b for b in blocks if math.isfinite(b.rest_power)]
        rest_rms = math.sqrt(sum(b.rest_power * b.span for b in rest) / sum(b.span for b in rest)) if rest else math.nan
        thd_n = rest_rms / (amplitude / math.sqrt(2.0)) if amplitude > 0 else math.inf
        sinad = -20.0 * math.log10(thd_n) if 0 < thd_n < math.inf else (math.inf if thd_n == 0 else -math.inf)
        if self._few_samples:
            warnings.append(f"duty cycle and edge times are not given: {fs / f:.2g} samples a period are too few "
                            "to tell a pulse from a sine (at least 6 are needed) — record at a higher sample rate")
        pooled: dict[str, Any] = {}
        if two_level:
            pp = [b.pulse for b in pulses if b.pulse is not None]
            pooled = pool_pulses(pp, fs, self._q_step or 0.0)
            warnings.extend(pp[0].warnings)
            if pooled["source"] == "estimated" and (pooled["droop"] or 0.0) >= _DROOP_WARN_PCT:
                warnings.append(
                    f"flat tops droop {pooled['droop']:.0f} % (input AC coupling, τ ≈ "
                    f"{_fmt(pooled['tau'], 's')} estimated): pulse values are compensated, levels "
                    "and THD are as recorded — calibrate the input's coupling or use a DC-coupled input")
            if clip.kind == "rail":
                clip = ClipReport(self._clip2_runs > 0, self._clip2_runs, self._clip2_samples, self._clip2_level,
                                  self._clip2_kind)
        elif self._pulse_not_given is not None and pulses == []:
            extra["pulse_not_given"] = self._pulse_not_given
        warnings.extend(self._notes)
        if clip.clipped:
            warnings.append(_clip_warning(clip))
        if two_level and pooled["noise"] is not None and pooled["low"] is not None and pooled["high"] is not None:
            amp_half = 0.5 * (pooled["high"] - pooled["low"])
            snr = 20.0 * math.log10(amp_half / pooled["noise"]) if pooled["noise"] > 0 else math.inf
        else:
            sig = float(np.sum(amps ** 2)) / 2.0
            noise_p = rss / n_all
            snr = 10.0 * math.log10(sig / noise_p) if noise_p > 0 and sig > 0 else (math.inf if sig > 0 else -math.inf)
        if snr < _LOW_SNR_DB:
            snr_noise = self._snr_noise if self._snr_noise is not None else -math.inf
            warnings.append(_snr_warning(snr, snr_noise, int(orders.max())))
        # the peak-to-peak's noise, on the record's strided samples as measure takes them
        xs = np.concatenate(self._strided)
        if two_level and pooled["low"] is not None and pooled["high"] is not None and pooled["noise"] is not None:
            mid = 0.5 * (pooled["low"] + pooled["high"])
            model, sigma = np.where(xs >= mid, pooled["high"], pooled["low"]), float(pooled["noise"])
        else:
            model = synthesize(vdc, orders * f, amps, phases, xs.size, fs / self._stride)
            sigma = math.sqrt(rss / dof)
        # a histogram's percentiles lie within one bin of the exact ones: each a rectangular
        # half-width of half a bin (GUM 4.3.7), two of them in the difference
        vpp_u_noise = math.hypot(vpp_noise_u(model, sigma, lo_pct, hi_pct, n_total=self.n),
                                 (self._q_step or 0.0) / math.sqrt(6.0), self._tails.resolution / math.sqrt(6.0))
        vrms_u_noise = _vrms_u(vrms, rss / n_all, span)
        thd_u_pct = None if thd is None or thd_u is None else 100.0 * thd_u
        extra.update({
            "harmonics_h": int(orders.max()),
            "amplitude_u": _with_gain(float(amplitude_u), amplitude, gain_u_rel),
            "vdc_u": _with_gain(dc_u, vdc, gain_u_rel),
            "vrms_u": _with_gain(vrms_u_noise, vrms, gain_u_rel),
            "vpp_u": _with_gain(vpp_u_noise, vpp, gain_u_rel),
            "vpp_u_noise": vpp_u_noise, "vac_rms": vac,
            "n_periods": float(self.n * f / fs), "whole_periods_used": periods,
            "frequency_u_fit_hz": u_fit, "frequency_method": method,
            "frequency_u_timebase_hz": abs(f) * tb_u_ppm * 1e-6,
            "frequency_chain_segments": line.n_segments, "frequency_birge": line.birge,
            "timebase_calibrated": bool(opts.get("timebase_calibrated", True)),
            "fit_iterations": max(b.iterations for b in blocks),
            "thd_u_pct": thd_u_pct, "snr_db": snr, "two_level": bool(two_level),
        })
        duty, duty_u = pooled.get("duty", (None, None))
        rise, rise_u = pooled.get("rise", (None, None))
        fall, fall_u = pooled.get("fall", (None, None))
        if two_level:
            extra.update({
                "state_low": pooled["low"], "state_high": pooled["high"], "duty_cycle_u_pct": duty_u,
                "rise_time_u_s": rise_u, "fall_time_u_s": fall_u, "overshoot_pct": pooled["over"],
                "undershoot_pct": pooled["under"], "pulse_periods": pooled["periods"],
                "pulse_period_s": pooled["period"], "coupling_tau_s": pooled["tau"],
                "coupling_source": pooled["source"], "droop_pct": pooled["droop"]})
        thd_floor = opts.get("distortion_floor_pct")
        if thd_floor is not None and thd is not None:
            extra["distortion_floor_pct"] = float(thd_floor)
        budget = channel_budgets(
            unit=self.unit, frequency_hz=f, frequency_u_noise_hz=u_fit, frequency_method=method,
            timebase_u_ppm=tb_u_ppm, timebase_calibrated=bool(opts.get("timebase_calibrated", True)),
            timebase_source=str(opts.get("timebase_source", "")),
            levels={"amplitude": (amplitude, float(amplitude_u)), "vdc": (vdc, dc_u),
                    "vrms": (vrms, vrms_u_noise), "vpp": (vpp, vpp_u_noise)},
            gain_u_rel=gain_u_rel, gain_source=str(opts.get("gain_source", "calibration profile")),
            gain_name=str(opts.get("gain_name", "gain")),
            thd_pct=None if thd is None else 100.0 * thd, thd_u_noise_pct=thd_u_pct,
            distortion_floor_pct=None if thd_floor is None else float(thd_floor),
            duty=(duty, duty_u) if two_level else (None, None),
            times={"rise_time_s": (rise, rise_u), "fall_time_s": (fall, fall_u)} if two_level else None)
        table = tuple(Harmonic(order=int(k), frequency_hz=float(k * f), amplitude=float(a), phase_deg=float(ph),
                               amplitude_u=float(au))
                      for k, a, ph, au in zip(orders, amps, phases, amps_u))
        return ChannelMeasurement(
            budget=budget, name=str(opts.get("name", "ch1")), unit=self.unit, frequency_hz=f,
            frequency_u_hz=_f(u_f), amplitude=_f(amplitude), vdc=float(vdc), vrms=float(vrms), vpp=float(vpp),
            duty_cycle_pct=_f(duty) if two_level else None, rise_time_s=_f(rise) if two_level else None,
            fall_time_s=_f(fall) if two_level else None, thd_pct=None if thd is None else _f(100.0 * thd),
            thd_n_pct=_f(100.0 * thd_n) if math.isfinite(thd_n) else None,
            sinad_db=_f(sinad) if math.isfinite(sinad) else None, harmonics=table, clipped=bool(clip.clipped),
            warnings=tuple(warnings),
            extra={k: (_f(v) if isinstance(v, (float, np.floating)) else v) for k, v in extra.items()})


@one_blas_thread  # small matrix products per block: one BLAS thread is faster and gives the same result
def measure_blocks(blocks: Iterable[Any], *, n_max: int, harmonics: int = 10, force_pulse: bool = False,
                   source: str = "", sha256: str | None = None, notes: Callable[[], Sequence[str]] | None = None,
                   on_block: Callable[[int], None] | None = None, reason: str = "",
                   gain_u_rel: float | None = None) -> Measurement:
    """Measure a record given as consecutive blocks (Capture objects) in constant memory.

    Parameters
    ----------
    blocks : iterable of Capture
        Consecutive blocks of one record, all with the same channels and rate (from
        :meth:`benchfit.capture.blocks.BlockReader.blocks`); ``metadata["start_frame"]`` or
        ``t0`` places each.
    n_max : int
        Upper bound of the frames in the record (sets the kept percentile tails).
    harmonics : int
        Highest harmonic order H.
    force_pulse : bool
        Duty cycle and edges even for a wave that is not two-level.
    source, sha256 : str
        The file and its SHA-256 for the result.
    notes : callable, optional
        Returns the reader's warnings once all blocks are read (a truncated file).
    on_block : callable, optional
        Called with the frames done after each block (progress).
    reason : str
        Why the record was measured in blocks, for the note in the warnings.
    """
    from benchfit.measurement.summary import channel_options

    chans: list[BlockChannel] = []
    first = None
    fs = math.nan
    done = 0
    held: tuple[int, np.ndarray] | None = None  # one block is held back: a short last piece joins it

    def push(start: int, samples: np.ndarray) -> None:
        for ch, x in zip(chans, samples):
            ch.push(x, start)
        if on_block is not None:
            on_block(start + samples.shape[1])

    for block in blocks:
        if first is None:
            first = block
            fs = float(block.sample_rate)
            chans = [BlockChannel(fs, n_max, kw, harmonics=harmonics, force_pulse=force_pulse)
                     for kw in channel_options(block, gain_u_rel=gain_u_rel)]
        start = int(block.metadata.get("start_frame", round(block.t0 * fs)))
        done = start + block.n_samples
        if held is not None and 2 * block.n_samples < held[1].shape[1]:
            # shorter than half a block (the file's end): measured with the block before it, so a
            # tail of less than a period is not counted as a block without a signal
            held = (held[0], np.concatenate([held[1], block.samples], axis=1))
            continue
        if held is not None:
            push(*held)
        held = (start, block.samples)
    if held is not None:
        push(*held)
    if first is None:
        raise MeasureError(f"{source or 'input'}: no samples to measure — record or export it again")
    late = tuple(notes()) if notes is not None else ()
    late = tuple(w for w in late if w not in first.warnings)
    block_s = chans[0].block_frames / fs
    note = (f"measured in {chans[0].n_blocks} blocks of {block_s:.4g} s{reason}: the frequency comes from the "
            "whole record (phases chained across blocks), levels and peak-to-peak from every sample, the "
            "harmonics, THD and pulse values are averaged over the blocks")
    results = tuple(ch.finish(note, late) for ch in chans)
    return Measurement(file=source, sample_rate_hz=fs, duration_s=done / fs, channels=results, sha256=sha256)


def is_long_file(path: str | os.PathLike[str], threshold: int | None = None, data: bytes | None = None) -> bool:
    """True when a capture file holds more samples than are measured at once (read in blocks instead).
    ``data``: the file's bytes when the caller has read them already."""
    from benchfit.capture.blocks import block_threshold, estimated_samples

    n = estimated_samples(path, data)
    return n is not None and n > (block_threshold() if threshold is None else threshold)


def measure_long_file(path: str | os.PathLike[str], *, harmonics: int = 10,
                      channels: Any = None, force_pulse: bool = False, sample_rate: float | None = None,
                      block_frames: int | None = None, on_block: Callable[[int, int | None], None] | None = None,
                      threshold: int | None = None, map_block: Callable[[Any], Any] | None = None,
                      on_first: Callable[[Any], None] | None = None, reason: str = "",
                      gain_u_rel: float | None = None) -> Measurement:
    """Measure a capture file in blocks (:func:`measure_blocks` on a :class:`BlockReader`).

    ``block_frames`` defaults to :func:`benchfit.capture.blocks.block_frames` for the file's
    channels; ``on_block(frames_done, frames_total)`` reports progress. ``map_block`` turns every
    block into the one measured (e.g. channels renamed); ``on_first`` gets the first (mapped)
    block with the file's source, SHA-256 and metadata (what a report draws and fits);
    ``reason`` is added to the note; ``gain_u_rel`` is the caller's stated gain u, as for
    :func:`benchfit.measurement.summary.measure`.
    """
    from benchfit.capture.blocks import BlockReader, block_frames as default_frames, block_threshold
    from benchfit.capture.load import file_sha256

    thr = block_threshold() if threshold is None else threshold
    keys = None if channels is None or (isinstance(channels, (list, tuple)) and not channels) else channels
    with BlockReader(path, channels=keys, sample_rate=sample_rate) as reader:
        total = reader.n_frames
        n_max = reader.max_frames
        frames = block_frames or default_frames(len(reader.channel_names), thr)
        if reader.kind == "csv" and not block_frames:
            frames = max(1024, frames // 4)  # parsing text costs ~12 bytes a byte: shorter blocks
        digest = file_sha256(path)
        progress = None if on_block is None else (lambda done: on_block(done, total))

        def blocks() -> Iterable[Any]:
            from dataclasses import replace

            for i, block in enumerate(reader.blocks(frames)):
                block = map_block(block) if map_block is not None else block
                if i == 0 and on_first is not None:
                    on_first(replace(block, source=str(path), sha256=digest,
                                     metadata={**reader.metadata, "measured_in_blocks": True}))
                yield block

        return measure_blocks(blocks(), n_max=n_max, harmonics=harmonics, force_pulse=force_pulse,
                              source=str(path), sha256=digest, notes=lambda: reader.warnings, on_block=progress,
                              reason=_why(path, reader.kind, thr) + reason + ")", gain_u_rel=gain_u_rel)


def _why(path: str | os.PathLike[str], kind: str, threshold: int) -> str:
    """The note's reason: the file's sample count (or a text export's size) against the threshold."""
    from benchfit.capture.blocks import estimated_samples

    n = estimated_samples(path) or 0
    if kind == "csv":
        size = os.path.getsize(path) / 2 ** 20
        return (f" (a text export of {size:.3g} MiB, up to {n:,} samples, more than the {threshold:,} "
                "measured at once")
    return f" (the file holds {n:,} samples, more than the {threshold:,} measured at once"
