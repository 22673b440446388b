"""A sharp drive's edge timing within a sample, as a budget input of the two-channel fit (issue 11).

A scope's export of a square with edges sharper than the sample interval says only that each edge lies
between two samples. The first-order-hold model reads the step as a ramp over the interval, which acts
like an edge at its middle; when the record is synchronous with the sample clock every edge sits at the
same phase and the error does not average out. Its effect is a delay δ of the drive against the output,
and the ESR's zero is a phase lead ω·Resr·C, so the fitted ESR is off by about δ/C: on the capture of
test_band_limited_drive._sharp (edges 0.37 sample off the grid: 0.13 sample late against the middle)
0.082 Ω on 0.8 Ω, 5 of the noise's u. The fit cannot see it (χ²ᵣ ≈ 1), so the budget carries it:
benchfit.fit.edges.edge_timing gives the timing's u from the edges' sub-sample phases, and the fit
propagates it like any fixed input.
"""

from __future__ import annotations

import math
from functools import lru_cache

import numpy as np
import pytest

from benchfit import fit_lowpass
from benchfit.fit.edges import edge_timing
from test_band_limited_drive import C, FS, L, RESR, RLOAD, RS, _band_limited, _sharp

FIX = {"L": L, "Rload": RLOAD}
TIMING_ROW = "drive edge timing within a sample"


def _square(period_samples: float, n_periods: int, phase: float = 0.3) -> np.ndarray:
    """A 0 … 1 V square of duty 0.5 sampled with sharp edges: ``period_samples`` per period, any real number."""
    n = np.arange(int(round(period_samples * n_periods)))
    return (np.mod((n + phase) / period_samples, 1.0) < 0.5).astype(float)


def test_synchronous_record_has_a_rectangular_half_sample_per_kind_of_edge():
    # every rising edge at one phase, every falling edge at another: each error uniform on ±½ sample,
    # 1/√12 (GUM 4.3.7, rectangular), independent, and their mean 1/√24 (worked out here)
    t = edge_timing(_square(960.0, 40), FS, FS / 960.0)
    assert t is not None and t.n_edges >= 79
    assert t.u_samples == pytest.approx(1.0 / math.sqrt(24.0), rel=1e-2)
    assert t.u_s == pytest.approx(t.u_samples / FS)
    assert t.synchronous_rel == pytest.approx(1.0, rel=1e-3)


def test_phases_on_m_points_shrink_u_by_m():
    # 960.25 samples a period: each kind of edge takes 4 equally spaced phases a + j/4. The mean of
    # frac(a + j/4) − ½ over them is (frac(4a) − ½)/4, uniform on ±1/8: 1/(4√12) for each kind, and
    # 1/(4√24) for the mean of the two independent kinds (worked out here; GUM 4.3.7)
    t = edge_timing(_square(960.25, 400), FS, FS / 960.25)
    assert t is not None
    # the period is fitted to the edges' sample indices, off by about 1/N^1.5 of a sample over N edges;
    # over the record that smears each phase by ~1/√N = 0.05 sample, which rounds the corners of E(a)
    # (1.2 % lower at 400 periods, 11 % at 40, measured): 3 %
    assert t.u_samples == pytest.approx(1.0 / (4.0 * math.sqrt(24.0)), rel=0.03)


def test_incommensurate_record_averages_out():
    # 50.01 Hz at 48 kHz: the phases fill the interval over 100 periods, u far below a synchronous record's
    t = edge_timing(_square(FS / 50.01, 100), FS, 50.01)
    assert t is not None and t.synchronous_rel < 0.05


def test_sagging_levels_still_count_as_sharp_steps():
    # a timer's output sags under its load between edges (levels anywhere from 60 % to 100 % of the
    # swing): the steps, not the levels, decide — still every kind of edge at one phase, 1/√24 as above
    sq = _square(960.0, 40)
    n = np.arange(sq.size)
    sag = 1.0 - 0.4 * np.mod(n + 0.3, 480.0) / 480.0
    t = edge_timing(0.1 + 2.0 * np.where(sq > 0, sag, 1.0 - sag), FS, FS / 960.0)
    assert t is not None and t.within_one_sample == 1.0
    assert t.u_samples == pytest.approx(1.0 / math.sqrt(24.0), rel=1e-2)


def test_resolved_edges_carry_their_own_timing():
    # a drive whose edges take several samples (a band-limited line input, or a slow ramp) is located by
    # its samples on the ramp: no term
    assert edge_timing(_band_limited(0).samples[0], FS, 50.0) is None
    ramp = np.clip(np.convolve(_square(960.0, 10), np.ones(4) / 4, mode="same"), 0, 1)
    assert edge_timing(ramp, FS, 50.0) is None


@lru_cache(maxsize=None)
def _fit(seed: int, time_domain: bool):
    return fit_lowpass(_sharp(seed), fix=FIX, time_domain=time_domain)


def _timing_row(budget):
    rows = [c for c in budget.contributions if c.name.startswith(TIMING_ROW)]
    assert len(rows) == 1, [c.name for c in budget.contributions]
    return rows[0]


@pytest.mark.parametrize("time_domain", [False, True], ids=["harmonic", "time-domain"])
@pytest.mark.parametrize("seed", range(3))
def test_sharp_synchronous_capture_is_honest_about_the_esr(seed, time_domain):
    r = _fit(seed, time_domain)
    rec = r.adequacy["drive_edges"]["edge_timing"]
    assert rec["u_samples"] == pytest.approx(1.0 / math.sqrt(24.0), rel=1e-2)  # synchronous: 960 samples a period
    esr = r.parameters["Resr"]
    row = _timing_row(esr.budget)
    assert row.type == "B" and row.distribution == "rectangular" and row.input_unit == "s"
    assert row.u_input == pytest.approx(rec["u_s"], rel=1e-9)
    # the sensitivity is that of the ESR's phase lead: ∂Resr/∂δ ≈ 1/C (the zero ω·Resr·C, first order
    # in ω; the test's own divider values)
    assert row.sensitivity == pytest.approx(1.0 / C, rel=0.05)
    # every part within 3 combined standard uncertainties of the divider's values (a 3σ bound)
    for name, truth in (("C", C), ("Rs", RS), ("Resr", RESR)):
        p = r.parameters[name]
        assert p.stderr is not None and abs(p.value - truth) < 3 * p.stderr, (name, p.value, p.stderr)
    # and the term is the model error, not a guess: the edges are 0.63 of a sample after the sample before
    # them (_sharp: grid 0.37 sample late, edges at whole samples of 960), 0.13 sample after the middle the
    # first-order hold assumes; the row's sensitivity times that delay is the ESR's bias, left with the
    # noise's u alone (3σ)
    delay = 0.13 / FS
    u_noise = next(c for c in esr.budget.contributions if c.type == "A").contribution
    assert abs(esr.value - (RESR - row.sensitivity * delay)) < 3 * u_noise, (esr.value, u_noise)


def test_band_limited_capture_has_no_timing_term():
    r = fit_lowpass(_band_limited(0), fix=FIX)
    assert "edge_timing" not in r.adequacy["drive_edges"]
    assert not any(c.name.startswith(TIMING_ROW) for c in r.parameters["Resr"].budget.contributions)
