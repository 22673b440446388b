"""benchfit.fit.edges: a sharp-edged sampled square told from a band-limited one by its drive alone.

Both kinds are synthesised here from a square's Fourier series (a_k = 2/(πk)·sin(πkD), the textbook
series): "sharp" is the square's own samples (edges within a sample, no filter, a scope's export),
"band-limited" the series cut at 0.45·fs (an ideal anti-alias filter, a line input's pass band ends
there, common practice, no source). Noise from an 8-bit scope (4e-3 of the swing, about one LSB) to a
16-bit card (3e-5), duty 0.3–0.7, several f/fs ratios, integer and not.
"""

from __future__ import annotations

import numpy as np
import pytest

from benchfit.fit.edges import THRESHOLD, classify_drive_edges

SECONDS = 1.0
CASES = [(48000.0, 50.0), (20000.0, 50.0), (48000.0, 441.3), (20000.0, 400.0), (96000.0, 1000.7)]


def _sharp(fs: float, f: float, duty: float, noise: float, seed: int) -> np.ndarray:
    t = np.arange(int(fs * SECONDS)) / fs
    x = ((t * f + 0.123) % 1.0 < duty).astype(float)
    return x + np.random.default_rng(seed).normal(0, noise, t.size)


def _band_limited(fs: float, f: float, duty: float, noise: float, seed: int) -> np.ndarray:
    t = np.arange(int(fs * SECONDS)) / fs
    x = np.full(t.size, duty)
    for k in range(1, int(0.45 * fs / f) + 1):
        x += 2.0 / (np.pi * k) * np.sin(np.pi * k * duty) * np.cos(2 * np.pi * k * f * (t - 0.3 / f) - np.pi * k * duty)
    return x + np.random.default_rng(seed).normal(0, noise, t.size)


@pytest.mark.parametrize("fs,f", CASES)
@pytest.mark.parametrize("duty", (0.3, 0.5, 0.7))
@pytest.mark.parametrize("noise", (3e-5, 4e-3))
def test_both_kinds_are_told_apart(fs, f, duty, noise):
    for seed in range(3):
        sharp = classify_drive_edges(_sharp(fs, f, duty, noise, seed), fs, f)
        band = classify_drive_edges(_band_limited(fs, f, duty, noise, seed), fs, f)
        assert (sharp.kind, sharp.decided) == ("sharp", True), (seed, sharp)
        assert (band.kind, band.decided) == ("band-limited", True), (seed, band)
        # the margin: the sharp square's lines keep at least its 2/π-folded level (0.4 of the trend);
        # the filtered one has nothing left but noise, well inside its stated u
        assert sharp.ratio is not None and sharp.ratio > 2 * THRESHOLD
        assert band.ratio is not None and band.ratio_u is not None and abs(band.ratio) < THRESHOLD / 2


def test_too_few_orders_near_nyquist_is_undecided():
    fs, f = 20000.0, 4000.0  # the top band 0.46–0.49·fs holds no order of 4 kHz
    e = classify_drive_edges(_sharp(fs, f, 0.5, 1e-3, 0), fs, f)
    assert (e.kind, e.decided, e.ratio) == ("sharp", False, None)


def test_noise_that_hides_the_top_band_is_undecided():
    fs, f = 48000.0, 50.0
    e = classify_drive_edges(_band_limited(fs, f, 0.5, 0.5, 0), fs, f)  # noise half the swing
    assert not e.decided and e.kind == "sharp"
