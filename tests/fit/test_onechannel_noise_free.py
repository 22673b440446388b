"""One-channel fit on noise-free captures: a pure sine is refused, a filtered square still fits.

A float file (or a synthetic array) has no noise, so every harmonic's standard uncertainty comes
out as zero; the fit must neither divide by it nor take the float rounding pattern of a pure sine
for a filter's harmonics.
"""

from __future__ import annotations

import numpy as np
import pytest

from benchfit.cli.fit_cmd import flag_wording
from benchfit.capture.capture import Capture
from benchfit.errors import FitError
from benchfit.fit.lowpass import fit_lowpass

FS = 48000.0  # Hz
F = 50.0  # Hz, the hum-check box's tone
L, C, RS, RESR, RLOAD = 0.3, 33e-6, 12.0, 0.4, 10e3  # H, F, Ω, Ω, Ω (two 150 mH chokes, 33 µF bank)


def _filtered_square(seconds: float = 1.0, amplitude: float = 0.4) -> np.ndarray:
    """The output of the L-C low-pass driven by a ±amplitude 50 % square, summed from harmonics.

    Square wave: x(t) = Σ_{k odd} (4A/(kπ))·sin(kωt) (Fourier series of a square wave, any
    circuit-theory textbook). Filter: the series-shunt divider H = Z_sh/(Rs + jωL + Z_sh) with
    Z_sh = (Resr + 1/(jωC)) ∥ Rload (textbook voltage divider, written out here independently of
    benchfit.model.filter).
    """
    t = np.arange(int(seconds * FS)) / FS
    y = np.zeros_like(t)
    for k in range(1, 200, 2):
        w = 2 * np.pi * k * F
        zc = RESR + 1 / (1j * w * C)
        zsh = zc * RLOAD / (zc + RLOAD)
        h = zsh / (RS + 1j * w * L + zsh)
        y += (4 * amplitude / (k * np.pi)) * abs(h) * np.sin(w * t + np.angle(h))
    return y


def _capture(y: np.ndarray) -> Capture:
    return Capture(samples=y[None, :].astype(float), sample_rate=FS, channel_names=("output",), units=("FS",),
                   source="synthetic.wav")


@pytest.mark.parametrize("dtype", [np.float64, np.float32])
def test_pure_sine_is_refused_with_one_line(dtype):
    t = np.arange(int(FS)) / FS
    y = (0.5 * np.sin(2 * np.pi * F * t)).astype(dtype).astype(float)
    with pytest.raises(FitError) as err:
        fit_lowpass(_capture(y), method="one-channel", fix={"L": L})
    msg = str(err.value)
    assert "\n" not in msg
    # the library names its parameters; the command line says its flags (cli/fit_cmd.py)
    assert msg == ("synthetic.wav: channel 'output' has no harmonics above the noise, so its shape says nothing "
                   "about the filter — capture the drive too and use method='two-channel', or use fit_ringdown()")
    assert flag_wording(msg) == ("synthetic.wav: channel 'output' has no harmonics above the noise, so its shape "
                                 "says nothing about the filter — capture the drive too and use --method "
                                 "two-channel, or use --model ringdown")


@pytest.mark.parametrize("duty", [0.5, None])
def test_noise_free_filtered_square_still_fits(duty):
    """Zero noise must not break the whitened fit: the parts come back from the shape of H.

    The hum-check design resonates at 50.6 Hz, 1 % from its 50 Hz drive: a resonance that
    narrow once sent the solver into a high-Q valley (C 9 % high, Q ≈ 110 instead of ≈ 7).
    """
    res = fit_lowpass(_capture(_filtered_square()), method="one-channel", fix={"L": L, "Rload": RLOAD},
                      drive_duty=duty)
    d = res.to_dict()
    c_fit = d["parameters"]["C"]["value"]
    f0 = d["derived"]["resonant_frequency_hz"]["value"]
    # noise-free data: only the −100 dBc / 24-bit-step floors and the solver's tolerance remain,
    # so 0.1 % is loose; a solver breakdown or a wrong valley gives errors of several percent
    assert c_fit == pytest.approx(C, rel=1e-3)
    assert f0 == pytest.approx(1 / (2 * np.pi * np.sqrt(L * C)), rel=1e-3)  # f0 = 1/(2π√(LC)), textbook
