"""A long record measured in blocks (constant memory) agrees with the whole-record measurement.

Records small enough to measure both ways are measured whole (:func:`benchfit.measure` on a
Capture) and in blocks (:func:`benchfit.measurement.long_record.measure_blocks` / the file path
with a lowered threshold). Tolerances come from the stated standard uncertainties: the two
estimates use the same samples, so they must agree well inside one u; the block method's
frequency u must stay within 10 % of the whole record's (both reach the Cramér–Rao bound,
Rife & Boorstyn 1974, IEEE Trans. Inf. Theory 20(5); the block/line combination's information
adds up to the whole record's, see benchfit.measurement.chain).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import soundfile as sf

from benchfit.capture.capture import Capture
from benchfit.measurement.chain import chain_points, fit_chained_line
from benchfit.measurement.long_record import is_long_file, measure_blocks, measure_long_file
from benchfit.measurement.summary import measure

FS = 8000.0
F0 = 50.04  # the hum-check scenario's drive frequency (DESIGN.md demo)


def _hum_check(seconds: float, seed: int) -> np.ndarray:
    """A drive square and a filtered-sine output, seeded white noise (invented demo data)."""
    rng = np.random.default_rng(seed)
    n = int(seconds * FS)
    t = np.arange(n) / FS
    drive = np.where(np.mod(t * F0 + 0.13, 1.0) < 0.52, 0.45, -0.45) + rng.normal(0, 2e-3, n)
    out = (0.6 * np.cos(2 * math.pi * F0 * t + 0.4) + 0.02 * np.cos(6 * math.pi * F0 * t)
           + rng.normal(0, 1e-3, n))
    return np.vstack([drive, out])


def _blocks(samples: np.ndarray, frames: int, names=("drive", "output")):
    for start in range(0, samples.shape[1], frames):
        yield Capture(samples=samples[:, start:start + frames], sample_rate=FS, channel_names=names,
                      metadata={"start_frame": start}, t0=start / FS)


@pytest.fixture(scope="module")
def pair(tmp_path_factory):
    path = tmp_path_factory.mktemp("long") / "hc05_long.wav"
    x = _hum_check(30.0, seed=12)
    sf.write(str(path), x.T, int(FS), subtype="DOUBLE")
    whole = measure(Capture(samples=x, sample_rate=FS, channel_names=("ch1", "ch2"), source=str(path)))
    blocks = measure_long_file(path, block_frames=24000)  # 10 blocks of 3 s
    return whole, blocks


def test_the_result_says_it_was_measured_in_blocks(pair):
    _, b = pair
    for ch in b.channels:
        assert any(w.startswith("measured in 10 blocks of 3 s") for w in ch.warnings)
        assert ch.extra["blocks"] == 10
    assert b.duration_s == pytest.approx(30.0)
    assert b.sha256 and len(b.sha256) == 64


@pytest.mark.parametrize("i", [0, 1])
def test_levels_are_exactly_the_whole_records(pair, i):
    w, b = pair[0].channels[i], pair[1].channels[i]
    # sums of squares, extremes and the kept tails' order statistics: the same numbers up to rounding
    assert b.vpp == w.vpp  # the same two order statistics of the same samples
    assert b.vrms == pytest.approx(w.vrms, rel=1e-12)
    assert b.vdc == pytest.approx(w.vdc, rel=1e-9, abs=1e-15)
    assert b.extra["vmax"] == w.extra["vmax"] and b.extra["vmin"] == w.extra["vmin"]


@pytest.mark.parametrize("i", [0, 1])
def test_frequency_agrees_within_u_and_its_u_is_the_whole_records(pair, i):
    w, b = pair[0].channels[i], pair[1].channels[i]
    uw, ub = w.extra["frequency_u_fit_hz"], b.extra["frequency_u_fit_hz"]
    assert abs(b.frequency_hz - w.frequency_hz) < max(uw, ub)
    assert ub == pytest.approx(uw, rel=0.10)
    assert b.extra["frequency_method"].startswith(w.extra["frequency_method"].split(",")[0])


@pytest.mark.parametrize("i", [0, 1])
def test_amplitude_thd_and_harmonics_agree_within_u(pair, i):
    w, b = pair[0].channels[i], pair[1].channels[i]
    assert abs(b.amplitude - w.amplitude) < w.amplitude_u
    assert b.amplitude_u == pytest.approx(w.amplitude_u, rel=0.10)  # amplitude info is linear in N
    assert abs(b.thd_pct - w.thd_pct) < max(w.thd_u_pct, b.thd_u_pct)
    assert b.thd_n_pct == pytest.approx(w.thd_n_pct, rel=1e-3)  # same residual power, per-block fits
    for hw, hb in zip(w.harmonics, b.harmonics):
        assert abs(hb.amplitude - hw.amplitude) < 2 * max(hw.amplitude_u, hb.amplitude_u)
        if hw.amplitude > 10 * hw.amplitude_u:  # the phase of a harmonic well above the noise
            assert abs(math.remainder(hb.phase_deg - hw.phase_deg, 360.0)) < 0.05


def test_pulse_values_pool_over_blocks(pair):
    w, b = pair[0].channels[0], pair[1].channels[0]
    assert b.extra["two_level"] and w.extra["two_level"]
    assert abs(b.duty_cycle_pct - w.duty_cycle_pct) < 2 * max(w.duty_cycle_u_pct, b.duty_cycle_u_pct)
    # edges within one sample: both carry the grid's resolution term, which does not average out
    assert b.rise_time_u_s == pytest.approx(w.rise_time_u_s, rel=0.10)
    assert abs(b.rise_time_s - w.rise_time_s) < w.rise_time_u_s


def test_block_frequency_u_is_honest_over_seeded_repeats():
    """z = (f − f_true)/u over 40 seeded records of 12 blocks: rms(z) ≈ 1 (χ² with 40 dof puts
    the rms within 0.7…1.3 at well beyond 99 %, Gaussian approximation)."""
    z, ratio = [], []
    n, frames = 24000, 2000
    t = np.arange(n) / FS
    for seed in range(40):
        rng = np.random.default_rng(1000 + seed)
        f0 = rng.uniform(40.0, 60.0)
        x = 0.5 * np.cos(2 * math.pi * f0 * t + rng.uniform(-math.pi, math.pi)) + rng.normal(0, 0.05, n)
        m = measure_blocks(_blocks(x[None, :], frames, names=("output",)), n_max=n, harmonics=3)
        ch = m.channels[0]
        u = ch.extra["frequency_u_fit_hz"]
        z.append((ch.frequency_hz - f0) / u)
        # the Cramér–Rao bound of a real tone's frequency in white noise (Rife & Boorstyn 1974, as
        # scripts/bench_measure.py): var = 24·σ²·fs² / ((2π)²·A²·N(N² − 1))
        crlb = math.sqrt(24 * 0.05 ** 2 * FS ** 2 / ((2 * math.pi) ** 2 * 0.25 * n * (n * n - 1)))
        ratio.append(u / crlb)
    rms = math.sqrt(float(np.mean(np.square(z))))
    assert 0.7 < rms < 1.3, rms
    assert 0.95 < float(np.mean(ratio)) < 1.15  # the stated u is the bound's (within its own noise)


def test_a_phase_jump_restarts_the_chain_and_says_so():
    n, frames = 40000, 4000
    t = np.arange(n) / FS
    phase = np.where(t >= 2.5, 1.7, 0.0)  # a glitch: the phase steps by 1.7 rad mid-record
    x = 0.5 * np.cos(2 * math.pi * F0 * t + 0.3 + phase) + np.random.default_rng(3).normal(0, 0.01, n)
    m = measure_blocks(_blocks(x[None, :], frames, names=("output",)), n_max=n, harmonics=3)
    ch = m.channels[0]
    assert any("phase chain broke" in w for w in ch.warnings)
    assert abs(ch.frequency_hz - F0) < 5 * ch.extra["frequency_u_fit_hz"]


def test_dropout_blocks_are_named_and_left_out():
    n, frames = 40000, 4000
    t = np.arange(n) / FS
    x = 0.5 * np.cos(2 * math.pi * F0 * t)
    x[8000:12000] = 0.0  # one block of silence (a loose lead)
    m = measure_blocks(_blocks(x[None, :], frames, names=("output",)), n_max=n, harmonics=3)
    ch = m.channels[0]
    assert any("1 of 10 blocks hold no periodic signal" in w for w in ch.warnings)
    assert ch.frequency_hz == pytest.approx(F0, rel=1e-9)


def test_a_noise_only_record_gives_no_frequency():
    x = np.random.default_rng(5).normal(0, 0.1, 40000)
    m = measure_blocks(_blocks(x[None, :], 4000, names=("output",)), n_max=40000)
    ch = m.channels[0]
    assert ch.frequency_hz is None and ch.thd_pct is None
    assert any("no periodic signal" in w for w in ch.warnings)
    assert ch.vrms == pytest.approx(math.sqrt(float(np.mean(x * x))), rel=1e-12)


def test_percentiles_are_exact_when_the_length_is_only_bounded():
    # a text export's length is known only as an upper bound (size / 2 bytes): the kept tails
    # are then longer than needed, and the order statistics still exact (numpy's linear rule)
    x = np.random.default_rng(9).standard_normal(30007)
    x = x + 0.8 * np.sin(np.arange(x.size) * 0.0391)
    m = measure_blocks(_blocks(x[None, :], 3001, names=("output",)), n_max=5 * x.size)
    lo, hi = np.percentile(x, [0.1, 99.9])
    assert m.channels[0].vpp == pytest.approx(hi - lo, rel=1e-15)


def test_chain_line_recovers_an_exact_line_with_segments():
    x = np.linspace(0.5, 95.5, 20)
    f = 50.123456
    y_true = 0.2 + f * x
    y_true[12:] += 0.37  # a phase step: a second segment
    frac = np.mod(y_true, 1.0)
    y, seg = chain_points(x, frac, np.ones_like(x), np.full(x.size, f), np.full(x.size, 1e-6))
    assert list(seg) == [0] * 12 + [1] * 8
    line = fit_chained_line(x, y, np.full(x.size, 1e-4), seg, np.full(x.size, f), np.full(x.size, 1e-3))
    assert line.slope == pytest.approx(f, rel=1e-12)
    assert line.n_segments == 2 and line.birge == 1.0


def test_threshold_from_the_environment(tmp_path, monkeypatch):
    path = tmp_path / "short.wav"
    sf.write(str(path), np.zeros((5000, 2)), 8000, subtype="PCM_16")
    assert not is_long_file(path)
    monkeypatch.setenv("BENCHFIT_BLOCK_SAMPLES", "8192")
    assert is_long_file(path)  # 10,000 samples > 8192
    monkeypatch.setenv("BENCHFIT_BLOCK_SAMPLES", "lots")
    from benchfit.errors import CaptureError

    with pytest.raises(CaptureError, match="BENCHFIT_BLOCK_SAMPLES: 'lots' is not a whole number"):
        is_long_file(path)


def test_csv_is_streamed_with_the_same_result(tmp_path):
    x = _hum_check(6.0, seed=4)[1]
    path = tmp_path / "hc05_scope.csv"
    t = np.arange(x.size) / FS
    with open(path, "w") as fh:
        fh.write("time_s,output_V\n")
        for ti, xi in zip(t, x):
            fh.write(f"{ti:.9f},{xi:.9f}\n")
    whole = measure(path)
    blocks = measure_long_file(path, block_frames=8000, threshold=1024)
    w, b = whole.channels[0], blocks.channels[0]
    assert any(s.startswith("measured in 6 blocks of 1 s") for s in b.warnings)
    assert b.vpp == w.vpp and b.vrms == pytest.approx(w.vrms, rel=1e-12)
    assert abs(b.frequency_hz - w.frequency_hz) < w.extra["frequency_u_fit_hz"]
    assert b.extra["frequency_u_fit_hz"] == pytest.approx(w.extra["frequency_u_fit_hz"], rel=0.10)
    assert abs(b.thd_pct - w.thd_pct) < max(w.thd_u_pct, b.thd_u_pct)


def test_a_long_csv_with_rounded_time_stamps_keeps_its_grid(tmp_path, monkeypatch):
    """Time stamps printed to 10 µs at 3 kHz: the block reader takes the rate over the whole file (the
    row count and the last stamps), not from its first rows alone (at 48 kHz printed to 0.1 µs those
    put row 1,572,866 of a 68 MiB export 0.6 steps off the grid, found by hand; too long for a
    test), and agrees with the whole-file reader."""
    fs, n = 3000.0, 100_000
    t = np.arange(n) / fs
    x = 0.5 * np.cos(2 * math.pi * 49.97 * t) + np.random.default_rng(8).normal(0, 1e-3, n)
    path = tmp_path / "hc09_logger.csv"
    path.write_text("time_s,output_V\n" + "".join(f"{a:.5f},{b:.6f}\n" for a, b in zip(t, x)))
    whole = measure(path)
    blocks = measure_long_file(path, block_frames=50_000, threshold=1024)
    # the rate over the whole file is good to the two end stamps' rounding (±5 µs each) over its
    # 66.7 s; the whole-file reader's least-squares fit of every stamp is better still
    rate_rel = 2 * 5e-6 / (n / fs)
    assert blocks.sample_rate_hz == pytest.approx(whole.sample_rate_hz, rel=rate_rel)
    w, b = whole.channels[0], blocks.channels[0]
    # the frequency scales with the rate: within the fit's u plus that bound
    assert abs(b.frequency_hz - w.frequency_hz) < w.extra["frequency_u_fit_hz"] + w.frequency_hz * rate_rel


def test_a_short_last_piece_joins_the_block_before_it():
    n, frames = 40_300, 4000  # the last 300 samples hold less than two periods
    t = np.arange(n) / FS
    x = 0.5 * np.cos(2 * math.pi * F0 * t) + np.random.default_rng(2).normal(0, 1e-3, n)
    m = measure_blocks(_blocks(x[None, :], frames, names=("output",)), n_max=n, harmonics=3)
    ch = m.channels[0]
    assert ch.extra["blocks"] == 10 and not any("no periodic signal" in w for w in ch.warnings)
    assert m.duration_s == pytest.approx(n / FS)
    whole = measure(Capture(samples=x, sample_rate=FS, channel_names=("output",))).channels[0]
    assert ch.vrms == pytest.approx(whole.vrms, rel=1e-12)  # the same whole periods of the same samples
