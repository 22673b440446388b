"""An R-C low-pass driven by a square, fitted as an L-C: the fit says there is no resonance.

The response is computed independently of benchfit's model: a first-order R-C low-pass driven by
a sampled square, discretised exactly (zero-order hold, y[n] = a·y[n−1] + (1 − a)·x[n−1] with
a = exp(−1/(fs·RC)); textbook first-order circuit, e.g. Nilsson & Riedel, *Electric Circuits*,
from memory), run by scipy.signal.lfilter. Seeded noise of 1 mV.
"""

from __future__ import annotations

import numpy as np
from scipy.signal import lfilter

import benchfit
from benchfit.capture.capture import Capture


def _rc_capture(r_ohm: float, c_farad: float, *, fs: float = 48000.0, f: float = 50.0) -> Capture:
    t = np.arange(int(fs)) / fs
    drive = np.where((t * f) % 1 < 0.5, 12.0, 0.0)
    a = np.exp(-1.0 / (fs * r_ohm * c_farad))
    out = lfilter([0.0, 1.0 - a], [1.0, -a], drive)
    rng = np.random.default_rng(7)
    return Capture(np.vstack([drive + rng.normal(0, 1e-3, drive.size), out + rng.normal(0, 1e-3, out.size)]),
                   fs, channel_names=("drive", "output"), units=("V", "V"))


def test_an_rc_square_is_flagged_as_having_no_resonance():
    fit = benchfit.fit_lowpass(_rc_capture(1e3, 10e-6), fix={"C": 10e-6, "Rload": 1e9})
    q = fit.derived["q_factor"].value
    # an R-C low-pass has no second-order resonance: whatever L the fit finds, Q stays far
    # below the 0.5 of critical damping, and the result says what that means
    assert q < 0.1
    assert any(w.startswith("no resonance: Q = ") and "R-C low-pass" in w for w in fit.warnings)


def test_a_real_lc_unit_gets_no_such_warning():
    cap = benchfit.load(__import__("pathlib").Path(__file__).resolve().parents[2]
                        / "sample_captures" / "hc03_drive_output_scope.csv")
    fit = benchfit.fit_lowpass(cap, fix={"L": 0.300, "Rload": 10e3})
    assert fit.derived["q_factor"].value > 0.5
    assert not any(w.startswith("no resonance") for w in fit.warnings)
