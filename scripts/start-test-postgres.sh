#!/usr/bin/env bash
# Starts a private PostgreSQL cluster for the tests on 127.0.0.1 only, in a folder of its own, and prints the
# connection string the tests read from BITBUDGET_TEST_POSTGRES. Installs Debian's postgresql package when no
# server is on the machine (CI starts on a fresh Debian). Idempotent: a cluster already running in the folder
# is reused. Stop it with scripts/stop-test-postgres.sh.
#
#   eval "$(scripts/start-test-postgres.sh)"   # exports BITBUDGET_TEST_POSTGRES
set -euo pipefail

port="${BITBUDGET_TEST_POSTGRES_PORT:-55432}"
folder="${BITBUDGET_TEST_POSTGRES_DIR:-/tmp/bitbudget-test-postgres}"

bin="$(ls -d /usr/lib/postgresql/*/bin 2>/dev/null | sort -V | tail -n1 || true)"
if [ -z "$bin" ] || [ ! -x "$bin/initdb" ]; then
  echo "installing postgresql from Debian's packages" >&2
  apt-get update -qq >&2
  DEBIAN_FRONTEND=noninteractive apt-get install -y -qq postgresql >/dev/null
  bin="$(ls -d /usr/lib/postgresql/*/bin | sort -V | tail -n1)"
fi

# PostgreSQL refuses to run as root: the cluster belongs to the postgres user (or to whoever runs this).
as_owner() {
  if [ "$(id -u)" = 0 ]; then runuser -u postgres -- "$@"; else "$@"; fi
}

mkdir -p "$folder"
[ "$(id -u)" = 0 ] && chown postgres "$folder"
if [ ! -f "$folder/data/PG_VERSION" ]; then
  as_owner "$bin/initdb" -D "$folder/data" -U bitbudget --auth=trust -E UTF8 >/dev/null
fi

if ! as_owner "$bin/pg_ctl" -D "$folder/data" status >/dev/null 2>&1; then
  # Loopback only, a private port, the socket inside the folder; fsync off: a test database is thrown away.
  as_owner "$bin/pg_ctl" -D "$folder/data" -l "$folder/server.log" -w -t 60 \
    -o "-c listen_addresses=127.0.0.1 -p $port -k $folder -c fsync=off -c synchronous_commit=off -c full_page_writes=off -c max_connections=200" \
    start >/dev/null
fi

as_owner "$bin/psql" -h 127.0.0.1 -p "$port" -U bitbudget -d postgres -tAc "SELECT 1 FROM pg_database WHERE datname = 'bitbudget_test'" | grep -q 1 \
  || as_owner "$bin/createdb" -h 127.0.0.1 -p "$port" -U bitbudget bitbudget_test

echo "export BITBUDGET_TEST_POSTGRES='Host=127.0.0.1;Port=$port;Username=bitbudget;Database=bitbudget_test'"
