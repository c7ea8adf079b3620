#!/usr/bin/env bash
# Stops the cluster scripts/start-test-postgres.sh started (nothing to do when none runs).
set -euo pipefail
folder="${BITBUDGET_TEST_POSTGRES_DIR:-/tmp/bitbudget-test-postgres}"
bin="$(ls -d /usr/lib/postgresql/*/bin 2>/dev/null | sort -V | tail -n1 || true)"
[ -n "$bin" ] && [ -f "$folder/data/PG_VERSION" ] || exit 0
if [ "$(id -u)" = 0 ]; then
  runuser -u postgres -- "$bin/pg_ctl" -D "$folder/data" -m fast stop >/dev/null 2>&1 || true
else
  "$bin/pg_ctl" -D "$folder/data" -m fast stop >/dev/null 2>&1 || true
fi
