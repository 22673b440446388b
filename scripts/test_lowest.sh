#!/usr/bin/env bash
# Run the test suite with the lowest dependency versions pyproject.toml allows
# (constraints-lowest.txt) in a throw-away virtual environment. Arguments go to pytest.
# Takes a few minutes (downloads the old wheels, then the whole suite).
set -euo pipefail
cd "$(dirname "$0")/.."
venv="${BENCHFIT_LOWEST_VENV:-$(mktemp -d)/lowest}"
[ -x "$venv/bin/python" ] || python3 -m venv "$venv"
"$venv/bin/python" -m pip install --quiet --prefer-binary -c constraints-lowest.txt '.[test]'
# the checkout, not the installed copy, is what runs
PYTHONPATH="$PWD" "$venv/bin/python" -m pytest -q -p no:cacheprovider "$@"
