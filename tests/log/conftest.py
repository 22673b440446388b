"""A real PostgreSQL server for the shared-log tests.

scripts/test.sh starts a throw-away cluster (scripts/pg_throwaway.sh) and exports
BENCHFIT_TEST_PG (its admin URL) and BENCHFIT_TEST_PGDIR (its folder). Without them (pytest
run by hand) the fixture starts its own cluster the same way and removes it at the end; if
no server can be started the tests are skipped — except under CI, where that is a failure.
"""

from __future__ import annotations

import itertools
import os
import subprocess
import tempfile
from dataclasses import dataclass
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
SCRIPT = ROOT / "scripts" / "pg_throwaway.sh"
_names = itertools.count(1)


@dataclass
class PgServer:
    admin_url: str
    folder: Path

    def url(self, dbname: str) -> str:
        return self.admin_url.replace("/postgres?", f"/{dbname}?", 1)

    def create_db(self) -> str:
        import psycopg

        name = f"bf_test_{os.getpid()}_{next(_names)}"
        with psycopg.connect(self.admin_url, autocommit=True) as con:
            con.execute(f"DROP DATABASE IF EXISTS {name}")
            con.execute(f"CREATE DATABASE {name}")
        return self.url(name)

    def pause(self) -> None:
        subprocess.run(["bash", str(SCRIPT), "pause", str(self.folder)], check=True, timeout=60)

    def resume(self) -> None:
        subprocess.run(["bash", str(SCRIPT), "resume", str(self.folder)], check=True, timeout=60)


@pytest.fixture(scope="session")
def pg_server():
    url, folder = os.environ.get("BENCHFIT_TEST_PG"), os.environ.get("BENCHFIT_TEST_PGDIR")
    if url and folder:
        yield PgServer(url, Path(folder))
        return
    # /tmp: short (a socket path has a length limit) and reachable by the unprivileged server user
    folder = Path(tempfile.mkdtemp(prefix="bfpg.", dir="/tmp" if os.path.isdir("/tmp") else None))
    env = dict(os.environ, BENCHFIT_PG_PORT=str(50000 + os.getpid() % 10000))
    res = subprocess.run(["bash", str(SCRIPT), "start", str(folder)], capture_output=True, text=True,
                         timeout=120, env=env)
    if res.returncode != 0:
        subprocess.run(["bash", str(SCRIPT), "stop", str(folder)], timeout=60)
        msg = f"no PostgreSQL server could be started: {res.stderr.strip()[-300:]}"
        if os.environ.get("CI"):
            pytest.fail(msg)
        pytest.skip(msg + " — run scripts/test.sh, or install Debian's postgresql")
    try:
        yield PgServer(res.stdout.strip(), folder)
    finally:
        subprocess.run(["bash", str(SCRIPT), "stop", str(folder)], timeout=60)


@pytest.fixture
def pg_url(pg_server, monkeypatch, tmp_path):
    """A fresh, empty database on the test server; the spool goes to this test's folder."""
    monkeypatch.setenv("BENCHFIT_SPOOL", str(tmp_path / "spool"))
    return pg_server.create_db()
