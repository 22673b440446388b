"""Exact periodic steady state of a switched rectangular source driving the lc-lowpass (no I/O).

A timer's output stage is not an ideal rectangular wave behind one resistance: while high it
sources through ``r_high``, while low it sinks through ``r_low`` (unequal in a 555-style stage,
REFERENCES §11). The circuit is then linear *within* each phase but time-varying over the
period, so its output harmonics are not P_k(D)·H(jkω) of one transfer function
(:mod:`benchfit.model.filter`). This module solves it exactly as a piecewise-linear system.

In phase i (high: t ∈ [0, D·T), level u_h, circuit with Rs_h; low: [D·T, T), level u_l, Rs_l)
the state x = [i_L, v_C] obeys x' = A_i·x + B_i·u_i, v_out = C_i·x + D_i·u_i
(:func:`benchfit.model.filter.state_space`, with the optional core loss Rp across L). With the
phase's equilibrium x̄_i = −A_i⁻¹B_i·u_i and Φ_i = e^{A_i·h_i}, the state at the phase's end is
x̄_i + Φ_i·(x_start − x̄_i); the periodic steady state is the fixed point x(T) = x(0):

    (I − Φ_l·Φ_h)·x(0) = (I − Φ_l)·x̄_l + Φ_l·(I − Φ_h)·x̄_h.

The output's phasors Y_k = (2/T)∫₀ᵀ v_out(t)·e^{−jkωt}dt (so v_out ≈ DC + Σ Re(Y_k e^{jkωt}), the
convention of :func:`benchfit.model.filter.rectangular_phasors`) follow in closed form, phase by
phase, from ∫₀ʰ e^{A s}e^{−jkωs}ds = (A − jkωI)⁻¹(e^{A h}e^{−jkωh} − I): no time grid, no FFT.
With Rs_h = Rs_l the result is P_k(D)·H(jkω) to rounding (tested).

The 2 × 2 matrix exponentials are written out (Cayley–Hamilton: e^{Ah} = e^{th}(cosh(sh)·I +
sinh(sh)/s·(A − tI)), t = tr(A)/2, s² = t² − det A), so one call costs a few tens of µs for
50 harmonics, cheap enough to sit inside a least-squares fit. The edges are instantaneous
(a timer's edges, tens of ns to a few µs, are far shorter than the filter's time constants).
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from benchfit.model.filter import LowpassParts, _state_space_d

__all__ = ["source_parts", "steady_state", "switched_phasors", "switched_waveform", "source_phasors"]


def _expm2(a: np.ndarray, h: float) -> np.ndarray:
    """e^{A·h} of a real 2 × 2 matrix (Cayley–Hamilton form, module docstring)."""
    t = 0.5 * (a[0, 0] + a[1, 1])
    det = a[0, 0] * a[1, 1] - a[0, 1] * a[1, 0]
    s = complex(t * t - det) ** 0.5
    m = a - t * np.eye(2)
    sh = s * h
    if abs(sh) < 1e-6:  # sinh(sh)/s → h (series to second order; the error is below 1e-13 relative)
        c0, c1 = 1.0 + sh * sh / 2.0, h * (1.0 + sh * sh / 6.0)
    else:
        ep, em = np.exp((t + s) * h), np.exp((t - s) * h)
        return ((0.5 * (ep + em)) * np.eye(2) + (0.5 * (ep - em) / s) * m).real
    return (math.exp(t * h) * (c0 * np.eye(2) + c1 * m)).real


def source_parts(p: LowpassParts, r_high: float, r_low: float) -> tuple[LowpassParts, LowpassParts]:
    """The circuits seen while high and while low: ``p.Rs`` plus the source's own resistance."""
    return replace(p, Rs=p.Rs + r_high), replace(p, Rs=p.Rs + r_low)


def _phases(duty: float, period: float, high: LowpassParts, low: LowpassParts, u_high: float, u_low: float):
    if not 0.0 < duty < 1.0:
        raise ValueError(f"switched source: duty must lie strictly between 0 and 1, not {duty!r}")
    out = []
    for p, u, h in ((high, u_high, duty * period), (low, u_low, (1.0 - duty) * period)):
        a, b, c, d = _state_space_d(p)
        xeq = -np.linalg.solve(a, b) * u
        out.append((a, c, d, u, h, xeq, _expm2(a, h)))
    return out


def steady_state(frequency_hz: float, duty: float, high: LowpassParts, low: LowpassParts,
                 u_high: float = 1.0, u_low: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
    """States [i_L (A), v_C (V)] at the rising edge (t = 0) and at the falling edge (t = D·T)."""
    (_, _, _, _, _, xh, ph), (_, _, _, _, _, xl, pl) = _phases(duty, 1.0 / frequency_hz, high, low, u_high, u_low)
    rhs = (np.eye(2) - pl) @ xl + pl @ ((np.eye(2) - ph) @ xh)
    x0 = np.linalg.solve(np.eye(2) - pl @ ph, rhs)
    return x0, xh + ph @ (x0 - xh)


def switched_phasors(orders: np.ndarray, frequency_hz: float, duty: float, high: LowpassParts,
                     low: LowpassParts, u_high: float = 1.0, u_low: float = 0.0) -> np.ndarray:
    """Output phasors Y_k (V) of the periodic steady state (module docstring), k = ``orders`` ≥ 1.

    Parameters
    ----------
    orders : ndarray
        Harmonic orders (positive integers, any order).
    frequency_hz : float
        The drive's repetition frequency f = 1/T in Hz.
    duty : float
        Fraction of the period the source is high (0 < duty < 1); high on [0, D·T).
    high, low : LowpassParts
        The circuit while the source is high and while it is low (Rs including the source's
        resistance in that state; see :func:`source_parts`).
    u_high, u_low : float
        The source's open-circuit levels in V (default 1 and 0: per volt of a drive that
        swings from ground).
    """
    k = np.asarray(orders, dtype=float)
    period = 1.0 / frequency_hz
    w = 2.0 * math.pi * frequency_hz
    ph_h, ph_l = _phases(duty, period, high, low, u_high, u_low)
    rhs = (np.eye(2) - ph_l[6]) @ ph_l[5] + ph_l[6] @ ((np.eye(2) - ph_h[6]) @ ph_h[5])
    x0 = np.linalg.solve(np.eye(2) - ph_l[6] @ ph_h[6], rhs)
    x1 = ph_h[5] + ph_h[6] @ (x0 - ph_h[5])
    jkw = 1j * k * w
    total = np.zeros(k.shape, dtype=complex)
    t_start = 0.0
    for (a, c, d, u, h, xeq, phi), xs in zip((ph_h, ph_l), (x0, x1)):
        z = xs - xeq
        rot = np.exp(-jkw * h)
        y_eq = float(c @ xeq) + d * u
        part = y_eq * (1.0 - rot) / jkw
        # c·(A − jkωI)⁻¹·(Φ·z·e^{−jkωh} − z), with the 2 × 2 inverse written out per order
        fz = phi @ z
        v0 = fz[0] * rot - z[0]
        v1 = fz[1] * rot - z[1]
        m00, m11 = a[0, 0] - jkw, a[1, 1] - jkw
        det = m00 * m11 - a[0, 1] * a[1, 0]
        s0 = (m11 * v0 - a[0, 1] * v1) / det
        s1 = (-a[1, 0] * v0 + m00 * v1) / det
        part = part + c[0] * s0 + c[1] * s1
        total = total + np.exp(-jkw * t_start) * part
        t_start += h
    return (2.0 / period) * total


def source_phasors(orders: np.ndarray, frequency_hz: float, duty: float, p: LowpassParts,
                   r_high: float, r_low: float) -> np.ndarray:
    """Output phasors per volt of a 0 → 1 V source with resistance ``r_high`` / ``r_low`` in series
    with ``p.Rs`` (:func:`switched_phasors` with :func:`source_parts`)."""
    high, low = source_parts(p, r_high, r_low)
    return switched_phasors(orders, frequency_hz, duty, high, low)


def switched_waveform(time_s: np.ndarray, frequency_hz: float, duty: float, high: LowpassParts,
                      low: LowpassParts, u_high: float = 1.0, u_low: float = 0.0) -> np.ndarray:
    """The exact steady-state output voltage at the given times (the rising edge at t = 0 mod T).

    Evaluated from the phase's start state with one matrix exponential per sample (for checks
    and plots, not for fitting).
    """
    period = 1.0 / frequency_hz
    ph_h, ph_l = _phases(duty, period, high, low, u_high, u_low)
    x0, x1 = steady_state(frequency_hz, duty, high, low, u_high, u_low)
    t = np.mod(np.asarray(time_s, dtype=float), period)
    out = np.empty(t.shape)
    for idx in np.ndindex(t.shape):
        ti = float(t[idx])
        if ti < duty * period:
            (a, c, d, u, _, xeq, _), xs, s = ph_h, x0, ti
        else:
            (a, c, d, u, _, xeq, _), xs, s = ph_l, x1, ti - duty * period
        x = xeq + _expm2(a, s) @ (xs - xeq)
        out[idx] = float(c @ x) + d * u
    return out
