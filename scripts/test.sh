#!/usr/bin/env bash
# Install what the test suite needs and run it. Used by the README and by CI (.ci/run).
# BENCHFIT_PYTHON names another interpreter (a virtual environment's) to install into and test
# with, BENCHFIT_CONSTRAINTS a pip constraints file for that install (scripts/test_lowest.sh).
#
# Debian packages (installed with apt-get when missing and we are root or have sudo):
#   ngspice            independent circuit simulator (fit and trim checks)
#   pulseaudio(-utils) virtual sound card for the live-capture tests (paplay, pactl)
#   libportaudio2      PortAudio, used by sounddevice
#   libasound2-plugins ALSA → PulseAudio bridge
#   libsndfile1        codec library behind soundfile
#   sox                independent RMS/peak cross-check
#   chromium           renders the HTML report headless
#   poppler-utils      pdftotext, to read the printed report
#   postgresql         a throw-away server for the shared-log tests (scripts/pg_throwaway.sh)
set -euo pipefail
cd "$(dirname "$0")/.."

packages="ngspice pulseaudio pulseaudio-utils libportaudio2 libasound2-plugins libsndfile1 sox chromium poppler-utils postgresql"
missing=""
if command -v dpkg >/dev/null 2>&1; then
  for p in $packages; do
    dpkg -s "$p" >/dev/null 2>&1 || missing="$missing $p"
  done
fi
if [ -n "$missing" ] && [ "$(id -u)" -ne 0 ] && ! command -v sudo >/dev/null 2>&1; then
  # a developer without root or sudo: run what can run (tests of absent programs skip outside CI)
  echo "note: Debian packages missing:$missing — not root and no sudo, so not installed" >&2
elif [ -n "$missing" ]; then
  sudo=""
  [ "$(id -u)" -eq 0 ] || sudo="sudo"
  echo "installing Debian packages:$missing" >&2
  $sudo env DEBIAN_FRONTEND=noninteractive apt-get update -qq
  $sudo env DEBIAN_FRONTEND=noninteractive apt-get install -y -qq $missing
fi

py="${BENCHFIT_PYTHON:-python3}"
"$py" -m pip install --quiet --prefer-binary ${BENCHFIT_CONSTRAINTS:+-c "$BENCHFIT_CONSTRAINTS"} -e '.[test]'

# A throw-away PostgreSQL cluster (Unix socket only, in a temporary folder, as an unprivileged
# user), removed on exit even when the tests fail. Without one the shared-log tests start
# their own; under CI they fail rather than skip when no server can be started.
pg_dir="$(mktemp -d /tmp/benchfit-pg.XXXXXX)"  # short and open to the server user (socket path limit)
trap 'bash scripts/pg_throwaway.sh stop "$pg_dir" || true' EXIT
trap 'exit 130' INT
trap 'exit 143' TERM
if pg_url="$(BENCHFIT_PG_PORT=$((50000 + RANDOM % 10000)) bash scripts/pg_throwaway.sh start "$pg_dir")"; then
  export BENCHFIT_TEST_PG="$pg_url" BENCHFIT_TEST_PGDIR="$pg_dir"
else
  echo "note: no PostgreSQL server started — the shared-log tests will try to start their own" >&2
fi
"$py" -m pytest -q "$@"
