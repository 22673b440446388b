"""Calibration profiles: the pure estimators (gain, timebase, coupling) and the TOML store.

No audio device is used here; signals are synthesised with seeded noise.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import soundfile as sf

from benchfit.capture.calibration import (
    CalibrationProfile,
    ChannelGain,
    CouplingCalibration,
    TimebaseCalibration,
    config_dir,
    estimate_coupling,
    estimate_gain,
    estimate_timebase,
    list_profiles,
    load_profile,
    profile_path,
    read_raw_wav,
    save_profile,
)
from benchfit.capture.sidecar import write_sidecar
from benchfit.errors import CaptureError, MeasureError

FS = 48000.0


@pytest.fixture(autouse=True)
def _config(tmp_path, monkeypatch):
    monkeypatch.setenv("BENCHFIT_CONFIG_DIR", str(tmp_path / "cfg"))


def _crlb_f_std(a: float, sigma: float, n: int, fs: float) -> float:
    """Cramér–Rao bound on the frequency std of a real tone (Rife & Boorstyn 1974; Kay 1993 Ex. 3.14):
    var(f̂) ≥ 6σ²fs²/(π²A²N(N²−1))."""
    return math.sqrt(6 * sigma ** 2 * fs ** 2 / (math.pi ** 2 * a ** 2 * n * (n ** 2 - 1)))


# --------------------------------------------------------------------------------------
# estimators
# --------------------------------------------------------------------------------------
def test_gain_from_known_rms_sine():
    rng = np.random.default_rng(7)
    n, a, sigma = 48000, 0.3, 1e-3
    t = np.arange(n) / FS
    x = a * np.sin(2 * np.pi * 1000.0 * t + 0.4) + 0.002 + sigma * rng.standard_normal(n)
    est = estimate_gain(x, FS, rms_known_v=0.775)
    truth = 0.775 / (a / math.sqrt(2))
    # amplitude bound std(Â) ≥ σ√(2/N) (Kay 1993, REFERENCES §2 companion bounds), relative to A
    u_rel_bound = sigma * math.sqrt(2 / n) / a
    assert est.u_v_per_fs / est.v_per_fs == pytest.approx(u_rel_bound, rel=0.1)  # fit covariance ≈ bound
    assert abs(est.v_per_fs - truth) < 4 * est.u_v_per_fs  # 4σ: a seeded draw, not a tuned one
    assert est.rms_fs == pytest.approx(a / math.sqrt(2), rel=1e-4)
    assert est.residual_pct == pytest.approx(100 * sigma / (a / math.sqrt(2)), rel=0.05)  # noise only


@pytest.mark.parametrize("ppm_true", [37.5, -120.0])
def test_timebase_recovers_a_clock_error(ppm_true):
    """A card clock fast by ppm samples at fs·(1+ppm·1e-6); measured on the nominal rate, the tone reads low."""
    rng = np.random.default_rng(1057)
    n, a, sigma, f_ref = 96000, 0.5, 2e-3, 1000.0
    t_true = np.arange(n) / (FS * (1 + ppm_true * 1e-6))
    x = a * np.sin(2 * np.pi * f_ref * t_true + 1.1) + sigma * rng.standard_normal(n)
    est = estimate_timebase(x, FS, f_ref)
    u_bound_ppm = 1e6 * _crlb_f_std(a, sigma, n, FS) / f_ref
    assert est.u_ppm == pytest.approx(u_bound_ppm, rel=0.1)  # the fit reaches the CRLB for long records
    assert abs(est.ppm - ppm_true) < 4 * est.u_ppm  # 4σ for one seeded draw
    assert est.measured_hz == pytest.approx(f_ref / (1 + ppm_true * 1e-6), rel=1e-7)


def test_timebase_adds_the_reference_uncertainty():
    rng = np.random.default_rng(3)
    t = np.arange(48000) / FS
    x = 0.5 * np.sin(2 * np.pi * 440.0 * t) + 1e-3 * rng.standard_normal(t.size)
    bare = estimate_timebase(x, FS, 440.0)
    with_ref = estimate_timebase(x, FS, 440.0, reference_u_hz=440.0 * 2e-6)  # a 2 ppm reference
    # GUM (JCGM 100:2008, 5.1.2) root-sum-square of uncorrelated contributions
    assert with_ref.u_ppm == pytest.approx(math.hypot(bare.u_ppm, 2.0), rel=1e-3)


@pytest.mark.parametrize("make,match", [
    (lambda t: 0.5 * np.sin(2 * np.pi * 1000 * t), "not near the reference"),  # wrong tone: 1000 vs 1100
    (lambda t: np.clip(1.2 * np.sin(2 * np.pi * 1100 * t), -1, 1), "clipped"),
    (lambda t: np.zeros_like(t), "no steady tone"),
    (lambda t: 1e-6 * np.sin(2 * np.pi * 1100 * t), "dBFS"),
])
def test_timebase_rejects_unusable_input(make, match):
    t = np.arange(4800) / FS
    with pytest.raises(MeasureError, match=match):
        estimate_timebase(make(t), FS, 1100.0)


def test_gain_rejects_a_non_sine():
    t = np.arange(48000) / FS
    square = 0.5 * np.sign(np.sin(2 * np.pi * 50.0 * t + 0.1))
    with pytest.raises(MeasureError, match="not a clean sine"):
        estimate_gain(square, FS, 1.0)
    with pytest.raises(MeasureError, match="rms_known_v"):  # the parameter's name (the CLI says --rms)
        estimate_gain(0.5 * np.sin(2 * np.pi * 50.0 * t), FS, -1.0)


def _high_passed_square(tau: float, f: float, seconds: float, seed: int) -> np.ndarray:
    """A square wave through a first-order RC high-pass, exactly discretised for a stepwise input:
    y[n] = e^(−T/τ)·(y[n−1] + x[n] − x[n−1]) (the RC step response decays as e^(−t/τ); any
    circuits textbook, e.g. Nilsson & Riedel, first-order circuits)."""
    rng = np.random.default_rng(seed)
    n = int(seconds * FS)
    t = np.arange(n) / FS
    x = 0.4 * np.sign(np.sin(2 * np.pi * f * t + 0.3))
    k = math.exp(-1.0 / (tau * FS))
    dx = np.diff(x, prepend=0.0)
    from scipy.signal import lfilter  # independent tool for the recursion

    y = lfilter([1.0], [1.0, -k], k * dx)
    return y + 1e-4 * rng.standard_normal(n)


def test_coupling_time_constant_from_square_droop():
    y = _high_passed_square(tau=0.1, f=10.0, seconds=1.0, seed=60469)
    tau = estimate_coupling(y, FS)
    # the pulse module's droop fit trims the edges of each flat; noise 1e-4 FS: 2 % is ample
    assert tau == pytest.approx(0.1, rel=0.02)


def test_coupling_needs_a_square():
    t = np.arange(48000) / FS
    with pytest.raises(MeasureError, match="no droop"):
        estimate_coupling(0.3 * np.sin(2 * np.pi * 10 * t), FS)


# --------------------------------------------------------------------------------------
# profiles
# --------------------------------------------------------------------------------------
def _profile() -> CalibrationProfile:
    return CalibrationProfile(
        name="desk-card",
        gains=(ChannelGain(2, 2.5, 1e-4, 0.775, "b.wav", "2026-12-01T17:00:00Z"),
               ChannelGain(1, 1.25, 2e-5, 0.775, "a.wav", "2026-12-01T17:00:00Z")),
        timebase=TimebaseCalibration(ppm=-23.4, u_ppm=0.05, reference_hz=1000.0, nominal_rate_hz=48000.0,
                                     source="ref.wav", measured_utc="2026-12-01T17:01:00Z"),
        coupling=CouplingCalibration(tau_s=0.047, channel=1, source="sq.wav"),
    )


def test_profile_round_trip_and_listing(tmp_path):
    prof = _profile()
    path = save_profile(prof)
    assert path == tmp_path / "cfg" / "profiles" / "desk-card.toml" == profile_path("desk-card")
    assert config_dir() == tmp_path / "cfg"
    back = load_profile("desk-card")
    assert back.timebase == prof.timebase and back.coupling == prof.coupling
    assert [g.channel for g in back.gains] == [1, 2]  # sorted on load
    assert back.gain_of(2) == prof.gain_of(2)
    save_profile(CalibrationProfile(name="bench2"))
    assert [p.name for p in list_profiles()] == ["bench2", "desk-card"]


def test_profile_to_input_calibration():
    prof = _profile()
    cal = prof.input_calibration(2)
    assert cal.gain_v_per_fs == (1.25, 2.5) and cal.timebase_ppm == -23.4
    assert cal.timebase_u_ppm == 0.05 and cal.coupling_tau_s == 0.047 and cal.profile == "desk-card"
    three = prof.input_calibration(3)
    # channel 3 unknown: it stays in FS, channels 1 and 2 keep their gains (issue 12: a partial profile
    # used to leave every channel in FS)
    assert three.gain_v_per_fs == (1.25, 2.5, None)
    assert prof.missing_gains(3) == [3]
    only_tb = CalibrationProfile(name="x", timebase=prof.timebase)
    assert only_tb.sidecar_calibration(1) == {"profile": "x", "gain_v_per_fs": None, "timebase_ppm": -23.4,
                                              "timebase_u_ppm": 0.05, "coupling_tau_s": None}


@pytest.mark.parametrize("name", ["", "has space", "../escape", "-lead", "x" * 65])
def test_bad_profile_names(name):
    with pytest.raises(CaptureError, match="not a valid profile name"):
        profile_path(name)


def test_missing_and_malformed_profiles(tmp_path):
    save_profile(CalibrationProfile(name="good"))
    with pytest.raises(CaptureError, match=r"no such calibration profile \(known: good\)"):
        load_profile("other")
    assert load_profile("other", missing_ok=True) is None
    folder = tmp_path / "cfg" / "profiles"
    (folder / "broken.toml").write_text("benchfit_profile = 1\nname = \n")
    with pytest.raises(CaptureError, match="broken.toml: not valid TOML"):
        load_profile("broken")
    (folder / "deep.toml").write_text("x = " + "[" * 100000 + "]" * 100000 + "\n")  # tomllib: RecursionError
    with pytest.raises(CaptureError, match="deep.toml: nested too deeply to be a calibration profile"):
        load_profile("deep")
    (folder / "neg.toml").write_text('benchfit_profile = 1\nname = "neg"\n[[gain]]\nchannel = 1\n'
                                     'v_per_fs = -2.0\nu_v_per_fs = 0.0\nreference_rms_v = 1.0\n')
    with pytest.raises(CaptureError, match="'v_per_fs' must be positive"):
        load_profile("neg")
    (folder / "wrong.toml").write_text('benchfit_profile = 1\nname = "other"\n')
    with pytest.raises(CaptureError, match="holds profile 'other'"):
        load_profile("wrong")


def test_read_raw_wav_ignores_sidecar_calibration(tmp_path):
    """Calibration must work on raw FS samples at the nominal rate, whatever the sidecar applies."""
    t = np.arange(4800) / FS
    data = np.stack([0.5 * np.sin(2 * np.pi * 100 * t), 0.25 * np.sin(2 * np.pi * 200 * t)], axis=1)
    wav = tmp_path / "two.wav"
    sf.write(str(wav), data, int(FS), subtype="FLOAT")
    write_sidecar(wav, {"benchfit_sidecar": 1, "channels": [{"name": "drive"}, {"name": "output"}],
                        "sample_rate_hz": 48000, "calibration": {"profile": "p", "gain_v_per_fs": [3.0, 4.0],
                                                                 "timebase_ppm": 100.0}})
    x, fs, names = read_raw_wav(wav)
    assert fs == FS and names == ("drive", "output")
    np.testing.assert_allclose(x, data.T, atol=1e-7)  # float32 file: rounding only
    with pytest.raises(CaptureError, match="no such file"):
        read_raw_wav(tmp_path / "missing.wav")
