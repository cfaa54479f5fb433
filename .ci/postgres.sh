#!/usr/bin/env bash
# Start a private PostgreSQL server on loopback for the postgres-marked tests and print its URL.
# Installs Debian's postgresql package when the server binaries are missing.
set -euo pipefail
port="${FOLDSWEEP_PG_PORT:-54329}"
bindir=$(ls -d /usr/lib/postgresql/*/bin 2>/dev/null | sort -V | tail -n 1 || true)
if [ -z "$bindir" ] || [ ! -x "$bindir/initdb" ]; then
  export DEBIAN_FRONTEND=noninteractive
  apt-get update -qq >&2
  apt-get install -y -qq postgresql >&2
  bindir=$(ls -d /usr/lib/postgresql/*/bin | sort -V | tail -n 1)
fi
data="${FOLDSWEEP_PG_DATA:-/tmp/foldsweep-pg-$port}"
run_as() { if [ "$(id -u)" = 0 ]; then su postgres -s /bin/bash -c "$*"; else bash -c "$*"; fi; }
if [ ! -f "$data/PG_VERSION" ]; then
  rm -rf "$data"; mkdir -p "$data"
  [ "$(id -u)" = 0 ] && chown postgres "$data"
  run_as "'$bindir/initdb' -D '$data' -A trust -U postgres" >&2
fi
if ! run_as "'$bindir/pg_ctl' -D '$data' status" >/dev/null 2>&1; then
  run_as "'$bindir/pg_ctl' -D '$data' -l '$data/server.log' -w -o \"-h 127.0.0.1 -p $port -k /tmp\" start" >&2
fi
run_as "'$bindir/psql' -h 127.0.0.1 -p $port -U postgres -tAc \"SELECT 1 FROM pg_database WHERE datname='foldsweep_test'\"" | grep -q 1 \
  || run_as "'$bindir/createdb' -h 127.0.0.1 -p $port -U postgres foldsweep_test" >&2
echo "postgresql+psycopg://postgres@127.0.0.1:$port/foldsweep_test"
