"""No error raised by the computing packages quotes a command-line flag.

fit/, design/ and measurement/ are called from Python too: their errors name the parameters
(``fix: unknown part 'l'``), and the command modules translate them to options (project
convention, no outside source).
"""

from __future__ import annotations

import ast
import re
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1] / "benchfit"
FLAG = re.compile(r"(^|[\s(])--[a-z]")


@pytest.mark.parametrize("package", ["fit", "design", "measurement"])
def test_no_raised_error_quotes_a_flag(package):
    bad = []
    for path in sorted((ROOT / package).glob("*.py")):
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.Raise) and node.exc is not None:
                for sub in ast.walk(node.exc):
                    if isinstance(sub, ast.Constant) and isinstance(sub.value, str) and FLAG.search(sub.value):
                        bad.append(f"{path.name}:{sub.lineno}: {sub.value!r}")
    assert not bad, bad


def test_the_check_finds_a_flag():
    # the pattern the test relies on: a flag after a space or bracket, not a dash in prose
    assert FLAG.search("— pass --fix L=…") and FLAG.search("(--rate)")
    assert not FLAG.search("0.5 -- 1.0") and not FLAG.search("two-channel")
