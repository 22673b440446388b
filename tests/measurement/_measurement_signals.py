"""Waveform builders for the measurement tests (analytic, seeded; no files)."""

from __future__ import annotations

import math

import numpy as np

FS = 48000.0


def times(seconds: float, fs: float = FS) -> np.ndarray:
    return np.arange(int(round(seconds * fs))) / fs


def fourier_wave(t: np.ndarray, f: float, kind: str, amplitude: float = 1.0, fs: float = FS,
                 phase: float = 0.0) -> np.ndarray:
    """Band-limited square, triangle or sawtooth by its Fourier series, orders below fs/2.

    Square: (4A/π) Σ_odd sin(kθ)/k; triangle: (8A/π²) Σ_odd (−1)^((k−1)/2) sin(kθ)/k²;
    sawtooth: (2A/π) Σ_k (−1)^(k+1) sin(kθ)/k (REFERENCES §5 harmonic laws).
    """
    theta = 2 * math.pi * f * t + phase
    kmax = int(math.ceil(0.5 * fs / f)) - 1
    x = np.zeros_like(t)
    for k in range(1, kmax + 1):
        if kind == "square" and k % 2:
            x += 4 * amplitude / math.pi * np.sin(k * theta) / k
        elif kind == "triangle" and k % 2:
            x += 8 * amplitude / math.pi ** 2 * (-1) ** ((k - 1) // 2) * np.sin(k * theta) / k ** 2
        elif kind == "sawtooth":
            x += 2 * amplitude / math.pi * (-1) ** (k + 1) * np.sin(k * theta) / k
    return x


def trapezoid(t: np.ndarray, f: float, duty: float, edge_s: float, low: float = 0.0,
              high: float = 1.0, delay_s: float = 0.0) -> np.ndarray:
    """Periodic trapezoid: linear 0–100 % edges of ``edge_s``; rising 50 % instant at ``delay_s``,
    falling 50 % instant ``duty/f`` later. Exact at every sample."""
    period = 1.0 / f
    ph = np.mod(t - delay_s, period)

    def ramp(u):
        return np.clip(u / edge_s + 0.5, 0.0, 1.0)

    y = np.clip(ramp(ph) - ramp(ph - duty * period) + ramp(ph - period), 0.0, 1.0)
    return low + (high - low) * y


def rc_square(t: np.ndarray, f: float, duty: float, tau_s: float, low: float = 0.0,
              high: float = 1.0) -> np.ndarray:
    """A square (rising at 0, falling at duty/f) through a single-pole RC low-pass, exact
    exponential edges; each flat lasts ≥ 15 τ so the previous edge has settled."""
    period = 1.0 / f
    ph = np.mod(t, period)
    t_high = duty * period
    up = 1.0 - np.exp(-ph / tau_s)
    down = np.exp(-(ph - t_high) / tau_s)
    y = np.where(ph < t_high, up, down)
    return low + (high - low) * y


def tone(t: np.ndarray, f: float, amplitude: float, phase: float, noise_sigma: float = 0.0,
         rng: np.random.Generator | None = None, dc: float = 0.0) -> np.ndarray:
    x = dc + amplitude * np.cos(2 * math.pi * f * t + phase)
    if noise_sigma:
        x = x + rng.normal(0.0, noise_sigma, t.size)
    return x
