#!/usr/bin/env bash
# Build benchfit's wheel, install it in a throw-away virtual environment (dependencies from
# this Python's site-packages) and run `benchfit demo` from an empty folder, so the demo must
# find its captures inside the installed package. About half a minute.
set -euo pipefail
cd "$(dirname "$0")/.."
tmp="$(mktemp -d)"
trap 'rm -rf "$tmp"' EXIT
python3 -m pip wheel . --no-deps -q -w "$tmp/dist"
python3 -m venv --system-site-packages "$tmp/venv"
"$tmp/venv/bin/pip" install -q --no-deps "$tmp"/dist/benchfit-*.whl
cd "$tmp"
where="$("$tmp/venv/bin/python" -c 'import benchfit; print(benchfit.__file__)')"
case "$where" in "$tmp/venv/"*) ;; *) echo "benchfit imported from $where, not the wheel" >&2; exit 1;; esac
MPLBACKEND=Agg "$tmp/venv/bin/benchfit" demo --out "$tmp/demo" > "$tmp/demo.log" 2>&1 || {
  tail -30 "$tmp/demo.log" >&2; echo "benchfit demo from the wheel failed" >&2; exit 1; }
"$tmp/venv/bin/benchfit" --version 2>/dev/null || true
echo "ok: benchfit demo ran from the installed wheel ($where)"
