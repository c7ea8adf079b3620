#!/usr/bin/env bash
# Writes a screenshot of each view of the page (searches, one search, compare) to docs/ (or the folder given):
# the browser tests run the demo model and its retrain through the real service in Debian's chromium and save
# each view once they have checked it. Needs /usr/bin/chromium (apt-get install -y chromium).
set -euo pipefail
cd "$(dirname "$0")/.."
out="$(realpath -m "${1:-docs}")"
BITBUDGET_SCREENSHOTS="$out" dotnet test tests/Service.Tests -c Release --filter "FullyQualifiedName~Bitbudget.Service.Tests.Web.PageBrowserTests"
ls -l "$out"/page-*.png
