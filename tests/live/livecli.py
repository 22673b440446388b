"""In-process runner for the live tests' command-line checks (a helper module, not a conftest:
modules named ``conftest`` from two test folders would shadow each other)."""


def run_cli(args, capsys) -> tuple[int, str, str]:
    """Run benchfit's entry point in this process; return (exit code, stdout, stderr)."""
    from benchfit.cli import main

    try:
        main([str(a) for a in args])
        code = 0
    except SystemExit as e:
        code = e.code if isinstance(e.code, int) else (0 if e.code is None else 2)
    out = capsys.readouterr()
    return code, out.out, out.err
