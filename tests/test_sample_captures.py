"""The bundled sample captures hold the truth sample_captures/README.md states for them.

scripts/make_samples.py says its sound card has been connected a while before each recording, so the
input's AC coupling (a first-order high-pass) is in its steady state from the first sample. Started
from rest instead, the high-pass leaves a decaying start transient in the record (3.6e-3 FS on HC-05)
that leaks into every harmonic as about 1/k, and the output-only fit of HC-05, simulated with a
symmetric drive, read it as a drive whose source resistance differs high and low (F-test p ≈ 1e-8).
"""

from __future__ import annotations

import importlib.util
import math
import sys
from pathlib import Path

import numpy as np
from scipy import signal

import benchfit

ROOT = Path(__file__).resolve().parents[1]


def _make_samples():
    """scripts/make_samples.py as a module (it is a script, not part of the package)."""
    spec = importlib.util.spec_from_file_location("make_samples", ROOT / "scripts" / "make_samples.py")
    assert spec is not None and spec.loader is not None
    module = importlib.util.module_from_spec(spec)
    sys.modules["make_samples"] = module  # dataclasses look their module up while the class is made
    spec.loader.exec_module(module)
    return module


def test_sound_card_coupling_is_in_steady_state_from_the_first_sample():
    """A sine through the simulated line-in equals the high-pass's steady-state response from sample 0.

    Reference: the steady-state response of an LTI filter to a sine is the sine scaled by its frequency
    response (scipy.signal.freqz of the card's own bilinear high-pass; the 20 kHz anti-alias filter is
    applied forwards and backwards, |H|² = 1 − 1e-42 at 50 Hz). Tolerance: half a 16-bit code (the
    card's rounding) plus 1e-7 FS for the linear interpolation from 480 kHz ((ωh)²/8 of 0.42 FS is
    2e-8 FS) and the warm-up's leftover transient (e⁻¹⁰ of about 1e-2 FS). The simulated stretch runs
    10 ms past the record so that the forward-backward filter's own edge effect at its end (0.1 code
    over the last few samples, a property of that filter and not of the coupling) stays out.
    """
    ms = _make_samples()
    f, amp, gain, seconds = 49.92, 1.7, 4.0, 0.2
    t_sim = np.arange(int((ms.CARD_WARMUP_S + seconds + 0.01) * ms.FS_SIM) + 1) / ms.FS_SIM
    x = ms.soundcard(amp * np.cos(2 * math.pi * f * t_sim), seconds, gain, np.random.default_rng(0), noise_fs=0.0)
    fs_true = 48_000.0 * (1 + ms.CARD_PPM * 1e-6)
    b, a = signal.bilinear([ms.CARD_TAU_S, 0.0], [ms.CARD_TAU_S, 1.0], fs=fs_true)
    _, h = signal.freqz(b, a, worN=[f], fs=fs_true)
    t_rec = (round(ms.CARD_WARMUP_S * 48_000) + np.arange(x.size)) / fs_true
    expected = (amp / gain) * np.real(h[0] * np.exp(2j * math.pi * f * t_rec))
    err = np.abs(x - expected)
    assert float(err.max()) <= 0.5 / 32767 + 1e-7, (float(err[:4800].max()), float(err[-4800:].max()))


def test_symmetric_drive_sample_is_not_called_asymmetric():
    """HC-05 is simulated with one source resistance high and low (sample_captures/README.md): its
    output-only fit keeps the ideal drive. The decision is the fit's F-test at p < 0.001
    (benchfit.fit.asymmetry); the record is one fixed draw, so this pins that draw, not a rate."""
    cap = benchfit.load(ROOT / "sample_captures" / "hc05_output.flac")
    fit = benchfit.fit_lowpass(cap, fix={"L": 0.3})
    cmp = fit.adequacy["drive_asymmetry"]
    assert cmp["chosen"] == cmp["models"][0], cmp
    assert "drive_asymmetry_ohm" not in fit.derived


def test_sound_card_codes_are_stored_exactly_in_wav_and_flac(tmp_path):
    """The script's 16-bit quantiser gives values a PCM_16 WAV or FLAC file stores and reads back unchanged.

    Reference: 16-bit PCM holds two's-complement codes c in −2¹⁵…2¹⁵−1 and soundfile reads code c as
    c/2¹⁵ FS (soundfile's float scaling of integer PCM; benchfit.load reads it so). Tolerance: none, a
    stored code is exact. A quiet noisy sine (±33 codes, noise 6.6 codes) dwells near zero, so code −1
    must occur: from a quantiser on the scale 2¹⁵−1 the WAV writer (which rounds down) stores every
    negative code one lower, never −1, a one-code step at each zero crossing whose odd harmonics an
    output-only fit reads as a misfit.
    """
    import soundfile as sf

    ms = _make_samples()
    rng = np.random.default_rng(3)
    t = np.arange(48_000) / 48_000.0
    x = ms.quantise_16bit(1e-3 * np.sin(2 * math.pi * 50.01 * t) + rng.normal(0.0, 2e-4, t.size))
    assert np.array_equal(x * 32768.0, np.round(x * 32768.0))
    for fmt in ("WAV", "FLAC"):
        path = tmp_path / f"q.{fmt.lower()}"
        sf.write(str(path), x, 48_000, subtype="PCM_16", format=fmt)
        back, _ = sf.read(str(path), dtype="float64")
        assert np.array_equal(back, x), fmt
        assert np.count_nonzero(np.round(back * 32768.0) == -1) > 0, fmt
