"""Done-when check of issue 11: simulated units with real losses, z-scores of every reported value.

Source of truth: ngspice (an independent circuit simulator) solves each unit once
(tests/fit/units_issue11.py describes the five cases); ten noise seeds per case are added here.
For every seed, every fitted part and derived value must either lie within 3 combined standard
uncertainties of the simulator's truth (|z| < 3: a k = 3 interval, which a normal error leaves
with probability 0.27 %; most rows here are dominated by Type B terms that are constant over
the seeds, so their z barely move), or be reported as not determined (stderr None) with a
warning that names it. Rp (core loss) is compared as a conductance 1/Rp, whose truth is 0 for
the units without core loss.

Known gap (kept visible as a strict xfail): the one-channel (sound-card) fit understates the
scatter of ESR and Q by about 1.8× (sd of z ≈ 1.7–1.9 over seeds, also without input
coupling and without quantisation), so ESR lands up to 5 u from the truth.
"""

from __future__ import annotations

import pytest

from units_issue11 import run_case

pytestmark = pytest.mark.ngspice

SEEDS = range(10)
TWO_CHANNEL = ("coupled-chokes", "core-loss", "asymmetric-drive", "scope-8bit")


def _check(rows):
    worst = {}
    for r, z, und in rows:
        for name in und:  # not determined: a warning must name it (or the fit's note on ESR/Rs)
            assert any(name in w.split(":")[0] or name in ("Rs", "Resr") and w.startswith("Resr:")
                       or name.endswith("_hz") for w in r.warnings), (name, r.warnings)
        for name, v in z.items():
            worst[name] = max(worst.get(name, 0.0), abs(v))
    bad = {k: round(v, 2) for k, v in worst.items() if not v < 3.0}
    assert not bad, f"|z| ≥ 3 for {bad}"
    return worst


@pytest.mark.parametrize("name", TWO_CHANNEL)
def test_two_channel_units_are_within_three_u_or_not_determined(tmp_path, name):
    rows = run_case(tmp_path, name, SEEDS)
    _check(rows)
    r0 = rows[0][0]
    if name == "core-loss":
        # the model comparison found the core loss (extra-sum-of-squares F-test, p < 0.001)
        assert "Rp" in r0.parameters and r0.adequacy["model_comparison"]["p_value"] < 1e-3
    if name == "scope-8bit":
        # the unmatched channels' gain ratio is an input of the budget, not an exact 1
        rows_c = [c.name for c in r0.parameters["Rs"].budget.contributions]
        assert any(n.startswith("channel gain ratio") for n in rows_c)
    if name == "coupled-chokes":
        # L is fitted (C and the load known): the coupled pair's effective 0.465 H, not the labels' 0.3 H
        assert r0.parameters["L"].value == pytest.approx(0.465, rel=0.01)


@pytest.mark.xfail(strict=True, reason="one-channel fit understates ESR and Q scatter ~1.8× (issue 11, open)")
def test_sound_card_unit_is_within_three_u_or_not_determined(tmp_path):
    _check(run_case(tmp_path, "sound-card", SEEDS))
