"""No message of the computing packages quotes a command-line flag.

capture/, fit/, design/, measurement/, log/, report/ and model/ are called from Python too: their
errors, warnings and notes name the parameters (``fix: unknown part 'l'``, ``fix={'Rload': …}``,
``overwrite=True``, ``device=3``, ``sample_rate=``), and the command modules translate them to
options (benchfit.cli.common.cli_words; project convention, no outside source). Every string literal
outside docstrings is checked, f-strings with their pieces joined; a flag inside a quoted
command line (``'benchfit calibrate gain --rms-u …'``) names a command to run and is allowed.
"""

from __future__ import annotations

import ast
import re
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1] / "benchfit"
FLAG = re.compile(r"(^|[\s(])--[a-z{]")
#: a command line quoted in a message: 'benchfit …'
COMMAND = re.compile(r"'benchfit [^']*'")


def _docstrings(tree: ast.AST) -> set[int]:
    nodes = (ast.Module, ast.ClassDef, ast.FunctionDef, ast.AsyncFunctionDef)
    return {id(n.body[0].value) for n in ast.walk(tree) if isinstance(n, nodes) and n.body
            and isinstance(n.body[0], ast.Expr) and isinstance(n.body[0].value, ast.Constant)}


def _texts(tree: ast.AST) -> list[tuple[int, str]]:
    """(line, text) of every string literal but docstrings; an f-string's fields read as ``{}``."""
    docs, inner, out = _docstrings(tree), set(), []
    for node in ast.walk(tree):
        if isinstance(node, ast.JoinedStr):
            parts = [v.value if isinstance(v, ast.Constant) else "{}" for v in node.values]
            inner.update(id(v) for v in node.values)
            out.append((node.lineno, "".join(map(str, parts))))
    for node in ast.walk(tree):
        if isinstance(node, ast.Constant) and isinstance(node.value, str) and id(node) not in docs | inner:
            out.append((node.lineno, node.value))
    return out


def flagged(source: str) -> list[tuple[int, str]]:
    """The literals of ``source`` that quote a flag outside a quoted command line."""
    return [(line, text) for line, text in _texts(ast.parse(source)) if FLAG.search(COMMAND.sub("", text))]


@pytest.mark.parametrize("package", ["capture", "fit", "design", "measurement", "log", "report", "model"])
def test_no_library_message_quotes_a_flag(package):
    bad = [f"{path.name}:{line}: {text!r}" for path in sorted((ROOT / package).glob("*.py"))
           for line, text in flagged(path.read_text(encoding="utf-8"))]
    assert not bad, bad


def test_the_check_finds_a_flag():
    # the pattern the test relies on: a flag after a space or bracket, not a dash in prose
    assert FLAG.search("— pass --fix L=…") and FLAG.search("(--rate)")
    assert not FLAG.search("0.5 -- 1.0") and not FLAG.search("two-channel")
    src = ('"""Docstring: --fix is fine here."""\n'
           'def f(role):\n    """Also --here."""\n'
           '    a = f"choose another channel with --{role}"\n'
           '    b = "warn (--fix Rload=…)"\n'
           '    c = "run \'benchfit calibrate gain --rms-u …\' again"\n')
    assert [line for line, _ in flagged(src)] == [4, 5]
