"""The packaging keeps its promises: a wheel carries the demo's captures, the licence and one version.

Built with ``pip wheel . --no-deps`` (PyPA's build front end; the build backend and its
metadata fields are PEP 517, PEP 639 for the licence). The whole demo run from an installed
wheel is in scripts/check_wheel.sh (about half a minute, too long for the suite).
"""

from __future__ import annotations

import subprocess
import sys
import zipfile
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent


@pytest.fixture(scope="module")
def wheel(tmp_path_factory) -> Path:
    out = tmp_path_factory.mktemp("wheel")
    res = subprocess.run([sys.executable, "-m", "pip", "wheel", str(ROOT), "--no-deps", "-q", "-w", str(out)],
                         capture_output=True, text=True, timeout=300)
    assert res.returncode == 0, res.stderr[-3000:]
    (found,) = out.glob("benchfit-*.whl")
    return found


def test_wheel_carries_the_sample_captures_licence_and_templates(wheel):
    import benchfit

    with zipfile.ZipFile(wheel) as z:
        names = set(z.namelist())
        meta = z.read(f"benchfit-{benchfit.__version__}.dist-info/METADATA").decode()
    samples = sorted(p.name for p in (ROOT / "sample_captures").iterdir() if p.is_file())
    assert samples, "the checkout has no sample captures"
    missing = [s for s in samples if f"benchfit/sample_captures/{s}" not in names]
    assert not missing, f"not packaged (add the pattern to package-data in pyproject.toml): {missing}"
    assert f"benchfit-{benchfit.__version__}.dist-info/licenses/LICENSE" in names
    assert {"benchfit/report/templates/report.html", "benchfit/report/templates/report.css",
            "benchfit/py.typed"} <= names
    lines = meta.splitlines()
    assert f"Version: {benchfit.__version__}" in lines  # the one version source
    assert "License-Expression: MIT" in lines  # PEP 639


def test_the_demo_finds_the_captures_inside_the_package():
    import benchfit
    from benchfit.cli.demo_cmd import _samples_dir

    where = _samples_dir(None)
    assert where == Path(benchfit.__file__).resolve().parent / "sample_captures"
    assert (where / "hc_spec.toml").is_file()


def test_the_version_is_written_once():
    text = (ROOT / "pyproject.toml").read_text(encoding="utf-8")
    assert 'dynamic = ["version"]' in text and "\nversion = " not in text.split("[tool.setuptools.dynamic]")[0]
