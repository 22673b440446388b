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

Levels off the rails (a bipolar timer's low level sits 0.1–0.2 V above ground and its high level
about 1.7 V below the supply: NE555 datasheet, TI SLFS022A, VOL and VOH) change only the scale of
the output's harmonics, exactly. At DC the choke is a short and the capacitor open, so both phases'
equilibria per volt lie along one vector: x̄_i = [1, R_L]/(Rs_i + R_L), so x̄_l = ρ·x̄_h with
ρ = (Rs_h + R_L)/(Rs_l + R_L). With x̃ = x − u_l·x̄_l the low phase is unforced (A_l·x̄_l = −B_l) and
the high phase is forced by A_h·x̄_l·u_l + B_h·u_h = B_h·(u_h − ρ·u_l) (A_h·x̄_h = −B_h): the 1 V / 0 V
drive scaled by u_h − ρ·u_l. What x̃ leaves out of the output, u_l·(C_i·x̄_l + D_i) in the low phase
and u_l·C_h·x̄_l + ρ·u_l·D_h in the high one, is the same constant u_l·R_L/(Rs_l + R_L) in both. So
for every order k ≥ 1

    Y_k(u_high, u_low) = (u_high − u_low·(Rs_h + R_L)/(Rs_l + R_L))·Y_k(1, 0),

with a core loss and an ESR too (neither carries DC); an open load gives the factor u_high − u_low. A
fit whose drive gain is free (an output-only capture) therefore needs no levels, and one that
measures the drive after the source sees a time-invariant filter.

The 2 × 2 matrix exponentials are written out (Cayley–Hamilton: e^{Ah} = e^{th}(cosh(sh)·I +
sinh(sh)/s·(A − tI)), t = tr(A)/2, s² = t² − det A), so one call costs a few tens of µs for
50 harmonics, cheap enough to sit inside a least-squares fit. The edges are instantaneous
(a timer's edges, tens of ns to a few µs, are far shorter than the filter's time constants).
"""

from __future__ import annotations

import cmath
import math
from dataclasses import replace

import numpy as np

from benchfit.model.filter import LowpassParts, _state_space_d, _state_space_rows

__all__ = ["source_parts", "steady_state", "switched_phasors", "switched_rows", "switched_waveform", "source_phasors",
           "series_current_row", "switched_samples"]


def _expm2(a: np.ndarray, h: float) -> np.ndarray:
    """e^{A·h} of a real 2 × 2 matrix (Cayley–Hamilton form, module docstring)."""
    a00, a01, a10, a11 = _expm2_scalar(float(a[0, 0]), float(a[0, 1]), float(a[1, 0]), float(a[1, 1]), h)
    return np.array([[a00, a01], [a10, a11]])


def _expm2_scalar(a00: float, a01: float, a10: float, a11: float, h: float) -> tuple[float, float, float, float]:
    t = 0.5 * (a00 + a11)
    det = a00 * a11 - a01 * a10
    s2 = t * t - det
    s = complex(s2) ** 0.5
    sh = s * h
    if abs(sh) < 1e-6:  # sinh(sh)/s → h (series to second order; the error is below 1e-13 relative)
        e = math.exp(t * h)
        c0, c1 = e * (1.0 + s2 * h * h / 2.0), e * h * (1.0 + s2 * h * h / 6.0)
    else:
        ep, em = cmath.exp((t + s) * h), cmath.exp((t - s) * h)
        c0, c1 = (0.5 * (ep + em)).real, (0.5 * (ep - em) / s).real
    return c0 + c1 * (a00 - t), c1 * a01, c1 * a10, c0 + c1 * (a11 - t)


def _phase_scalars(p: LowpassParts, u: float, h: float):
    """(A, C, D, u, h, x̄, Φ) of one phase as plain floats (2 × 2 work is faster without numpy)."""
    (a00, a01, a10, a11), (b0, b1), c, d = _state_space_rows(p)
    det = a00 * a11 - a01 * a10
    b0, b1 = b0 * u, b1 * u
    xeq = (-(a11 * b0 - a01 * b1) / det, -(-a10 * b0 + a00 * b1) / det)  # −A⁻¹·B·u
    return (a00, a01, a10, a11), c, d, u, h, xeq, _expm2_scalar(a00, a01, a10, a11, h)


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
    if not 0.0 < duty < 1.0:
        raise ValueError(f"switched source: duty must lie strictly between 0 and 1, not {duty!r}")
    ph = (_phase_scalars(high, u_high, duty * period), _phase_scalars(low, u_low, (1.0 - duty) * period))
    (x0, x1) = _fixed_point(ph)
    # both phases at once: rows 0 (high, from t = 0) and 1 (low, from t = D·T)
    h = np.array([[ph[0][4]], [ph[1][4]]])
    jkw = (2j * math.pi * frequency_hz) * k[None, :]
    rot = np.exp(-jkw * h)
    coef = np.empty((2, 7))
    ca = np.empty((2, 4))
    for i, (((a00, a01, a10, a11), (c0, c1), d, u, _, xeq, phi), xs) in enumerate(zip(ph, (x0, x1))):
        z0, z1 = xs[0] - xeq[0], xs[1] - xeq[1]
        coef[i] = (c0 * xeq[0] + c1 * xeq[1] + d * u, phi[0] * z0 + phi[1] * z1, phi[2] * z0 + phi[3] * z1,
                   z0, z1, a00, a11)
        ca[i] = (a01, a10, c0, c1)
    col = [coef[:, j:j + 1] for j in range(7)]
    y_eq, fz0, fz1, z0, z1, a00, a11 = col
    a01, a10, c0, c1 = (ca[:, j:j + 1] for j in range(4))
    # c·(A − jkωI)⁻¹·(Φ·z·e^{−jkωh} − z), with the 2 × 2 inverse written out per order
    v0 = fz0 * rot - z0
    v1 = fz1 * rot - z1
    m00, m11 = a00 - jkw, a11 - jkw
    part = y_eq * (1.0 - rot) / jkw + ((c0 * m11 - c1 * a10) * v0 + (c1 * m00 - c0 * a01) * v1) / (
        m00 * m11 - a01 * a10)
    return (2.0 / period) * (part[0] + rot[0] * part[1])  # the low phase starts at D·T: e^{−jkωD·T}


def _fixed_point(ph) -> tuple[tuple[float, float], tuple[float, float]]:
    """x(0) and x(D·T) of the periodic steady state from the two phases' scalars."""
    (_, _, _, _, _, xh, (p00, p01, p10, p11)), (_, _, _, _, _, xl, (q00, q01, q10, q11)) = ph
    # rhs = (I − Φ_l)·x̄_l + Φ_l·(I − Φ_h)·x̄_h
    w0 = xh[0] - (p00 * xh[0] + p01 * xh[1])
    w1 = xh[1] - (p10 * xh[0] + p11 * xh[1])
    r0 = xl[0] - (q00 * xl[0] + q01 * xl[1]) + q00 * w0 + q01 * w1
    r1 = xl[1] - (q10 * xl[0] + q11 * xl[1]) + q10 * w0 + q11 * w1
    # M = I − Φ_l·Φ_h
    m00 = 1.0 - (q00 * p00 + q01 * p10)
    m01 = -(q00 * p01 + q01 * p11)
    m10 = -(q10 * p00 + q11 * p10)
    m11 = 1.0 - (q10 * p01 + q11 * p11)
    det = m00 * m11 - m01 * m10
    x0 = ((m11 * r0 - m01 * r1) / det, (-m10 * r0 + m00 * r1) / det)
    z0, z1 = x0[0] - xh[0], x0[1] - xh[1]
    x1 = (xh[0] + p00 * z0 + p01 * z1, xh[1] + p10 * z0 + p11 * z1)
    return x0, x1


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


def switched_rows(orders: np.ndarray, frequency_hz: float, duty: float, high: LowpassParts, low: LowpassParts,
                  rows, u_high: float = 1.0, u_low: float = 0.0) -> list[tuple[float, np.ndarray]]:
    """Mean and phasors of any quantities linear in the state and the source level, phase by phase.

    ``rows`` lists, per quantity, ((c_high, d_high), (c_low, d_low)): the quantity is c·x + d·u
    in each phase (c a 2-vector over [i_L, v_C], u the phase's level). ``None`` in place of a
    row means the circuit's output v_out. Returns (mean over the period, phasors at ``orders``)
    per quantity, with the conventions of :func:`switched_phasors` (this is its general form,
    with plain numpy algebra: for predictions and checks, not for fitting).
    """
    k = np.asarray(orders, dtype=float)
    period = 1.0 / frequency_hz
    w = 2.0 * math.pi * frequency_hz
    phases = _phases(duty, period, high, low, u_high, u_low)
    x0, x1 = steady_state(frequency_hz, duty, high, low, u_high, u_low)
    out = []
    for row in rows:
        total = np.zeros(k.shape, dtype=complex)
        mean = 0.0
        t_start = 0.0
        for i, ((a, c_out, d_out, u, h, xeq, phi), xs) in enumerate(zip(phases, (x0, x1))):
            c, d = (c_out, d_out) if row is None else (np.asarray(row[i][0], dtype=float), float(row[i][1]))
            z = xs - xeq
            q_eq = float(c @ xeq) + d * u
            # mean: ∫₀ʰ (q̄ + c·e^{As}·z) ds = q̄·h + c·A⁻¹(Φ − I)·z
            mean += q_eq * h + float(c @ np.linalg.solve(a, (phi - np.eye(2)) @ z))
            jkw = 1j * k * w
            rot = np.exp(-jkw * h)
            m = a[None, :, :] - jkw[:, None, None] * np.eye(2)[None, :, :]
            v = (phi @ z)[None, :] * rot[:, None] - z[None, :]
            s = np.linalg.solve(m, v[:, :, None])[:, :, 0]
            total = total + np.exp(-jkw * t_start) * (q_eq * (1.0 - rot) / jkw + s @ c)
            t_start += h
        out.append((mean / period, (2.0 / period) * total))
    return out


def series_current_row(p: LowpassParts) -> tuple[np.ndarray, float]:
    """(c, d) of the current through ``p.Rs`` (the choke's terminal current, L and its core loss Rp
    together): i = c·x + d·u. Without core loss it is i_L; with it i_L + v_L/Rp
    (:func:`benchfit.model.filter.state_space`), which jumps with the source level at every edge."""
    g, rc, gp = p.g, p.Resr, p.gp
    k = 1.0 / (1.0 + rc * g)
    m = 1.0 + gp * (p.Rs + k * rc)
    return np.array([1.0, -gp * k]) / m, gp / m


def _expm2_grid(a: np.ndarray, s: np.ndarray) -> np.ndarray:
    """e^{A·s} for every s of a 1-D array, shape (n, 2, 2) (the Cayley–Hamilton form of :func:`_expm2`)."""
    t = 0.5 * (a[0, 0] + a[1, 1])
    s2 = t * t - (a[0, 0] * a[1, 1] - a[0, 1] * a[1, 0])
    root = complex(s2) ** 0.5
    e = np.exp(t * s)
    if abs(root) * float(np.max(s, initial=0.0)) < 1e-6:  # sinh(root·s)/root → s (module docstring's series)
        c0, c1 = e * (1.0 + s2 * s * s / 2.0), e * s * (1.0 + s2 * s * s / 6.0)
    else:
        c0 = e * np.cosh(root * s).real if root.imag == 0 else e * np.cos(root.imag * s)
        c1 = (e * (np.sinh(root * s) / root).real if root.imag == 0
              else e * np.sin(root.imag * s) / root.imag)
    out = c0[:, None, None] * np.eye(2)[None] + c1[:, None, None] * (a - t * np.eye(2))[None]
    return out


def switched_samples(frequency_hz: float, duty: float, high: LowpassParts, low: LowpassParts, rows,
                     u_high: float = 1.0, u_low: float = 0.0, points: int = 1025):
    """Exact samples of quantities linear in the state and the level, on each phase's own grid.

    ``rows`` as in :func:`switched_rows` (``None``: the output). Each phase (high on [0, D·T), low on
    [D·T, T)) is sampled at ``points`` (odd) equally spaced instants from its start to its end, both
    included, from the exact phase solution x(s) = x̄ + e^{A·s}·(x_start − x̄): a quantity that jumps at
    an edge (a direct term in u) is sampled on both sides of the jump, so its extremes are exact up
    to the spacing (no truncated harmonic sum, no Gibbs overshoot).

    Returns (per phase: duration h in s and Simpson weights w with Σw = h, shape (points,)) and, per
    quantity, its two phase arrays; ∫ q² over the period is Σ_phases Σ w·q².
    """
    if points < 3 or points % 2 == 0:
        raise ValueError(f"switched_samples: points must be odd and at least 3, not {points!r}")
    period = 1.0 / frequency_hz
    phases = _phases(duty, period, high, low, u_high, u_low)
    x0, x1 = steady_state(frequency_hz, duty, high, low, u_high, u_low)
    grids = []
    states = []
    for (a, _c, _d, _u, h, xeq, _phi), xs in zip(phases, (x0, x1)):
        s = np.linspace(0.0, h, points)
        w = np.full(points, 2.0)
        w[1:-1:2] = 4.0
        w[0] = w[-1] = 1.0
        grids.append((h, w * (h / (points - 1) / 3.0)))
        states.append(xeq[None, :] + _expm2_grid(a, s) @ (xs - xeq))
    out = []
    for row in rows:
        vals = []
        for i, ((_a, c_out, d_out, u, _h, _xeq, _phi), x) in enumerate(zip(phases, states)):
            c, d = (c_out, d_out) if row is None else (np.asarray(row[i][0], dtype=float), float(row[i][1]))
            vals.append(x @ c + d * u)
        out.append(vals)
    return grids, out
