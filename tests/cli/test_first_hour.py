"""A newcomer's first hour: channel names as the CSV header writes them, a bare duty in percent."""

from __future__ import annotations

import json

import numpy as np
import pytest

FS = 48000


@pytest.fixture(autouse=True)
def _isolated(tmp_path, monkeypatch):
    monkeypatch.setenv("BENCHFIT_LOG", str(tmp_path / "default_log.sqlite"))
    monkeypatch.setenv("BENCHFIT_CONFIG_DIR", str(tmp_path / "config"))


@pytest.fixture
def scope_csv(tmp_path):
    """A scope-style export: time_s, drive_V, output_V (a 50 Hz square and a 2nd-order low-pass of it,
    scipy.signal.bilinear of a Butterworth prototype at 60 Hz)."""
    import scipy.signal as ss

    t = np.arange(FS // 4) / FS
    square = np.where((t * 50) % 1 < 0.5, 0.8, -0.8)
    b, a = ss.butter(2, 2 * np.pi * 60, analog=True)
    bz, az = ss.bilinear(b, a, FS)
    out = ss.lfilter(bz, az, square)
    path = tmp_path / "HC-03_scope.csv"
    path.write_text("time_s,drive_V,output_V\n" + "\n".join(f"{x:.8f},{d:.5f},{o:.5f}" for x, d, o in
                                                            zip(t, square, out)) + "\n", encoding="utf-8")
    return path


def test_channels_are_found_by_the_header_as_written(run, scope_csv):
    """The reader names the column 'drive_V' channel 'drive' (unit V); the name as written works too."""
    r = run("measure", str(scope_csv), "--channel", "output_V", "--json")
    assert r.returncode == 0, r.stderr
    (ch,) = json.loads(r.stdout)["channels"]
    assert ch["name"] == "output" and ch["unit"] == "V"
    r = run("fit", str(scope_csv), "--drive", "drive_V", "--response", "output_V", "--json")
    assert r.returncode == 0, r.stderr
    assert json.loads(r.stdout)["method"] == "two-channel"


def test_a_bare_drive_duty_of_50_is_percent(run, scope_csv):
    outs = []
    for duty in ("50", "0.5", "50%"):
        r = run("fit", str(scope_csv), "--method", "one-channel", "--response", "output_V", "--drive-duty", duty,
                "--fix", "L=258m", "--json")
        assert r.returncode == 0, (duty, r.stderr)
        outs.append(json.loads(r.stdout)["parameters"])
    assert outs[0] == outs[1] == outs[2]  # the same duty (0.5) each time
    r = run("fit", str(scope_csv), "--method", "one-channel", "--drive-duty", "100")
    assert r.returncode == 2 and "the duty cycle must lie between 0 and 1" in r.stderr


def test_measure_plot_writes_waveform_and_harmonics(run, scope_csv, tmp_path):
    svg = tmp_path / "HC-03_measure.svg"
    r = run("measure", str(scope_csv), "--plot", str(svg))
    assert r.returncode == 0, r.stderr
    assert f"figure written to {svg}" in r.stdout
    text = svg.read_text(encoding="utf-8")
    assert text.startswith("<?xml") and "<svg" in text and "<script" not in text
    png = tmp_path / "HC-03_measure.png"
    r = run("measure", str(scope_csv), "--channel", "output", "--plot", str(png), "--json")
    assert r.returncode == 0, r.stderr
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (ISO/IEC 15948, 5.2)
    assert json.loads(r.stdout)["channels"][0]["name"] == "output"
    before = svg.read_bytes()
    r = run("measure", str(scope_csv), "--plot", str(svg))  # never over an existing file
    assert r.returncode == 2 and r.stderr.strip() == f"error: {svg}: file exists — choose another --plot"
    assert svg.read_bytes() == before
    r = run("measure", str(scope_csv), str(scope_csv), "--plot", str(tmp_path / "two.svg"))
    assert r.returncode == 2 and "draws one capture" in r.stderr


def test_log_stats_cautions_a_small_batch(run, scope_csv, tmp_path):
    """Three runs: the spread of three values is uncertain by about 1/√(2·2) = 50 % (GUM E.4.3, from
    memory), and the statistics say so; 30 or more units print no caution."""
    from benchfit.cli.log_cmd import _small_n_caution

    log = tmp_path / "log.sqlite"
    for _ in range(3):
        assert run("measure", str(scope_csv), "--log", str(log), "--json").returncode == 0
    r = run("log", "stats", "frequency_hz", "--all-runs", "--channel", "output", "--log", str(log))
    assert r.returncode == 0, r.stderr
    assert "caution: n = 3 is a small batch" in " ".join(r.stdout.split()) and "±50 %" in r.stdout
    r = run("log", "stats", "frequency_hz", "--all-runs", "--channel", "output", "--log", str(log), "--json")
    assert json.loads(r.stdout)["caution"].startswith("n = 3 is a small batch")
    assert _small_n_caution(30) is None and "±14 %" in _small_n_caution(26)  # 1/√50 = 0.141
