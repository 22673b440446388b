"""--jobs is a ceiling: a busy machine runs the batch in one process (benchfit.cli.batch.jobs_for_load).

The rule is make's --load-average habit (common practice, no source): at a 1-minute load at or above
the CPU count every core is busy, and a pool would only add start-up and hand-over costs.
"""

from __future__ import annotations

import os

import pytest


def test_idle_machine_keeps_the_jobs_asked_for(monkeypatch):
    from benchfit.cli import batch

    monkeypatch.setattr(batch, "default_jobs", lambda: 2)
    assert batch.jobs_for_load(2, load=0.3) == 2
    assert batch.jobs_for_load(3, load=1.9) == 3
    assert batch.jobs_for_load(1, load=0.0) == 1


def test_busy_machine_runs_in_one_process(monkeypatch):
    from benchfit.cli import batch

    monkeypatch.setattr(batch, "default_jobs", lambda: 2)
    assert batch.jobs_for_load(2, load=2.0) == 1
    assert batch.jobs_for_load(4, load=7.5) == 1


@pytest.mark.parametrize("load, expected", [(0.5, 2), (5.0, 1)])
def test_the_load_average_is_read_when_not_given(monkeypatch, load, expected):
    from benchfit.cli import batch

    monkeypatch.setattr(batch, "default_jobs", lambda: 2)
    monkeypatch.setattr(os, "getloadavg", lambda: (load, load, load))
    assert batch.jobs_for_load(2) == expected


def test_no_load_average_keeps_the_jobs(monkeypatch):
    from benchfit.cli import batch

    def missing():
        raise OSError("no load average here")

    monkeypatch.setattr(os, "getloadavg", missing)
    assert batch.jobs_for_load(2) == 2
