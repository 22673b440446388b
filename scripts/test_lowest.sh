#!/usr/bin/env bash
# Run the test suite with the lowest dependency versions pyproject.toml allows
# (constraints-lowest.txt) in a throw-away virtual environment, through scripts/test.sh (the same
# Debian packages and PostgreSQL server). Arguments go to pytest. CI runs it after the README's
# test command (.ci/run). Takes a few minutes (downloads the old wheels, then the whole suite).
set -euo pipefail
cd "$(dirname "$0")/.."
if [ -n "${BENCHFIT_LOWEST_VENV:-}" ]; then
  venv="$BENCHFIT_LOWEST_VENV"  # kept for the next run
else
  tmp="$(mktemp -d)"
  venv="$tmp/lowest"
  trap 'rm -rf "$tmp"' EXIT
fi
[ -x "$venv/bin/python" ] || python3 -m venv "$venv"
BENCHFIT_PYTHON="$venv/bin/python" BENCHFIT_CONSTRAINTS=constraints-lowest.txt \
  ./scripts/test.sh -p no:cacheprovider "$@"
