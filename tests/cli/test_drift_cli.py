"""``benchfit drift FILE``: JSON contract, text summary, log (results + series table), errors.

The capture is synthetic (made here, seeded): a 60 s tone at 2 kHz sampling with a known
linear drift; the checks are the drift command's own contract plus recovery of the drift
within 4 standard uncertainties (common practice for a synthetic recovery, no source).
"""

from __future__ import annotations

import json
import math
import sqlite3

import numpy as np
import pytest
import soundfile as sf

FS = 2000
F0 = 50.0
DRIFT = 500e-6 / 3600  # fractional per second: 500 ppm/h


@pytest.fixture(scope="module")
def capture(tmp_path_factory):
    rng = np.random.default_rng(7)
    d = tmp_path_factory.mktemp("drift")
    t = np.arange(60 * FS) / FS
    cycles = F0 * (t + 0.5 * DRIFT * t * t) + np.cumsum(1e-6 * rng.normal(size=t.size)) / FS * F0
    x = 0.4 * np.cos(2 * math.pi * cycles) + 1e-3 * rng.normal(size=t.size)
    path = d / "hc09_run.wav"
    sf.write(str(path), x, FS, subtype="FLOAT")
    side = {"benchfit_sidecar": 1, "channels": [{"name": "output"}], "sample_rate_hz": FS,
            "calibration": {"profile": "bench", "gain_v_per_fs": [4.0], "timebase_ppm": 0.0,
                            "timebase_u_ppm": 0.5, "coupling_tau_s": None}, "unit": "HC-09"}
    path.with_suffix(".json").write_text(json.dumps(side))
    return path


def test_json_contract_and_recovery(run, capture):
    r = run("drift", str(capture), "--json")
    assert r.returncode == 0, r.stderr
    d = json.loads(r.stdout)
    assert d["benchfit_drift"] == 1 and d["unit"] == "HC-09" and d["channel"] == "output"
    assert d["channel_unit"] == "V" and d["n_intervals"] == 60 and len(d["series"]) == 60
    st = d["stability"]
    assert st["model"] == "linear" and st["warmup_s"] == 0.0
    assert abs(st["drift_ppm_per_h"] - 500.0) < 4 * st["drift_u_ppm_per_h"]
    # levels in volts through the sidecar gain: 0.4 FS · 4 V/FS
    assert st["level_mean"] == pytest.approx(1.6, rel=1e-3)
    assert st["adev"][0]["tau_s"] == pytest.approx(1.0) and st["adev_1s"] == st["adev"][0]["adev"]
    row = d["series"][5]
    assert {"frequency_hz", "frequency_u_hz", "phase_rad", "amplitude", "thd_pct", "duty_cycle_pct"} <= set(row)
    # u of the frequency includes the sidecar's 0.5 ppm timebase uncertainty (25 µHz at 50 Hz)
    assert row["frequency_u_hz"] >= 50.0 * 0.5e-6


def test_text_summary_and_log(run, capture, tmp_path):
    log = tmp_path / "log.sqlite"
    r = run("drift", str(capture), "--log", str(log), "--operator", "demo")
    assert r.returncode == 0, r.stderr
    assert "drift rate" in r.stdout and "ppm/h" in r.stdout and "Allan deviation" in r.stdout
    assert "logged as run 1" in r.stdout
    con = sqlite3.connect(log)
    q = dict(con.execute("SELECT quantity, value FROM results WHERE run_id = 1").fetchall())
    assert {"drift_ppm_per_h", "warmup_s", "adev_1s", "level_drift_pct_per_h"} <= set(q)
    n = con.execute("SELECT COUNT(*) FROM drift_series WHERE run_id = 1").fetchone()[0]
    assert n == 60
    con.close()
    from benchfit.log.drift import read_series

    rows = read_series(log, 1)
    assert [r["index"] for r in rows] == list(range(60))
    # log stats works on the drift summary like on any result
    s = run("log", "stats", "drift_ppm_per_h", "--log", str(log), "--json")
    assert s.returncode == 0, s.stderr
    assert json.loads(s.stdout)["n"] == 1


def test_live_options_with_a_file_are_refused(run, capture):
    r = run("drift", str(capture), "--seconds", "10")
    assert r.returncode == 2
    assert r.stderr.startswith("error: --seconds: only for a live run")


def test_bad_interval(run, capture):
    r = run("drift", str(capture), "--interval", "soon")
    assert r.returncode == 2 and r.stderr.startswith("error: --interval 'soon'")


def test_an_interval_of_a_few_samples_is_refused_at_once(run, capture):
    # 1e-300 s made one-sample intervals (millions of them, for ever); a file and a live run alike refuse it
    for args in ((str(capture), "--interval", "1e-300"), (str(capture), "--interval", "1ms"),
                 ("--device", "0", "--seconds", "10", "--interval", "1ms")):
        r = run("drift", *args)
        lines = [ln for ln in r.stderr.splitlines() if ln.strip()]
        assert r.returncode == 2 and len(lines) == 1, r.stderr
        assert lines[0].startswith("error: --interval: ") and "needs at least 64 samples" in lines[0], r.stderr


def test_too_short_a_file(run, tmp_path):
    p = tmp_path / "short.wav"
    sf.write(str(p), np.cos(2 * math.pi * 50 * np.arange(3 * FS) / FS), FS)
    r = run("drift", str(p), "--json")
    # three intervals: no stability statistics, said in the warnings, series still given
    assert r.returncode == 0, r.stderr
    d = json.loads(r.stdout)
    assert d["stability"] is None and len(d["series"]) == 3
    assert any("at least 8" in w for w in d["warnings"])


def test_missing_file(run, tmp_path):
    r = run("drift", str(tmp_path / "nope.flac"))
    assert r.returncode == 2 and "no such file" in r.stderr and "Traceback" not in r.stderr
