"""The command line follows the ecosystem's habits: --version, shell completion, listed choices, env vars.

Conventions of click/typer programs (typer documentation: "Version CLI Option", "CLI Option
autocompletion", "Enum - Choices", "Environment Variables"); common practice, no other source.
"""

from __future__ import annotations

import re


def _flat(text: str) -> str:
    return " ".join(text.split())


def test_version_prints_the_package_version(run):
    import benchfit

    res = run("--version")
    assert res.returncode == 0
    assert res.stdout.strip() == f"benchfit {benchfit.__version__}"


def test_shell_completion_is_offered(run):
    res = run("--help")
    assert res.returncode == 0
    assert "--install-completion" in res.stdout and "--show-completion" in res.stdout


def test_help_lists_the_choices(run):
    # typer 0.29 writes the choices as <a|b>, older releases as [a|b]
    fit = _flat(run("fit", "--help").stdout)
    assert re.search(r"--model [<\[]lc-lowpass\|ringdown[>\]]", fit)
    assert re.search(r"--method [<\[]auto\|two-channel\|one-channel[>\]]", fit)
    assert re.search(r"--format [<\[]csv\|json[>\]]", _flat(run("log", "export", "--help").stdout))
    assert re.search(r"--model [<\[]lc-lowpass\|ringdown[>\]]", _flat(run("report", "--help").stdout))


def test_help_names_the_environment_variable_of_the_log(run):
    for command in (("log", "list"), ("log", "show"), ("log", "export"), ("log", "stats"), ("report",)):
        assert "[env var: BENCHFIT_LOG]" in _flat(run(*command, "--help").stdout), command


def test_a_choice_is_checked_case_sensitively_and_named(run, tmp_path):
    res = run("log", "export", "--format", "CSV", "--log", str(tmp_path / "log.sqlite"))
    assert res.returncode == 2
    assert res.stderr.startswith("error: --format 'CSV': not one of csv, json")


def test_the_log_is_read_from_the_environment(run, tmp_path, monkeypatch):
    """BENCHFIT_LOG fills --log; a log named there that does not exist is an error naming it."""
    missing = tmp_path / "nowhere" / "log.sqlite"
    monkeypatch.setenv("BENCHFIT_LOG", str(missing))
    res = run("log", "list")
    assert res.returncode == 2 and str(missing) in res.stderr


def test_no_log_wins_over_the_environment(run, tmp_path, monkeypatch):
    """report --no-log with BENCHFIT_LOG set logs nothing and is not a '--log and --no-log' clash."""
    from pathlib import Path

    samples = Path(__file__).resolve().parents[2] / "sample_captures"
    log = tmp_path / "env.sqlite"
    monkeypatch.setenv("BENCHFIT_LOG", str(log))
    res = run("report", str(samples / "hc01_output.flac"), "--unit", "HC-01", "--spec",
              str(samples / "hc_spec.toml"), "--out", str(tmp_path / "r"), "--no-log", "--no-figures")
    assert res.returncode == 0, res.stderr
    assert not log.exists()
