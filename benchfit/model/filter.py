"""Pure model functions of the "lc-lowpass" circuit (no fitting, no I/O).

Circuit: drive → Rs → L → node *out*; from *out* to ground the capacitor C in series with
its ESR ``Resr``, and the load ``Rload`` across the output. With ``g = 1/Rload`` (so an
open output is ``g = 0``) the transfer function is (REFERENCES §6; Nilsson & Riedel,
*Electric Circuits*, impedance divider with Z_sh = Rload ∥ (Resr + 1/sC))::

              1 + s·Resr·C
    H(s) = ----------------------------------------------------------------
           L·C·(1 + Resr·g)·s² + (L·g + C·(Rs·(1 + Resr·g) + Resr))·s + (1 + Rs·g)

which is the textbook form divided through by Rload. The characteristic polynomial
``a2·s² + a1·s + a0`` gives ω0² = a0/a2, Q = √(a0·a2)/a1, decay rate α = a1/(2·a2) and
damped frequency ω_d = √(ω0² − α²).

The time response to an arbitrary sampled drive uses the exact discretisation of the
state-space model (states: inductor current i_L, capacitor voltage v_C) with a first-order
hold (the drive is taken as linear between samples), computed with a matrix exponential
and run as a second-order recursion (``scipy.signal.lfilter``), not a fixed-step Euler loop.
A drive that was band-limited before sampling (behind an anti-alias filter) is simulated by the same
recursion after a short pre-filter of its samples (:func:`band_limit_prefilter`), with the hold's
images near Nyquist removed on the record's DFT grid (:func:`simulate_band_limited`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np

__all__ = ["PARAMETER_NAMES", "PART_NAMES", "LowpassParts", "coefficients", "coefficients_full", "feedthrough",
           "transfer", "transfer_log_gradient", "transfer_log_gradient_at", "transfer_powers",
           "transfer_at", "transfer_log_derivatives_at", "sampled_transfer", "second_order",
           "state_space", "discretize", "simulate", "free_response_basis", "rectangular_phasors",
           "band_limit_prefilter", "prefilter_drive", "prefiltered_transfer", "simulate_band_limited",
           "rectangular_phasors_duty_derivative"]

#: the parameters of the lc-lowpass model, in the order used everywhere
PARAMETER_NAMES: tuple[str, ...] = ("L", "C", "Rs", "Resr", "Rload")
#: every part the model knows, with the optional core loss Rp (fitted only when the data call for it)
PART_NAMES: tuple[str, ...] = PARAMETER_NAMES + ("Rp",)


@dataclass(frozen=True)
class LowpassParts:
    """Effective parts of the lc-lowpass model.

    Attributes
    ----------
    L : float
        Inductance in henry (H).
    C : float
        Capacitance in farad (F).
    Rs : float
        Everything in series with L between the drive and the output, in ohm.
    Resr : float
        Capacitor equivalent series resistance in ohm (may be 0).
    Rload : float
        Load across the output in ohm (``math.inf`` for an open output).
    Rp : float
        Core loss of the choke as a resistance across L, in ohm (``math.inf``: none, the
        default). At angular frequency ω it acts like a series resistance (ωL)²/Rp for
        Rp ≫ ωL (REFERENCES §11), a loss rising as f², unlike Rs or the ESR.
    """

    L: float
    C: float
    Rs: float
    Resr: float = 0.0
    Rload: float = math.inf
    Rp: float = math.inf

    @property
    def g(self) -> float:
        """Load conductance 1/Rload in siemens (0 for an open output)."""
        return 0.0 if math.isinf(self.Rload) else 1.0 / self.Rload

    @property
    def gp(self) -> float:
        """Core-loss conductance 1/Rp in siemens (0 without core loss)."""
        return 0.0 if math.isinf(self.Rp) else 1.0 / self.Rp

    def as_dict(self) -> dict[str, float]:
        out = {"L": self.L, "C": self.C, "Rs": self.Rs, "Resr": self.Resr, "Rload": self.Rload}
        if not math.isinf(self.Rp):
            out["Rp"] = self.Rp
        return out


def coefficients(p: LowpassParts) -> tuple[np.ndarray, np.ndarray]:
    """Numerator ``[b1, b0]`` and denominator ``[a2, a1, a0]`` of H(s), highest power first.

    Both are the textbook polynomials divided by Rload, so they stay finite for an open output.
    With core loss (finite Rp) the numerator has a second-order term: use
    :func:`coefficients_full`, which this function then refuses to truncate.
    """
    if not math.isinf(p.Rp):
        raise ValueError("coefficients: the part has core loss (finite Rp) — use coefficients_full")
    b, a = coefficients_full(p)
    return b[1:], a


def coefficients_full(p: LowpassParts) -> tuple[np.ndarray, np.ndarray]:
    """Numerator ``[b2, b1, b0]`` and denominator ``[a2, a1, a0]`` of H(s) including core loss.

    With Z1 = Rs + (sL ∥ Rp) and Y2 = g + sC/(1 + sC·Resr), H = 1/(1 + Z1·Y2); multiplied
    through by (1 + sL·γ)(1 + sC·Resr) with γ = 1/Rp (so Rp = ∞ gives γ = 0 and the
    second-order form of the module docstring):
    N(s) = (1 + sLγ)(1 + sC·Resr),
    D(s) = N(s) + (sL(1 + Rs·γ) + Rs)·(g + sC(1 + g·Resr)).
    """
    g, gp, L, C, rs, rc = p.g, p.gp, p.L, p.C, p.Rs, p.Resr
    b = np.array([L * gp * C * rc, L * gp + C * rc, 1.0])
    a = np.array([b[0] + L * (1.0 + rs * gp) * C * (1.0 + g * rc),
                  b[1] + L * (1.0 + rs * gp) * g + rs * C * (1.0 + g * rc),
                  1.0 + rs * g])
    return b, a


def transfer(frequency_hz: np.ndarray | float, p: LowpassParts) -> np.ndarray:
    """Complex response H(j·2πf) (output / drive, dimensionless) at the given frequencies in Hz."""
    s = 2j * math.pi * np.asarray(frequency_hz, dtype=float)
    b, a = coefficients_full(p)
    return ((b[0] * s + b[1]) * s + b[2]) / ((a[0] * s + a[1]) * s + a[2])


def _coefficient_derivative_rows(p: LowpassParts, names: tuple[str, ...]) -> tuple[list, list]:
    """∂b/∂ln x and ∂a/∂ln x of :func:`coefficients_full` for the parts ``names``, as rows of Python floats.

    With A = L·(1 + Rs·γ) and B = C·(1 + g·Resr): b = [L·γ·C·Resr, L·γ + C·Resr, 1] and
    a = [b0 + A·B, b1 + A·g + Rs·B, 1 + Rs·g]. A resistance R entering as its conductance (the load
    g = 1/Rload, the core loss γ = 1/Rp) has ∂/∂ln R = −(1/R)·∂/∂(1/R), 0 for R = ∞. Each part's row
    comes from the derivatives of b0, b1, A, B and a2 (and, for Rs and g, the extra term of a1).
    """
    g, gp, L, C, rs, rc = p.g, p.gp, p.L, p.C, p.Rs, p.Resr
    big_a, big_b = L * (1.0 + rs * gp), C * (1.0 + g * rc)
    # name: (db0, db1, dA, dB, da2, extra ∂a1, the factor x of ∂/∂ln x), derivatives by the part's value
    # (by its conductance for Rload and Rp)
    terms = {"L": (gp * C * rc, gp, 1.0 + rs * gp, 0.0, 0.0, 0.0, L),
             "C": (L * gp * rc, rc, 0.0, 1.0 + g * rc, 0.0, 0.0, C),
             "Rs": (0.0, 0.0, L * gp, 0.0, g, big_b, rs),  # ∂(Rs·B)/∂Rs
             "Resr": (L * gp * C, C, 0.0, C * g, 0.0, 0.0, rc),
             "Rload": (0.0, 0.0, 0.0, C * rc, rs, big_a, -g),  # ∂(A·g)/∂g
             "Rp": (L * C * rc, L, L * rs, 0.0, 0.0, 0.0, -gp)}
    db, da = [], []
    for n in names:
        db0, db1, d_big_a, d_big_b, da2, da1, x = terms[n]
        db.append([db0 * x, db1 * x, 0.0])
        da.append([(db0 + d_big_a * big_b + big_a * d_big_b) * x, (db1 + d_big_a * g + rs * d_big_b + da1) * x,
                   da2 * x])
    return db, da


def transfer_powers(frequency_hz: np.ndarray | float) -> np.ndarray:
    """The powers s², s, 1 at s = j·2πf, shape (3, number of frequencies): each polynomial of
    :func:`coefficients_full` there is its coefficients @ these (for :func:`transfer_log_gradient_at`)."""
    s = 2j * math.pi * np.atleast_1d(np.asarray(frequency_hz, dtype=float))
    return np.stack([s * s, s, np.ones_like(s)])


def transfer_at(powers: np.ndarray, p: LowpassParts) -> tuple[np.ndarray, np.ndarray]:
    """H = N/D and the denominator D at the frequencies whose :func:`transfer_powers` are given."""
    b, a = coefficients_full(p)
    den = a @ powers
    return (b @ powers) / den, den


def transfer_log_derivatives_at(powers: np.ndarray, p: LowpassParts, names: tuple[str, ...], h: np.ndarray,
                                den: np.ndarray) -> np.ndarray:
    """∂H/∂ln x for the parts ``names`` (a row each), given H and D there (:func:`transfer_at`):
    dH = (dN − H·dD)/D (:func:`transfer_log_gradient`)."""
    if not names:
        return np.zeros((0, h.size), dtype=complex)
    db, da = _coefficient_derivative_rows(p, names)
    both = np.array(db + da) @ powers  # the rows of dN, then those of dD
    return (both[:len(names)] - h * both[len(names):]) / den


def transfer_log_gradient_at(powers: np.ndarray, p: LowpassParts,
                             names: tuple[str, ...] = PART_NAMES) -> tuple[np.ndarray, np.ndarray]:
    """:func:`transfer_log_gradient` at the frequencies whose :func:`transfer_powers` are given, for a caller
    that evaluates it many times at the same frequencies (a fit)."""
    h, den = transfer_at(powers, p)
    return h, transfer_log_derivatives_at(powers, p, names, h, den)


def transfer_log_gradient(frequency_hz: np.ndarray | float, p: LowpassParts,
                          names: tuple[str, ...] = PART_NAMES) -> tuple[np.ndarray, np.ndarray]:
    """H(j·2πf) (as :func:`transfer`) and its derivatives with respect to the logarithms of the parts ``names``.

    dH = (dN − H·dD)/D for H = N/D, N and D the polynomials of :func:`coefficients_full` at s = j·2πf
    and their coefficients' derivatives from :func:`_coefficient_derivative_rows`; a fit over log-parts
    needs exactly these columns (checked against finite differences in the tests). Returns H (shape of
    the frequencies, 1-D) and the derivatives, shape (len(names), number of frequencies).
    """
    return transfer_log_gradient_at(transfer_powers(frequency_hz), p, names)


def sampled_transfer(frequency_hz: np.ndarray | float, p: LowpassParts, sample_rate: float) -> np.ndarray:
    """Response Y/X of the *sampled* output to the *sampled* drive, the drive linear between samples.

    The exact first-order-hold discretisation of :func:`discretize` (the model of :func:`simulate`)
    at z = e^{j·2πf/fs}: H_d(z) = C·(zI − Φ)⁻¹·(ΦΓ1 + Γ0 − Γ1) + C·Γ1 + D. Unlike :func:`transfer`
    it takes the drive's samples for what they are, not for a band-limited waveform: a drive with
    edges within one sample (no anti-alias filter, e.g. a scope's export) has its harmonics above
    Nyquist folded onto the ones below, which moves Y_k/X_k from H(j·2πkf) by about (π·k·f/fs)²/3
    while the output (behind the low-pass) has almost none to fold. It tends to :func:`transfer`
    as fs → ∞.

    Computed per pole p_i of H(s) = D + Σ r_i/(s − p_i) (x = p_i·T, T = 1/fs): one mode has
    Φ = eˣ, Γ1 = T·E(x), Γ0 = T·(1 + x·E(x)) with E(x) = (eˣ − 1 − x)/x², so its term is
    r_i·[T·(1 + x·E)²/(z − Φ) + T·E]; a double pole (critical damping) takes the matrix exponential.
    """
    b, a = coefficients_full(p)
    t = 1.0 / float(sample_rate)
    dc = b[0] / a[0]
    c1, c0 = b[1] - dc * a[1], b[2] - dc * a[2]  # N − D·Den, the strictly proper part's numerator
    root = np.sqrt(complex(a[1] * a[1] - 4.0 * a[0] * a[2]))
    poles = ((-a[1] + root) / (2 * a[0]), (-a[1] - root) / (2 * a[0]))
    if abs(poles[0] - poles[1]) < 1e-6 * abs(poles[0]):
        return _sampled_transfer_expm(frequency_hz, p, sample_rate)
    wt = 2.0 * math.pi * np.asarray(frequency_hz, dtype=float) * t
    zm1 = np.expm1(1j * wt)  # z − 1, accurate where ωT is small
    out = np.full(wt.shape, dc, dtype=complex)
    for pi, pj in (poles, poles[::-1]):
        r = (c1 * pi + c0) / (a[0] * (pi - pj))
        x = pi * t
        if abs(x) < 0.1:  # the series of E(x) to x⁶: relative error below 3·10⁻¹³
            e = sum(x ** n / math.factorial(n + 2) for n in range(7))
        else:
            e = (np.expm1(x) - x) / (x * x)
        out += r * (t * (1.0 + x * e) ** 2 / (zm1 - x * (1.0 + x * e)) + t * e)
    return out


def _sampled_transfer_expm(frequency_hz: np.ndarray | float, p: LowpassParts, sample_rate: float) -> np.ndarray:
    """:func:`sampled_transfer` from the state-space matrices (any pole pair, slower)."""
    phi, gam0, gam1, c = _foh(p, sample_rate)
    bd = phi @ gam1 + gam0 - gam1
    z = np.exp(2j * math.pi * np.asarray(frequency_hz, dtype=float) / float(sample_rate))
    # (zI − Φ)⁻¹·bd for the 2×2 Φ, by its adjugate
    det = (z - phi[0, 0]) * (z - phi[1, 1]) - phi[0, 1] * phi[1, 0]
    x0 = ((z - phi[1, 1]) * bd[0] + phi[0, 1] * bd[1]) / det
    x1 = (phi[1, 0] * bd[0] + (z - phi[0, 0]) * bd[1]) / det
    return c[0] * x0 + c[1] * x1 + float(c @ gam1) + feedthrough(p)


def second_order(p: LowpassParts) -> dict[str, float]:
    """Resonance figures from the characteristic polynomial.

    Returns
    -------
    dict
        ``resonant_frequency_hz`` (1/(2π√(LC)), the L-C resonance as DESIGN.md defines it),
        ``natural_frequency_hz`` (√(a0/a2)/2π, the loaded circuit's undamped natural
        frequency: higher than the L-C resonance by √((1 + Rs/Rload)/(1 + Resr/Rload))),
        ``q_factor`` (√(a0·a2)/a1), ``decay_rate_per_s`` (α = a1/(2·a2), in 1/s) and
        ``damped_frequency_hz`` (√(ω0² − α²)/2π with ω0 the natural frequency, NaN when the
        circuit is not underdamped, Q ≤ 0.5).
    """
    _, a = coefficients_full(p)
    a2, a1, a0 = (float(v) for v in a)
    w0 = math.sqrt(a0 / a2)
    alpha = a1 / (2.0 * a2)
    wd2 = w0 * w0 - alpha * alpha
    return {
        "resonant_frequency_hz": 1.0 / (2 * math.pi * math.sqrt(p.L * p.C)),
        "natural_frequency_hz": w0 / (2 * math.pi),
        "q_factor": math.sqrt(a0 * a2) / a1,
        "damped_frequency_hz": math.sqrt(wd2) / (2 * math.pi) if wd2 > 0 else math.nan,
        "decay_rate_per_s": alpha,
    }


def state_space(p: LowpassParts) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Continuous state-space matrices (A, B, C_out) for states x = [i_L (A), v_C (V)].

    From Kirchhoff's laws, with the series current i = i_L + γ·v_L through L ∥ Rp (γ = 1/Rp):
    v_out = k·(v_C + Resr·i), k = 1/(1 + Resr·g); v_L = u − (Rs + k·Resr)·i − k·v_C;
    L·di_L/dt = v_L; C·dv_C/dt = i − g·v_out. Without core loss i = i_L. With it the
    output also follows the drive directly: see :func:`feedthrough`.
    """
    a, b, c, _ = _state_space_d(p)
    return a, b, c


def feedthrough(p: LowpassParts) -> float:
    """The direct term D of v_out = C·x + D·u (0 without core loss)."""
    return _state_space_d(p)[3]


def _state_space_rows(p: LowpassParts):
    """(A, B, C, D) of :func:`state_space` and :func:`feedthrough` as plain floats: A's four entries row by
    row, B's two, C's two and D (the Kirchhoff rows of :func:`state_space`'s docstring, written out once).

    Floats, not arrays: the switched source (:mod:`benchfit.model.switched`) calls this twice per model
    evaluation, where numpy's per-call cost on 2 × 2 arrays was a fifth of its time.
    """
    g, rc, gp = p.g, p.Resr, p.gp
    k = 1.0 / (1.0 + rc * g)
    r = p.Rs + k * rc
    m = 1.0 + gp * r
    i = (1.0 / m, -gp * k / m, gp / m)  # the series current, as a row over (i_L, v_C, u)
    v_out = (k * rc * i[0], k * (1.0 + rc * i[1]), k * rc * i[2])
    v_l = (-r * i[0], -k - r * i[1], 1.0 - r * i[2])
    a = (v_l[0] / p.L, v_l[1] / p.L, (i[0] - g * v_out[0]) / p.C, (i[1] - g * v_out[1]) / p.C)
    b = (v_l[2] / p.L, (i[2] - g * v_out[2]) / p.C)
    return a, b, (v_out[0], v_out[1]), v_out[2]


def _state_space_d(p: LowpassParts):
    """:func:`_state_space_rows` as arrays: A (2 × 2), B (2), C (2) and the float D."""
    a, b, c, d = _state_space_rows(p)
    return np.array(a).reshape(2, 2), np.array(b), np.array(c), float(d)


def _foh(p: LowpassParts, sample_rate: float):
    """Φ, Γ0, Γ1 of the first-order-hold discretisation and the output row C."""
    from scipy.linalg import expm

    h = 1.0 / float(sample_rate)
    a, b, c = state_space(p)
    m = np.zeros((4, 4))
    m[:2, :2] = a * h
    m[:2, 2] = b * h
    m[2, 3] = 1.0
    e = expm(m)
    # top row of expm([[A·h, B·h, 0], [0, 0, 1], [0, 0, 0]]) = [Φ, Γ0, Γ1]
    return e[:2, :2], e[:2, 2], e[:2, 3], c


def discretize(p: LowpassParts, sample_rate: float) -> tuple[np.ndarray, np.ndarray]:
    """Exact first-order-hold discretisation as a z-domain filter ``(b, a)`` for ``lfilter``.

    With Φ = e^{A·h}, Γ0 = ∫₀ʰ e^{Aτ}dτ·B and Γ1 = (1/h)∫₀ʰ e^{Aτ}(h − τ)dτ·B (all from one
    matrix exponential of an augmented matrix), a drive linear between samples gives
    x[k+1] = Φx[k] + (Γ0 − Γ1)u[k] + Γ1·u[k+1]; with ξ = x − Γ1·u this is the ordinary
    state-space system (Φ, ΦΓ1 + Γ0 − Γ1, C, CΓ1), converted to a transfer function.
    """
    from scipy.signal import ss2tf

    phi, gam0, gam1, c = _foh(p, sample_rate)
    bd = phi @ gam1 + gam0 - gam1
    dd = float(c @ gam1) + feedthrough(p)
    num, den = ss2tf(phi, bd[:, None], c[None, :], np.array([[dd]]))
    return np.asarray(num[0], dtype=float), np.asarray(den, dtype=float)


def simulate(drive: np.ndarray, sample_rate: float, p: LowpassParts,
             x0: tuple[float, float] = (0.0, 0.0)) -> np.ndarray:
    """Output voltage for a sampled drive voltage (drive linear between samples).

    Parameters
    ----------
    drive : ndarray
        Drive samples in volts, uniformly spaced.
    sample_rate : float
        Samples per second (Hz).
    p : LowpassParts
        The circuit.
    x0 : (float, float)
        Initial state: inductor current in A and capacitor voltage in V (default: at rest).

    Returns
    -------
    ndarray
        Output samples in volts, same length as ``drive``.
    """
    from scipy.signal import lfilter

    u = np.asarray(drive, dtype=float)
    if u.size == 0:
        return u.copy()
    b, a = discretize(p, sample_rate)
    y = lfilter(b, a, u)  # zero-state response of the ξ system
    phi, _, gam1, c = _foh(p, sample_rate)
    xi0 = np.asarray(x0, dtype=float) - gam1 * u[0]
    if np.any(xi0 != 0):
        y = y + xi0 @ free_response_basis(p, sample_rate, u.size)
    return y


def free_response_basis(p: LowpassParts, sample_rate: float, n: int) -> np.ndarray:
    """Two output sequences spanning the free (initial-state) response, shape (2, n).

    Row j is y[k] = C·Φᵏ·e_j for the unit initial states e_0 = [1 A, 0] and
    e_1 = [0, 1 V]; used to add or fit an initial state linearly. Each row obeys the
    recursion of Φ's characteristic polynomial z² + c1·z + c0, so it is the impulse
    response of the filter (b0 + b1·z⁻¹)/(1 + c1·z⁻¹ + c0·z⁻²) with b0 = y[0] and
    b1 = y[1] + c1·y[0] (run by ``lfilter``).
    """
    from scipy.linalg import expm
    from scipy.signal import lfilter

    a, _, c = state_space(p)
    phi = expm(a / float(sample_rate))
    den = np.array([1.0, -np.trace(phi), np.linalg.det(phi)])
    impulse = np.zeros(n)
    if n:
        impulse[0] = 1.0
    out = np.empty((2, n))
    for j in range(2):
        x0 = np.zeros(2)
        x0[j] = 1.0
        y0 = float(c @ x0)
        y1 = float(c @ (phi @ x0))
        out[j] = lfilter([y0, y1 + den[1] * y0], den, impulse)
    return out


#: pre-filter taps (odd) and the band, as a fraction of fs, over which it inverts the hold's sinc²
PREFILTER_TAPS = 15
PREFILTER_BAND = 0.45  # a line input's pass band ends near 0.45·fs (20 kHz at 44.1 kHz), as in benchfit.fit.edges
#: orders of sin²(ωT/2) matched exactly at DC: the error then starts at (ωT/2)⁸
_PREFILTER_FLAT = 4


def _inverse_sinc2_series(n: int) -> list[float]:
    """The first ``n`` coefficients of 1/sinc²(x) = x²/sin²x as a power series in s = sin²x.

    From arcsin²(√s) = ½·Σ_{m≥1} (4s)^m/(m²·C(2m, m)) (the Maclaurin series of arcsin², from memory;
    checked against 1/sinc² in the tests): 1/sinc² = arcsin²(√s)/s = 1 + s/3 + 8s²/45 + 4s³/35 + …
    """
    return [0.5 * 4.0 ** (m + 1) / ((m + 1) ** 2 * math.comb(2 * m + 2, m + 1)) for m in range(n)]


@lru_cache(maxsize=4)
def _prefilter_taps(n_taps: int, band: float) -> tuple[float, ...]:
    """The taps of :func:`band_limit_prefilter`, computed once per design."""
    from numpy.polynomial import chebyshev, polynomial

    m = n_taps // 2
    w = np.linspace(0.0, 2.0 * math.pi * band, 4000)  # rad/sample over the band
    s = np.sin(w / 2.0) ** 2
    head = _inverse_sinc2_series(_PREFILTER_FLAT)
    rest = 1.0 / np.sinc(w / (2.0 * math.pi)) ** 2 - polynomial.polyval(s, head)
    # P(s) = head(s) + s^J·Q(s), Q of degree m − J by least squares in a Chebyshev basis over [0, s_max]
    s_max = float(s[-1])
    basis = chebyshev.chebvander(2.0 * s / s_max - 1.0, m - _PREFILTER_FLAT) * (s ** _PREFILTER_FLAT)[:, None]
    q, *_ = np.linalg.lstsq(basis, rest, rcond=None)
    q_power = np.zeros(1)
    for c in reversed(chebyshev.cheb2poly(q)):  # Horner in x = 2s/s_max − 1, as a polynomial in s
        q_power = polynomial.polyadd(polynomial.polymul(q_power, [-1.0, 2.0 / s_max]), [c])
    coeffs = np.zeros(m + 1)
    coeffs[:_PREFILTER_FLAT] = head
    coeffs[_PREFILTER_FLAT:_PREFILTER_FLAT + q_power.size] += q_power
    # s = sin²(ωT/2) = (2 − z − z⁻¹)/4: each power of s is a symmetric FIR of 2n + 1 taps
    taps = np.zeros(2 * m + 1)
    power = np.array([1.0])
    for n, c in enumerate(coeffs):
        taps[m - n:m + n + 1] += c * power
        power = np.convolve(power, [-0.25, 0.5, -0.25])
    return tuple(float(t) for t in taps)


def band_limit_prefilter(n_taps: int = PREFILTER_TAPS, band: float = PREFILTER_BAND) -> np.ndarray:
    """Symmetric FIR taps whose response is 1/sinc²(ωT/2) over 0…``band``·fs (T = 1/fs).

    Why: :func:`simulate` takes the drive as linear between samples. For a drive band-limited before
    sampling, that interpolation's spectrum is the samples' times the triangle's transform T·sinc²(ωT/2)
    plus its images at ω + m·ωs, so the simulated output is U·Σ_m H(j(ω + m·ωs))·sinc²((ω + m·ωs)T/2):
    in band H(jω)·sinc²(ωT/2), off by about (ωT)²/12. Pre-filtered by these taps, the m = 0 term is
    H(jω) to the design error; the images (m ≠ 0) remain, weighed by H at ≥ ωs − ω and by sinc² there:
    negligible at low orders, not near Nyquist, where :func:`simulate_band_limited` removes them.

    Design: the response of a symmetric FIR is a polynomial P(s) in s = sin²(ωT/2) of degree
    (n_taps − 1)/2. Its first four coefficients are those of 1/sinc² (:func:`_inverse_sinc2_series`),
    so the error starts at (ωT/2)⁸ (below 10⁻¹¹ at ωT = 0.06); the rest are fitted by least squares over
    the band. With 15 taps over 0.45·fs the error is below 2.5·10⁻³ at 0.3·fs and 10⁻² at 0.45·fs.
    """
    if n_taps < 2 * _PREFILTER_FLAT + 1 or n_taps % 2 == 0 or not 0.0 < band < 0.5:
        raise ValueError(f"band_limit_prefilter: need an odd n_taps ≥ {2 * _PREFILTER_FLAT + 1} and 0 < band < 0.5")
    return np.array(_prefilter_taps(int(n_taps), float(band)))


def prefilter_drive(drive: np.ndarray, taps: np.ndarray | None = None) -> tuple[np.ndarray, int]:
    """The drive samples pre-filtered for :func:`simulate` as a band-limited drive, and the samples dropped.

    Only the samples the taps cover fully are kept ('valid' convolution): ``(len(taps) − 1)/2`` samples
    are dropped at each end rather than padded, so nothing invented enters the model. Output sample j
    belongs to drive sample j + dropped.
    """
    h = band_limit_prefilter() if taps is None else np.asarray(taps, dtype=float)
    u = np.asarray(drive, dtype=float)
    trim = (h.size - 1) // 2
    if u.size <= 2 * trim:
        return u[:0].copy(), trim
    return np.convolve(u, h, mode="valid"), trim


def prefiltered_transfer(frequency_hz: np.ndarray | float, p: LowpassParts, sample_rate: float,
                         taps: np.ndarray | None = None) -> np.ndarray:
    """Y/X of :func:`simulate` run on :func:`prefilter_drive`'s output: the FIR's response × :func:`sampled_transfer`.

    Compared with :func:`transfer` this is the whole error of the band-limited simulation (design error
    and the images of the hold) for these parts at these frequencies.
    """
    h = band_limit_prefilter() if taps is None else np.asarray(taps, dtype=float)
    wt = 2.0 * math.pi * np.asarray(frequency_hz, dtype=float) / float(sample_rate)
    m = (h.size - 1) // 2
    resp = h[m] + 2.0 * sum(h[m + j] * np.cos(j * wt) for j in range(1, m + 1))
    return resp * sampled_transfer(frequency_hz, p, sample_rate)


def simulate_band_limited(drive: np.ndarray, sample_rate: float, p: LowpassParts) -> tuple[np.ndarray, int]:
    """Output for a drive that was band-limited before sampling, and the samples dropped at each end.

    Two steps. :func:`simulate` of the pre-filtered drive (:func:`prefilter_drive`) has the response
    :func:`prefiltered_transfer`, H(jω) to within the pre-filter's design error and the hold's images
    H(j(ω + m·ωs))·sinc²((ω + m·ωs)T/2), m ≠ 0. Those images are small at low orders but not near
    Nyquist: with the ESR's zero H falls only as 1/f there, and at 0.45·fs the first image is about half
    of H. The rest E = H − prefiltered_transfer is therefore added exactly on the record's DFT grid
    (a circular convolution of the drive with E): exact for a record of whole periods; otherwise the
    wrap-around joins the record's end to its start through E, which is at most |E| ≤ |H| near Nyquist
    and carries no resonance (there the pre-filter is exact to 10⁻¹¹), so it stays at the level of the
    output's own lines near Nyquist. Output sample j belongs to drive sample j + dropped; the
    simulation starts at rest there (add an initial state with :func:`free_response_basis`).
    """
    u = np.asarray(drive, dtype=float)
    pre, trim = prefilter_drive(u)
    if pre.size == 0:
        return pre, trim
    freq = np.fft.rfftfreq(u.size, 1.0 / float(sample_rate))
    rest = transfer(freq, p) - prefiltered_transfer(freq, p, sample_rate)
    images = np.fft.irfft(np.fft.rfft(u) * rest, n=u.size)
    return simulate(pre, sample_rate, p) + images[trim:u.size - trim], trim


def rectangular_phasors(orders: np.ndarray, duty: float) -> np.ndarray:
    """Phasors P_k of a 0→1 rectangular wave that is high for t in [0, D·T) of each period.

    With x(t) ≈ D + Σ Re(P_k e^{jkωt}): P_k = (2/(kπ))·sin(kπD)·e^{−jkπD} (Fourier series of
    a pulse train, REFERENCES §5: a_k = (2A/(kπ))·|sin(kπD)|).
    """
    k = np.asarray(orders, dtype=float)
    return 2.0 / (k * math.pi) * np.sin(k * math.pi * duty) * np.exp(-1j * k * math.pi * duty)


def rectangular_phasors_duty_derivative(orders: np.ndarray, duty: float) -> np.ndarray:
    """∂P_k/∂D of :func:`rectangular_phasors`: (2/(kπ))·kπ·(cos − j·sin)(kπD)·e^{−jkπD} = 2·e^{−2jkπD}."""
    k = np.asarray(orders, dtype=float)
    return 2.0 * np.exp(-2j * k * math.pi * duty)
