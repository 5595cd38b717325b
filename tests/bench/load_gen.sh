#!/usr/bin/env bash
# End-to-end load benchmark, the standard set (builds nothing; run after deploy/build.sh or
# `cmake --build build --target load_gen bellwetherd`). Each run starts its own bellwetherd
# on 127.0.0.1 port 0 (gRPC and --http), with --state-dir in a fresh directory under
# LG_WORK_DIR, drives it with tests/bench/load_gen.cc and stops it:
#   1. memory: RSS per stream and per question (64- and 128-question pools, 4 streams)
#   2. --sync=none, frames as fast as they are acknowledged, Predict reader at 200/s
#   3. --sync=batch, the same
#   4. --sync=none paced at 80 % of run 2's frames/s, Predict reader at 200/s
#   5. (SOAK=1) --sync=none paced at SOAK_RATE (default: run 4's rate) for SOAK_SECONDS
#      (600), the daemon's RSS sampled every 10 s; the first 60 s are left out of the drift
# and prints a summary table. Every run is bounded (load_gen's own watchdog, and an outer
# timeout here). Nothing asserts on time: read the figures with the load average printed
# beside them (client and daemon share the machine's cores).
#
# Usage: tests/bench/load_gen.sh            (about 3 minutes)
#        SOAK=1 tests/bench/load_gen.sh     (plus the 10-minute soak)
# Environment (defaults in brackets):
#   LG_SECONDS [30]  measured seconds per run    LG_WARMUP [5]   warm-up seconds per run
#   LG_STREAMS [8]   producer streams            LG_BATCH [256]  frames per batch
#   LG_PREDICT_RATE [200]  Predict calls/s       LG_ARGS         more load_gen flags
#   LG_WORK_DIR [/tmp]     where the daemons' state directories go
#   SOAK [0]  SOAK_SECONDS [600]  SOAK_RATE [80 % of the max rate]
#   LG_SKIP   space-separated runs to skip: memory none batch rate80
#   LG_SPEC [tests/bench/load_gen_pool.json]  the pool (load_gen_pool_fixed.json: FIXED
#             steps, no RUPEE, the same recipe)
set -euo pipefail
root=$(cd "$(dirname "${BASH_SOURCE[0]}")/../.." && pwd)
build=${BELLWETHER_BUILD_DIR:-$root/build}
daemon=$build/server/bellwetherd
bench=$build/tests/bench/load_gen
spec=${LG_SPEC:-$root/tests/bench/load_gen_pool.json}
for f in "$daemon" "$bench"; do
  if [[ ! -x $f ]]; then
    echo "load_gen.sh: $f not built (cd $root && cmake --build build --target load_gen bellwetherd -j2)" >&2
    exit 1
  fi
done

seconds=${LG_SECONDS:-30}
warmup=${LG_WARMUP:-5}
streams=${LG_STREAMS:-8}
batch=${LG_BATCH:-256}
predict_rate=${LG_PREDICT_RATE:-200}
work_dir=${LG_WORK_DIR:-/tmp}
soak=${SOAK:-0}
soak_seconds=${SOAK_SECONDS:-600}
skip=" ${LG_SKIP:-} "
read -r -a extra <<<"${LG_ARGS:-}"
script_start=$EPOCHREALTIME

logs=$(mktemp -d)
bench_pid=
cleanup() {
  if [[ -n $bench_pid ]] && kill -0 "$bench_pid" 2>/dev/null; then
    kill -TERM "$bench_pid" 2>/dev/null || true  # load_gen stops its daemon and reader
    wait "$bench_pid" 2>/dev/null || true
  fi
  rm -rf "$logs"
}
trap cleanup EXIT
trap 'exit 130' INT
trap 'exit 143' TERM

# run LABEL LOAD_GEN_FLAGS...: runs load_gen (in the background, so that a signal to this
# script is handled at once), shows its output, keeps its "@ key value" lines.
run() {
  local label=$1
  shift
  local args=(--daemon "$daemon" --spec "$spec" --work-dir "$work_dir" --streams "$streams"
              --batch "$batch" --predict-rate "$predict_rate" "$@" "${extra[@]}")
  echo "=== $label: uptime: $(uptime)"
  echo "\$ $bench ${args[*]}"
  local status=0
  timeout --signal=TERM --kill-after=30 $((seconds + warmup + soak_seconds + 900)) \
    "$bench" "${args[@]}" >"$logs/$label.log" 2>&1 &
  bench_pid=$!
  wait "$bench_pid" || status=$?
  bench_pid=
  grep -v '^@ ' "$logs/$label.log" || true
  grep '^@ ' "$logs/$label.log" | cut -c3- >"$logs/$label.res" || true
  echo
  if ((status != 0)); then
    echo "load_gen.sh: $label failed (exit $status)" >&2
    exit 1
  fi
}
get() { awk -v k="$2" '$1 == k { print $2 }' "$logs/$1.res" 2>/dev/null; }
getf() { get "$1" "$2" | awk -v d="${3:-0}" '{ printf "%.*f", d, $1 }'; }
ms() { get "$1" "$2" | awk '{ printf "%.2f", $1 / 1000 }'; }

summary=()
row() { summary+=("$(printf '%-34s %s' "$1" "$2")"); }
load_row() {
  local label=$1 what=$2
  row "$what: frames/s applied" "$(getf "$label" fps) (acks), $(getf "$label" fps_metrics) (/metrics)$(
    [[ $(get "$label" target_rate) != 0 ]] && printf ', target %s' "$(getf "$label" target_rate)")"
  row "$what: ingest-to-ack p50 / p99" "$(ms "$label" ack.p50_us) / $(ms "$label" ack.p99_us) ms (n $(get "$label" ack.n))"
  row "$what: Predict p50 / p99 / p99.9" "$(ms "$label" predict.p50_us) / $(ms "$label" predict.p99_us) / $(ms "$label" predict.p999_us) ms (n $(get "$label" predict.n), errors $(get "$label" predict.errors))"
  row "$what: daemon CPU, RSS" "$(getf "$label" cpu.daemon_cores 2) cores; RSS $(getf "$label" rss.first_mib) -> $(getf "$label" rss.last_mib) MiB (max $(getf "$label" rss.max_mib)); load avg at end $(get "$label" load_end)"
}

echo "Bellwether end-to-end load benchmark (invented campus meters, synthetic frames;"
echo "predictions are advisory, Bellwether is not a safety system)"
echo "machine: $(nproc) cores, $(awk '/MemTotal/ { printf "%.1f GiB", $2 / 1048576 }' /proc/meminfo) RAM; $(uptime)"
if git -C "$root" rev-parse --short HEAD >/dev/null 2>&1; then
  echo "source: commit $(git -C "$root" rev-parse --short HEAD)$(git -C "$root" diff --quiet HEAD -- core server client proto 2>/dev/null || echo ' with uncommitted changes in core/server/client/proto') (the binaries may predate them: check their times)"
fi
echo "binaries: $(ls -l --time-style=+%FT%T "$daemon" | awk '{ print $6 }') bellwetherd, $(ls -l --time-style=+%FT%T "$bench" | awk '{ print $6 }') load_gen"
echo "state directories under $work_dir ($(df -T "$work_dir" | awk 'NR == 2 { print $2 }'))"
echo

if [[ $skip != *" memory "* ]]; then
  run memory --memory
  row "memory: per stream (64 questions)" "$(getf memory mem.per_stream64_mib 1) MiB (engine estimate $(getf memory mem.est_per_stream64_mib 1)); 128 questions: $(getf memory mem.per_stream128_mib 1) MiB"
  row "memory: per question and stream" "$(getf memory mem.per_question_stream_kib 0) KiB ((per stream 128 q - per stream 64 q) / 64)"
  row "memory: pool without streams" "$(getf memory mem.pool64_mib 1) MiB (64 q), daemon alone $(getf memory mem.r0_mib 1) MiB"
fi
if [[ $skip != *" none "* ]]; then
  run none --sync none --seconds "$seconds" --warmup-seconds "$warmup"
  load_row none "sync=none max"
fi
if [[ $skip != *" batch "* ]]; then
  run batch --sync batch --seconds "$seconds" --warmup-seconds "$warmup"
  load_row batch "sync=batch max"
fi
rate80=
if [[ $skip != *" none "* ]]; then
  rate80=$(get none fps | awk '{ printf "%.0f", $1 * 0.8 }')
fi
if [[ $skip != *" rate80 "* ]]; then
  if [[ -z $rate80 || $rate80 == 0 ]]; then
    echo "load_gen.sh: no max rate measured (run 'none' skipped or failed): skipping the 80 % run" >&2
  else
    run rate80 --sync none --rate "$rate80" --seconds "$seconds" --warmup-seconds "$warmup"
    load_row rate80 "sync=none 80 %"
    row "sync=none 80 %: from schedule p99" "$(ms rate80 sched.p99_us) ms (batch's due time to its ack)"
  fi
fi
if [[ $soak == 1 ]]; then
  soak_rate=${SOAK_RATE:-$rate80}
  if [[ -z $soak_rate || $soak_rate == 0 ]]; then
    echo "load_gen.sh: SOAK=1 needs SOAK_RATE or run 'none'" >&2
    exit 1
  fi
  run soak --sync none --rate "$soak_rate" --soak --seconds "$soak_seconds" \
    --warmup-seconds "$warmup" --sample-seconds 10 --soak-ignore-seconds 60
  load_row soak "soak ${soak_seconds} s"
  row "soak: RSS after the first $(get soak soak.ignored_s) s" "first $(getf soak soak.first_mib 1), last $(getf soak soak.last_mib 1), min $(getf soak soak.min_mib 1), max $(getf soak soak.max_mib 1) MiB; drift $(getf soak soak.drift_pct 2) %, spread $(getf soak soak.spread_pct 2) %"
  row "soak: per-minute RSS floor" "$(getf soak soak.floor_first_mib 1) -> $(getf soak soak.floor_last_mib 1) MiB; drift $(getf soak soak.floor_drift_pct 2) % (checkpoint transients left out)"
fi

echo "=== summary ($(awk -v a="$script_start" -v b="$EPOCHREALTIME" 'BEGIN { printf "%.0f", b - a }') s; $streams streams, batches of $batch, $seconds s measured per run after $warmup s; $(uptime | sed 's/.*load/load/'); command: $0) ==="
for line in "${summary[@]}"; do echo "$line"; done
