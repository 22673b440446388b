"""How a batch's workers start (benchfit.cli.batch.worker_pool, start_method="auto"): forked from
this process only while it runs one thread, else from the fork server.

A fork copies the memory of every thread but runs only the forking one; a lock another thread held
at that moment stays locked in the child for ever (POSIX fork(2), "Application Usage": the child
may only call async-signal-safe functions when the parent had threads). Each check runs in a fresh
interpreter, where the thread count is known, and tells the start method by what the workers see:
a forked worker's parent is this process, a fork-server worker's parent is the server.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import textwrap
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]

PROBE = '''
import os
import sys
import time
from pathlib import Path


def _both_started(path):
    # the batch's own process takes files too: each job waits until two processes have each
    # started one, so that a worker surely runs a job of these four files
    here = Path(path).parent
    (here / f"started-{os.getpid()}").touch()
    deadline = time.monotonic() + 60
    while len(list(here.glob("started-*"))) < 2 and time.monotonic() < deadline:
        time.sleep(0.01)


def parent_pid(path):
    _both_started(path)
    return [os.getpid(), os.getppid()]


def preloaded(path):
    from benchfit.cli.batch import MEASURE_PRELOAD

    _both_started(path)
    return [os.getpid(), [name for name in MEASURE_PRELOAD if name in sys.modules]]
'''

CHILD = textwrap.dedent('''
    import json, os, sys, tempfile, threading, time
    from pathlib import Path

    from benchfit.cli.batch import prefer_one_blas_thread, worker_pool
    from probe_job import parent_pid


    def four_files():
        folder = Path(tempfile.mkdtemp())
        return [folder / f"f{i}" for i in range(4)]


    def started(label):
        threads = len(os.listdir("/proc/self/task"))
        with worker_pool(2, 4) as pool:
            outcomes = pool.run(parent_pid, four_files())
        assert all(o.ok for o in outcomes), [o.error for o in outcomes]
        # the parents of the workers' jobs (this process runs jobs too)
        parents = {ppid for pid, ppid in (o.result for o in outcomes) if pid != os.getpid()}
        return {"label": label, "threads": threads, "method": pool.start_method,
                "forked_here": parents == {os.getpid()}}


    if __name__ == "__main__":
        rows = []
        if sys.argv[1] == "threads":
            rows.append(started("one thread"))
            stop = threading.Event()
            helper = threading.Thread(target=stop.wait)
            helper.start()
            rows.append(started("a helper thread"))
            stop.set()
            helper.join()
            # the OS lists a joined thread until it has unwound (and so does the pool's manager thread)
            deadline = time.monotonic() + 10.0
            while len(os.listdir("/proc/self/task")) > 1 and time.monotonic() < deadline:
                time.sleep(0.01)
            rows.append(started("the helper joined"))
        elif sys.argv[1] == "preload":  # as `benchfit measure`: one BLAS thread asked for, numpy not loaded
            from probe_job import preloaded

            assert prefer_one_blas_thread()
            with worker_pool(2, 4) as pool:
                seen = [o.result[1] for o in pool.run(preloaded, four_files()) if o.result[0] != os.getpid()]
            rows.append({"method": pool.start_method, "seen": seen,
                         "threads": len(os.listdir("/proc/self/task"))})
        else:  # numpy loaded with the BLAS thread count of the environment
            if sys.argv[1] == "one-blas-thread":
                assert prefer_one_blas_thread()
            import numpy  # noqa: F401
            rows.append(started(sys.argv[1]))
        print(json.dumps(rows))
''')


def _run(tmp_path: Path, case: str, env_extra: dict[str, str] | None = None) -> list[dict]:
    (tmp_path / "probe_job.py").write_text(PROBE, encoding="utf-8")
    script = tmp_path / "child.py"
    script.write_text(CHILD, encoding="utf-8")
    env = {k: v for k, v in os.environ.items()
           if k not in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS", "BLIS_NUM_THREADS")}
    env.update(env_extra or {})
    env["PYTHONPATH"] = os.pathsep.join([str(ROOT), str(tmp_path)])
    # a fork with threads running is a DeprecationWarning from Python 3.12 on: it must not happen
    res = subprocess.run([sys.executable, "-W", "error::DeprecationWarning", str(script), case],
                         capture_output=True, text=True, env=env, timeout=120, check=False)
    assert res.returncode == 0, res.stderr
    return json.loads(res.stdout)


def test_forked_only_while_one_thread_runs(tmp_path):
    if not Path("/proc/self/task").is_dir():
        import pytest

        pytest.skip("the thread count of a process is read from /proc (Linux)")
    rows = _run(tmp_path, "threads")
    # (the first pool's own threads may not have unwound yet when the helper starts: ≥ 2 there)
    assert rows[0]["threads"] == 1 and rows[1]["threads"] >= 2 and rows[2]["threads"] == 1, rows
    assert [(r["method"], r["forked_here"]) for r in rows] == [
        ("fork", True), ("forkserver", False), ("fork", True)], rows


def test_numpy_with_one_blas_thread_keeps_fork_and_a_blas_pool_does_not(tmp_path):
    if not Path("/proc/self/task").is_dir():
        import pytest

        pytest.skip("the thread count of a process is read from /proc (Linux)")
    one = _run(tmp_path, "one-blas-thread")[0]
    assert one["threads"] == 1 and (one["method"], one["forked_here"]) == ("fork", True), one
    # two BLAS threads asked for: a threaded BLAS build starts its pool when numpy loads
    two = _run(tmp_path, "two-blas-threads", {"OPENBLAS_NUM_THREADS": "2", "OMP_NUM_THREADS": "2"})[0]
    expected = ("fork", True) if two["threads"] == 1 else ("forkserver", False)
    assert (two["method"], two["forked_here"]) == expected, two


def test_forked_workers_start_with_the_measure_modules_loaded(tmp_path):
    """The parent imports them once before the fork (one BLAS thread asked for), so no worker does."""
    if not Path("/proc/self/task").is_dir():
        import pytest

        pytest.skip("the thread count of a process is read from /proc (Linux)")
    from benchfit.cli.batch import MEASURE_PRELOAD

    row = _run(tmp_path, "preload")[0]
    assert row["method"] == "fork", row
    # every job a worker ran saw them (the probe job itself imports none of them)
    assert row["seen"] and all(seen == list(MEASURE_PRELOAD) for seen in row["seen"]), row


def test_single_threaded_sees_a_python_thread():
    import threading

    from benchfit.cli.batch import single_threaded

    stop = threading.Event()
    helper = threading.Thread(target=stop.wait)
    helper.start()
    try:
        assert not single_threaded()
    finally:
        stop.set()
        helper.join()


def test_a_measure_job_imports_nothing_beyond_the_preload(tmp_path):
    """Every module a measure job of a WAV needs is in MEASURE_PRELOAD, so a forked worker imports
    none itself (each worker importing them again is CPU time a loaded machine does not have)."""
    code = textwrap.dedent('''
        import importlib, json, sys
        import numpy as np, soundfile as sf
        from benchfit.cli.batch import MEASURE_PRELOAD, measure_job, prefer_one_blas_thread
        prefer_one_blas_thread()
        t = np.arange(48000) / 48000
        sf.write(sys.argv[1], (0.3 * np.sin(2 * np.pi * 50 * t)).astype(np.float32), 48000, subtype="FLOAT")
        for name in MEASURE_PRELOAD:
            importlib.import_module(name)
        before = set(sys.modules)
        result = measure_job(sys.argv[1])
        print(json.dumps({"measured": bool(result["measurement"]), "new": sorted(set(sys.modules) - before)}))
    ''')
    res = subprocess.run([sys.executable, "-c", code, str(tmp_path / "tone.wav")], capture_output=True, text=True,
                         timeout=120, check=False, cwd=ROOT)
    assert res.returncode == 0, res.stderr
    row = json.loads(res.stdout)
    assert row["measured"] and row["new"] == [], row
