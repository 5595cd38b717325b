#!/usr/bin/env bash
# Configures and builds Bellwether into build/ (Release, x86-64-v3 baseline).
# Extra arguments go to CMake, e.g. deploy/build.sh -DBELLWETHER_NATIVE=ON
set -euo pipefail
root=$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)
build=${BELLWETHER_BUILD_DIR:-$root/build}
cmake -S "$root" -B "$build" -G Ninja -DCMAKE_BUILD_TYPE=Release "$@" >/dev/null
jobs=$(nproc 2>/dev/null || echo 2)
cmake --build "$build" --parallel "$jobs"
