#!/usr/bin/env bash
# README's test command: what the tests need (scripts/test-prerequisites.sh), then the whole suite. Arguments
# are passed on to dotnet test, e.g.
#   scripts/test.sh --filter "FullyQualifiedName~Commands"
# .ci/run runs the same two steps, so a prerequisite added there is one CI installs too.
set -euo pipefail
cd "$(dirname "$0")/.."
source scripts/test-prerequisites.sh
dotnet test Search.sln -c Release "$@"
