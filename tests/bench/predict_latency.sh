#!/usr/bin/env bash
# Predict latency while frames are ingested: starts a private bellwetherd on 127.0.0.1
# (port 0), runs tests/bench/predict_latency.cc against it, stops the daemon on exit.
# Run by hand (not in CI; nothing asserts on time). The figures depend on the machine:
# client and daemon share its cores (2 on the team's machine), so read them as a
# comparison of ingest on against ingest off on the same box, not as absolute numbers.
#
# Usage: tests/bench/predict_latency.sh [BENCHMARK FLAGS...]   (after deploy/build.sh)
#   e.g. tests/bench/predict_latency.sh --predicts 20000 --streams 200 --questions 50 \
#          --ingest-threads 2
# Daemon flags can be added with BELLWETHERD_ARGS, e.g. BELLWETHERD_ARGS="--queue-batches 8".
set -euo pipefail
root=$(cd "$(dirname "${BASH_SOURCE[0]}")/../.." && pwd)
build=${BELLWETHER_BUILD_DIR:-$root/build}
daemon=$build/server/bellwetherd
bench=$build/tests/bench/predict_latency
for f in "$daemon" "$bench"; do
  if [[ ! -x $f ]]; then
    echo "predict_latency.sh: $f not built (cd $root && cmake --build build -j2)" >&2
    exit 1
  fi
done

workdir=$(mktemp -d)
daemon_pid=
bench_pid=
cleanup() {
  if [[ -n $bench_pid ]] && kill -0 "$bench_pid" 2>/dev/null; then
    kill -TERM "$bench_pid" 2>/dev/null || true
    wait "$bench_pid" 2>/dev/null || true
  fi
  if [[ -n $daemon_pid ]] && kill -0 "$daemon_pid" 2>/dev/null; then
    kill -TERM "$daemon_pid" 2>/dev/null || true
    for _ in $(seq 50); do
      kill -0 "$daemon_pid" 2>/dev/null || break
      sleep 0.1
    done
    kill -KILL "$daemon_pid" 2>/dev/null || true
    wait "$daemon_pid" 2>/dev/null || true
  fi
  rm -rf "$workdir"
}
trap cleanup EXIT
trap 'exit 130' INT
trap 'exit 143' TERM

# shellcheck disable=SC2086  # BELLWETHERD_ARGS is a word list on purpose
"$daemon" --listen 127.0.0.1:0 --state-dir "$workdir/state" ${BELLWETHERD_ARGS:-} \
  >"$workdir/daemon.out" 2>"$workdir/daemon.err" &
daemon_pid=$!

address=
for _ in $(seq 100); do  # up to 10 s
  address=$(sed -n 's/^listening on \([0-9.]*:[0-9]*\)$/\1/p' "$workdir/daemon.out" | head -n1)
  [[ -n $address ]] && break
  if ! kill -0 "$daemon_pid" 2>/dev/null; then
    echo "predict_latency.sh: bellwetherd exited early:" >&2
    cat "$workdir/daemon.err" >&2
    exit 1
  fi
  sleep 0.1
done
if [[ -z $address ]]; then
  echo "predict_latency.sh: bellwetherd did not print 'listening on HOST:PORT' within 10 s" >&2
  exit 1
fi

echo "bellwetherd pid $daemon_pid listening on $address${BELLWETHERD_ARGS:+ (args: $BELLWETHERD_ARGS)}"
status=0
# The benchmark caps itself (--max-seconds, default 120); the outer timeout is a backstop.
# It runs in the background so that a signal to this script is handled at once.
timeout --signal=TERM --kill-after=10 300 "$bench" --server "$address" "$@" &
bench_pid=$!
wait "$bench_pid" || status=$?
bench_pid=
if [[ -s $workdir/daemon.err ]]; then
  echo "--- bellwetherd stderr (last 20 lines) ---"
  tail -n 20 "$workdir/daemon.err"
fi
echo "wrapper command: $0 $*"
exit "$status"
