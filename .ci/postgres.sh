#!/usr/bin/env bash
# Start a private PostgreSQL server on loopback for the postgres-marked tests and print its URL
# (`bash .ci/postgres.sh stop` stops it and removes its data directory).
# Installs Debian's postgresql package when the server binaries are missing. The port is
# FOLDSWEEP_PG_PORT (default 54329), or the next free one if something else listens there.
set -euo pipefail
port="${FOLDSWEEP_PG_PORT:-54329}"
data="${FOLDSWEEP_PG_DATA:-/tmp/foldsweep-pg-$port}"
run_as() { if [ "$(id -u)" = 0 ]; then su postgres -s /bin/bash -c "$*"; else bash -c "$*"; fi; }
bindir=$(ls -d /usr/lib/postgresql/*/bin 2>/dev/null | sort -V | tail -n 1 || true)
if [ "${1:-}" = stop ]; then
  if [ -n "$bindir" ] && [ -f "$data/PG_VERSION" ]; then
    run_as "'$bindir/pg_ctl' -D '$data' -m fast stop" >/dev/null 2>&1 || true
  fi
  rm -rf "$data"
  exit 0
fi
if [ -z "$bindir" ] || [ ! -x "$bindir/initdb" ]; then
  export DEBIAN_FRONTEND=noninteractive
  apt-get update -qq >&2
  apt-get install -y -qq postgresql >&2
  bindir=$(ls -d /usr/lib/postgresql/*/bin | sort -V | tail -n 1)
fi
if [ ! -f "$data/PG_VERSION" ]; then
  rm -rf "$data"; mkdir -p "$data"
  [ "$(id -u)" = 0 ] && chown postgres "$data"
  run_as "'$bindir/initdb' -D '$data' -A trust -U postgres" >&2
fi
if run_as "'$bindir/pg_ctl' -D '$data' status" >/dev/null 2>&1; then
  port=$(sed -n 4p "$data/postmaster.pid")  # already running: on the port it was started with
else
  while (: </dev/tcp/127.0.0.1/"$port") 2>/dev/null; do port=$((port + 1)); done  # taken: the next one
  run_as "'$bindir/pg_ctl' -D '$data' -l '$data/server.log' -w -o \"-h 127.0.0.1 -p $port -k /tmp\" start" >&2
fi
run_as "'$bindir/psql' -h 127.0.0.1 -p $port -U postgres -tAc \"SELECT 1 FROM pg_database WHERE datname='foldsweep_test'\"" | grep -q 1 \
  || run_as "'$bindir/createdb' -h 127.0.0.1 -p $port -U postgres foldsweep_test" >&2
echo "postgresql+psycopg://postgres@127.0.0.1:$port/foldsweep_test"
