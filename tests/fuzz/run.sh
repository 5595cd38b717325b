#!/usr/bin/env bash
# Builds and runs the libFuzzer harnesses of tests/fuzz/ for a bounded time each.
#
#   tests/fuzz/run.sh [SECONDS]      default 60 seconds per harness
#
# Configures build-fuzz (clang-14, -DBELLWETHER_FUZZ=ON) if needed and builds the
# harnesses. Then, per harness:
#   1. the known crash reproducers in tests/fuzz/crashes/<name>/ (if any) run once each:
#      a fixed bug stays fixed;
#   2. the harness fuzzes for SECONDS (-max_total_time) from a copy of the committed seed
#      corpus tests/fuzz/corpus/<name>/ (the copy grows; the committed seeds do not), with
#      -rss_limit_mb=2048 and -timeout=25 (seconds per input), and the harness's
#      dictionary tests/fuzz/<name>.dict if there is one.
# Harnesses run side by side, as many at once as there are cores (BELLWETHER_FUZZ_JOBS
# overrides). Prints the executions each harness ran and the result. A crash, leak,
# timeout or out-of-memory input is copied to build-fuzz/fuzz-findings/<name>/ (emptied
# at the start of each run) with its log; the script then exits 1.
#
# Environment: BELLWETHER_FUZZ_BUILD_DIR (default build-fuzz), BELLWETHER_FUZZ_JOBS,
# BELLWETHER_FUZZ_ARGS (extra libFuzzer flags, e.g. "-fork=1 -ignore_crashes=1" to keep
# going after a crash when hunting for more than one bug).
set -euo pipefail

seconds=${1:-60}
if ! [[ "$seconds" =~ ^[0-9]+$ ]] || [ "$seconds" -lt 1 ]; then
  echo "usage: $0 [SECONDS]   (a whole number of seconds per harness, default 60)" >&2
  exit 2
fi

root=$(cd "$(dirname "${BASH_SOURCE[0]}")/../.." && pwd)
build=${BELLWETHER_FUZZ_BUILD_DIR:-$root/build-fuzz}
fuzz_src=$root/tests/fuzz
harnesses=(spec_json frame_batch csv_reader checkpoint wal)
cores=$(nproc 2>/dev/null || echo 2)
jobs=${BELLWETHER_FUZZ_JOBS:-$cores}
extra_args=${BELLWETHER_FUZZ_ARGS:-}

for tool in clang-14 clang++-14; do
  if ! command -v "$tool" >/dev/null; then
    echo "fuzz: $tool not found (deploy/install-deps.sh installs clang-14 and libclang-rt-14-dev)" >&2
    exit 2
  fi
done

start=$(date +%s)
if [ ! -f "$build/build.ninja" ]; then
  echo "fuzz: configuring $build (clang-14, BELLWETHER_FUZZ=ON)"
  CC=clang-14 CXX=clang++-14 cmake -S "$root" -B "$build" -G Ninja \
    -DCMAKE_BUILD_TYPE=Release -DBELLWETHER_FUZZ=ON >/dev/null
fi
echo "fuzz: building the harnesses in $build"
cmake --build "$build" --parallel "$cores" --target bellwether_fuzzers
built=$(date +%s)
echo "fuzz: build took $((built - start)) s"

symbolizer=/usr/lib/llvm-14/bin/llvm-symbolizer
if [ -x "$symbolizer" ]; then export ASAN_SYMBOLIZER_PATH=$symbolizer; fi
export UBSAN_OPTIONS=${UBSAN_OPTIONS:-print_stacktrace=1}

findings=$build/fuzz-findings
rm -rf "$findings"
work=$(mktemp -d "${TMPDIR:-/tmp}/bellwether-fuzz.XXXXXX")
# Scratch state directories of the wal harness: in memory where possible (recovery
# fsyncs), and removed with the rest even when a harness crashed and left its own behind.
shm=/dev/shm
[ -d "$shm" ] && [ -w "$shm" ] || shm=$work
scratch=$(mktemp -d "$shm/bellwether-fuzz-scratch.XXXXXX")
export BELLWETHER_FUZZ_SCRATCH=$scratch
pids=()
cleanup() {
  for pid in "${pids[@]}"; do kill "$pid" 2>/dev/null || true; done
  rm -rf "$work" "$scratch"
}
trap cleanup EXIT

# Runs one harness; writes $work/<name>.result: "<status> <executions>".
run_one() {
  local name=$1
  local bin=$build/tests/fuzz/${name}_fuzz
  local dir=$work/$name
  mkdir -p "$dir/corpus" "$dir/artifacts"
  local status=ok
  local known=$fuzz_src/crashes/$name
  if [ -d "$known" ] && [ -n "$(ls -A "$known" 2>/dev/null)" ]; then
    # Each known reproducer once; libFuzzer exits non-zero on the first that crashes.
    if ! "$bin" -rss_limit_mb=2048 -timeout=25 -artifact_prefix="$dir/artifacts/" \
        "$known"/* >"$dir/known.log" 2>&1; then
      status=known-crash
    fi
  fi
  cp -r "$fuzz_src/corpus/$name/." "$dir/corpus/"
  local dict=()
  if [ -f "$fuzz_src/$name.dict" ]; then dict=(-dict="$fuzz_src/$name.dict"); fi
  # shellcheck disable=SC2086
  if ! "$bin" "$dir/corpus" -max_total_time="$seconds" -rss_limit_mb=2048 -timeout=25 \
      -print_final_stats=1 -artifact_prefix="$dir/artifacts/" "${dict[@]}" $extra_args \
      >"$dir/fuzz.log" 2>&1; then
    status=crash
  fi
  if [ -n "$(ls -A "$dir/artifacts")" ]; then
    [ "$status" = ok ] && status=crash
  fi
  local execs
  execs=$(grep -o 'stat::number_of_executed_units: *[0-9]*' "$dir/fuzz.log" | tail -1 |
          grep -o '[0-9]*$' || true)
  if [ -z "$execs" ]; then
    # Fork mode and some exits print no final stats: the last status line's count.
    execs=$(grep -oE '^#[0-9]+' "$dir/fuzz.log" | tail -1 | tr -d '#' || true)
  fi
  echo "$status ${execs:-0}" >"$dir.result"
}

running=0
for name in "${harnesses[@]}"; do
  run_one "$name" &
  pids+=($!)
  running=$((running + 1))
  if [ "$running" -ge "$jobs" ]; then
    wait -n || true
    running=$((running - 1))
  fi
done
wait || true
pids=()

failed=0
printf '\nfuzz: %-12s %14s  %s\n' harness executions result
for name in "${harnesses[@]}"; do
  read -r status execs <"$work/$name.result"
  printf 'fuzz: %-12s %14s  %s\n' "$name" "$execs" "$status"
  if [ "$status" != ok ]; then
    failed=1
    mkdir -p "$findings/$name"
    cp "$work/$name"/*.log "$findings/$name/" 2>/dev/null || true
    cp "$work/$name/artifacts/." "$findings/$name/" -r 2>/dev/null || true
  fi
done

for name in "${harnesses[@]}"; do
  dir=$work/$name
  read -r status _ <"$work/$name.result"
  [ "$status" = ok ] && continue
  echo
  echo "fuzz: $name: $status; inputs and logs in $findings/$name/"
  for log in "$dir/known.log" "$dir/fuzz.log"; do
    [ -f "$log" ] || continue
    # The report's first lines and the frames in project code.
    grep -m1 -E 'ERROR: |runtime error|fuzz invariant broken|ALARM|out-of-memory' "$log" || true
    grep -E '^ +#[0-9]+ .*(/core/|/server/|/tests/fuzz/)' "$log" | head -8 || true
  done
done

end=$(date +%s)
echo
echo "fuzz: ${seconds} s per harness, $jobs at a time; total $((end - start)) s (build $((built - start)) s)"
if [ "$failed" -ne 0 ]; then
  echo "fuzz: FAILED (reproduce: $build/tests/fuzz/<name>_fuzz <input>)"
  exit 1
fi
echo "fuzz: no crashes"
