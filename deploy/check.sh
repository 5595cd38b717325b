#!/usr/bin/env bash
# The test command: installs what is missing, builds, and runs every test with ctest.
set -euo pipefail
root=$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)
"$root/deploy/install-deps.sh"
"$root/deploy/build.sh"
build=${BELLWETHER_BUILD_DIR:-$root/build}
cd "$build"
ctest --output-on-failure --parallel "$(nproc 2>/dev/null || echo 2)" --timeout 600
