"""Output-only fit of an asymmetric timer tuned above the drive frequency: the right valley, or a clear error.

Source of truth: ngspice (an independent circuit simulator) solves the unit of tests/model/unitspice.py:
a rectangular drive at 50.02 Hz, duty 0.52, behind a timer output resistance of 25 Ω while high and
8 Ω while low, then Rs, L = 0.3 H, C with ESR 1.5 Ω, and a 10 kΩ load; the output is captured
AC-coupled (its mean removed), without added noise. Both units resonate above the drive frequency
(1/(2π√(LC)) = 68.5 Hz and 62.0 Hz). The ideal-drive model misses such a drive, and ranked the valley
below the drive frequency first: the fit then raised a bare ValueError (first unit) or reported
L = 1.24 ± 0.10 H (second unit; 1.94 H with the duty given).

Noise: one seeded white noise of 1e-4 of full scale on a ±0.5 FS capture (a consumer sound card's input
noise floor is about −80…−90 dBFS, from memory), so that a z-score is meaningful; without it the
uncertainties come only from the residuals ngspice's integration and 1 µs edges leave.

Tolerances: the issue's done-when (issue 11) asks every reported value to lie within 3 combined standard
uncertainties of the truth, the k = 3 interval; that is the bound here, on one seed.
"""

from __future__ import annotations

import math
import sys
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "model"))  # the shared ngspice helper

from benchfit.capture.capture import Capture  # noqa: E402
from benchfit.errors import FitError  # noqa: E402
from benchfit.fit.lowpass import fit_lowpass  # noqa: E402
from unitspice import SpiceUnit, simulate_unit  # noqa: E402

pytestmark = pytest.mark.ngspice

FS = 48000.0
R_HIGH, R_LOW, DUTY = 25.0, 8.0, 0.52
NOISE_FS = 1e-4
UNITS = {"rs40-c18": dict(Rs=40.0, C=18e-6), "rs12-c22": dict(Rs=12.0, C=22e-6)}


def _unit(Rs: float, C: float) -> SpiceUnit:
    return SpiceUnit(f=50.02, duty=DUTY, v_high=12.0, v_low=0.0, r_src=R_HIGH, r_low=R_LOW, L=0.3, Rs=Rs, C=C,
                     Resr=1.5, Rload=1e4)


@pytest.fixture(scope="module")
def captures(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("basins")
    out = {}
    for name, kw in UNITS.items():
        u = _unit(**kw)
        y = simulate_unit(tmp, u, fs=FS, settle=0.6, keep=0.5, name=name)["out"]
        y = y - np.mean(y)
        y = 0.5 * y / float(np.max(np.abs(y))) + np.random.default_rng(1).normal(0.0, NOISE_FS, y.size)
        out[name] = (u, Capture(y[None, :], FS, ("output",), ("FS",), source=f"ngspice:{name}"))
    return out


def _within_3u(name: str, q, truth: float) -> None:
    assert q.stderr is not None, f"{name} not determined"
    assert abs(q.value - truth) < 3 * q.stderr, (name, q.value, q.stderr, truth)


@pytest.mark.parametrize("name, duty", [("rs40-c18", None), ("rs12-c22", None), ("rs12-c22", DUTY)])
def test_asymmetric_unit_tuned_above_the_drive_fits_within_3u(captures, name, duty):
    u, cap = captures[name]
    r = fit_lowpass(cap, fix={"C": u.C, "Rload": u.Rload}, drive_duty=duty)
    _within_3u("L", r.parameters["L"], u.L)  # was 1.24 ± 0.10 H (1.94 H with the duty given) on rs12-c22
    _within_3u("resonant_frequency_hz", r.derived["resonant_frequency_hz"], 1 / (2 * math.pi * math.sqrt(u.L * u.C)))
    # r_high − r_low belongs to the phase lasting 52 %; with the duty fitted the fit may take the other
    # phase as high, which flips the sign (the output alone cannot tell which phase is high)
    dr = r.derived["drive_asymmetry_ohm"]
    high = r.adequacy["drive_asymmetry"]["duty_high"]
    _within_3u("drive_asymmetry_ohm", dr, (R_HIGH - R_LOW) * (1 if high > 0.5 else -1))
    if duty is None:  # with the duty given, see the test below
        _rs_within_3u(r, u)


def _rs_within_3u(r, u: SpiceUnit) -> None:
    # Rs holds the time average of everything in series with the choke: Rs + D·r_high + (1 − D)·r_low
    # (benchfit.fit.asymmetry); the ESR beside it is marginalised (reported as not separated)
    rs = r.parameters["Rs"]
    if rs.stderr is not None:
        _within_3u("Rs", rs, u.Rs + DUTY * R_HIGH + (1 - DUTY) * R_LOW)


def test_rs_with_the_duty_given_within_3u(captures):
    u, cap = captures["rs12-c22"]
    _rs_within_3u(fit_lowpass(cap, fix={"C": u.C, "Rload": u.Rload}, drive_duty=DUTY), u)


def test_no_marginal_point_gives_a_fit_error_naming_the_capture(captures, monkeypatch):
    import benchfit.fit.onechannel as onechannel

    def none_fitted(*args, **kwargs):
        raise ValueError("no grid point could be fitted")

    monkeypatch.setattr(onechannel, "marginalise", none_fitted)
    u, cap = captures["rs40-c18"]
    with pytest.raises(FitError, match=r"^ngspice:rs40-c18: channel 'output': no fit of the output's shape"):
        fit_lowpass(cap, fix={"C": u.C, "Rload": u.Rload}, drive_duty=DUTY)
