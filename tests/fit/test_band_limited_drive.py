"""Two-channel captures whose drive is band-limited before sampling (a sound card's line input), or not.

The two-channel harmonic method's default model of Y_k/X_k is the sampled response to a drive linear
between samples (benchfit.model.filter.sampled_transfer): right for a scope's export of sharp edges, whose
harmonics above Nyquist fold onto the kept orders. A drive behind an anti-alias filter has no such
folding: both channels then carry the continuous response, Y_k/X_k = H(j·2πkf) exactly, and the
first-order-hold model is off by about (π·k·f/fs)²/3 (0.9 % at k = 49, 50 Hz, 48 kHz). With a 16-bit
card's noise the high orders resolve that: with drive_edges="sharp" the fit flags a model it lacks
(χ²ᵣ 2.5–3.2 on 46 degrees of freedom, measured) and Birge-inflates every u. The fit tells the two apart
from the drive channel (benchfit.fit.edges; issue 11: residual structure beyond noise must not be an
artefact of the method).

The source of truth is computed here, independently of benchfit.model: the Fourier series of a square
(a_k = 2/(πk)·sin(πkD)) through the textbook impedance divider of the L-C ladder.
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


def _period(kmax: int, phase: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """One period (FS/F samples, an integer) of a 0 … 1 V square at duty 0.5: t, the orders' a_k·e^{jkωt}."""
    t = (np.arange(int(FS / F)) + phase) / FS
    k = np.arange(1, kmax + 1)
    ak = 2.0 / (np.pi * k) * np.sin(np.pi * k * 0.5)  # the square's Fourier series
    return t, k, ak[:, None] * np.exp(2j * np.pi * np.outer(k * F, t))


def _with_noise(x: np.ndarray, y: np.ndarray, seed: int, noise: float, name: str) -> Capture:
    reps = int(SECONDS * F)
    x, y = np.tile(x, reps), np.tile(y, reps)
    rng = np.random.default_rng(seed)
    return Capture(np.vstack([x + rng.normal(0, noise, x.size), y + rng.normal(0, noise, y.size)]), FS,
                   ("drive", "output"), ("V", "V"), source=f"{name}-{seed}.wav")


def _band_limited(seed: int) -> Capture:
    # an ideal anti-alias filter: nothing above 0.45·fs on either channel
    _, k, terms = _period(int(0.45 * FS / F), 0.0)
    x = 0.5 + terms.real.sum(axis=0)
    y = 0.5 * RLOAD / (RS + RLOAD) + (_h(k * F)[:, None] * terms).real.sum(axis=0)
    # 3e-5 of the 1 V swing, about a 16-bit card's noise floor (common practice, no source)
    return _with_noise(x, y, seed, 3e-5, "band-limited")


def _sharp(seed: int) -> Capture:
    # a scope's export: the drive's samples are the square itself (edges 0.37 sample off the grid, no
    # filter), the output the continuous response sampled (its series to 40·Nyquist; beyond, |a_k·H| < 1e-8)
    t, k, terms = _period(int(20 * FS / F), 0.37)
    x = ((t * F + 0.25) % 1.0 < 0.5).astype(float)  # high for |t| < T/4, as the cosine series
    y = 0.5 * RLOAD / (RS + RLOAD) + (_h(k * F)[:, None] * terms).real.sum(axis=0)
    # 2e-3 of the swing: an 8-bit scope channel's noise, half an LSB on a 1 V range (common practice, no source)
    return _with_noise(x, y, seed, 2e-3, "sharp")


def _fit_called(cap: Capture, kind: str):
    """The default fit of ``cap``: its drive called ``kind`` with evidence, and χ²ᵣ of noise only."""
    r = fit_lowpass(cap, fix={"L": L, "Rload": RLOAD})
    assert r.adequacy["drive_edges"]["drive_edges"] == kind
    assert r.adequacy["drive_edges"]["decided"]
    # χ²ᵣ below its 99.9 % point (scipy.stats.chi2 via the fit's own limit): residuals are noise
    assert r.adequacy["chi2_red"] < r.adequacy["chi2_red_limit"], (cap.source, r.adequacy["chi2_red"])
    return r


@pytest.mark.parametrize("seed", range(3))
def test_band_limited_drive_leaves_noise_only_residuals(seed):
    r = _fit_called(_band_limited(seed), "band-limited")
    # the fitted parts within 3 combined standard uncertainties of the divider's values (a 3σ bound)
    for name, truth in (("C", C), ("Rs", RS), ("Resr", RESR)):
        p = r.parameters[name]
        assert p.stderr is not None and abs(p.value - truth) < 3 * p.stderr, (seed, name, p.value, p.stderr)


def test_band_limited_drive_forced_sharp_shows_the_model_error():
    # the converse of the choice: the first-order-hold model on the same data leaves structure beyond noise
    r = fit_lowpass(_band_limited(0), fix={"L": L, "Rload": RLOAD}, drive_edges="sharp")
    assert r.adequacy["drive_edges"]["drive_edges"] == "sharp"
    assert r.adequacy["chi2_red"] > r.adequacy["chi2_red_limit"]


@pytest.mark.parametrize("seed", range(2))
def test_sharp_edged_drive_is_still_called_sharp(seed):
    _fit_called(_sharp(seed), "sharp")
