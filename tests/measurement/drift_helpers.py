"""Synthetic long runs for the drift tests (a helper module with a unique name)."""

from __future__ import annotations

import math

import numpy as np

from benchfit.measurement.drift import IntervalReading


def readings_from_phase(phase_rad: np.ndarray, f0: float, tau0: float, phase_u: float = 1e-6,
                        amplitude: np.ndarray | None = None, thd_pct: np.ndarray | None = None
                        ) -> list[IntervalReading]:
    """IntervalReadings whose chained midpoint phases are ``phase_rad`` (midpoints k·τ0 + τ0/2).

    This bypasses the tone fit so the statistics can be checked on a series with a known law.
    """
    n = phase_rad.size
    amp = np.ones(n) if amplitude is None else amplitude
    out = []
    for k in range(n):
        chain = None if k == 0 else (phase_rad[k] - phase_rad[k - 1]) / (2 * math.pi * tau0)
        out.append(IntervalReading(
            index=k, start_frame=k, n_frames=1, t_start_s=k * tau0, t_mid_s=k * tau0 + 0.5 * tau0,
            frequency_hz=chain if chain is not None else f0, frequency_u_hz=phase_u, phase_rad=float(phase_rad[k]),
            phase_u_rad=phase_u, chain_frequency_hz=chain, chain_frequency_u_hz=None if k == 0 else phase_u,
            segment=0, chain_start=k == 0, amplitude=float(amp[k]), amplitude_u=1e-6, vrms=float(amp[k]) / math.sqrt(2),
            thd_pct=None if thd_pct is None else float(thd_pct[k]), thd_u_pct=None, duty_cycle_pct=None,
            duty_cycle_u_pct=None))
    return out


def phase_from_fractional(y: np.ndarray, f0: float, tau0: float) -> np.ndarray:
    """Phase (rad) at N+1 midpoints whose back-to-back mean fractional frequencies are ``y``."""
    x = np.concatenate([[0.0], np.cumsum(y) * tau0])  # time error (s)
    t = np.arange(x.size) * tau0
    return 2 * math.pi * f0 * (t + x)


def tone_with_fm(y_of_t, duration_s: float, fs: float, f0: float, noise_rms: float, seed: int,
                 y_rate_hz: float = 50.0, harmonics: tuple[tuple[int, float], ...] = ()) -> np.ndarray:
    """A unit-amplitude tone whose fractional frequency is y(t) (sampled at y_rate_hz, phase
    linearly interpolated), plus seeded white noise of ``noise_rms``."""
    rng = np.random.default_rng(seed)
    ty = np.arange(int(duration_s * y_rate_hz) + 1) / y_rate_hz
    y = y_of_t(ty, rng)
    ph = 2 * math.pi * f0 * (ty + np.concatenate([[0.0], np.cumsum(y[:-1]) / y_rate_hz]))
    t = np.arange(int(duration_s * fs)) / fs
    phase = np.interp(t, ty, ph)
    x = np.cos(phase)
    for k, a in harmonics:
        x = x + a * np.cos(k * phase)
    return x + noise_rms * rng.normal(size=t.size)
