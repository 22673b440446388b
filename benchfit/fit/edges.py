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

from benchfit.measurement.pulse import edge_period

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


#: an edge lies within one sample interval when one sample-to-sample step carries this share of the swing
#: over the five intervals around it (a ramp over two or more samples carries at most about half of it);
#: the term applies when at least half the edges do (common practice, no source)
STEP_SHARE = 0.8
_PHASE_GRID = 1024  # points over the first edge's unknown phase within a sample


@dataclass(frozen=True)
class EdgeTiming:
    """Where within their sample intervals a sharp drive's edges lie, as an uncertainty of its timing.

    ``u_samples`` is the standard uncertainty of the drive's mean edge time (in sample intervals, ``u_s``
    in seconds) that the first-order-hold model cannot see; ``within_one_sample`` the share of edges
    whose step falls between two samples; ``n_edges`` the edges counted; ``synchronous_rel`` how far
    the edges' sub-sample phases fail to average out (1: every edge of a kind at one phase, the record synchronous with the sample clock).
    """

    u_samples: float
    u_s: float
    within_one_sample: float
    n_edges: int
    synchronous_rel: float

    def to_dict(self) -> dict:
        return {"u_samples": self.u_samples, "u_s": self.u_s, "edges_within_one_sample": self.within_one_sample,
                "n_edges": self.n_edges, "synchronous_rel": self.synchronous_rel}


def _phase_rms(offsets: np.ndarray) -> float:
    """√∫₀¹ E(a)² da: E(a) the mean of frac(a + o) − ½ over the edges' offsets ``o`` (in samples)."""
    n_edges = offsets.size
    if n_edges < 1:
        return 0.0
    frac = np.sort(np.mod(offsets, 1.0))
    a = (np.arange(_PHASE_GRID) + 0.5) / _PHASE_GRID
    # frac(a + f) = a + f − [f ≥ 1 − a]: the wrapped edges counted on the sorted phases (memory O(N + grid))
    wrapped = n_edges - np.searchsorted(frac, 1.0 - a, side="left")
    e = a + float(frac.mean()) - 0.5 - wrapped / n_edges
    return float(np.sqrt(np.mean(e ** 2)))


def edge_timing(x: np.ndarray, fs: float, f: float) -> EdgeTiming | None:
    """The timing uncertainty of a two-level drive whose edges fall within one sample, or None.

    A sampled step says only that the edge lies between two samples. The first-order-hold model reads it
    as a ramp between them, which acts on the response like an edge at the interval's middle; an edge at
    phase φ of its interval is then (φ − ½) samples late in the model. For a square the response's odd
    harmonics see the mean of that error over the rising and falling edges as a delay of the drive against
    the output (to first order), and such a delay moves the fitted parts — most of all the ESR, whose zero
    is a phase lead ω·Resr·C, so a delay δ reads as Resr off by δ/C.

    Within each kind of edge the phases follow from the period P: rising edge n sits at a + n·P samples,
    falling edge n at b + n·P. P is the least-squares line through the first sample after each edge
    (:func:`benchfit.measurement.pulse.edge_period`), not the tone fit's fs/f: for a sharp square that is
    off by parts in 10⁵ (the harmonics above the tone model pull it), which over a long record would
    spread a synchronous record's phases over samples and shrink the term where it matters most. Neither
    a nor b (the first edges' phases) is known from the samples — nor is b − a, the high time, beyond whole samples when the record is synchronous — so each is
    taken as uniform on [0, 1) and independent (GUM 4.3.7, rectangular priors). With E_r(a) the mean of
    frac(a + n·P) − ½ over the N_r rising edges, U_r² = ∫₀¹ E_r(a)² da, and likewise U_f for the N_f
    falling ones; the mean over all edges then has u² = (N_r²·U_r² + N_f²·U_f²)/(N_r + N_f)². A record
    synchronous with the sample clock has every edge of a kind at one phase: U = 1/√12 sample each, u =
    1/√24. Otherwise the phases spread over the interval and u shrinks towards 0.

    None when the drive's edges are resolved (fewer than half of them within one sample, ``STEP_SHARE``: the
    samples on a ramp locate its edge), when fewer than two edges are seen, or when ``f`` is not positive.
    The levels need not be flat (a timer's output sags under its load): only the steps are looked at.
    """
    x = np.asarray(x, dtype=float)
    if not (f > 0 and fs > 0) or x.size < 4:
        return None
    lo, hi = float(np.percentile(x, 5)), float(np.percentile(x, 95))
    if not hi > lo:
        return None
    above = x > 0.5 * (lo + hi)
    step = np.flatnonzero(above[1:] != above[:-1]) + 1  # the first sample after each edge
    n_edges = int(step.size)
    if n_edges < 2:
        return None
    jump = np.abs(x[step] - x[step - 1])
    swing = np.abs(x[np.minimum(step + 2, x.size - 1)] - x[np.maximum(step - 3, 0)])
    within = float(np.mean(jump >= STEP_SHARE * swing))
    if within < 0.5:
        return None
    at = [step[above[step]].astype(float), step[~above[step]].astype(float)]
    line = edge_period(at[0], at[1])
    period = fs / f if line is None else line[0]
    var = sum((k.size * _phase_rms(np.arange(k.size) * period)) ** 2 for k in at)
    u = float(math.sqrt(var)) / n_edges
    return EdgeTiming(u, u / fs, within, n_edges, u * math.sqrt(24.0))
