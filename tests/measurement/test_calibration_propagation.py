"""Calibration estimators: their uncertainty chains and the parameter names in their errors.

The timebase's ppm = (f_ref/f_meas − 1)·1e6 and the gain's relative uncertainty are checked
against the first-order formula of the GUM (JCGM 100:2008 5.1.2, written out here by hand)
and against a seeded Monte Carlo propagation (JCGM 101:2008, 7) with numpy. Both are sums in
quadrature of independent inputs, so they stay plain ``math.hypot`` (no correlation to carry). The error
wording is the project's convention (library: parameter names; command line: options).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from benchfit.cli.common import flag_words
from benchfit.errors import MeasureError
from benchfit.measurement.calibration import combine_gain_u_rel, estimate_gain, estimate_timebase

FS = 48000.0


def _tone(freq: float, seconds: float = 1.0, seed: int = 1) -> np.ndarray:
    t = np.arange(int(seconds * FS)) / FS
    return 0.5 * np.sin(2 * math.pi * freq * t) + np.random.default_rng(seed).normal(0.0, 1e-3, t.size)


def test_timebase_u_is_the_gum_quotient_rule_and_matches_monte_carlo():
    f_ref, u_ref = 1000.0, 0.002  # a 2 mHz reference uncertainty, comparable to the fit's own
    est = estimate_timebase(_tone(1000.0 * (1 + 40e-6)), FS, f_ref, u_ref)
    f, u = est.measured_hz, est.measured_u_hz
    # GUM 5.1.2: y = f_ref/f_meas, c_ref = 1/f_meas, c_meas = −f_ref/f_meas²
    gum = 1e6 * math.hypot(u_ref / f, f_ref * u / f ** 2)
    assert est.u_ppm == pytest.approx(gum, rel=1e-12)
    # JCGM 101: 200,000 draws; the sample standard deviation scatters by 1/√(2N) ≈ 0.16 %, and
    # the quotient is linear to parts in 1e6 at these relative uncertainties, so 1 % is > 5 σ
    rng = np.random.default_rng(11)
    draws = 1e6 * (rng.normal(f_ref, u_ref, 200_000) / rng.normal(f, u, 200_000) - 1.0)
    assert est.u_ppm == pytest.approx(float(np.std(draws)), rel=0.01)
    assert est.ppm == pytest.approx(-40.0, abs=5 * est.u_ppm)  # the tone is 40 ppm fast


def test_gain_u_rel_matches_monte_carlo():
    # gain = reading / fitted RMS; u_v_per_fs is the fit's part (the fitted RMS's relative u).
    # JCGM 101 with 200,000 draws: the relative standard deviation scatters by ≈ 0.16 %, and
    # the quotient is linear to parts in 1e5 at 0.2 %, so 1 % is > 5 σ
    gain, u_fit, reading, u_meter = 2.0, 0.004, 0.775, 0.00155
    rng = np.random.default_rng(12)
    fitted = reading / gain
    draws = rng.normal(reading, u_meter, 200_000) / rng.normal(fitted, fitted * u_fit / gain, 200_000)
    assert combine_gain_u_rel(gain, u_fit, reading, u_meter) == pytest.approx(
        float(np.std(draws) / np.mean(draws)), rel=0.01)
    assert combine_gain_u_rel(gain, 0.0, reading, 0.0) == 0.0


def test_library_names_parameters_and_the_cli_says_options():
    with pytest.raises(MeasureError) as err:
        estimate_timebase(_tone(1000.0), FS, 30000.0)
    msg = str(err.value)
    assert msg.startswith("reference_hz: 30000.0 Hz must be positive") and "--" not in msg
    cli = flag_words(msg, {"reference_hz": "--frequency", "nominal_rate": "--rate"})
    assert cli == ("--frequency: 30000.0 Hz must be positive and below half the sample rate (24000 Hz) — "
                   "check --frequency, or record at a higher sample rate (--rate)")
    with pytest.raises(MeasureError) as err:
        estimate_gain(_tone(1000.0), FS, -1.0)
    assert str(err.value).startswith("rms_known_v: must be a positive voltage") and "--" not in str(err.value)
    with pytest.raises(MeasureError) as err:
        combine_gain_u_rel(2.0, 0.004, 0.775, -1.0)
    assert flag_words(str(err.value), {"rms_u_v": "--rms-u"}).startswith("--rms-u: -1.0 must be")


def test_drift_and_stability_errors_name_parameters():
    from benchfit.measurement.drift_run import run_drift
    from benchfit.measurement.stability import stability

    with pytest.raises(MeasureError) as err:
        run_drift(iter(()), interval_s=0.0)
    msg = str(err.value)
    assert msg.startswith("interval_s: 0.0 must be") and "--" not in msg
    assert flag_words(msg, {"interval_s": "--interval"}) == (
        "--interval: 0.0 must be a positive number of seconds — e.g. --interval 1.0")
    with pytest.raises(MeasureError) as err:
        stability([], interval_s=1.0, band_ppm=-5.0)
    assert flag_words(str(err.value), {"band_ppm": "--band"}) == (
        "--band: -5.0 must be a positive number of ppm — e.g. --band 100")

