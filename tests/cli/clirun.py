"""Result of one benchfit command in the CLI tests (a helper module with a unique name: modules
called ``conftest`` in two test folders would shadow each other when imported by name)."""


class CliResult:
    """Exit code and captured output of one benchfit command."""

    def __init__(self, returncode: int, stdout: str, stderr: str) -> None:
        self.returncode, self.stdout, self.stderr = returncode, stdout, stderr
