"""Nothing the user has is replaced: files that appear after a check, foreign folders, read-only logs."""

from __future__ import annotations

import numpy as np
import pytest
import soundfile as sf

FS = 48000


@pytest.fixture(autouse=True)
def _isolated(tmp_path, monkeypatch):
    monkeypatch.setenv("BENCHFIT_LOG", str(tmp_path / "default_log.sqlite"))
    monkeypatch.setenv("BENCHFIT_CONFIG_DIR", str(tmp_path / "config"))


@pytest.fixture
def two_channel(tmp_path):
    t = np.arange(FS // 2) / FS
    square = np.where((t * 50) % 1 < 0.5, 0.8, -0.8)
    sine = 0.5 * np.sin(2 * np.pi * 50 * t)
    path = tmp_path / "HC-03_two.wav"
    sf.write(path, np.stack([square, sine], axis=1), FS, subtype="PCM_24")
    return path


def test_fit_plot_keeps_a_file_made_while_the_fit_ran(run, two_channel, tmp_path, monkeypatch):
    """The up-front 'file exists' check passes; the file appears while the figure is drawn; the write
    (hard link of a finished temporary file, POSIX link(2) fails with EEXIST) keeps it."""
    import benchfit.report.figures as figures

    fig = tmp_path / "hc03_fit.svg"
    real = figures.fit_svg

    def racing_fit_svg(result, **kwargs):
        fig.write_text("<svg>another program's figure</svg>\n", encoding="utf-8")
        return real(result, **kwargs)

    monkeypatch.setattr(figures, "fit_svg", racing_fit_svg)
    r = run("fit", str(two_channel), "--plot", str(fig), "--json")
    assert r.returncode == 2 and r.stdout == ""
    assert r.stderr.strip() == (f"error: {fig}: file exists (it appeared while the figure was drawn) — choose "
                                "another path or add --overwrite")
    assert fig.read_text(encoding="utf-8") == "<svg>another program's figure</svg>\n"
    assert [p.name for p in tmp_path.iterdir() if p.name.startswith(".")] == []  # no temporary left


def test_save_figure_png_exclusive_and_overwrite(tmp_path):
    from benchfit.capture.capture import Capture
    from benchfit.errors import BenchfitError
    from benchfit.report.figures import save_figure, waveform_svg

    svg = waveform_svg(Capture(np.sin(np.arange(4800) / 20), FS))
    png = tmp_path / "wave.png"
    png.write_bytes(b"keep")
    with pytest.raises(BenchfitError, match="file exists"):
        save_figure(svg, png, overwrite=False)
    assert png.read_bytes() == b"keep"
    save_figure(svg, png)  # the library default replaces, as before
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # the PNG signature (PNG spec, ISO/IEC 15948 5.2)


def test_demo_refuses_a_folder_holding_other_files(run, tmp_path):
    out = tmp_path / "projects"
    out.mkdir()
    (out / "notes.txt").write_text("my notes\n", encoding="utf-8")
    r = run("demo", "--out", str(out))
    assert r.returncode == 2
    assert r.stderr.strip() == (f"error: {out}: the folder holds files the demo did not make — give --out a "
                                "new or empty folder")
    assert sorted(p.name for p in out.iterdir()) == ["notes.txt"]


# --- the log: checked before report files are written, explained when it fails -------------------

SPEC = """\
[spec]
name = "hum-check box"
decision_rule = "guard-banded"

[[limit]]
quantity = "frequency_hz"
nominal = 50.0
tolerance = 0.25
"""


@pytest.fixture
def unit_files(tmp_path):
    t = np.arange(FS // 4) / FS
    wav = tmp_path / "HC-02.wav"
    sf.write(wav, 0.5 * np.sin(2 * np.pi * 50 * t), FS, subtype="PCM_24")
    spec = tmp_path / "hc_spec.toml"
    spec.write_text(SPEC, encoding="utf-8")
    return wav, spec


def _runs(log) -> int:
    import sqlite3

    with sqlite3.connect(log) as db:
        return db.execute("SELECT COUNT(*) FROM runs").fetchone()[0]


def test_report_to_a_log_that_cannot_be_written_writes_nothing(run, unit_files, tmp_path, monkeypatch):
    """The log file refuses to open for writing (as for chattr +i, a read-only mount, or mode 0444 for
    a normal user: open(2) fails with EPERM/EROFS/EACCES): the report stops before writing files."""
    import os

    wav, spec = unit_files
    log = tmp_path / "log.sqlite"
    assert run("measure", str(wav), "--log", str(log), "--json").returncode == 0
    real_open = os.open

    def refusing_open(path, flags, *args, **kwargs):
        if str(path) == str(log) and flags & (os.O_RDWR | os.O_WRONLY):
            raise PermissionError(1, "Operation not permitted", str(path))
        return real_open(path, flags, *args, **kwargs)

    monkeypatch.setattr(os, "open", refusing_open)
    out = tmp_path / "reports"
    r = run("report", str(wav), "--spec", str(spec), "--unit", "HC-02", "--log", str(log), "--out", str(out))
    assert r.returncode == 2 and r.stdout == ""
    assert r.stderr.strip() == (f"error: {log}: the log file cannot be opened for writing (Operation not "
                                "permitted) — make the log and its folder writable, give another --log, or use "
                                "--no-log; nothing was written")
    assert not out.exists() and _runs(log) == 1


def test_report_rolls_its_files_back_when_the_log_refuses_the_run(run, unit_files, tmp_path, monkeypatch):
    """A full disk found only at the append: SQLite says "database or disk is full" (SQLITE_FULL, sqlite.org
    rescode.html); the error names it, and the report files made for the run are removed."""
    import sqlite3

    import benchfit.log.store as store
    from benchfit.errors import LogError

    def full_disk(db_path, **entry):
        try:
            raise sqlite3.OperationalError("database or disk is full")
        except sqlite3.OperationalError as e:
            raise LogError(f"{db_path}: cannot write the run ({e}) — another program holds the log; try again") from e

    monkeypatch.setattr(store, "append_run", full_disk)
    wav, spec = unit_files
    log, out = tmp_path / "log.sqlite", tmp_path / "reports"
    r = run("report", str(wav), "--spec", str(spec), "--unit", "HC-02", "--log", str(log), "--out", str(out))
    assert r.returncode == 2
    line = r.stderr.strip()
    assert line.startswith(f"error: {log}: the disk is full (No space left on device) — free some space")
    assert "another program" not in line and "its report files were removed: HC-02_" in line
    assert list(out.iterdir()) == []


def _immutable(path, on: bool) -> bool:
    import subprocess

    res = subprocess.run(["chattr", "+i" if on else "-i", str(path)], capture_output=True)
    return res.returncode == 0


def test_a_read_only_log_is_still_readable(run, unit_files, tmp_path):
    """A WAL log whose folder cannot be written (SQLite needs the -shm file beside it, sqlite.org wal.html
    "Read-Only Databases") is read from a snapshot copy; errors still name the log itself."""
    wav, _ = unit_files
    folder = tmp_path / "archive"
    folder.mkdir()
    log = folder / "log.sqlite"
    assert run("measure", str(wav), "--log", str(log), "--json").returncode == 0
    if not (_immutable(log, True) and _immutable(folder, True)):
        _immutable(log, False)
        pytest.skip("chattr +i is not permitted here (needs CAP_LINUX_IMMUTABLE)")
    try:
        for argv in (["log", "list"], ["log", "show", "1"], ["log", "export"], ["log", "stats", "frequency_hz"]):
            r = run(*argv, "--log", str(log))
            assert r.returncode == 0, (argv, r.stderr)
        assert "HC-02.wav" in run("log", "show", "1", "--log", str(log)).stdout
        r = run("log", "show", "9", "--log", str(log))
        assert r.returncode == 2 and f"no such run in {log} — " in r.stderr
        r = run("measure", str(wav), "--log", str(log))
        assert r.returncode == 2 and "error: " in r.stderr
    finally:
        _immutable(folder, False)
        _immutable(log, False)


def test_ctrl_c_during_a_report_batch_stops_at_once_and_keeps_log_and_files_consistent(unit_files, tmp_path):
    """SIGINT after the first unit is logged: exit 130 (128 + SIGINT, POSIX XCU 2.8.2) within seconds
    (the workers are terminated, not left to finish), and every report file in --out is in the log."""
    import json
    import os
    import signal
    import subprocess
    import sys
    import time

    wav, spec = unit_files
    batch = tmp_path / "batch"
    batch.mkdir()
    for i in range(1, 13):
        (batch / f"HC-{i:02d}.wav").write_bytes(wav.read_bytes())
    out, log = tmp_path / "reports", tmp_path / "batch_log.sqlite"
    env = dict(os.environ, BENCHFIT_LOG=str(tmp_path / "unused.sqlite"))
    proc = subprocess.Popen([sys.executable, "-m", "benchfit", "report", str(batch), "--each", "--jobs", "2",
                             "--spec", str(spec), "--out", str(out), "--log", str(log), "--json"],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env)
    first = proc.stdout.readline()
    assert first, proc.stderr.read()
    t0 = time.monotonic()
    proc.send_signal(signal.SIGINT)
    proc.wait(timeout=60)
    stopped = time.monotonic() - t0
    # read through the same buffered pipe as the first line: communicate() reads the raw pipe and
    # would lose a second line that readline() had already buffered (a dozen short lines: no
    # pipe fills while waiting)
    rest, err = proc.stdout.read(), proc.stderr.read()
    assert proc.returncode == 130, err
    assert "Traceback" not in err
    # the 12-unit batch takes ~10 s on the development machine; 5 s only catches a batch left running
    assert stopped < 5.0
    from benchfit.log.store import get_run, list_runs

    logged = {get_run(log, r["id"])["details"]["html"] for r in list_runs(log)}
    printed = [json.loads(ln) for ln in (first + rest).splitlines()]
    assert {p["html"] for p in printed} == logged and len(logged) < 12
    files = sorted(p.name for p in out.iterdir())  # no staging folder left, no unlogged report
    assert files == sorted([os.path.basename(h) for h in logged] + [os.path.basename(h)[:-5] + ".json"
                                                                    for h in logged])


def test_measure_logs_only_what_it_printed(unit_files, tmp_path):
    """The reader of stdout goes away (a closed pipe, EPIPE): the result was never shown, so it is not
    logged either; with the pipe open the same command logs one run."""
    import os
    import subprocess
    import sys

    wav, _ = unit_files
    log = tmp_path / "log.sqlite"
    env = dict(os.environ, BENCHFIT_LOG=str(tmp_path / "unused.sqlite"), COLUMNS="200")
    cmd = [sys.executable, "-m", "benchfit", "measure", str(wav), "--log", str(log)]
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, env=env)
    proc.stdout.close()  # nobody reads the result
    err = proc.stderr.read().decode()
    proc.wait(timeout=60)
    assert proc.returncode != 0 and "Traceback" not in err, err
    assert not log.exists() or _runs(log) == 0
    res = subprocess.run(cmd, capture_output=True, text=True, env=env, timeout=60)
    assert res.returncode == 0 and f"logged as run 1 in {log}" in res.stdout and _runs(log) == 1
