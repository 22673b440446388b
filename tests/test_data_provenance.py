"""Test data keep the provenance their READMEs record: each file is described in a
tests/data/README*.md, and every SHA-256 written there matches the file's bytes (FIPS 180-4
SHA-256, computed by hashlib)."""

from __future__ import annotations

import hashlib
import re
from pathlib import Path

DATA = Path(__file__).resolve().parent / "data"
#: a table row naming a file in backticks and giving its 64-hex-digit SHA-256
_ROW = re.compile(r"^\|\s*`([^`]+)`.*?\b([0-9a-f]{64})\b", re.M)


def _recorded() -> dict[str, tuple[str, str]]:
    sums: dict[str, tuple[str, str]] = {}
    for readme in sorted(DATA.glob("README*.md")):
        for name, digest in _ROW.findall(readme.read_text(encoding="utf-8")):
            sums[name] = (digest, readme.name)
    return sums


def test_recorded_sha256_sums_match_the_files():
    sums = _recorded()
    assert sums, "no SHA-256 recorded in tests/data/README*.md"
    wrong = {}
    for name, (digest, readme) in sums.items():
        path = DATA / name
        assert path.is_file(), f"{readme} records {name}, which is not in tests/data"
        actual = hashlib.sha256(path.read_bytes()).hexdigest()
        if actual != digest:
            wrong[name] = (readme, digest, actual)
    assert not wrong, f"changed since their README recorded them (file: readme, recorded, now): {wrong}"


def test_every_data_file_is_described_in_a_readme():
    text = "\n".join(p.read_text(encoding="utf-8") for p in DATA.glob("README*.md"))
    undescribed = [p.name for p in DATA.iterdir()
                   if p.is_file() and not p.name.startswith("README") and p.name not in text]
    assert not undescribed, f"tests/data files without provenance in a README: {undescribed}"
