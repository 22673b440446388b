"""The fixed-size histogram that replaces the exact percentile tails of very long records.

Reference: numpy.percentile (linear rule) on the whole record held at once — an independent
computation of the same order statistics. Tolerance: one bin width, the histogram's stated
resolution (a percentile is interpolated inside the bin that holds its rank).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from benchfit.measurement.levels import VPP_PERCENTILE
from benchfit.measurement.pooling import ExactTails, HistogramTails, percentile_tails


def _blocks(x: np.ndarray, size: int):
    for i in range(0, x.size, size):
        yield x[i:i + size]


@pytest.mark.parametrize("seed", range(5))
def test_histogram_percentiles_are_within_one_bin_of_numpy(seed):
    rng = np.random.default_rng(seed)
    t = np.arange(400_000) / 48000.0
    x = 0.5 * np.sin(2 * math.pi * 50.04 * t) + rng.normal(0, 0.01, t.size)
    tails = HistogramTails(bins=2 ** 12)  # coarse, so the bound is tested, not hidden by fine bins
    for b in _blocks(x, 30_000):
        tails.push(b)
    lo, hi = tails.percentiles(x.size)
    ref_lo, ref_hi = np.percentile(x, [VPP_PERCENTILE, 100 - VPP_PERCENTILE])
    assert abs(lo - ref_lo) <= tails.resolution
    assert abs(hi - ref_hi) <= tails.resolution
    assert tails.resolution > 0


def test_a_signal_that_grows_past_the_first_block_doubles_the_span_without_losing_counts():
    rng = np.random.default_rng(11)
    quiet = rng.normal(0, 0.01, 50_000)           # the first block sets a narrow span
    loud = rng.normal(0, 1.0, 200_000) + 3.0      # then the level rises far beyond it
    x = np.concatenate([quiet, loud, -loud])
    tails = HistogramTails(bins=2 ** 10)
    for b in _blocks(x, 25_000):
        tails.push(b)
    assert int(tails.counts.sum()) == x.size
    lo, hi = tails.percentiles(x.size)
    ref_lo, ref_hi = np.percentile(x, [VPP_PERCENTILE, 100 - VPP_PERCENTILE])
    assert abs(lo - ref_lo) <= tails.resolution and abs(hi - ref_hi) <= tails.resolution


def test_exact_tails_below_the_cap_and_a_histogram_of_fixed_size_above_it():
    assert isinstance(percentile_tails(10_000, cap=100), ExactTails)
    big = percentile_tails(10 ** 12, cap=100)
    assert isinstance(big, HistogramTails)
    rng = np.random.default_rng(2)
    for _ in range(20):
        big.push(rng.normal(0, 1, 10_000))
    assert big.counts.size == big.bins  # memory does not grow with the record


def test_a_long_record_past_the_cap_states_the_bin_in_its_peak_to_peak_u(monkeypatch):
    """The block measurement with the histogram: vpp within one bin of the exact record's, and
    its u includes the bin (rectangular, GUM 4.3.7)."""
    from benchfit.capture.capture import Capture
    from benchfit.measurement import long_record, pooling

    fs, n, frames = 8000.0, 80_000, 8000
    rng = np.random.default_rng(5)
    t = np.arange(n) / fs
    x = 0.5 * np.cos(2 * math.pi * 50.04 * t) + rng.normal(0, 0.01, n)

    def blocks():
        for i in range(0, n, frames):
            yield Capture(x[None, i:i + frames], fs, ("output",), ("FS",), source="long.wav",
                          t0=i / fs, metadata={"start_frame": i})

    exact = long_record.measure_blocks(blocks(), n_max=n, harmonics=3).channels[0]
    monkeypatch.setattr(long_record, "percentile_tails", lambda n_max: pooling.HistogramTails(bins=2 ** 10))
    hist = long_record.measure_blocks(blocks(), n_max=n, harmonics=3).channels[0]
    res = 3.0 * (float(x[:frames].max()) - float(x[:frames].min())) / 2 ** 10
    assert abs(hist.vpp - exact.vpp) <= 2 * res  # each percentile within one bin
    assert hist.extra["vpp_u_noise"] >= res / math.sqrt(6.0)
    assert exact.extra["vpp_u_noise"] < hist.extra["vpp_u_noise"]
