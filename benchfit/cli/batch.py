"""Batch work for ``benchfit measure`` and ``benchfit report``: pick capture files, run one
job per file in this process and worker processes, and hand each result back as soon as it is
done.

Pieces:

* :func:`collect_captures` turns the command-line arguments (files and folders) into the
  list of capture files: a folder contributes its files whose extension is one of
  :data:`CAPTURE_SUFFIXES` (sidecar ``.json`` files are not captures), sorted by name;
  ``recursive=True`` descends into sub-folders. A file named on the command line is always
  taken, whatever its extension (the reader then decides by content).
* The per-file jobs :func:`measure_job` and :func:`report_job` are top-level functions of
  this module, which imports only the standard library at module level, so a worker
  process loads nothing but what the job needs (never sounddevice, never the typer app; a
  forked worker shares what the parent had loaded when it forked, and loads nothing more).
  A job never raises a :class:`~benchfit.errors.BenchfitError`: it returns a
  :class:`JobOutcome` holding either the result or the one-line message.
* :func:`worker_pool` starts ``jobs − 1`` worker processes (none for ``jobs=1``); its
  :meth:`WorkerPool.run` runs a job over the files in this process and the workers, which take
  the next file from one shared counter, and calls ``on_outcome`` in this process for each file
  in completion order (so output streams and the measurement log is written by one process
  only). :func:`run_jobs` is the two in one call.

Start method (``"auto"``): the workers are forked from this process when it runs exactly one
thread (:func:`single_threaded`), else started by the ``forkserver`` with the measurement
modules preloaded into the server (``spawn`` where that is missing). A fork costs nothing,
where the fork server first starts an interpreter that imports numpy/scipy (~0.35 s before
the first worker runs); a fork with other threads running can deadlock the child (a lock
held by a thread that the child does not have), so the commands enter :func:`worker_pool`
before they start a progress bar's refresh thread. Before a fork the job's modules are imported
here once (:func:`_preload_here`, when one BLAS thread is asked for), so the workers do not
import them again each. The log is checked (opened and closed)
before the fork and written by the parent only, after it; workers never touch it.
Worker processes ignore Ctrl-C; the parent terminates them and exits 130. Each
worker's BLAS/OpenMP libraries get CPU count ÷ workers threads (unless the user set
``OPENBLAS_NUM_THREADS`` etc.): with one BLAS thread per CPU in every worker, two workers
on two cores were 2× slower than one process.
"""

from __future__ import annotations

import os
import sys
import time
from contextlib import contextmanager, suppress
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable, Iterable, Iterator, Literal, Mapping, Sequence, get_args

__all__ = ["CAPTURE_SUFFIXES", "StartMethod", "JobOutcome", "collect_captures", "default_jobs",
           "measure_job", "report_job", "unit_serial", "run_jobs", "worker_pool", "WorkerPool",
           "single_threaded", "usable_cpus", "progress_bar", "BatchProgress", "prefer_one_blas_thread",
           "MEASURE_PRELOAD", "REPORT_PRELOAD", "keep_freed_memory"]

#: extensions (lower case) of the files a folder contributes to a batch
CAPTURE_SUFFIXES: tuple[str, ...] = (".wav", ".flac", ".csv", ".tsv", ".txt", ".ogg", ".aiff")

StartMethod = Literal["auto", "forkserver", "spawn"]

#: modules a measure job needs (its first file imports all but the first three; ``numpy.ma`` is
#: numpy 2's lazy import inside ``np.unique``), imported once before the workers are forked
#: (:func:`worker_pool`) or by the forkserver, so no worker imports them
#: (tests/cli/test_batch_start.py checks that a job imports nothing more)
MEASURE_PRELOAD: tuple[str, ...] = ("benchfit.capture.load", "benchfit.measurement.summary",
                                    "benchfit.measurement.long_record", "benchfit.capture.blocks", "soundfile",
                                    "threadpoolctl", "numpy.fft", "numpy.ma")
#: the same for report jobs
REPORT_PRELOAD: tuple[str, ...] = MEASURE_PRELOAD + ("benchfit.report.assemble",)


@dataclass(frozen=True)
class JobOutcome:
    """What one per-file job gave back.

    Attributes
    ----------
    index : int
        Position of the file in the batch (input order).
    path : Path
        The capture file.
    result : object or None
        The job's result (a JSON-ready dict) when it succeeded.
    error : str or None
        One line ``<file>: <what is wrong> — <what to do>`` when it failed.
    seconds : float
        Wall time of the job in its worker (s).
    """

    index: int
    path: Path
    result: Any = None
    error: str | None = None
    seconds: float = 0.0

    @property
    def ok(self) -> bool:
        return self.error is None


# --- choosing files ------------------------------------------------------------------------

def collect_captures(paths: Iterable[str | os.PathLike[str]], *, recursive: bool = False
                     ) -> tuple[list[Path], list[str]]:
    """The capture files named by command-line arguments.

    Parameters
    ----------
    paths : iterable of path
        Files and folders, in command-line order.
    recursive : bool
        Also take capture files from the sub-folders of each folder.

    Returns
    -------
    files : list of Path
        Files in argument order; each folder's files sorted by their path. A file given
        twice is taken once. A named file that does not exist is kept, so that its job
        reports it like any other bad file. A named ``.json`` file beside a capture of
        the same stem is that capture's sidecar and is left out.
    notes : list of str
        One line per folder that holds no capture file and per sidecar left out.
    """
    files: list[Path] = []
    seen: set[str] = set()
    notes: list[str] = []

    def add(p: Path) -> None:
        key = os.path.normcase(os.path.abspath(p))
        if key not in seen:
            seen.add(key)
            files.append(p)

    for raw in paths:
        p = Path(raw)
        if not p.is_dir():
            partner = _sidecar_partner(p)
            if partner is not None:  # e.g. a shell pattern HC-07.* that also matched the sidecar
                notes.append(f"{p}: a sidecar, not a capture — skipped (it is applied when {partner.name} "
                             "is read)")
                continue
            add(p)
            continue
        found = p.rglob("*") if recursive else p.iterdir()
        picked = sorted((f for f in found if f.suffix.lower() in CAPTURE_SUFFIXES and f.is_file()),
                        key=lambda f: f.as_posix())
        if not picked:
            where = "it or its sub-folders" if recursive else "it"
            fix = ("give a folder that holds captures, or the capture files themselves" if recursive
                   else "give the capture files, or add --recursive to look in sub-folders")
            notes.append(f"{p}: a folder with no capture files ({' '.join(CAPTURE_SUFFIXES)}) in {where} — {fix}")
        for f in picked:
            add(f)
    return files, notes


def _sidecar_partner(path: Path) -> Path | None:
    """The capture a ``.json`` file is the sidecar of (same stem, audio extension), or None."""
    if path.suffix.lower() != ".json":
        return None
    for suffix in CAPTURE_SUFFIXES:
        for candidate in (path.with_suffix(suffix), path.with_suffix(suffix.upper())):
            if candidate.is_file():
                return candidate
    return None


def usable_cpus() -> int:
    """The CPUs this process may run on: those of its affinity mask (``taskset``, a container's
    cpuset), and no more than its cgroup's CPU quota (cgroup v2 ``cpu.max``, as container
    limits set it; rounded up). ``os.cpu_count()`` counts the machine's CPUs instead, which a
    pinned or CPU-limited process cannot all use. At least 1."""
    try:
        cpus = len(os.sched_getaffinity(0))
    except (AttributeError, OSError):  # not on this platform
        cpus = os.cpu_count() or 1
    quota = _cgroup_cpu_quota()
    if quota is not None:
        cpus = min(cpus, quota)
    return max(1, cpus)


def _cgroup_cpu_quota(path: str = "/sys/fs/cgroup/cpu.max") -> int | None:
    """CPUs allowed by the cgroup v2 quota at ``path`` (``"<quota> <period>"`` in µs, or
    ``"max <period>"`` for none; Linux kernel documentation, cgroup-v2 "cpu.max"), rounded up;
    None when there is no quota or no such file."""
    import math

    try:
        with open(path, encoding="ascii") as f:
            quota, period = f.read().split()[:2]
    except (OSError, ValueError):
        return None
    if quota == "max":
        return None
    try:
        return max(1, math.ceil(int(quota) / int(period)))
    except (ValueError, ZeroDivisionError):
        return None


def default_jobs() -> int:
    """Processes working on a batch by default, and at most: :func:`usable_cpus`.

    More processes than usable CPUs only take turns on them, each paying its own start and
    cache misses; pinned to one CPU, two processes measured 0.87× of one (scripts/bench_batch.py).
    A busy machine does not lower it: this process works on the batch too, so a worker that
    gets little CPU time costs little, and at a load of 1 to 6 busy processes on 2 cores two
    processes measured 1.19–1.48× one (median; worst repeat 1.06×).
    """
    return usable_cpus()


# --- the per-file jobs (run in workers) ----------------------------------------------------

def _message(path: Path, err: BaseException) -> str:
    """One line naming the file: the error's own text (in the command line's words), prefixed by
    the path when it lacks it."""
    from benchfit.cli.common import cli_words

    text = cli_words(" ".join(str(err).split())) or type(err).__name__
    return text if str(path) in text else f"{path}: {text}"


def _guarded(index: int, path: Path, fn: Callable[..., Any], kwargs: Mapping[str, Any]) -> JobOutcome:
    """Run ``fn(path, **kwargs)``; a failure becomes the outcome's one-line error."""
    from benchfit.errors import BenchfitError

    t0 = time.perf_counter()
    try:
        result = fn(path, **kwargs)
    except BenchfitError as e:
        return JobOutcome(index, path, error=_message(path, e), seconds=time.perf_counter() - t0)
    except Exception as e:
        # an unexpected failure on one file must not end a batch of hundreds
        text = f"{type(e).__name__}: {e}"
        return JobOutcome(index, path, error=f"{path}: unexpected {' '.join(text.split())} — "
                                              "report this file with the message as a benchfit bug",
                          seconds=time.perf_counter() - t0)
    return JobOutcome(index, path, result=result, seconds=time.perf_counter() - t0)


def measure_job(path: str | Path, *, channels: Sequence[str] | None = None, harmonics: int = 10,
                sample_rate: float | None = None, with_capture: bool = False,
                force_pulse: bool = False, gain_u_rel: float | None = None,
                on_block: Any = None) -> dict[str, Any]:
    """Load one capture file and measure it (the job of ``benchfit measure``).

    Parameters
    ----------
    path : str or Path
        Capture file (WAV, FLAC, OGG, AIFF or CSV; an audio file's sidecar JSON is applied).
    channels : sequence of str, optional
        Channel names or 1-based numbers to measure (default: all).
    harmonics : int
        Highest harmonic order H (THD over 2…H).
    sample_rate : float, optional
        Sample rate (Hz) for a CSV without a time column.
    with_capture : bool
        Also return what the measurement log stores about the file.
    force_pulse : bool
        Duty cycle and edges even for a wave that is not two-level (``measure --pulse``).
    gain_u_rel : float, optional
        Gain uncertainty for levels in V whose calibration states none (``measure --gain-u``).
    on_block : callable, optional
        For a file measured in blocks (more samples than
        :func:`benchfit.capture.blocks.block_threshold`): called as ``on_block(frames_done,
        frames_total or None)`` after each block.

    Returns
    -------
    dict
        ``{"measurement": Measurement.to_dict(full=True), "capture": {...} or None}``;
        ``capture`` holds ``path``, ``sha256``, ``unit`` (the sidecar's ``"unit"`` key or
        None) and ``metadata`` (the capture's metadata with its input calibration).
    """
    from benchfit.measurement.long_record import is_long_file

    data = _whole_file(path)
    if is_long_file(path, data=data):
        return _measure_job_in_blocks(path, channels=channels, harmonics=harmonics, sample_rate=sample_rate,
                                      with_capture=with_capture, force_pulse=force_pulse, on_block=on_block,
                                      gain_u_rel=gain_u_rel)
    from benchfit.capture.load import load
    from benchfit.measurement.summary import measure

    cap = load(path, sample_rate=sample_rate, data=data)
    del data  # freed before the measurement's large temporaries are allocated
    result = measure(cap, harmonics=harmonics, channels=list(channels) if channels else None,
                     force_pulse=force_pulse, gain_u_rel=gain_u_rel)
    capture = None
    if with_capture:
        meta = dict(cap.metadata)
        meta["calibration"] = cap.calibration.to_dict()
        unit = meta.get("unit")
        capture = {"path": cap.source, "sha256": cap.sha256, "metadata": meta,
                   "unit": unit.strip() if isinstance(unit, str) and unit.strip() else None}
    return {"measurement": result.to_dict(full=True), "capture": capture}


def _whole_file(path: str | Path) -> bytes | None:
    """The bytes of a capture file that may be measured whole, read once (its header, SHA-256 and
    samples then all come from them), or None: a file larger than 8 bytes × the block threshold
    (no format stores a sample in more than 8 bytes, so it is long unless its header says
    otherwise, and is not read whole to find out), or one that cannot be read here (the
    reader then gives its one-line error)."""
    from benchfit.capture.blocks import block_threshold
    from benchfit.capture.load import file_bytes
    from benchfit.errors import CaptureError

    p = Path(path)
    try:
        if not p.is_file() or p.stat().st_size > 8 * block_threshold():
            return None
        return file_bytes(p)
    except (OSError, CaptureError):
        return None


def _measure_job_in_blocks(path: str | Path, *, channels: Sequence[str] | None, harmonics: int,
                           sample_rate: float | None, with_capture: bool, force_pulse: bool,
                           on_block: Any, gain_u_rel: float | None = None) -> dict[str, Any]:
    """:func:`measure_job` for a file too long to hold: read and measured block by block."""
    from benchfit.capture.blocks import BlockReader
    from benchfit.measurement.long_record import measure_long_file

    result = measure_long_file(path, harmonics=harmonics, channels=list(channels) if channels else None,
                               force_pulse=force_pulse, sample_rate=sample_rate, on_block=on_block,
                               gain_u_rel=gain_u_rel)
    capture = None
    if with_capture:
        with BlockReader(path, sample_rate=sample_rate) as reader:
            meta = dict(reader.metadata)
            meta["calibration"] = reader.calibration.to_dict()
        meta["measured_in_blocks"] = True
        unit = meta.get("unit")
        capture = {"path": str(path), "sha256": result.sha256, "metadata": meta,
                   "unit": unit.strip() if isinstance(unit, str) and unit.strip() else None}
    return {"measurement": result.to_dict(full=True), "capture": capture}


def unit_serial(path: str | Path) -> str:
    """Serial of the unit a capture belongs to: the sidecar's ``"unit"`` key, else the file stem.

    Raises
    ------
    CaptureError
        The sidecar is unreadable, or its ``"unit"`` is not a non-empty string.
    """
    from benchfit.capture.sidecar import read_sidecar, sidecar_path
    from benchfit.errors import CaptureError

    p = Path(path)
    data = read_sidecar(p) if p.is_file() else None
    if data is not None and "unit" in data:
        unit = data["unit"]
        if not isinstance(unit, str) or not unit.strip():
            raise CaptureError(f"{sidecar_path(p)}: 'unit' must be the unit's serial as a non-empty string, "
                               f"got {unit!r} — fix it, or remove the key to use the file name {p.stem!r}")
        return unit.strip()
    return p.stem


def report_job(path: str | Path, *, spec: str | Path, out_dir: str | Path, fit: Any = None,
               operator: str | None = None, with_log_entry: bool = False,
               with_figures: bool = True, channel_map: Mapping[str, str] | None = None,
               sample_rate: float | None = None) -> dict[str, Any]:
    """Judge one capture as its own unit and write its report (the job of ``report --each``).

    Parameters
    ----------
    path : str or Path
        The unit's as-left capture; the serial comes from :func:`unit_serial`.
    spec : str or Path
        Spec TOML file.
    out_dir : str or Path
        Directory for the report files.
    fit : FitOptions, optional
        Fit options (see :func:`benchfit.report.assemble.run_unit`).
    operator : str, optional
        Who measured.
    with_log_entry : bool
        Also return what the measurement log stores about the run (the keyword arguments
        of :func:`benchfit.log.store.append_run`); the job itself never writes the log, so
        that a batch appends from one process.
    with_figures : bool
        Draw the report's figures.
    channel_map : mapping, optional
        Spec channel name → capture channel (``report --channel output=2``).
    sample_rate : float, optional
        Sample rate in Hz of a CSV capture without a time column.

    Returns
    -------
    dict
        ``{"file", "unit", "verdict", "exit_code", "html", "json", "log_entry"}``
        (``log_entry`` None unless asked for).
    """
    from benchfit.report.assemble import run_unit

    unit = unit_serial(path)
    res = run_unit([path], unit=unit, spec=spec, operator=operator, out_dir=out_dir, fit=fit,
                   log_path=None, with_figures=with_figures, defer_log=with_log_entry,
                   channel_map=channel_map, sample_rate=sample_rate)
    return {"file": str(path), "unit": unit, "verdict": res.verdict, "exit_code": res.exit_code,
            "html": str(res.html_path), "json": str(res.json_path),
            "log_entry": None if res.log_entry is None else dict(res.log_entry)}


def _worker_init() -> None:
    """Workers leave Ctrl-C to the parent, which cancels the batch, and keep freed memory
    (:func:`keep_freed_memory`; a forked worker has it from the parent already)."""
    import signal

    signal.signal(signal.SIGINT, signal.SIG_IGN)
    keep_freed_memory()


#: glibc ``mallopt`` parameters (malloc.h)
_M_TRIM_THRESHOLD, _M_MMAP_THRESHOLD = -1, -3


def keep_freed_memory() -> bool:
    """Let this process's C heap keep the memory a file's measurement frees, for the next file.

    Measuring a 1 s, 48 kHz capture allocates tens of arrays of a few hundred kB; glibc's
    malloc may serve each from a fresh ``mmap`` (or trim the heap after it) and the kernel then
    zeroes every page again on first touch. With the mmap threshold at 32 MiB and the trim
    threshold at 128 MiB (``mallopt``) the pages are reused. Measured on the 2-core development
    machine at a load of 2.5–3 (other sessions), 200 such files: ``measure_job`` in a loop
    1,478 → 0.4 minor page faults a file and 10.1 → 6.2–6.4 ms of CPU time a file (the same
    thresholds set through glibc's environment variables); ``run_jobs(jobs=1)`` 466 → 6 faults
    and 1.26–1.33 → 0.12–0.18 ms of system time a file. Forked workers faulted 47 times a file
    either way. The cost is up to 128 MiB of freed heap held until the process ends, which a
    batch ends soon. Elsewhere than glibc nothing is
    changed. True when the setting took.
    """
    import ctypes

    try:
        libc = ctypes.CDLL(None)
        mallopt = libc.mallopt
    except (OSError, AttributeError):
        return False
    return bool(mallopt(_M_MMAP_THRESHOLD, 32 << 20)) and bool(mallopt(_M_TRIM_THRESHOLD, 128 << 20))


# --- running ---------------------------------------------------------------------------------

#: environment variables that set the thread count of numpy's linear-algebra libraries
_THREAD_VARIABLES = ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS", "BLIS_NUM_THREADS")


@contextmanager
def _thread_limits(threads: int) -> Iterator[None]:
    """Set the BLAS/OpenMP thread variables that the user has not set, for processes started
    inside the block, and restore the environment afterwards.

    Each worker otherwise starts one BLAS thread per CPU: two workers on two cores then
    run four busy threads, and the measured batch ran 2× slower than in one process
    (scripts/bench_batch.py). Variables already set by the user are left as they are.
    """
    added = [name for name in _THREAD_VARIABLES if name not in os.environ]
    for name in added:
        os.environ[name] = str(threads)
    try:
        yield
    finally:
        for name in added:
            os.environ.pop(name, None)


def prefer_one_blas_thread() -> bool:
    """Ask numpy's BLAS/OpenMP libraries for one thread, if numpy is not loaded yet.

    Called by ``benchfit measure`` and ``benchfit report`` before anything imports numpy
    (the thread count is read when the library loads). The measurement's matrix products
    are small: on the 2-core development machine, with other processes running, measuring
    10 s of 48 kHz stereo took a median 460 ms with one BLAS thread per CPU and 80–90 ms
    with one thread; with the machine otherwise idle one thread was still ~10 % faster.
    Variables the user has set are left alone.

    Returns
    -------
    bool
        True when the variables could still take effect.
    """
    if "numpy" in sys.modules:
        return False
    for name in _THREAD_VARIABLES:
        os.environ.setdefault(name, "1")
    return True


def single_threaded() -> bool:
    """True when this process runs exactly one thread, counting the threads of C libraries.

    On Linux every thread of the process, Python's or a library's (a BLAS pool, an audio
    callback), is an entry of ``/proc/self/task``. Elsewhere that count is not available
    and the answer is False.
    """
    import threading

    if threading.active_count() != 1:
        return False
    try:
        return len(os.listdir("/proc/self/task")) == 1
    except OSError:
        return False


def _start_method(method: StartMethod) -> str:
    """The start method ``method`` stands for: ``"auto"`` is ``fork`` when this process has
    one thread (:func:`single_threaded`), else ``forkserver`` (``spawn`` where that is missing)."""
    import multiprocessing

    if method not in get_args(StartMethod):
        raise ValueError(f"start method {method!r} is not one of {get_args(StartMethod)}")
    available = multiprocessing.get_all_start_methods()
    chosen: str = method
    if method == "auto":
        chosen = "fork" if "fork" in available and single_threaded() else "forkserver"
    if chosen == "forkserver" and "forkserver" not in available:
        return "spawn"
    return chosen


def _context(method: str, preload: Sequence[str]):
    import multiprocessing

    ctx = multiprocessing.get_context(method)
    if method == "forkserver":
        # takes effect when the server starts (the first pool of this process)
        ctx.set_forkserver_preload(list(preload))
    return ctx


def _preload_here(preload: Sequence[str]) -> bool:
    """Import ``preload`` in this process before the workers are forked from it, when this
    process has asked for one BLAS thread (every variable of :data:`_THREAD_VARIABLES` is
    ``"1"``, as :func:`prefer_one_blas_thread` sets them): each forked worker then starts with
    the modules loaded instead of importing them itself. Otherwise (a caller whose numpy would
    load a thread pool) nothing is imported here. A module that fails to import is skipped
    (the job reports it). True when something was imported.

    Two workers importing the measurement modules each spent ~0.14 s of CPU time on it
    (imports and the first file's lazy imports), the same again as the in-process run:
    CPU time a loaded machine does not have (scripts/bench_batch.py reports it).
    """
    import importlib

    if any(os.environ.get(name) != "1" for name in _THREAD_VARIABLES):
        return False
    missing = [name for name in preload if name not in sys.modules]
    for name in missing:
        with suppress(Exception):
            importlib.import_module(name)
    return bool(missing)


def _take(counter: Any, n: int) -> int | None:
    """The index of the batch's next file, or None when all ``n`` have been taken. One shared
    counter: whoever is free takes the next file."""
    with counter.get_lock():
        i = int(counter.value)
        if i >= n:
            return None
        counter.value = i + 1
    return i


#: what a worker sends when it has found no file left to take
_ROUND_DONE = "round done"


def _worker_main(conn: Any, counter: Any) -> None:
    """A worker process: for each batch sent to it (``(job, files, kwargs)``; None ends it),
    take files from the shared counter, send back each :class:`JobOutcome`, then
    :data:`_ROUND_DONE`."""
    _worker_init()
    while True:
        task = conn.recv()
        if task is None:
            return
        job, files, kw = task
        while (i := _take(counter, len(files))) is not None:
            outcome = _guarded(i, files[i], job, kw)
            try:
                conn.send(outcome)
            except Exception as e:  # a result that will not pickle (nothing was sent: send pickles first)
                conn.send(JobOutcome(i, files[i], error=f"{files[i]}: the worker could not hand the result "
                                                        f"back ({type(e).__name__}: {e}) — run it again with "
                                                        "--jobs 1", seconds=outcome.seconds))
        conn.send(_ROUND_DONE)


class _Crew:
    """The worker processes of a pool, each with its pipe, and the file counter they share with
    this process (a ``multiprocessing`` Value)."""

    def __init__(self, ctx: Any, workers: int) -> None:
        self.counter = ctx.Value("q", 0)
        self.pipes: list[Any] = []
        self.procs: list[Any] = []
        for _ in range(workers):
            here, there = ctx.Pipe()
            proc = ctx.Process(target=_worker_main, args=(there, self.counter), daemon=True)
            proc.start()
            there.close()
            self.pipes.append(here)
            self.procs.append(proc)

    def stop(self) -> None:
        """Let every worker end after its batch (normal exit)."""
        for conn, proc in zip(self.pipes, self.procs):
            with suppress(OSError):
                conn.send(None)
        for proc in self.procs:
            proc.join(timeout=30)

    def kill(self) -> None:
        """Stop every worker now (SIGTERM): what it was doing is dropped."""
        for proc in self.procs:
            with suppress(Exception):
                proc.terminate()
        for proc in self.procs:  # gone before the caller cleans up after them
            with suppress(Exception):
                proc.join(timeout=5)


class WorkerPool:
    """Where a batch's jobs run: this process and ``workers − 1`` worker processes started by
    ``start_method``, or this process alone (``workers`` 1, ``start_method`` ``"in-process"``).
    Made by :func:`worker_pool`."""

    def __init__(self, workers: int, start_method: str, crew: _Crew | None = None) -> None:
        self.workers, self.start_method, self._crew = workers, start_method, crew

    def run(self, job: Callable[..., Any], files: Sequence[Path], *, kwargs: Mapping[str, Any] | None = None,
            on_outcome: Callable[[JobOutcome], None] | None = None) -> list[JobOutcome]:
        """Run ``job(path, **kwargs)`` for every file; see :func:`run_jobs`.

        This process takes files from the same counter as the workers and, between its own
        files, hands on what the workers have sent; so no process waits while files are left,
        and a worker starved of CPU by a busy machine only means this process takes more files.
        """
        kw = dict(kwargs or {})
        done: list[JobOutcome] = []

        def notify(outcome: JobOutcome) -> None:
            done.append(outcome)
            if on_outcome is not None:
                on_outcome(outcome)

        crew = self._crew
        with _interrupt_between_jobs() as interrupted:
            if crew is None:
                for i, path in enumerate(files):
                    notify(_guarded(i, path, job, kw))
                    interrupted()
                return done
            crew.counter.value = 0
            busy = {k for k, conn in enumerate(crew.pipes) if _send(conn, (job, list(files), kw))}
            while True:
                busy -= _hand_on(crew, busy, files, notify, wait_s=0.0)
                mine = _take(crew.counter, len(files))
                if mine is None:
                    break
                notify(_guarded(mine, files[mine], job, kw))
                interrupted()
            while busy:
                busy -= _hand_on(crew, busy, files, notify, wait_s=_POLL_S)
                interrupted()
        seen = {o.index for o in done}
        for i in range(len(files)):  # taken by a worker that died before it sent the outcome
            if i not in seen:
                notify(JobOutcome(i, files[i], error=f"{files[i]}: the worker process failed — run it again "
                                                     "with --jobs 1"))
        return done


#: how long this process waits on the workers at a time before it looks for a Ctrl-C (s)
_POLL_S = 0.1


@contextmanager
def _interrupt_between_jobs() -> Iterator[Callable[[], None]]:
    """Take a Ctrl-C in this process between jobs, not inside one; yields the check to call
    after each job (it raises KeyboardInterrupt when one came).

    A KeyboardInterrupt raised inside a C library's callback (soundfile reads a file from
    memory through cffi callbacks) is printed as "Exception ignored" and lost, and the batch
    went on to the end. So the first Ctrl-C only sets a flag; a second one raises at once.
    Main thread only (elsewhere signals are not delivered, and nothing changes).
    """
    import signal
    import threading

    pending: list[int] = []

    def check() -> None:
        if pending:
            raise KeyboardInterrupt

    if threading.current_thread() is not threading.main_thread():
        yield check
        return

    def on_sigint(signum: int, frame: Any) -> None:
        if pending:
            raise KeyboardInterrupt
        pending.append(signum)
        sys.stderr.write("\nstopping after the file in hand — Ctrl-C again to stop at once\n")

    previous = signal.signal(signal.SIGINT, on_sigint)
    try:
        yield check
    finally:
        signal.signal(signal.SIGINT, previous)


def _send(conn: Any, message: Any) -> bool:
    """Send ``message`` to a worker; False when the worker is gone."""
    try:
        conn.send(message)
    except OSError:
        return False
    return True


def _hand_on(crew: _Crew, busy: set[int], files: Sequence[Path], notify: Callable[[JobOutcome], None], *,
             wait_s: float) -> set[int]:
    """Pass every outcome the busy workers have sent to ``notify``, waiting up to ``wait_s`` for
    a message or a worker's end first. Returns the workers that finished the batch (or died)."""
    from multiprocessing.connection import wait

    finished: set[int] = set()
    if not busy:
        return finished
    conns = [crew.pipes[k] for k in busy]
    ready = wait(conns + [crew.procs[k].sentinel for k in busy], timeout=wait_s)
    for k in busy:
        conn, proc = crew.pipes[k], crew.procs[k]
        if conn not in ready and proc.sentinel not in ready:
            continue
        try:
            while conn.poll():
                message = conn.recv()
                if message == _ROUND_DONE:
                    finished.add(k)
                    break
                notify(message)
        except (EOFError, OSError):
            finished.add(k)  # it died; what it had taken is reported as failed at the end
            continue
        if k not in finished and not proc.is_alive() and not conn.poll():
            finished.add(k)
    return finished


@contextmanager
def worker_pool(jobs: int, n_files: int, *, start_method: StartMethod = "auto",
                preload: Sequence[str] = MEASURE_PRELOAD) -> Iterator[WorkerPool]:
    """Start the worker processes for a batch of ``n_files`` files; stop them on the way out.

    ``jobs`` processes work on the batch: this one and ``jobs − 1`` workers, all taking the next
    file from one shared counter (:meth:`WorkerPool.run`). Enter it before this process starts any
    thread (a progress bar's refresh thread) or opens a log connection: with
    ``start_method="auto"`` the workers are then forked from this process, which costs nothing,
    while ``forkserver`` first starts a server interpreter that imports the measurement modules
    (~0.35 s before the first worker runs; scripts/bench_batch.py). ``fork`` is taken only when
    this process runs exactly one thread (:func:`single_threaded`): a fork copies locks held by
    other threads, and the child can deadlock on them. The pool starts no thread of its own, so
    the fork-with-threads DeprecationWarning of Python 3.12+ has no cause to fire. Workers never
    touch the log: this process writes it. Numpy loaded with one BLAS thread
    (:func:`prefer_one_blas_thread`) adds no thread; loaded with a BLAS pool, it does, and the
    fork server is used.

    On the way out the workers end after the batch; on an exception (Ctrl-C) they are
    terminated and what they were doing is dropped.

    Parameters
    ----------
    jobs : int
        Processes (≥ 1) working on the batch, this one included; 1 runs the jobs in this
        process only. A ceiling: no more processes than files or than :func:`default_jobs`.
    n_files : int
        Number of files of the batch.
    start_method : {"auto", "forkserver", "spawn"}
        How the workers are started.
    preload : sequence of str
        Modules the fork server imports before forking workers (only the first pool of a
        process starts the server; a module that fails to import is skipped by it), and that
        this process imports before forking (:func:`_preload_here`).
    """
    if jobs < 1:
        raise ValueError(f"jobs must be ≥ 1, got {jobs}")
    workers = min(jobs, default_jobs(), n_files)
    keep_freed_memory()  # for the jobs run here, and inherited by forked workers
    if workers <= 1:
        yield WorkerPool(1, "in-process")
        return

    method = _start_method(start_method)
    if method == "fork" and _preload_here(preload):
        method = _start_method(start_method)  # fork only if the imports started no thread
    # the workers inherit the thread limits set here, before a forkserver/spawn worker loads numpy
    with _thread_limits(max(1, default_jobs() // workers)):
        crew = _Crew(_context(method, preload), workers - 1)
    try:
        yield WorkerPool(workers, method, crew)
    except BaseException:
        # Ctrl-C (or an error in on_outcome): stop now. The workers ignore SIGINT, so the jobs
        # they are running would otherwise finish (and write their files) long after this
        # process gave up on them; terminate them (SIGTERM).
        crew.kill()
        raise
    crew.stop()


def run_jobs(job: Callable[..., Any], files: Sequence[Path], *, jobs: int,
             kwargs: Mapping[str, Any] | None = None,
             on_outcome: Callable[[JobOutcome], None] | None = None,
             start_method: StartMethod = "auto",
             preload: Sequence[str] = MEASURE_PRELOAD) -> list[JobOutcome]:
    """Run ``job(path, **kwargs)`` for every file, ``jobs`` at a time.

    The same as ``with worker_pool(...) as pool: pool.run(...)``; a caller that starts a
    thread of its own during the batch (a progress bar) enters :func:`worker_pool` first.

    Parameters
    ----------
    job : callable
        A top-level (picklable) function of a module that is cheap to import.
    files : sequence of Path
        The files, one job each.
    jobs : int
        Worker processes (≥ 1); 1 runs every job in this process, one after the other.
        More workers than files are not started.
    kwargs : mapping, optional
        Keyword arguments for every job (must be picklable).
    on_outcome : callable, optional
        Called in this process with each :class:`JobOutcome` as it completes.
    start_method : {"auto", "forkserver", "spawn"}
        How worker processes are started (see :func:`worker_pool`).
    preload : sequence of str
        Modules the fork server imports before forking workers.
    Returns
    -------
    list of JobOutcome
        In completion order.
    """
    with worker_pool(jobs, len(files), start_method=start_method, preload=preload) as pool:
        return pool.run(job, files, kwargs=kwargs, on_outcome=on_outcome)


class BatchProgress:
    """A running batch's progress bar: :meth:`advance` after each file, :meth:`say` for a line."""

    def __init__(self, progress, task) -> None:
        self._progress, self._task = progress, task

    def advance(self, name: str) -> None:
        self._progress.update(self._task, advance=1, description=name)

    def say(self, line: str) -> None:
        """Print one line on stderr above the bar."""
        self._progress.console.print(line, markup=False, soft_wrap=True)


@contextmanager
def progress_bar(label: str, total: int, notes: Sequence[str] = ()) -> Iterator[BatchProgress]:
    """A rich progress bar on stderr for a batch of ``total`` files (transient, one line),
    after printing each of ``notes`` as a ``note:`` line.

    The bar is drawn only when stderr is a terminal. stdout is redirected through the bar
    only when stdout is itself a terminal, so that piped output (``--json > batch.jsonl``)
    is never routed to stderr.
    """
    from rich.console import Console
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn

    console = Console(stderr=True, highlight=False, soft_wrap=True, emoji=False)
    to_tty = bool(getattr(sys.stdout, "isatty", lambda: False)())
    with Progress(TextColumn(label), BarColumn(), MofNCompleteColumn(), TimeElapsedColumn(),
                  TextColumn("{task.description}"), console=console, transient=True,
                  redirect_stdout=to_tty, redirect_stderr=False, disable=not console.is_terminal) as progress:
        bar = BatchProgress(progress, progress.add_task("", total=total))
        for note in notes:
            bar.say(f"note: {note}")
        yield bar

@contextmanager
def block_progress(path: str | Path) -> Iterator[Callable[[int, int | None], None] | None]:
    """A rich progress bar on stderr (transient) for one file measured in blocks; yields the
    ``on_block(frames_done, frames_total)`` callback for :func:`measure_job`, or None when the
    file is measured whole. Drawn only when stderr is a terminal."""
    from benchfit.measurement.long_record import is_long_file

    if not is_long_file(path):
        yield None
        return
    from rich.console import Console
    from rich.progress import BarColumn, Progress, TaskProgressColumn, TextColumn, TimeRemainingColumn

    console = Console(stderr=True, highlight=False, soft_wrap=True, emoji=False)
    with Progress(TextColumn("measuring in blocks"), BarColumn(), TaskProgressColumn(), TimeRemainingColumn(),
                  TextColumn("{task.description}"), console=console, transient=True, redirect_stdout=False,
                  redirect_stderr=False, disable=not console.is_terminal) as progress:
        task = progress.add_task(Path(path).name, total=None)

        def on_block(done: int, total: int | None) -> None:
            progress.update(task, completed=done, total=total)

        yield on_block
