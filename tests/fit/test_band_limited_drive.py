"""A two-channel capture whose drive is band-limited before sampling (a sound card's line input).

The two-channel harmonic method models Y_k/X_k as the sampled response to a drive linear between
samples (benchfit.model.filter.sampled_transfer): right for a scope's export of sharp edges, whose
harmonics above Nyquist fold onto the kept orders. A drive behind an anti-alias filter has no such
folding: both channels then carry the continuous response, Y_k/X_k = H(j·2πkf) exactly, and the
first-order-hold model is off by about (π·k·f/fs)²/3 (0.9 % at k = 49, 50 Hz, 48 kHz). With a
16-bit card's noise the high orders resolve that, and the fit flags a model it lacks (χ²ᵣ 2.5–3.2
on 46 degrees of freedom, measured) and Birge-inflates every u. Kept visible as a strict xfail until
the fit tells the two sampling cases apart (issue 11: a fit whose residuals show structure beyond
noise must not be an artefact of the method).
"""

from __future__ import annotations

import numpy as np
import pytest

from benchfit import fit_lowpass
from benchfit.capture.capture import Capture

FS, F, SECONDS = 48000.0, 50.0, 2.0
L, C, RS, RESR, RLOAD = 0.3, 33e-6, 12.0, 0.8, 10e3


def _h(freq: np.ndarray) -> np.ndarray:
    # the L-C ladder as an impedance divider (textbook circuit theory, computed here independently of
    # benchfit.model): Rs + jωL in series, C with its ESR across the load
    w = 2j * np.pi * freq
    zc = RESR + 1.0 / (w * C)
    zp = zc * RLOAD / (zc + RLOAD)
    return zp / (RS + w * L + zp)


def _capture(seed: int) -> Capture:
    n = int(FS * SECONDS)
    t = np.arange(n) / FS
    k = np.arange(1, int(0.45 * FS / F) + 1)  # an ideal anti-alias filter: nothing above 0.45·fs
    ak = 2.0 / (np.pi * k) * np.sin(np.pi * k * 0.5)  # a 0 … 1 V square at duty 0.5 (Fourier series)
    ph = np.exp(2j * np.pi * np.outer(k * F, t))
    x = 0.5 + (ak[:, None] * ph).real.sum(axis=0)
    y = 0.5 * RLOAD / (RS + RLOAD) + ((ak * _h(k * F))[:, None] * ph).real.sum(axis=0)
    rng = np.random.default_rng(seed)
    noise = 3e-5  # of the 1 V swing, about a 16-bit card's noise floor (common practice, no source)
    return Capture(np.vstack([x + rng.normal(0, noise, n), y + rng.normal(0, noise, n)]), FS,
                   ("drive", "output"), ("V", "V"), source=f"band-limited-{seed}.wav")


@pytest.mark.xfail(strict=True, reason="the harmonic method's first-order-hold model is right for sharp edges "
                                       "sampled without an anti-alias filter, off by ≈ (π·k·f/fs)²/3 for a "
                                       "band-limited drive: χ²ᵣ 2.5–3.2 against a limit of ≈ 1.8 (module docstring)")
def test_band_limited_drive_leaves_noise_only_residuals():
    for seed in range(2):
        r = fit_lowpass(_capture(seed), fix={"L": L, "Rload": RLOAD})
        # χ²ᵣ below its 99.9 % point (scipy.stats.chi2 via the fit's own limit): residuals are noise
        assert r.adequacy["chi2_red"] < r.adequacy["chi2_red_limit"], (seed, r.adequacy["chi2_red"])
