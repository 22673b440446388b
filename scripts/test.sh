#!/usr/bin/env bash
# Install what the test suite needs and run it. Used by the README and by CI (.ci/run).
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
set -euo pipefail
cd "$(dirname "$0")/.."

packages="ngspice pulseaudio pulseaudio-utils libportaudio2 libasound2-plugins libsndfile1 sox chromium poppler-utils"
missing=""
if command -v dpkg >/dev/null 2>&1; then
  for p in $packages; do
    dpkg -s "$p" >/dev/null 2>&1 || missing="$missing $p"
  done
fi
if [ -n "$missing" ]; then
  sudo=""
  [ "$(id -u)" -eq 0 ] || sudo="sudo"
  echo "installing Debian packages:$missing" >&2
  $sudo env DEBIAN_FRONTEND=noninteractive apt-get update -qq
  $sudo env DEBIAN_FRONTEND=noninteractive apt-get install -y -qq $missing
fi

python3 -m pip install --quiet -e '.[test]'
python3 -m pytest -q "$@"
