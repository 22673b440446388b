"""--jobs is a ceiling: no more processes than the CPUs this process may use
(benchfit.cli.batch.usable_cpus, default_jobs, worker_pool).

The affinity mask is what ``os.sched_getaffinity`` reports (POSIX sched_getaffinity(2)); the CPU
quota is cgroup v2's ``cpu.max``, "<quota> <period>" in µs or "max <period>" (Linux kernel
documentation, Documentation/admin-guide/cgroup-v2.rst, "cpu.max").
"""

from __future__ import annotations

import os

import pytest


@pytest.mark.parametrize("text, expected", [("max 100000\n", None), ("150000 100000\n", 2),
                                            ("100000 100000\n", 1), ("20000 100000\n", 1),
                                            ("400000 100000\n", 4), ("garbage\n", None), ("", None)])
def test_the_cgroup_quota_in_cpus(tmp_path, text, expected):
    from benchfit.cli.batch import _cgroup_cpu_quota

    f = tmp_path / "cpu.max"
    f.write_text(text, encoding="ascii")
    assert _cgroup_cpu_quota(str(f)) == expected


def test_no_cgroup_file_is_no_quota(tmp_path):
    from benchfit.cli.batch import _cgroup_cpu_quota

    assert _cgroup_cpu_quota(str(tmp_path / "missing")) is None


def test_usable_cpus_is_the_affinity_capped_by_the_quota(monkeypatch):
    from benchfit.cli import batch

    monkeypatch.setattr(os, "sched_getaffinity", lambda pid: {0, 1, 2, 3}, raising=False)
    monkeypatch.setattr(batch, "_cgroup_cpu_quota", lambda: None)
    assert batch.usable_cpus() == 4
    monkeypatch.setattr(batch, "_cgroup_cpu_quota", lambda: 2)
    assert batch.usable_cpus() == 2
    monkeypatch.setattr(os, "sched_getaffinity", lambda pid: {3}, raising=False)
    assert batch.usable_cpus() == 1


@pytest.mark.skipif(not hasattr(os, "sched_getaffinity"), reason="affinity masks are a Linux call")
def test_usable_cpus_follows_this_process_affinity():
    from benchfit.cli.batch import _cgroup_cpu_quota, usable_cpus

    quota = _cgroup_cpu_quota()
    assert usable_cpus() == min(len(os.sched_getaffinity(0)), quota or 10**6)


def test_jobs_above_the_usable_cpus_run_no_more_processes(monkeypatch, tmp_path):
    from benchfit.cli import batch

    monkeypatch.setattr(batch, "usable_cpus", lambda: 1)
    with batch.worker_pool(4, 10) as pool:
        assert (pool.workers, pool.start_method) == (1, "in-process")
    monkeypatch.setattr(batch, "usable_cpus", lambda: 2)
    with batch.worker_pool(4, 10) as pool:
        assert pool.workers == 2
    with batch.worker_pool(4, 1) as pool:  # no more processes than files either
        assert pool.workers == 1
