"""Sine and multi-harmonic least-squares fits (IEEE Std 1057 / IEEE Std 1241 sine fitting).

Pure functions of ``(samples, sample_rate)``. The model is

    x(t) ≈ dc + Σ_k Re(P_k · exp(j·k·ω·t)),   t = n / fs  (t = 0 at the first sample)

so a single tone ``A·cos(ωt + φ)`` has phasor ``P_1 = A·exp(jφ)``. With columns
``cos(kωt)`` and ``sin(kωt)`` and coefficients ``a_k``, ``b_k`` this is ``P_k = a_k − j·b_k``
(the phase convention θ = atan2(−B, A) of the three-parameter fit).

* :func:`dft_frequency_seed` — interpolated DFT on a Hann window (Grandke's two-bin rule,
  IEEE Trans. Instrum. Meas. 32(2), 1983) to start the iteration.
* :func:`fit_harmonics` — linear least squares at a known frequency (the three-parameter fit
  when ``n_harmonics == 1``), or, with ``fit_frequency=True``, the four-parameter IEEE 1057
  Gauss–Newton iteration generalised to several harmonics: the extra column is
  ``∂x/∂ω = Σ_k k·t·(−a_k sin kωt + b_k cos kωt)``.

The normal equations are accumulated in blocks, so memory stays O(block × columns) and the
cost is O(N·K²) for K harmonics. Time is centred on the record for conditioning; phasors are
returned referred to the first sample. Standard uncertainties come from the covariance
σ²·(DᵀD)⁻¹ with σ² = RSS/(N − p): for white noise this reaches the Cramér–Rao bound
(Rife & Boorstyn 1974) for long records.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

__all__ = ["HarmonicFit", "dft_frequency_seed", "fit_harmonics", "fit_tone", "synthesize"]

#: longest and shortest segment (samples) the normal equations cut a record into (see _segments)
_SEGMENT, _SEGMENT_MIN = 4096, 256


@dataclass(frozen=True, eq=False)
class HarmonicFit:
    """Result of a (multi-)harmonic least-squares fit.

    Attributes
    ----------
    frequency_hz : float
        Fundamental frequency (Hz), fitted or as given.
    frequency_u_hz : float or None
        Standard uncertainty of the frequency (Hz); None when the frequency was not fitted.
    dc : float
        Offset (same unit as the samples).
    orders : ndarray of int
        Harmonic orders k, ascending (1 = fundamental).
    phasors : ndarray of complex
        ``P_k`` referred to the first sample (peak amplitude, cosine phase).
    phasor_cov : ndarray, shape (K, 2, 2)
        Covariance of (Re P_k, Im P_k) for each order.
    dc_u : float
        Standard uncertainty of ``dc``.
    rss : float
        Residual sum of squares.
    n_samples : int
        Number of samples fitted.
    n_params : int
        Number of fitted parameters.
    iterations : int
        Gauss–Newton iterations used (0 for a linear fit).
    converged : bool
        False when the iteration hit its limit without settling.
    """

    frequency_hz: float
    frequency_u_hz: float | None
    dc: float
    orders: np.ndarray
    phasors: np.ndarray
    phasor_cov: np.ndarray
    dc_u: float
    rss: float
    n_samples: int
    n_params: int
    iterations: int = 0
    converged: bool = True
    #: the linear solution in the fit's own basis (time centred on the record), so that an
    #: iterative fit can start from this one without solving it again
    start_beta: np.ndarray | None = field(default=None, repr=False)

    @property
    def amplitudes(self) -> np.ndarray:
        """Peak amplitude |P_k| of each order."""
        return np.abs(self.phasors)

    @property
    def amplitudes_u(self) -> np.ndarray:
        """Standard uncertainty of |P_k| (linearised; for |P| ≫ u)."""
        p = self.phasors
        mag = np.abs(p)
        safe = np.where(mag > 0, mag, 1.0)
        g = np.stack([p.real / safe, p.imag / safe], axis=1)  # d|P|/d(re, im)
        var = np.einsum("ki,kij,kj->k", g, self.phasor_cov, g)
        out = np.sqrt(np.maximum(var, 0.0))
        # at |P| = 0 the magnitude is not linearisable: use the mean per-axis std
        zero = mag == 0
        if np.any(zero):
            out[zero] = np.sqrt(0.5 * (self.phasor_cov[zero, 0, 0] + self.phasor_cov[zero, 1, 1]))
        return out

    @property
    def phases_rad(self) -> np.ndarray:
        return np.angle(self.phasors)

    @property
    def sigma(self) -> float:
        """Residual standard deviation sqrt(RSS / (N − p))."""
        dof = max(self.n_samples - self.n_params, 1)
        return math.sqrt(self.rss / dof)

    @property
    def residual_rms(self) -> float:
        """RMS of the residual, sqrt(RSS / N) (IEEE 1241 NAD)."""
        return math.sqrt(self.rss / self.n_samples)

    def phasor(self, order: int) -> complex:
        idx = np.nonzero(self.orders == order)[0]
        if idx.size == 0:
            raise KeyError(f"order {order} was not fitted")
        return complex(self.phasors[idx[0]])

    def evaluate(self, n_samples: int, sample_rate: float, orders: "np.ndarray | None" = None,
                 include_dc: bool = True) -> np.ndarray:
        """The fitted waveform at t = n/fs, n = 0…n_samples−1 (optionally a subset of orders).

        The record is cut into segments of one template length: each segment is the template
        [1, cos kωτ, sin kωτ] (angle-addition recurrence, re-anchored every 16 orders) times
        that segment's coefficients (the phasors rotated to its start), so a long record costs
        one matrix product and a few transcendentals.
        """
        n = int(n_samples)
        w = 2 * math.pi * self.frequency_hz
        keep = np.array([orders is None or int(k) in orders for k in self.orders], dtype=bool)
        if n <= 0:
            return np.zeros(0)
        if not keep.any():
            return np.full(n, self.dc if include_dc else 0.0)
        ks = self.orders[keep]
        ph = self.phasors[keep]
        length, m, rem = _segments(n)
        u = _template(length, float(sample_rate), w, ks)
        seg = np.arange(m + (1 if rem else 0))
        # a_k cos kω(t_s+τ) + b_k sin kω(t_s+τ) with P_k = a_k − j b_k rotated to the segment start t_s
        rotated = ph[None, :] * np.exp(1j * np.outer(seg * (length / float(sample_rate)), ks * w))
        coef = np.empty((seg.size, u.shape[1]))
        coef[:, 0] = self.dc if include_dc else 0.0
        coef[:, 1::2] = rotated.real
        coef[:, 2::2] = -rotated.imag
        y = np.empty(seg.size * length)
        y.reshape(seg.size, length)[:] = coef @ u.T
        return y[:n]


def dft_frequency_seed(x: np.ndarray, sample_rate: float, min_hz: float = 0.0) -> float | None:
    """Frequency of the strongest spectral peak by interpolated DFT (Hann window, Grandke's rule).

    Parameters
    ----------
    x : ndarray
        Samples (any unit).
    sample_rate : float
        Sample rate in Hz.
    min_hz : float
        Ignore peaks below this frequency (Hz); bins 0 and 1 are always ignored.

    Returns
    -------
    float or None
        Frequency in Hz, or None when the record is too short or has no spectral peak.
    """
    x = np.asarray(x, dtype=np.float64)
    n = x.size
    if n < 8:
        return None
    # periodic Hann window applied in the frequency domain: X_w[k] = X[k]/2 − (X[k−1] + X[k+1])/4;
    # the mean only sets bin 0, so it is cleared there instead of subtracted from every sample
    raw = np.fft.rfft(x)
    raw[0] = 0.0
    lo = max(2, int(math.ceil(min_hz * n / sample_rate)))
    if lo >= raw.size - 1:
        return None
    win = raw[:-2] + raw[2:]  # 2·X_w = X[k] − (X[k−1] + X[k+1])/2: the factor 2 cancels below
    win *= -0.5
    win += raw[1:-1]
    power = win.real * win.real
    power += np.square(win.imag)  # |X_w|², whose peak is that of |X_w|
    k = lo + int(np.argmax(power[lo - 1:]))
    if power[k - 1] <= 0:
        return None

    def spec(i: int) -> float:  # |X_w[i]|, bins 0 and N/2 taken as 0 as before
        return math.sqrt(float(power[i - 1])) if 1 <= i <= power.size else 0.0

    left, right, peak = spec(k - 1), spec(k + 1), spec(k)
    if right >= left:
        alpha, sign = right / peak, 1.0
    else:
        alpha, sign = left / peak, -1.0
    delta = sign * (2 * alpha - 1) / (alpha + 1)
    delta = min(max(delta, -0.5), 0.5)
    return (k + delta) * sample_rate / n


def _segments(n: int) -> tuple[int, int, int]:
    """Split n samples into m segments of length L plus a remainder: (L, m, remainder).

    The template's Gram costs ∝ L and the per-segment rotations ∝ n/L, so L grows as √n: the
    power of two nearest √(22·n), within 256…4096 (1024 for 1 s at 48 kHz, 4096 from about 6 s;
    the balance measured for H = 10 with scripts/bench_measure.py's signals). Only the rounding
    of the fit depends on L.
    """
    best = 2 ** round(0.5 * math.log2(22.0 * max(n, 1)))
    length = min(n, _SEGMENT, max(_SEGMENT_MIN, best))
    m = n // length
    return length, m, n - m * length


def _template(length: int, fs: float, omega: float, orders: np.ndarray, with_tau: bool = False) -> np.ndarray:
    """U = [1, cos k ωτ, sin k ωτ, …] for τ = j/fs, j = 0…length−1 (angle-addition recurrence);
    with ``with_tau`` the columns τ·U follow, in the same array."""
    tau = np.arange(length) / fs
    p = 1 + 2 * orders.size
    ut = np.empty((2 * p if with_tau else p, length))  # built column by column: stored transposed
    ut[0] = 1.0
    kmax = int(orders.max())
    c1, s1 = np.cos(omega * tau), np.sin(omega * tau)
    ck, sk = c1, s1
    col = {int(k): i for i, k in enumerate(orders)}
    tmp = np.empty(length)
    for k in range(1, kmax + 1):
        if k > 1:
            if k % 16 == 0:  # re-anchor the recurrence to keep rounding at the 1e-15 level
                ck, sk = np.cos(k * omega * tau), np.sin(k * omega * tau)
            else:
                c_new = ck * c1
                c_new -= np.multiply(sk, s1, out=tmp)
                s_new = sk * c1
                s_new += np.multiply(ck, s1, out=tmp)
                ck, sk = c_new, s_new
        i = col.get(k)
        if i is not None:
            ut[1 + 2 * i] = ck
            ut[2 + 2 * i] = sk
    if with_tau:
        np.multiply(ut[:p], tau, out=ut[p:])
    return ut.T


def _rotations(t_starts: np.ndarray, omega: float, orders: np.ndarray) -> np.ndarray:
    """Per-segment maps P (m, p, p) from template columns to global columns (p = 1 + 2K)."""
    m = t_starts.size
    p = 1 + 2 * orders.size
    rot = np.zeros((m, p, p))
    rot[:, 0, 0] = 1.0
    ang = np.outer(t_starts, orders * omega)
    c, s = np.cos(ang), np.sin(ang)
    for i in range(orders.size):
        ia, ib = 1 + 2 * i, 2 + 2 * i
        rot[:, ia, ia] = c[:, i]
        rot[:, ia, ib] = s[:, i]
        rot[:, ib, ia] = -s[:, i]
        rot[:, ib, ib] = c[:, i]
    return rot


def _normal_equations(x, fs, t_mid, omega, orders, coef_ab, t_scale):
    """DᵀD, Dᵀy and yᵀy for the design [1, cos kωt, sin kωt, …, (∂x/∂ω)/t_scale].

    The record is cut into equal segments; every segment shares one template U (and τ·U),
    so the data enter only through two matrix products and the per-segment Grams are
    rotations of the template's Gram. The result equals the direct computation up to rounding.
    """
    n = x.size
    p = 1 + 2 * orders.size
    with_w = coef_ab is not None
    ncol = p + with_w
    g = np.zeros((ncol, ncol))
    r = np.zeros(ncol)
    yy = float(x @ x)
    length, m, rem = _segments(n)
    pieces = [(0, length, m)]
    if rem:
        pieces.append((m * length, rem, 1))
    if with_w:
        v = np.zeros(p)
        v[1::2] = orders * coef_ab[1::2] / t_scale  # coefficient of cos: k·b_k
        v[2::2] = -orders * coef_ab[0::2] / t_scale  # coefficient of sin: −k·a_k
    # one template [U, τU] for every piece: the remainder's is the first rows of the full one
    ext = _template(length, fs, omega, orders, with_tau=with_w)
    # [U, τU]ᵀ[U, τU] over the first `rem` rows and over the rest: the remainder's Gram and the full
    # template's (their sum) from one pass over the template
    head = ext[:rem].T @ ext[:rem] if rem else None
    tail = ext[rem:].T @ ext[rem:]
    grams = {length: tail if head is None else head + tail, rem: head}
    for start, seg_len, count in pieces:
        u = ext[:seg_len, :p]
        y = x[start:start + seg_len * count].reshape(count, seg_len)
        if with_w:
            ab = y @ ext[:seg_len]  # one pass over the data for both projections
            a, b = ab[:, :p], ab[:, p:]
        else:
            a = y @ u  # (count, p) template projections
        t_starts = (start + seg_len * np.arange(count)) / fs - t_mid
        rot = _rotations(t_starts, omega, orders)
        gram = grams[seg_len]
        assert gram is not None
        g0 = gram[:p, :p]
        rot_t = rot.transpose(0, 2, 1)
        g[:p, :p] += (rot_t @ g0 @ rot).sum(axis=0)
        r[:p] += (rot_t @ a[:, :, None]).sum(axis=0)[:, 0]
        if with_w:
            g1 = gram[:p, p:]  # Uᵀ(τU)
            g2 = gram[p:, p:]  # (τU)ᵀ(τU)
            w = rot @ v  # (count, p): dw column = t_m·U w + (τU) w
            g0w = w @ g0  # (count, p)
            g1w = w @ g1.T
            cross = t_starts[:, None] * g0w + g1w  # Uᵀ(dw) per segment, template basis
            g[:p, -1] += (rot_t @ cross[:, :, None]).sum(axis=0)[:, 0]
            g[-1, -1] += float(np.sum(t_starts ** 2 * np.einsum("mi,mi->m", g0w, w))
                               + 2 * np.sum(t_starts * np.einsum("mi,mi->m", w @ g1, w))
                               + np.sum(np.einsum("mi,ij,mj->m", w, g2, w)))
            r[-1] += float(np.sum(t_starts * np.einsum("mi,mi->m", w, a)) + np.sum(np.einsum("mi,mi->m", w, b)))
    if with_w:
        g[-1, :p] = g[:p, -1]
    return g, r, yy


def _solve(g: np.ndarray, r: np.ndarray, yy: float) -> tuple[np.ndarray, np.ndarray, float]:
    """Solve the normal equations with column scaling; return (beta, G⁻¹, RSS)."""
    scale = np.sqrt(np.clip(np.diag(g), 1e-300, None))
    gs = g / np.outer(scale, scale)
    try:
        ginv_s = np.linalg.inv(gs)
    except np.linalg.LinAlgError:
        ginv_s = np.linalg.pinv(gs)
    ginv = ginv_s / np.outer(scale, scale)
    beta = ginv @ r
    rss = max(yy - 2 * float(beta @ r) + float(beta @ g @ beta), 0.0)
    return beta, ginv, rss


def fit_harmonics(x: np.ndarray, sample_rate: float, frequency_hz: float, n_harmonics: int = 1,
                  *, fit_frequency: bool = False, orders: "np.ndarray | None" = None,
                  max_iter: int = 30, rtol: float = 1e-12, start: HarmonicFit | None = None) -> HarmonicFit:
    """Least-squares fit of a DC term and harmonics k·f of a fundamental.

    Parameters
    ----------
    x : ndarray
        Samples (any unit), uniformly spaced.
    sample_rate : float
        Sample rate in Hz.
    frequency_hz : float
        The fundamental (Hz): exact when ``fit_frequency`` is False, a start value otherwise
        (it should be within a fraction of 1/duration of the truth, as an interpolated DFT gives).
    n_harmonics : int
        Fit orders 1…n_harmonics (ignored when ``orders`` is given). Orders at or above
        Nyquist are dropped.
    fit_frequency : bool
        Also fit the frequency (IEEE 1057 four-parameter iteration, generalised).
    orders : array of int, optional
        Explicit harmonic orders to fit; must include 1 when ``fit_frequency``.
    max_iter : int
        Iteration limit for the frequency fit.
    rtol : float
        Stop when |Δω|/ω falls below this.
    start : HarmonicFit, optional
        A linear fit (``fit_frequency=False``) of the same samples at ``frequency_hz`` with the
        same orders: the iteration starts from its solution instead of solving it again.

    Returns
    -------
    HarmonicFit
    """
    x = np.asarray(x, dtype=np.float64)
    n = x.size
    fs = float(sample_rate)
    if orders is None:  # only the orders below Nyquist are ever fitted: no larger array is made
        below = int(math.ceil(fs / 2 / float(frequency_hz))) if frequency_hz > 0 else 1
        orders = np.arange(1, max(min(int(n_harmonics), below), 1) + 1)
    orders = np.asarray(orders, dtype=np.int64)
    orders = orders[orders * frequency_hz < fs / 2]
    if orders.size == 0:
        orders = np.array([1], dtype=np.int64)
    t_mid = (n - 1) / (2 * fs)
    t_scale = max(t_mid, 1.0 / fs)
    omega = 2 * math.pi * float(frequency_hz)

    # linear fit at the start frequency (the three-parameter fit when K = 1)
    if (fit_frequency and start is not None and start.start_beta is not None and start.n_samples == n
            and math.isclose(start.frequency_hz, float(frequency_hz), rel_tol=1e-14, abs_tol=0.0)
            and np.array_equal(start.orders, orders)):
        beta = start.start_beta  # (ginv and rss are set by the first iteration or the final solve)
    else:
        g, r, yy = _normal_equations(x, fs, t_mid, omega, orders, None, t_scale)
        beta, ginv, rss = _solve(g, r, yy)
    linear_beta = None if fit_frequency else beta
    iterations = 0
    converged = True
    omega_var = None
    if fit_frequency:
        converged = False
        bin_w = 2 * math.pi * fs / n  # one DFT bin in rad/s
        for iterations in range(1, max_iter + 1):
            g, r, yy = _normal_equations(x, fs, t_mid, omega, orders, beta[1:], t_scale)
            beta_w, ginv_w, rss_w = _solve(g, r, yy)
            d_omega = beta_w[-1] / t_scale
            # a Gauss–Newton step beyond half a bin means the start was poor: limit it
            d_omega = max(-0.5 * bin_w, min(0.5 * bin_w, d_omega))
            if not (0 < omega + d_omega < math.pi * fs):
                break
            beta, ginv, rss = beta_w[:-1], ginv_w[:-1, :-1], rss_w
            omega_var = ginv_w[-1, -1] / t_scale ** 2
            omega += d_omega
            if abs(d_omega) <= rtol * omega:
                converged = True
                break
        if not converged:
            # final solve at the last frequency (the iteration's coefficients lag one step). After a
            # converged step (|Δω| ≤ rtol·ω) that solve is not needed: the step's own solution is the
            # linearised fit at the new frequency, with differences of order Δω², far below rounding
            g, r, yy = _normal_equations(x, fs, t_mid, omega, orders, beta[1:], t_scale)
            beta_w, ginv_w, rss = _solve(g, r, yy)
            beta = beta_w[:-1]
            ginv = ginv_w[:-1, :-1]
            omega_var = ginv_w[-1, -1] / t_scale ** 2
        # RSS of the model without the (near-zero) frequency step
        g_lin = g[:-1, :-1]
        r_lin = r[:-1]
        rss = max(yy - 2 * float(beta @ r_lin) + float(beta @ g_lin @ beta), 0.0)

    n_params = beta.size + (1 if fit_frequency else 0)
    dof = max(n - n_params, 1)
    s2 = rss / dof
    cov = s2 * ginv
    a = beta[1::2]
    b = beta[2::2]
    # phasor at the record middle, then refer to the first sample: P0 = Pmid·exp(−jkω·t_mid)
    rot = np.exp(-1j * orders * omega * t_mid)
    phasors = (a - 1j * b) * rot
    pcov = np.empty((orders.size, 2, 2))
    for i in range(orders.size):
        ia, ib = 1 + 2 * i, 2 + 2 * i
        # (Re, Im) of (a − j b) is (a, −b); then rotate by rot
        c_ab = np.array([[cov[ia, ia], -cov[ia, ib]], [-cov[ib, ia], cov[ib, ib]]])
        cr, sr = rot[i].real, rot[i].imag
        m = np.array([[cr, -sr], [sr, cr]])
        pcov[i] = m @ c_ab @ m.T
    f_u = None
    if fit_frequency and omega_var is not None:
        f_u = math.sqrt(max(s2 * omega_var, 0.0)) / (2 * math.pi)
    return HarmonicFit(
        frequency_hz=omega / (2 * math.pi), frequency_u_hz=f_u, dc=float(beta[0]),
        orders=orders, phasors=phasors, phasor_cov=pcov, dc_u=math.sqrt(max(cov[0, 0], 0.0)),
        rss=rss, n_samples=n, n_params=n_params, iterations=iterations, converged=converged,
        start_beta=linear_beta,
    )


def fit_tone(x: np.ndarray, sample_rate: float, n_harmonics: int = 1,
             frequency_hz: float | None = None, min_hz: float = 0.0) -> HarmonicFit | None:
    """Estimate the fundamental and its harmonics: interpolated-DFT seed, then the iterative fit.

    Returns None when no spectral peak exists (silence, DC only, too short).
    """
    seed = frequency_hz if frequency_hz is not None else dft_frequency_seed(x, sample_rate, min_hz)
    if seed is None or seed <= 0:
        return None
    return fit_harmonics(x, sample_rate, seed, n_harmonics, fit_frequency=True)


def synthesize(dc: float, frequencies_hz, amplitudes, phases_deg, n_samples: int,
               sample_rate: float) -> np.ndarray:
    """The waveform ``dc + Σ A_k·cos(2π f_k t + φ_k)`` at t = n/fs, n = 0…n_samples−1.

    Evaluates a harmonic table (e.g. ``ChannelMeasurement.harmonics``: frequency in Hz, peak
    amplitude, phase in degrees referred to the first sample) as the model of the capture.
    """
    t = np.arange(int(n_samples)) / float(sample_rate)
    y = np.full(t.size, float(dc))
    for f, a, ph in zip(frequencies_hz, amplitudes, phases_deg):
        y += float(a) * np.cos(2 * math.pi * float(f) * t + math.radians(float(ph)))
    return y
