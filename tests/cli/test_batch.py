"""Batch work of `benchfit measure` and `benchfit report --each`: folders, worker processes,
streamed results, one error line per bad file, exit codes.

All captures are small synthetic hum-check outputs written here with soundfile (0.5 s at
48 kHz, seeded noise); the expected values are the synthesis parameters.
"""

from __future__ import annotations

import json
import math
import sys
from pathlib import Path

import numpy as np
import pytest
import soundfile as sf

FS = 48000
GAIN_V_PER_FS = 4.0  # sidecar gain: samples × 4 V/FS → volts

SPEC_TOML = """
[spec]
name = "hum-check box, 50 Hz reference tone (test copy)"
decision_rule = "guard-banded"

[[limit]]
quantity = "frequency_hz"
label = "output frequency"
nominal = 50.0
tolerance = 0.25

[[limit]]
quantity = "thd_pct"
label = "output THD"
max = 5.0

[[limit]]
quantity = "vrms"
label = "output level into 10 kΩ"
unit = "V"
min = 1.0
max = 1.6
"""




def write_unit(path: Path, *, freq: float, seed: int, unit: str | None = None, seconds: float = 0.5) -> Path:
    """A hum-check output (1.6 V peak sine + 2 % third harmonic + noise) with its sidecar."""
    rng = np.random.default_rng(seed)
    t = np.arange(int(seconds * FS)) / FS
    x = 0.4 * np.cos(2 * math.pi * freq * t + 0.3) + 0.008 * np.cos(6 * math.pi * freq * t)
    x = x + rng.normal(0.0, 1e-3, t.size)
    path.parent.mkdir(parents=True, exist_ok=True)
    sf.write(path, x, FS, subtype="FLOAT")
    sidecar = {"benchfit_sidecar": 1, "channels": [{"name": "output"}], "sample_rate_hz": FS,
               "device": "test", "start_utc": "2026-12-01T17:00:00Z", "overflow_count": 0, "clip_count": 0,
               "calibration": {"profile": "test", "gain_v_per_fs": [GAIN_V_PER_FS], "timebase_ppm": 0.0,
                               "timebase_u_ppm": 0.0, "coupling_tau_s": None},
               "benchfit_version": "0.1.0"}
    if unit is not None:
        sidecar["unit"] = unit
    path.with_suffix(".json").write_text(json.dumps(sidecar))
    return path


@pytest.fixture(scope="module")
def batch(tmp_path_factory) -> dict[str, Path]:
    """Four good captures, a non-numeric CSV and a capture in a sub-folder."""
    d = tmp_path_factory.mktemp("batch")
    write_unit(d / "HC-01.wav", freq=50.00, seed=1)
    write_unit(d / "HC-02.wav", freq=50.05, seed=2)
    write_unit(d / "box_c.wav", freq=49.98, seed=3, unit="HC-03")
    write_unit(d / "HC-04.wav", freq=51.00, seed=4)  # 1 Hz high: fails the ±0.25 Hz limit
    (d / "HC-99_bad.csv").write_text("time,output\nabc,def\nghi,jkl\n")
    write_unit(d / "nested" / "HC-05.wav", freq=50.01, seed=5)
    (d / "notes.md").write_text("bench notes, not a capture\n")
    spec = d / "hc_spec.toml"
    spec.write_text(SPEC_TOML, encoding="utf-8")
    return {"dir": d, "spec": spec, "bad": d / "HC-99_bad.csv"}


def _lines(text: str) -> list[dict]:
    return [json.loads(line) for line in text.strip().splitlines()]


def assert_same_result(a, b, where: str = "") -> None:
    """Same keys, same strings/flags, numbers equal to rounding.

    Tolerance: workers run numpy's BLAS on one thread, this test process on as many as it
    was started with; a different thread count changes the order of floating-point sums,
    so results agree to rounding (rel 1e-9 is ~10^7 ulp of margin), not bit for bit.
    """
    if isinstance(a, dict):
        assert isinstance(b, dict) and set(a) == set(b), where
        for k in a:
            assert_same_result(a[k], b[k], f"{where}.{k}")
    elif isinstance(a, list):
        assert isinstance(b, list) and len(a) == len(b), where
        for i, (x, y) in enumerate(zip(a, b)):
            assert_same_result(x, y, f"{where}[{i}]")
    elif isinstance(a, float) and not isinstance(b, bool):
        assert b == pytest.approx(a, rel=1e-9, abs=1e-12), where
    else:
        assert a == b, where


# --- choosing files -------------------------------------------------------------------------

def test_collect_captures_picks_by_extension_sorted_and_skips_sidecars(tmp_path):
    from benchfit.cli.batch import collect_captures

    for name in ("b.wav", "a.FLAC", "c.csv", "c.json", "d.tsv", "e.txt", "f.ogg", "g.aiff", "h.md", "i.wav.bak"):
        (tmp_path / name).write_bytes(b"")
    (tmp_path / "sub").mkdir()
    (tmp_path / "sub" / "z.wav").write_bytes(b"")
    files, notes = collect_captures([tmp_path])
    assert [f.name for f in files] == ["a.FLAC", "b.wav", "c.csv", "d.tsv", "e.txt", "f.ogg", "g.aiff"]
    assert notes == []
    deep, _ = collect_captures([tmp_path], recursive=True)
    assert [f.name for f in deep][-1] == "z.wav" and len(deep) == 8
    # a named file is taken whatever its extension, once; a missing one is kept for its job to report
    named, _ = collect_captures([tmp_path / "h.md", tmp_path / "b.wav", tmp_path, tmp_path / "gone.wav"])
    assert [f.name for f in named][:2] == ["h.md", "b.wav"]
    assert [f.name for f in named].count("b.wav") == 1 and named[-1].name == "gone.wav"
    # a shell pattern that also matched a sidecar: the sidecar is named in a note, not measured
    files, notes = collect_captures([tmp_path / "c.csv", tmp_path / "c.json"])
    assert [f.name for f in files] == ["c.csv"] and len(notes) == 1 and "sidecar" in notes[0]
    empty = tmp_path / "empty"
    empty.mkdir()
    files, notes = collect_captures([empty])
    assert files == [] and len(notes) == 1 and "--recursive" in notes[0]


def test_unit_serial_from_sidecar_else_stem(batch, tmp_path):
    from benchfit.cli.batch import unit_serial
    from benchfit.errors import CaptureError

    assert unit_serial(batch["dir"] / "box_c.wav") == "HC-03"
    assert unit_serial(batch["dir"] / "HC-01.wav") == "HC-01"
    assert unit_serial(batch["bad"]) == "HC-99_bad"
    odd = write_unit(tmp_path / "x.wav", freq=50.0, seed=9)
    data = json.loads(odd.with_suffix(".json").read_text())
    odd.with_suffix(".json").write_text(json.dumps({**data, "unit": 7}))
    with pytest.raises(CaptureError, match="'unit' must be"):
        unit_serial(odd)


# --- measure ----------------------------------------------------------------------------------

def test_measure_folder_good_results_bad_file_one_line_exit_2(batch, run):
    res = run("measure", str(batch["dir"]), "--json", "--jobs", "2")
    assert res.returncode == 2, res.stderr
    objs = _lines(res.stdout)
    assert sorted(Path(o["file"]).name for o in objs) == ["HC-01.wav", "HC-02.wav", "HC-04.wav", "box_c.wav"]
    named = [line for line in res.stderr.splitlines() if "HC-99_bad.csv" in line]
    assert len(named) == 1 and named[0].startswith("error: "), res.stderr
    assert "Traceback" not in res.stderr
    by_name = {Path(o["file"]).name: o["channels"][0] for o in objs}
    assert by_name["HC-02.wav"]["frequency_hz"] == pytest.approx(50.05, abs=1e-3)  # u ≈ 1e-5 Hz at this SNR
    assert by_name["HC-01.wav"]["vrms"] == pytest.approx(1.6 / math.sqrt(2), rel=2e-3)  # + harmonic, noise
    assert by_name["HC-01.wav"]["unit"] == "V"  # sidecar gain applied in the worker


def test_json_lines_equal_single_file_runs(batch, run):
    res = run("measure", str(batch["dir"]), "--json", "--jobs", "2")
    for obj in _lines(res.stdout):
        single = run("measure", obj["file"], "--json")
        assert single.returncode == 0, single.stderr
        assert_same_result(json.loads(single.stdout), obj)  # same code on the same bytes


def test_jobs_1_and_2_give_the_same_results(batch, run):
    one = run("measure", str(batch["dir"]), "-r", "--json", "--jobs", "1")
    two = run("measure", str(batch["dir"]), "-r", "--json", "--jobs", "2")
    assert one.returncode == two.returncode == 2
    key = lambda o: o["file"]  # noqa: E731
    assert [o["file"] for o in sorted(_lines(one.stdout), key=key)] == \
        [o["file"] for o in sorted(_lines(two.stdout), key=key)]
    assert_same_result(sorted(_lines(one.stdout), key=key), sorted(_lines(two.stdout), key=key))
    assert len(_lines(one.stdout)) == 5


def test_recursive_finds_nested_files(batch, run):
    flat = run("measure", str(batch["dir"]), "--json", "--jobs", "1")
    deep = run("measure", str(batch["dir"]), "--recursive", "--json", "--jobs", "1")
    flat_names = {Path(o["file"]).name for o in _lines(flat.stdout)}
    deep_names = {Path(o["file"]).name for o in _lines(deep.stdout)}
    assert "HC-05.wav" not in flat_names and deep_names == flat_names | {"HC-05.wav"}


def test_human_output_prints_every_good_file(batch, run):
    res = run("measure", str(batch["dir"]), "--jobs", "2")
    assert res.returncode == 2
    for name in ("HC-01.wav", "HC-02.wav", "HC-04.wav", "box_c.wav"):
        assert name in res.stdout
    assert res.stdout.count("channel output (V)") == 4


def test_empty_folder_is_bad_input(tmp_path, run):
    res = run("measure", str(tmp_path), "--json")
    assert res.returncode == 2 and res.stdout == ""
    assert res.stderr.startswith("error: ") and len(res.stderr.strip().splitlines()) == 1


def _probe(path: Path, meet: str) -> tuple[int, list[str]]:
    """Measure, then name the heavy or device modules loaded in the process the job ran in.

    The batch's own process takes files too, so each job first waits until two processes have
    each started one (markers in ``meet``): a worker then surely runs one of the files.
    """
    import os
    import time

    from benchfit.cli.batch import measure_job

    (Path(meet) / f"started-{os.getpid()}").touch()
    deadline = time.monotonic() + 60
    while len(list(Path(meet).glob("started-*"))) < 2 and time.monotonic() < deadline:
        time.sleep(0.01)
    measure_job(path)
    return os.getpid(), sorted(m for m in ("sounddevice", "typer", "benchfit.cli.app", "benchfit.capture.live")
                               if m in sys.modules)


@pytest.mark.parametrize("start_method", ["auto", "forkserver"])
def test_workers_do_not_load_sounddevice_or_the_cli(batch, start_method, tmp_path):
    """A fork-server worker loads none of them; a forked worker (``auto`` in a process with one
    thread) has only what this process had loaded when it forked."""
    import os

    from benchfit.cli.batch import worker_pool

    files = [batch["dir"] / "HC-01.wav", batch["dir"] / "HC-02.wav"]
    here = sorted(m for m in ("sounddevice", "typer", "benchfit.cli.app", "benchfit.capture.live")
                  if m in sys.modules)
    with worker_pool(2, len(files), start_method=start_method) as pool:
        outcomes = pool.run(_probe, files, kwargs={"meet": str(tmp_path)})
    assert all(o.ok for o in outcomes), [o.error for o in outcomes]
    in_workers = [loaded for pid, loaded in (o.result for o in outcomes) if pid != os.getpid()]
    assert in_workers == [here if pool.start_method == "fork" else []]


def _in_worker(parent: int, meet: Path) -> bool:
    """True in a worker (which leaves a marker in ``meet``); in this process (``parent``), first
    wait for a worker's marker, so that a worker surely takes one of the files."""
    import os
    import time

    if os.getpid() != parent:
        (meet / "a worker started").touch()
        return True
    deadline = time.monotonic() + 60
    while not (meet / "a worker started").exists() and time.monotonic() < deadline:
        time.sleep(0.005)
    return False


def _slow_pid(path: Path, parent: int, meet: Path, die: bool = False) -> int:
    """The pid the job ran in, after 20 ms; with ``die`` a worker dies on its first file without
    a word (as when killed or out of memory)."""
    import os
    import time

    if _in_worker(parent, meet) and die:
        os._exit(9)
    time.sleep(0.02)
    return os.getpid()


def _unpicklable(path: Path, parent: int, meet: Path) -> object:
    """A result that cannot be sent back from a worker (a lock); fine in this process."""
    import threading

    return threading.Lock() if _in_worker(parent, meet) else "here"


def test_every_file_once_shared_by_this_process_and_the_workers(tmp_path):
    """jobs=3: this process and two workers take files from one counter; each file runs once."""
    import os

    from benchfit.cli.batch import run_jobs

    files = [tmp_path / f"f{i:02d}" for i in range(40)]
    outcomes = run_jobs(_slow_pid, files, jobs=3, kwargs={"parent": os.getpid(), "meet": tmp_path})
    assert sorted(o.index for o in outcomes) == list(range(40)) and all(o.ok for o in outcomes)
    assert [o.path for o in sorted(outcomes, key=lambda o: o.index)] == files
    pids = {o.result for o in outcomes}
    assert os.getpid() in pids and len(pids) >= 2  # this process worked, and so did a worker


def test_a_worker_that_dies_costs_only_its_file(tmp_path):
    """The file a worker was on when it died gets one error line; the others are done by the
    remaining processes."""
    import os

    from benchfit.cli.batch import run_jobs

    files = [tmp_path / f"f{i:02d}" for i in range(30)]
    outcomes = run_jobs(_slow_pid, files, jobs=2, kwargs={"parent": os.getpid(), "meet": tmp_path, "die": True})
    assert sorted(o.index for o in outcomes) == list(range(30))
    bad = [o for o in outcomes if not o.ok]
    assert len(bad) == 1 and "worker process failed" in bad[0].error and "--jobs 1" in bad[0].error
    assert str(bad[0].path) in bad[0].error and {o.result for o in outcomes if o.ok} == {os.getpid()}


def test_a_result_that_will_not_pickle_is_one_error_line(tmp_path):
    import os

    from benchfit.cli.batch import run_jobs

    files = [tmp_path / f"f{i}" for i in range(12)]
    outcomes = run_jobs(_unpicklable, files, jobs=2, kwargs={"parent": os.getpid(), "meet": tmp_path})
    assert sorted(o.index for o in outcomes) == list(range(12)) and not all(o.ok for o in outcomes)
    for o in outcomes:
        assert (o.ok and o.result == "here") or ("could not hand the result back" in o.error
                                                 and str(o.path) in o.error and "\n" not in o.error)


def _ctrl_c_swallowed(path: Path, parent: int, presses: int, done: Path) -> str:
    """On file f02, in this process: Ctrl-C ``presses`` times inside code that swallows a
    KeyboardInterrupt (as a C library's callback does: soundfile's cffi callbacks print
    "Exception ignored" and go on), then mark the job as finished."""
    import os
    import signal

    if path.name == "f02" and os.getpid() == parent:
        for _ in range(presses):
            try:
                os.kill(os.getpid(), signal.SIGINT)
            except KeyboardInterrupt:  # lost, as in a C callback
                pass
    (done / path.name).touch()
    return path.name


@pytest.mark.parametrize("jobs", [1, 2])
def test_ctrl_c_inside_a_job_stops_the_batch_after_that_file(tmp_path, jobs, capsys):
    """The first Ctrl-C is taken between files: a KeyboardInterrupt raised inside the job could
    be swallowed by a C callback, and the batch would run to the end."""
    import os

    from benchfit.cli.batch import run_jobs

    done = tmp_path / "done"
    done.mkdir()
    files = [tmp_path / f"f{i:02d}" for i in range(40)]
    seen: list = []
    with pytest.raises(KeyboardInterrupt):
        run_jobs(_ctrl_c_swallowed, files, jobs=jobs, on_outcome=seen.append,
                 kwargs={"parent": os.getpid(), "presses": 1, "done": done})
    assert "f02" in {o.result for o in seen}                     # the file in hand was finished
    assert len(seen) < len(files) and "Ctrl-C again" in capsys.readouterr().err


def test_a_second_ctrl_c_stops_at_once(tmp_path):
    import os

    from benchfit.cli.batch import run_jobs

    done = tmp_path / "done"
    done.mkdir()
    files = [tmp_path / f"f{i:02d}" for i in range(10)]
    with pytest.raises(KeyboardInterrupt):
        run_jobs(_ctrl_c_raised_twice, files, jobs=1, kwargs={"parent": os.getpid(), "done": done})
    assert sorted(p.name for p in done.iterdir()) == ["f00", "f01"]  # f02 never finished


def _ctrl_c_raised_twice(path: Path, parent: int, done: Path) -> str:
    """Ctrl-C twice on f02 (the second is not caught), then mark the job as finished."""
    import os
    import signal

    if path.name == "f02" and os.getpid() == parent:
        os.kill(os.getpid(), signal.SIGINT)
        os.kill(os.getpid(), signal.SIGINT)
    (done / path.name).touch()
    return path.name


def test_run_jobs_reports_in_completion_order_with_index(batch):
    from benchfit.cli.batch import measure_job, run_jobs

    files = [batch["bad"], batch["dir"] / "HC-01.wav"]
    seen = []
    outcomes = run_jobs(measure_job, files, jobs=1, on_outcome=seen.append)
    assert seen == outcomes and [o.index for o in outcomes] == [0, 1]
    assert not outcomes[0].ok and str(batch["bad"]) in outcomes[0].error and "\n" not in outcomes[0].error
    assert outcomes[1].ok and outcomes[1].result["measurement"]["file"] == str(files[1])


def test_measure_job_reads_the_file_once_same_hash_and_result(batch, monkeypatch):
    """A file measured whole is read once: its SHA-256 is that of the bytes read (hashlib,
    independent of the reader) and the result equals that of the path-by-path reading;
    libsndfile never opens the path itself, and the separate hashing pass is not run."""
    import hashlib
    import io

    import benchfit.capture.audiofile as audiofile
    import benchfit.capture.load as load_mod
    from benchfit.capture.load import load
    from benchfit.cli.batch import measure_job
    from benchfit.measurement.summary import measure

    path = batch["dir"] / "HC-01.wav"
    cap = load(path)
    before = {"measurement": measure(cap).to_dict(full=True), "sha256": cap.sha256}
    opened: list[object] = []
    real = sf.SoundFile

    def recording(file, *args, **kwargs):
        opened.append(file)
        return real(file, *args, **kwargs)

    def no_second_pass(_path):
        raise AssertionError("the file was hashed in a second read")

    monkeypatch.setattr(sf, "SoundFile", recording)
    monkeypatch.setattr(load_mod, "file_sha256", no_second_pass)
    monkeypatch.setattr(audiofile, "_head", lambda *_: pytest.fail("the header was read from the file"))
    out = measure_job(path, with_capture=True)
    assert len(opened) == 2 and all(isinstance(f, io.BytesIO) for f in opened)  # header count, samples
    assert out["capture"]["sha256"] == hashlib.sha256(path.read_bytes()).hexdigest() == before["sha256"]
    assert_same_result(before["measurement"], out["measurement"])


def test_sample_count_from_the_bytes_equals_the_headers(batch):
    """Whether a file is measured in blocks is told the same from its bytes as from its path."""
    from benchfit.capture.blocks import estimated_samples

    for path in (batch["dir"] / "HC-01.wav", batch["bad"]):
        assert estimated_samples(path, path.read_bytes()) == estimated_samples(path) is not None
    assert estimated_samples(batch["dir"] / "HC-01.wav") == int(0.5 * FS)  # write_unit: 0.5 s mono


_FAULTS = """
import resource, sys
from benchfit.cli.batch import keep_freed_memory, measure_job
if sys.argv[2] == "keep":
    assert keep_freed_memory()
measure_job(sys.argv[1])
before = resource.getrusage(resource.RUSAGE_SELF).ru_minflt
for _ in range(10):
    measure_job(sys.argv[1])
print((resource.getrusage(resource.RUSAGE_SELF).ru_minflt - before) / 10)
"""


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="glibc's mallopt and Linux page-fault counts")
def test_kept_memory_saves_the_page_faults_of_each_file(batch):
    """With freed memory kept, measuring the same file again touches pages the process has
    already faulted in: a 0.5 s capture's arrays (~190 kB each, tens of them) would otherwise
    come from fresh mmaps, one minor fault a 4 KiB page (getrusage's ru_minflt)."""
    import os
    import subprocess

    path = str(batch["dir"] / "HC-01.wav")
    env = {**os.environ, "OPENBLAS_NUM_THREADS": "1"}
    faults = {mode: float(subprocess.run([sys.executable, "-c", _FAULTS, path, mode], capture_output=True,
                                         text=True, check=True, env=env).stdout)
              for mode in ("default", "keep")}
    assert faults["default"] > 94  # at least two arrays of ~47 pages each
    assert faults["keep"] < faults["default"] / 4, faults


# --- report --each -----------------------------------------------------------------------------

@pytest.fixture(scope="module")
def units(tmp_path_factory, batch) -> Path:
    """Three passing units and one failing unit (no bad file)."""
    d = tmp_path_factory.mktemp("units")
    for name in ("HC-01.wav", "HC-02.wav", "box_c.wav", "HC-04.wav"):
        for suffix in (".wav", ".json"):
            src = (batch["dir"] / name).with_suffix(suffix)
            (d / src.name).write_bytes(src.read_bytes())
    return d


def test_report_each_one_report_per_unit_and_exit_1(units, batch, run, tmp_path):
    out = tmp_path / "reports"
    res = run("report", str(units), "--each", "--spec", str(batch["spec"]), "--out", str(out),
              "--no-log", "--no-figures", "--jobs", "2")
    assert res.returncode == 1, res.stderr  # HC-04 fails its frequency limit, nothing errored
    htmls = sorted(p.name.split("_")[0] for p in out.glob("*.html") if p.name != "index.html")
    assert htmls == ["HC-01", "HC-02", "HC-03", "HC-04"]  # box_c.wav is HC-03 by its sidecar
    assert (out / "index.html").is_file()  # the folder's index of reports
    assert len(list(out.glob("*.json"))) == 4
    rows = {line.split()[0]: line.split()[1] for line in res.stdout.splitlines() if line.startswith("HC-")}
    assert rows == {"HC-01": "pass", "HC-02": "pass", "HC-03": "pass", "HC-04": "fail"}
    for p in out.glob("HC-04_*.json"):
        twin = json.loads(p.read_text())
        assert twin["verdict"] == "fail" and twin["unit"] == "HC-04"


def test_report_each_json_lines_and_error_wins(batch, run, tmp_path):
    out = tmp_path / "reports"
    res = run("report", str(batch["dir"]), "--each", "--spec", str(batch["spec"]), "--out", str(out),
              "--no-log", "--no-figures", "--jobs", "2", "--json")
    assert res.returncode == 2  # the bad CSV errored; 2 wins over the failing unit's 1
    objs = _lines(res.stdout)
    assert {o["unit"]: o["verdict"] for o in objs} == {"HC-01": "pass", "HC-02": "pass", "HC-03": "pass",
                                                       "HC-04": "fail"}
    assert all(Path(o["html"]).is_file() and Path(o["json"]).is_file() for o in objs)
    assert len([line for line in res.stderr.splitlines() if "HC-99_bad.csv" in line]) == 1


def test_report_each_logs_every_unit(units, batch, run, tmp_path):
    from benchfit.log.store import list_runs

    log = tmp_path / "log.sqlite"
    res = run("report", str(units), "--each", "--spec", str(batch["spec"]), "--out", str(tmp_path / "r"),
              "--log", str(log), "--no-figures", "--jobs", "2", "--json")
    assert res.returncode == 1, res.stderr
    runs = list_runs(log)
    assert sorted((r["unit"], r["verdict"]) for r in runs) == [
        ("HC-01", "pass"), ("HC-02", "pass"), ("HC-03", "pass"), ("HC-04", "fail")]
    assert {r["command"] for r in runs} == {"report"}
    printed = {o["unit"]: o["run_id"] for o in _lines(res.stdout)}
    assert printed == {r["unit"]: r["id"] for r in runs}  # each line names the run it logged
    assert all(o["log"] == str(log) for o in _lines(res.stdout))


def test_report_each_holds_one_log_connection_for_the_batch(units, batch, run, tmp_path, monkeypatch):
    """The parent opens the log once for the units it appends (plus the check before the
    workers start), and every unit is still logged."""
    import benchfit.log.sqlite as backend
    from benchfit.log.store import list_runs

    log = tmp_path / "log.sqlite"
    opened = []
    real = backend.connect
    monkeypatch.setattr(backend, "connect", lambda *a, **k: opened.append(a) or real(*a, **k))
    res = run("report", str(units), "--each", "--spec", str(batch["spec"]), "--out", str(tmp_path / "r"),
              "--log", str(log), "--no-figures", "--jobs", "1", "--json")
    assert res.returncode == 1, res.stderr
    assert len(opened) == 2, opened  # the check (open_log) and the batch's held connection
    assert sorted(r["unit"] for r in list_runs(log)) == ["HC-01", "HC-02", "HC-03", "HC-04"]


def test_report_options_that_do_not_fit_together(batch, run, tmp_path):
    spec = str(batch["spec"])
    cases = [
        ("report", str(batch["dir"] / "HC-01.wav"), "--spec", spec, "--no-log"),  # no --unit, no --each
        ("report", str(batch["dir"]), "--each", "--unit", "HC-01", "--spec", spec, "--no-log"),
        ("report", str(batch["dir"]), "--each", "--as-found", str(batch["dir"] / "HC-01.wav"),
         "--spec", spec, "--no-log"),
        # a missing spec is one error before any unit is judged, not one per capture
        ("report", str(batch["dir"]), "--each", "--spec", str(tmp_path / "nospec.toml"), "--no-log"),
    ]
    for args in cases:
        res = run(*args, "--out", str(tmp_path))
        assert res.returncode == 2, args
        assert res.stderr.startswith("error: ") and len(res.stderr.strip().splitlines()) == 1, res.stderr
    assert list(tmp_path.glob("*.html")) == []


def test_deferred_log_entry_stores_what_run_unit_stores(batch, tmp_path):
    # report --each appends each unit's run in the parent from the entry its worker returns;
    # the stored run must be the one run_unit writes itself
    from benchfit.log.store import append_run, get_run
    from benchfit.report.assemble import run_unit

    capture = batch["dir"] / "box_c.wav"
    direct_log, deferred_log = tmp_path / "direct.sqlite", tmp_path / "deferred.sqlite"
    direct = run_unit([capture], unit="HC-03", spec=batch["spec"], out_dir=tmp_path / "a",
                      log_path=direct_log, with_figures=False)
    deferred = run_unit([capture], unit="HC-03", spec=batch["spec"], out_dir=tmp_path / "b",
                        log_path=None, with_figures=False, defer_log=True)
    assert direct.log_entry is None and deferred.run_id is None
    import pickle

    entry = pickle.loads(pickle.dumps(deferred.log_entry))  # it travels back from a worker
    run_id = append_run(deferred_log, **entry)

    def stored(log, rid):
        run = get_run(log, rid)
        strip = {"id", "run_id", "capture_id", "time_utc", "stored_utc", "uuid", "details_json", "details"}
        return ({k: v for k, v in run.items() if k not in strip | {"captures", "results", "decisions"}},
                [{k: v for k, v in c.items() if k not in strip} for c in run["captures"]],
                [{k: v for k, v in r.items() if k not in strip} for r in run["results"]],
                [{k: v for k, v in d.items() if k not in strip} for d in run["decisions"]])

    a, b = stored(direct_log, direct.run_id), stored(deferred_log, run_id)
    assert a == b
    assert any(r["quantity"] == "frequency_hz" and r["value"] is not None for r in a[2])
    assert [d["decision"] for d in a[3]] == ["pass", "pass", "pass"]
