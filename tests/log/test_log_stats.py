"""Capability statistics of the log (Cp, Cpk) and the histogram figure."""

from __future__ import annotations

import statistics
import xml.etree.ElementTree as ET

import numpy as np
import pytest

from benchfit.errors import LogError
from benchfit.log.stats import capability, histogram_svg


def _batch(mean, std, n=12, seed=3):
    """Seeded values rescaled to exactly this sample mean and sample standard deviation."""
    z = np.random.default_rng(seed).normal(size=n)
    return list(mean + std * (z - z.mean()) / z.std(ddof=1))


def test_cp_cpk_against_the_definition():
    # Definition from NIST/SEMATECH e-Handbook of Statistical Methods, 6.1.6 "What is Process
    # Capability?": Cp = (USL − LSL)/(6σ), Cpk = min(USL − μ, μ − LSL)/(3σ). Numbers computed here;
    # the example values USL = 20, LSL = 8, μ = 16, σ = 2 are the handbook's, from memory.
    cap = capability(_batch(16.0, 2.0), lower=8.0, upper=20.0)
    assert cap.n == 12
    assert cap.mean == pytest.approx(16.0, abs=1e-12)       # rescaled exactly; float rounding only
    assert cap.std == pytest.approx(2.0, rel=1e-12)          # rescaled exactly; float rounding only
    assert cap.cp == pytest.approx(12.0 / 12.0, rel=1e-12)  # (20 − 8)/(6·2) = 1; rel: float rounding
    assert cap.cpk == pytest.approx(4.0 / 6.0, rel=1e-12)   # min(4, 8)/(3·2) = 0.667; rel: float rounding


def test_mean_std_agree_with_python_statistics_module():
    values = [50.012, 49.98, 50.07, 50.003, 49.95, 50.11, 50.02]
    cap = capability(values, 49.75, 50.25)
    # independent tool: Python's statistics module (sample standard deviation, n − 1)
    assert cap.mean == pytest.approx(statistics.fmean(values), rel=1e-14)   # float summation order
    assert cap.std == pytest.approx(statistics.stdev(values), rel=1e-12)    # different algorithms; rounding
    assert (cap.min, cap.max) == (49.95, 50.11)
    mu, s = statistics.fmean(values), statistics.stdev(values)
    assert cap.cpk == pytest.approx(min(50.25 - mu, mu - 49.75) / (3 * s), rel=1e-12)   # float rounding


def test_one_sided_limit_gives_cpk_only():
    cap = capability(_batch(3.0, 0.5), upper=5.0)             # THD ≤ 5 %
    assert cap.cp is None
    assert cap.cpk == pytest.approx((5.0 - 3.0) / 1.5, rel=1e-12)   # (USL − μ)/(3σ); float rounding
    assert capability([1.0], 0.0, 2.0).std is None             # one value: no spread
    with pytest.raises(LogError, match="no logged values"):
        capability([], 0.0, 1.0, "thd_pct")


def test_histogram_svg_is_self_contained():
    values = _batch(50.0, 0.05, n=30)
    svg = histogram_svg(values, capability(values, 49.75, 50.25), "frequency_hz", "Hz")
    root = ET.fromstring(svg.encode())
    assert root.tag.endswith("svg")
    assert "href=\"http" not in svg and "src=\"http" not in svg
