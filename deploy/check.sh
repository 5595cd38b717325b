#!/usr/bin/env bash
# The test command: installs what is missing, builds, and runs every test with ctest.
set -euo pipefail
root=$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)
"$root/deploy/install-deps.sh"
"$root/deploy/build.sh"
build=${BELLWETHER_BUILD_DIR:-$root/build}
cd "$build"
ctest --output-on-failure --parallel "$(nproc 2>/dev/null || echo 2)" --timeout 600

# The fuzz harnesses of the loaders of hostile input (tests/fuzz/run.sh): a clang-14 build
# in build-fuzz, then each harness for BELLWETHER_FUZZ_SECONDS seconds (default 60; 0
# skips) from the committed seeds. A crash fails the check; its input and log go to
# build-fuzz/fuzz-findings/. About 5 minutes on 2 cores, build included.
if [ "${BELLWETHER_FUZZ_SECONDS:-60}" != 0 ]; then
  "$root/tests/fuzz/run.sh" "${BELLWETHER_FUZZ_SECONDS:-60}"
fi

# Second stage: every test again, built with AddressSanitizer + UndefinedBehaviorSanitizer
# (-DBELLWETHER_SANITIZE=ON) in build-asan/. The daemon and CLI built there are sanitized
# too, so the integration tests that run them (the Python ones included: they are the only
# ones that drive the daemon's HTTP status and /metrics code) check those as well. A
# finding aborts the process (SIGABRT, never an exit code a test could expect). Reports
# must not hide in a daemon's stderr or a CLI run's captured output, so: ASan and LSan
# write theirs to build-asan/sanitizer-logs/ (log_path), and UBSan's (which ignores
# log_path when ASan is linked in) is looked for in the output of every test, passed or
# not (Testing/Temporary/LastTest.log). Any report fails the stage, as does any failing
# test. About 10 minutes on 2 cores, build included; BELLWETHER_CHECK_SANITIZE=0 skips it
# (and BELLWETHER_FUZZ_SECONDS=0 the fuzz stage) for a quick local run.
if [ "${BELLWETHER_CHECK_SANITIZE:-1}" != 0 ]; then
  start=$SECONDS
  asan=${BELLWETHER_ASAN_BUILD_DIR:-$root/build-asan}
  BELLWETHER_BUILD_DIR=$asan "$root/deploy/build.sh" -DBELLWETHER_SANITIZE=ON
  built=$SECONDS
  logs=$asan/sanitizer-logs
  rm -rf "$logs" && mkdir -p "$logs"
  cd "$asan"
  status=0
  ASAN_OPTIONS=detect_leaks=1:abort_on_error=1:log_path=$logs/asan \
  UBSAN_OPTIONS=print_stacktrace=1:halt_on_error=1:abort_on_error=1 \
    ctest --output-on-failure --parallel 2 --timeout 600 || status=$?
  shopt -s nullglob
  reports=("$logs"/*)
  for r in "${reports[@]}"; do echo "== sanitizer report $r"; cat "$r"; done
  pattern='runtime error:|ERROR: (AddressSanitizer|LeakSanitizer)'
  if grep -Eq "$pattern" Testing/Temporary/LastTest.log; then
    echo "== sanitizer reports in the tests' output (Testing/Temporary/LastTest.log)"
    grep -E -A12 "$pattern" Testing/Temporary/LastTest.log
    status=1
  fi
  if [ ${#reports[@]} -gt 0 ]; then
    echo "check: sanitizer reports in $logs (above)"
    status=1
  fi
  echo "check: sanitizer stage: build $((built - start)) s, tests $((SECONDS - built)) s"
  if [ "$status" != 0 ]; then exit "$status"; fi
fi
