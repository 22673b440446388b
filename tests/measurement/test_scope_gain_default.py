"""Levels read from a scope's CSV carry a stated default vertical-gain term (issue 11).

A scope applies its own vertical gain before it writes volts; benchfit has not calibrated it,
so every level gets a Type B row of ±3 % rectangular (an 8-bit scope channel's usual dc gain
accuracy — common practice, no source), with a "vertical gain not calibrated" note, unless the
caller states the channel's figure (``measure(gain_u_rel=…)``, ``measure --gain-u``, or a
capture calibration's ``gain_u_rel``). Signals are synthetic, seeded, in the hum-check scenario.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

import benchfit
from benchfit.capture.capture import Capture, InputCalibration
from benchfit.errors import MeasureError
from benchfit.measurement.budgets import DEFAULT_SCOPE_GAIN_HALF_WIDTH_REL, DEFAULT_SCOPE_GAIN_U_REL

FS = 20000.0
ROW = "vertical gain (not calibrated: stated default)"


def _output(seed: int, seconds: float = 0.2, gain: float = 1.0) -> np.ndarray:
    """A hum-check box's 50 Hz output (1.85 V peak) seen by a scope whose gain is off by ``gain``,
    with 2 mV of noise and the 8-bit codes of a ±5 V range."""
    rng = np.random.default_rng(seed)
    t = np.arange(int(seconds * FS)) / FS
    x = gain * 1.85 * np.sin(2 * np.pi * 50.0 * t + 0.4) + 2e-3 * rng.standard_normal(t.size)
    q = 10.0 / 256
    return np.round(x / q) * q


def _csv(path, seed: int = 1):
    x = _output(seed)
    t = np.arange(x.size) / FS
    rows = "\n".join(f"{ti:.8f},{xi:.5f}" for ti, xi in zip(t, x))
    path.write_text("time (s),output (V)\n" + rows + "\n")
    return path


def test_scope_csv_levels_get_the_stated_gain_row(tmp_path):
    ch = benchfit.measure(_csv(tmp_path / "hc04_scope.csv")).channels[0]
    assert ch.unit == "V"
    assert DEFAULT_SCOPE_GAIN_U_REL == pytest.approx(0.03 / math.sqrt(3))  # GUM 4.3.7: a/√3
    for name in ("amplitude", "vdc", "vrms", "vpp"):
        rows = {r.name: r for r in ch.budget[name].contributions}
        row = rows[ROW]
        assert row.type == "B" and row.distribution == "rectangular"
        assert row.u_input == pytest.approx(DEFAULT_SCOPE_GAIN_U_REL)
        assert row.sensitivity == pytest.approx(abs(getattr(ch, name)))  # a level is samples × gain
        assert "common practice, no source" in row.source
        assert ch.budget[name].u == pytest.approx(ch.extra[f"{name}_u"], rel=1e-12)  # one u, two places
    assert any(w.startswith("vertical gain not calibrated") for w in ch.warnings)
    # ratios of one channel do not depend on its gain: no gain row in frequency or THD
    assert not any("gain" in r.name for r in ch.budget["frequency_hz"].contributions)
    assert not any("gain" in r.name for r in ch.budget["thd_pct"].contributions)


def test_the_term_makes_level_uncertainties_honest_over_seeds():
    """z = (vrms − truth)/u over 300 seeded scopes whose gain error is drawn from the stated
    ±3 % rectangular: sd(z) ≈ 1, and |z| stays within √3 (the rectangle's edge) plus noise."""
    rng = np.random.default_rng(1241)
    truth = 1.85 / math.sqrt(2)
    z, z_without = [], []
    for seed in range(300):
        g = 1.0 + rng.uniform(-DEFAULT_SCOPE_GAIN_HALF_WIDTH_REL, DEFAULT_SCOPE_GAIN_HALF_WIDTH_REL)
        cap = Capture(_output(seed, 0.1, g), FS, ("output",), ("V",), source="scope",
                      calibration=InputCalibration(instrument_volts=True))
        ch = benchfit.measure(cap).channels[0]
        z.append((ch.vrms - truth) / ch.extra["vrms_u"])
        noise_u = next(r.contribution for r in ch.budget["vrms"].contributions if r.name == "noise")
        z_without.append((ch.vrms - truth) / noise_u)
    # the sd of 300 draws of a rectangular z scatters by √((1.8 − 1)/(4·300)) ≈ 2.6 %: ±0.1 is ~4σ
    assert float(np.std(z, ddof=1)) == pytest.approx(1.0, abs=0.1)
    assert float(np.max(np.abs(z))) < math.sqrt(3) * 1.05
    assert float(np.std(z_without, ddof=1)) > 5  # noise alone would claim far too much


def test_a_stated_figure_overrides_the_default():
    x = _output(3)
    scope = InputCalibration(instrument_volts=True)
    ch = benchfit.measure(Capture(x, FS, ("output",), ("V",), calibration=scope), gain_u_rel=0.004).channels[0]
    rows = {r.name: r for r in ch.budget["vrms"].contributions}
    assert "vertical gain" in rows and rows["vertical gain"].u_input == 0.004
    assert rows["vertical gain"].distribution == "normal" and ROW not in rows
    assert not any("vertical gain not calibrated" in w for w in ch.warnings)
    # the capture's own calibration figure (what a channel calibration records) is used as well
    cal = InputCalibration(instrument_volts=True, gain_u_rel=(0.002,))
    ch2 = benchfit.measure(Capture(x, FS, ("output",), ("V",), calibration=cal), gain_u_rel=0.004).channels[0]
    assert {r.name: r.u_input for r in ch2.budget["vrms"].contributions}["vertical gain"] == 0.002


def test_sound_card_and_array_inputs_keep_their_rules():
    x = _output(4)
    card = InputCalibration(profile="desk", gain_v_per_fs=(5.0,), gain_u_rel=(0.003,))
    rows = benchfit.measure(Capture(x, FS, ("output",), ("V",), calibration=card),
                            gain_u_rel=0.02).channels[0].budget["vrms"].contributions
    assert {r.name: r.u_input for r in rows}["gain"] == 0.003  # a calibration's own u wins
    plain = benchfit.measure(Capture(x, FS, ("output",), ("V",))).channels[0]  # caller's own volts
    assert not any("gain" in r.name for r in plain.budget["vrms"].contributions)
    fs_units = benchfit.measure(Capture(x / 5.0, FS, ("output",), ("FS",),
                                        calibration=InputCalibration(instrument_volts=True))).channels[0]
    assert not any("gain" in r.name for r in fs_units.budget["vrms"].contributions)  # FS needs no gain


@pytest.mark.parametrize("bad", [-0.01, 1.0, float("nan"), "1%"])
def test_bad_gain_u_is_one_line(bad):
    cap = Capture(_output(5), FS, ("output",), ("V",), calibration=InputCalibration(instrument_volts=True))
    with pytest.raises(MeasureError, match=r"^gain_u_rel: .* — give the channel's stated"):
        benchfit.measure(cap, gain_u_rel=bad)


def test_cli_json_budget_and_gain_u_option(tmp_path, capsys):
    from benchfit.cli import main

    path = _csv(tmp_path / "hc04_scope.csv")

    def run(*args):
        try:
            main(list(args))
            code = 0
        except SystemExit as e:
            code = e.code if isinstance(e.code, int) else 1
        return code, *capsys.readouterr()

    code, out, _ = run("measure", str(path), "--json")
    assert code == 0
    ch = json.loads(out)["channels"][0]
    row = next(r for r in ch["budget"]["vrms"]["contributions"] if r["name"] == ROW)
    assert row["u_input"] == pytest.approx(DEFAULT_SCOPE_GAIN_U_REL)
    code, out, _ = run("measure", str(path), "--json", "--gain-u", "0.5%")
    assert code == 0
    rows = {r["name"]: r for r in json.loads(out)["channels"][0]["budget"]["vrms"]["contributions"]}
    assert rows["vertical gain"]["u_input"] == pytest.approx(0.005) and ROW not in rows
    code, out, err = run("measure", str(path), "--gain-u", "150%")
    assert code == 2 and err.strip().startswith("error: --gain-u '150%': a relative uncertainty of 100 %")
    assert len(err.strip().splitlines()) == 1
