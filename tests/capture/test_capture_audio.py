"""Audio reader: every PCM/float subtype, sidecar calibration, truncated and bad files."""

from __future__ import annotations

import shutil
import subprocess

import numpy as np
import pytest
import soundfile as sf

from benchfit.capture.audiofile import read_audio, sniff_audio, wav_declared_frames
from benchfit.capture.load import load
from benchfit.capture.sidecar import write_sidecar
from benchfit.errors import CaptureError

FS = 8000


def _signal(n_ch: int, n: int = 1000, seed: int = 7) -> np.ndarray:
    """(n, n_ch) test signal inside [-0.95, 0.95]: a 50 Hz tone plus seeded noise."""
    rng = np.random.default_rng(seed)
    t = np.arange(n) / FS
    cols = [0.6 * np.sin(2 * np.pi * 50 * t + k) + 0.3 * rng.uniform(-1, 1, n) for k in range(n_ch)]
    return np.column_stack(cols)


# bits of resolution of each subtype; None = floating point
SUBTYPES = [
    ("WAV", "PCM_16", 16), ("WAV", "PCM_24", 24), ("WAV", "PCM_32", 32), ("WAV", "PCM_U8", 8),
    ("WAV", "FLOAT", None), ("WAV", "DOUBLE", None), ("FLAC", "PCM_S8", 8), ("FLAC", "PCM_16", 16),
    ("FLAC", "PCM_24", 24),
]


@pytest.mark.parametrize("n_ch", [1, 3])
@pytest.mark.parametrize("fmt, subtype, bits", SUBTYPES)
def test_round_trip_within_quantisation_step(tmp_path, fmt, subtype, bits, n_ch):
    x = _signal(n_ch)
    path = tmp_path / f"HC-01_{subtype}.{fmt.lower()}"
    sf.write(path, x, FS, format=fmt, subtype=subtype)
    cap = load(path)
    assert cap.samples.shape == (n_ch, x.shape[0])
    assert cap.sample_rate == FS
    assert cap.units == ("FS",) * n_ch
    assert cap.channel_names == tuple(f"ch{i + 1}" for i in range(n_ch))
    assert cap.warnings == ()
    assert cap.metadata["subtype"] == subtype
    if bits is None:
        # float32 keeps 24 significant bits: relative error ≤ 2^-24 (IEEE 754 binary32)
        tol = 2.0 ** -23 if subtype == "FLOAT" else 0.0
    else:
        # quantisation step 2^-(bits-1) of a full scale of ±1, common practice, no source
        tol = 2.0 ** -(bits - 1)
    assert np.max(np.abs(cap.samples - x.T)) <= tol


def test_sox_sine_reads_with_its_amplitude(tmp_path):
    sox = shutil.which("sox")
    if sox is None:
        pytest.skip("sox is not installed")
    path = tmp_path / "sox_50hz.wav"
    # independent tool: sox "synth sine" at half scale, 16-bit, no dither (-D)
    subprocess.run([sox, "-n", "-r", "8000", "-b", "16", "-D", str(path), "synth", "0.5", "sine", "50", "vol", "0.5"],
                   check=True, capture_output=True)
    cap = load(path)
    x = cap.samples[0]
    t = cap.time
    basis = np.column_stack([np.sin(2 * np.pi * 50 * t), np.cos(2 * np.pi * 50 * t)])
    coef, *_ = np.linalg.lstsq(basis, x, rcond=None)
    assert cap.sample_rate == 8000
    assert x.size == 4000
    # amplitude 0.5 FS set by "vol 0.5"; 1e-3 FS allows sox's rounding to 16 bits (2^-15 ≈ 3e-5) with margin
    assert np.hypot(*coef) == pytest.approx(0.5, abs=1e-3)
    # rms residual after removing the fitted sine: within 2 steps of 16-bit quantisation (2^-15 each; its rms
    # alone is 2^-15/sqrt(12)), common practice, no source. The max is not checked: sox's first few samples
    # carry a start-up transient (~70 steps, observed) that is sox's, not the reader's.
    assert np.sqrt(np.mean((x - basis @ coef) ** 2)) <= 2 * 2.0 ** -15


def test_ogg_vorbis_reads(tmp_path):
    if "VORBIS" not in sf.available_subtypes("OGG"):
        pytest.skip("libsndfile without Vorbis")
    x = _signal(1, n=8000)
    path = tmp_path / "tone.ogg"
    sf.write(path, x, FS, format="OGG", subtype="VORBIS")
    cap = load(path)
    assert cap.n_channels == 1
    # lossy codec: only the waveform's likeness is checked (correlation), common practice, no source
    n = min(cap.n_samples, x.shape[0])
    assert np.corrcoef(cap.samples[0, :n], x[:n, 0])[0, 1] > 0.95


def test_mp3_reads_when_libsndfile_has_it(tmp_path):
    if "MP3" not in sf.available_formats():
        pytest.skip("libsndfile without MP3")
    x = _signal(1, n=8000)
    path = tmp_path / "tone.mp3"
    sf.write(path, x, FS, format="MP3", subtype="MPEG_LAYER_III")
    assert sniff_audio(path.read_bytes()[:16]) == "MP3"
    cap = load(path)
    # lossy codec with encoder delay: only the level is checked — rms within 10 % (common practice, no source)
    assert np.sqrt(np.mean(cap.samples[0] ** 2)) == pytest.approx(np.sqrt(np.mean(x ** 2)), rel=0.1)


def _sidecar(names, gains=None, ppm=0.0, u_ppm=0.0, tau=None, rate=FS, **extra):
    data = {"benchfit_sidecar": 1, "channels": [{"name": n} for n in names], "sample_rate_hz": rate,
            "device": "bench card", "start_utc": "2026-12-01T17:00:00Z", "overflow_count": 0, "clip_count": 0,
            "calibration": {"profile": "bench-2", "gain_v_per_fs": gains, "timebase_ppm": ppm,
                            "timebase_u_ppm": u_ppm, "coupling_tau_s": tau},
            "benchfit_version": "0.1.0"}
    data.update(extra)
    return data


def test_sidecar_gain_timebase_and_names_are_applied(tmp_path):
    x = _signal(2)
    path = tmp_path / "HC-05_as-found.wav"
    sf.write(path, x, FS, subtype="FLOAT")
    write_sidecar(path, _sidecar(["drive", "output"], gains=[4.0, 1.5], ppm=-125.0, u_ppm=3.0, tau=0.47))
    raw_bytes = path.read_bytes()
    cap = load(path)
    assert cap.channel_names == ("drive", "output")
    assert cap.units == ("V", "V")
    # gain applied exactly: samples × V/FS; float32 storage error 2^-24 relative (IEEE 754 binary32)
    np.testing.assert_allclose(cap.samples, x.T * np.array([[4.0], [1.5]]), rtol=0, atol=4.0 * 2.0 ** -23)
    # timebase: fs_true = fs_nominal·(1 + ppm·1e-6), definition in the sidecar schema
    assert cap.sample_rate == pytest.approx(FS * (1 - 125e-6), rel=1e-15)
    cal = cap.calibration
    assert (cal.profile, cal.gain_v_per_fs, cal.timebase_ppm, cal.timebase_u_ppm, cal.coupling_tau_s) == (
        "bench-2", (4.0, 1.5), -125.0, 3.0, 0.47)
    assert cap.metadata["device"] == "bench card"
    assert path.read_bytes() == raw_bytes  # the raw file is never rewritten


def test_sidecar_without_gain_keeps_full_scale_units(tmp_path):
    path = tmp_path / "u.wav"
    sf.write(path, _signal(1), FS, subtype="PCM_16")
    write_sidecar(path, _sidecar(["output"], ppm=50.0))
    cap = load(path)
    assert cap.units == ("FS",)
    assert cap.channel_names == ("output",)
    # tolerance: IEEE 754 double rounding of parsing and unit scaling (~2e-16 per step), common practice, no source
    assert cap.sample_rate == pytest.approx(FS * (1 + 50e-6), rel=1e-15)


def test_sidecar_counts_become_warnings(tmp_path):
    path = tmp_path / "u.wav"
    sf.write(path, _signal(1), FS, subtype="PCM_16")
    write_sidecar(path, _sidecar(["output"], overflow_count=2, clip_count=5))
    cap = load(path)
    assert any("overflowed 2 time" in w for w in cap.warnings)
    assert any("5 sample(s) at full scale" in w for w in cap.warnings)


def test_recorder_extras_pass_into_metadata_and_frame_count_is_checked(tmp_path):
    path = tmp_path / "u.wav"
    sf.write(path, _signal(1, n=1000), FS, subtype="PCM_16")
    write_sidecar(path, _sidecar(["output"], frames=1200, interrupted=True, peak_dbfs=[-6.0]))
    cap = load(path)
    assert (cap.metadata["interrupted"], cap.metadata["peak_dbfs"], cap.metadata["frames"]) == (True, [-6.0], 1200)
    assert cap.metadata["sidecar"] == str(tmp_path / "u.json")
    assert any("wrote 1200 frames but u.wav holds 1000" in w for w in cap.warnings)


def test_sidecar_with_wrong_channel_count_is_an_error(tmp_path):
    path = tmp_path / "HC-06.wav"
    sf.write(path, _signal(2), FS, subtype="PCM_16")
    write_sidecar(path, _sidecar(["output"]))
    with pytest.raises(CaptureError) as info:
        load(path)
    msg = str(info.value)
    assert msg.startswith(str(tmp_path / "HC-06.json")) and "1 channels but HC-06.wav has 2" in msg


def test_sidecar_rate_mismatch_warns_and_uses_header(tmp_path):
    path = tmp_path / "u.wav"
    sf.write(path, _signal(1), FS, subtype="PCM_16")
    write_sidecar(path, _sidecar(["output"], rate=44100))
    cap = load(path)
    assert cap.sample_rate == FS
    assert any("header's rate is used" in w for w in cap.warnings)


def test_truncated_wav_returns_what_remains_with_a_warning(tmp_path):
    x = _signal(3, n=1000)
    path = tmp_path / "cut.wav"
    sf.write(path, x, FS, subtype="PCM_16")
    data = path.read_bytes()
    path.write_bytes(data[:-1001])  # 1001 bytes off: 166 whole 6-byte frames and part of one more
    assert wav_declared_frames(path) == 1000
    cap = load(path)
    held = (len(data) - 44 - 1001) // 6  # 44-byte canonical header written by libsndfile for PCM_16
    assert cap.n_samples == held
    assert any(f"header declares 1000 frames, file holds {held}" in w for w in cap.warnings)
    # quantisation step 2^-15 for PCM_16, common practice, no source
    assert np.max(np.abs(cap.samples - x[:held].T)) <= 2.0 ** -15


def test_truncated_flac_returns_the_decodable_part(tmp_path):
    x = _signal(1, n=40000)
    path = tmp_path / "cut.flac"
    sf.write(path, x, FS, subtype="PCM_16")
    data = path.read_bytes()
    path.write_bytes(data[: len(data) // 2])
    cap = read_audio(path)
    assert 0 < cap.n_samples < 40000
    assert any("header declares 40000 frames" in w for w in cap.warnings)
    # quantisation step 2^-15 for PCM_16, common practice, no source
    assert np.max(np.abs(cap.samples[0] - x[: cap.n_samples, 0])) <= 2.0 ** -15


@pytest.mark.parametrize(
    "content, fragment",
    [
        (b"", "the file is empty"),
        (b"this is a shopping list, not a recording\n" * 3, "not an audio file"),
        (bytes(np.random.default_rng(3).integers(0, 256, 4000, dtype=np.uint8)), "not an audio file"),
        (b"RIFF\x24\x00\x00\x00WAVEfmt \x10\x00\x00\x00" + b"\xff" * 40, "unreadable audio"),
    ],
    ids=["empty", "text", "random-bytes", "broken-header"],
)
def test_bad_audio_files_give_one_line_errors(tmp_path, content, fragment):
    path = tmp_path / "HC-09.wav"
    path.write_bytes(content)
    with pytest.raises(CaptureError) as info:
        load(path)
    msg = str(info.value)
    assert msg.startswith(str(path) + ": ")
    assert fragment in msg
    assert "\n" not in msg


def test_single_frame_is_refused(tmp_path):
    path = tmp_path / "one.wav"
    sf.write(path, np.zeros((1, 1)), FS, subtype="PCM_16")
    with pytest.raises(CaptureError, match="at least 2"):
        load(path)


def test_sniff_audio_recognises_containers(tmp_path):
    for fmt, name in [("WAV", "WAV"), ("FLAC", "FLAC"), ("AIFF", "AIFF")]:
        path = tmp_path / f"s.{fmt.lower()}"
        sf.write(path, _signal(1, n=16), FS, format=fmt, subtype="PCM_16")
        assert sniff_audio(path.read_bytes()[:16]) == name
    assert sniff_audio(b"Time,CH1\n0,1\n") is None
