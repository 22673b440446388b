"""Was the drive sampled with sharp edges or behind an anti-alias filter? :func:`classify_drive_edges`.

The two-channel harmonic method needs to know (:mod:`benchfit.fit.lowpass`): a drive whose edges fall
within one sample (a scope's export, no anti-alias filter) has its harmonics above Nyquist folded onto
the kept orders, and Y_k/X_k is the first-order-hold response (``sampled_transfer``); a drive behind an
anti-alias filter (a sound card's line input) has nothing folded, and Y_k/X_k = H(j·2πkf) (``transfer``).
The two differ by about (π·k·f/fs)²/3.

The evidence is taken from the drive channel alone, not from a fit's χ² (which also moves with noise and
with every other model error): a square's harmonics fall as |sin(π·k·D)|/k (its Fourier series), so
sampled with sharp edges they are still there just below Nyquist at the level the lower orders predict;
an anti-alias filter removes them there. The ratio of measured to predicted line power in the top band
(0.46–0.49·fs), normalised by the same ratio in a reference band (0.05–0.20·fs), is ≈ 1 for sharp edges
(0.4…2 with the folded aliases, which add to or cancel the lines, common practice, no source) and ≈ 0
behind a filter. The threshold 0.25 sits between: a filter leaving more than a quarter of the power
(−6 dB) there does not band-limit the drive at those orders.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Literal

import numpy as np

DriveEdges = Literal["auto", "sharp", "band-limited"]

TOP_BAND = (0.46, 0.49)   # of fs: above a line input's pass band (≈ 0.45·fs, 20 kHz at 44.1 kHz), below Nyquist
REF_BAND = (0.05, 0.20)   # of fs: well inside any filter's pass band
THRESHOLD = 0.25          # ratio of top to reference band, between 0 (filtered) and ≈ 1 (sharp)


@dataclass(frozen=True)
class EdgeEvidence:
    """The classification and what it rests on (``ratio`` None: too few lines to tell)."""

    kind: Literal["sharp", "band-limited"]
    ratio: float | None
    ratio_u: float | None
    decided: bool
    reason: str

    def to_dict(self) -> dict:
        return {"drive_edges": self.kind, "top_band_ratio": self.ratio, "top_band_ratio_u": self.ratio_u,
                "decided": self.decided, "reason": self.reason}


def _line_powers(spec: np.ndarray, fs: float, n: int, f: float, band: tuple[float, float],
                 duty: float) -> tuple[float, float, float]:
    """Measured line power (floor removed), its noise u, and the square's predicted power in ``band``."""
    bin_hz = fs / n
    k = np.arange(max(1, math.ceil(band[0] * fs / f)), math.floor(band[1] * fs / f) + 1)
    centre = np.rint(k * f / bin_hz).astype(int)
    lo, hi = int(band[0] * fs / bin_hz), int(band[1] * fs / bin_hz)
    floor = float(np.median(spec[lo:hi])) / math.log(2.0)  # mostly noise bins: the median of an exponential law
    idx = centre[:, None] + np.arange(-2, 3)[None, :]  # ±2 bins: a Hann window's main lobe
    measured = float(np.sum(spec[idx]) - floor * idx.size)
    u = floor * math.sqrt(idx.size)  # the floor's bins scatter with sd = their mean (exponential law)
    pred = float(np.sum(np.sin(math.pi * k * duty) ** 2 / k.astype(float) ** 2))
    return measured, u, pred


def classify_drive_edges(x: np.ndarray, fs: float, f: float) -> EdgeEvidence:
    """Sharp-edged or band-limited: the drive's top-band harmonic level against the square's trend.

    ``x`` the drive samples, ``fs`` the sample rate (Hz), ``f`` its fundamental (Hz). Where the top band
    holds fewer than two of the drive's orders, or its level cannot be told from the noise, the result is
    "sharp" (the first-order-hold model, right for a scope's export) with ``decided`` False.
    """
    x = np.asarray(x, dtype=float)
    n = x.size
    k_top = np.arange(max(1, math.ceil(TOP_BAND[0] * fs / f)), math.floor(TOP_BAND[1] * fs / f) + 1)
    if k_top.size < 2 or n < 64:
        return EdgeEvidence("sharp", None, None, False,
                            f"fewer than two drive orders lie in {TOP_BAND[0]}–{TOP_BAND[1]}·fs; "
                            "first-order hold assumed (sharp edges)")
    mid = 0.5 * (np.percentile(x, 5) + np.percentile(x, 95))
    duty = float(np.mean(x > mid))  # high time / period of a two-level drive
    w = 0.5 - 0.5 * np.cos(2 * math.pi * np.arange(n) / n)
    spec = np.abs(np.fft.rfft((x - x.mean()) * w)) ** 2
    m_top, u_top, p_top = _line_powers(spec, fs, n, f, TOP_BAND, duty)
    m_ref, u_ref, p_ref = _line_powers(spec, fs, n, f, REF_BAND, duty)
    if p_top <= 0 or p_ref <= 0 or m_ref <= 3 * u_ref:
        return EdgeEvidence("sharp", None, None, False,
                            "the drive's square-wave lines are not resolved in the reference band; "
                            "first-order hold assumed (sharp edges)")
    ratio = (m_top / p_top) / (m_ref / p_ref)
    ratio_u = abs(ratio) * math.hypot(u_top / max(abs(m_top), 1e-300), u_ref / m_ref) \
        if m_top != 0 else (u_top / p_top) / (m_ref / p_ref)
    if ratio_u > THRESHOLD / 2:
        return EdgeEvidence("sharp", ratio, ratio_u, False,
                            f"top-band ratio {ratio:.3g} ± {ratio_u:.2g} cannot be told from {THRESHOLD} "
                            "in this noise; first-order hold assumed (sharp edges)")
    kind: Literal["sharp", "band-limited"] = "sharp" if ratio > THRESHOLD else "band-limited"
    return EdgeEvidence(kind, ratio, ratio_u, True,
                        f"drive's lines at {TOP_BAND[0]}–{TOP_BAND[1]}·fs at {ratio:.3g} ± {ratio_u:.2g} of the "
                        f"square's 1/k trend (threshold {THRESHOLD}: sharp above, band-limited below)")
