#!/usr/bin/env bash
# A throw-away PostgreSQL cluster for the log tests: Unix socket only, in a temporary folder.
#
#   scripts/pg_throwaway.sh start DIR   initdb + start in DIR (created empty), print the URL
#   scripts/pg_throwaway.sh stop DIR    stop the server and remove DIR
#   scripts/pg_throwaway.sh pause DIR   stop the server, keep DIR (a test of "server away")
#   scripts/pg_throwaway.sh resume DIR  start it again after pause
#
# PostgreSQL refuses to run as root: as root the cluster belongs to the unprivileged user
# $BENCHFIT_PG_OSUSER (default "nobody"); as any other user it runs as that user, no sudo.
# The server listens on no TCP address (listen_addresses=''), only on the socket in DIR;
# authentication is "trust" for local connections of this throw-away cluster only, and
# fsync is off (the data is thrown away; nothing here is a model for a real log server).
set -euo pipefail

pg_bindir() {
  local d
  for d in $(ls -d /usr/lib/postgresql/*/bin 2>/dev/null | sort -V -r); do
    [ -x "$d/initdb" ] && { echo "$d"; return 0; }
  done
  if command -v pg_config >/dev/null 2>&1; then
    d="$(pg_config --bindir)"
    [ -x "$d/initdb" ] && { echo "$d"; return 0; }
  fi
  d="$(dirname "$(command -v initdb 2>/dev/null || echo /nonexistent/initdb)")"
  [ -x "$d/initdb" ] && [ -x "$d/pg_ctl" ] && { echo "$d"; return 0; }
  return 1
}

as_owner() {  # run a command as the cluster's owner
  if [ "$(id -u)" -eq 0 ]; then
    runuser -u "${BENCHFIT_PG_OSUSER:-nobody}" -- "$@"
  else
    "$@"
  fi
}

cmd="${1:-}"; dir="${2:-}"
[ -n "$dir" ] || { echo "usage: $0 start|stop DIR" >&2; exit 2; }
port="${BENCHFIT_PG_PORT:-54329}"
case "$cmd" in
  start)
    bin="$(pg_bindir)" || { echo "error: PostgreSQL server binaries (initdb, pg_ctl) not found — install Debian's postgresql" >&2; exit 1; }
    mkdir -p "$dir"
    if [ "$(id -u)" -eq 0 ]; then chown "${BENCHFIT_PG_OSUSER:-nobody}" "$dir"; fi
    chmod 700 "$dir"
    as_owner "$bin/initdb" -D "$dir/data" -U postgres -A trust -E UTF8 --no-sync >"$dir/initdb.log" 2>&1 \
      || { cat "$dir/initdb.log" >&2; exit 1; }
    echo "-k $dir -p $port -c listen_addresses='' -c fsync=off -c full_page_writes=off -c max_connections=60" \
      >"$dir/options"
    as_owner "$bin/pg_ctl" -D "$dir/data" -l "$dir/server.log" -w -t 30 -o "$(cat "$dir/options")" \
      start >/dev/null || { cat "$dir/server.log" >&2; exit 1; }
    echo "postgresql:///postgres?host=$dir&port=$port&user=postgres"
    ;;
  pause)
    bin="$(pg_bindir)"
    as_owner "$bin/pg_ctl" -D "$dir/data" -m fast -w -t 30 stop >/dev/null
    ;;
  resume)
    bin="$(pg_bindir)"
    as_owner "$bin/pg_ctl" -D "$dir/data" -l "$dir/server.log" -w -t 30 -o "$(cat "$dir/options")" \
      start >/dev/null || { tail -20 "$dir/server.log" >&2; exit 1; }
    ;;
  stop)
    if [ -f "$dir/data/postmaster.pid" ]; then
      bin="$(pg_bindir)" && as_owner "$bin/pg_ctl" -D "$dir/data" -m immediate -w stop >/dev/null 2>&1 || true
    fi
    rm -rf "$dir"
    ;;
  *) echo "usage: $0 start|stop|pause|resume DIR" >&2; exit 2 ;;
esac
