#!/usr/bin/env bash
# Durability benchmarks, run by hand (not in CI; nothing asserts on time). Builds nothing:
# run `cmake --build build -j2` first. Starts private bellwetherd processes on 127.0.0.1
# (port 0) with state directories under a temporary directory, drives them with
# build/tests/bench/durability_bench (tests/bench/durability_bench.cc), and removes
# everything on exit. Invented scenario (refrigerated rooms, synthetic frames).
#
#   1. Checkpoint of a large pool (1,000 questions over a 65,536-entry hashed feature
#      table): in-process (SaveState, EncodeCheckpoint, WriteCheckpoint; read, Decode,
#      Create, RestoreState; Recover on the directory) and through the daemon (Checkpoint
#      RPC, then kill -9 and the restart's `loaded ... in S s` line and time to `ready`).
#   2. Ingest frames/s without --state-dir, with --sync=none and with --sync=batch, batches
#      of 64 and of 8, on the disk under the work directory (and on tmpfs for contrast,
#      when /dev/shm is one; or on /var/tmp when /tmp itself is tmpfs).
#   3. Recovery time per million logged frames: stream frames of a 10-question pool with
#      checkpoints off, kill -9, restart, time to `ready`.
#
# Usage: tests/bench/durability_bench.sh
# Environment (defaults in brackets):
#   DURABILITY_BENCH_DIR   parent of the work directory [/tmp]
#   BENCH_QUESTIONS [1000] BENCH_TABLE [65536] BENCH_CK_FRAMES [3000] BENCH_LEARNING [per_stream]
#   BENCH_INGEST_FRAMES [150000] BENCH_INGEST_REPEATS [3] BENCH_PRODUCERS [4]
#   BENCH_RECOVERY_FRAMES [1000000]
#   BENCH_SKIP  space-separated parts to skip: checkpoint ingest recovery
# The machine's memory must hold about 4x the large pool's state (~6 GiB at the defaults).
set -euo pipefail
root=$(cd "$(dirname "${BASH_SOURCE[0]}")/../.." && pwd)
build=${BELLWETHER_BUILD_DIR:-$root/build}
daemon=$build/server/bellwetherd
bench=$build/tests/bench/durability_bench
for f in "$daemon" "$bench"; do
  if [[ ! -x $f ]]; then
    echo "durability_bench.sh: $f not built (cd $root && cmake --build build -j2)" >&2
    exit 1
  fi
done

parent=${DURABILITY_BENCH_DIR:-/tmp}
questions=${BENCH_QUESTIONS:-1000}
table=${BENCH_TABLE:-65536}
ck_frames=${BENCH_CK_FRAMES:-3000}
learning=${BENCH_LEARNING:-per_stream}
ingest_frames=${BENCH_INGEST_FRAMES:-150000}
ingest_repeats=${BENCH_INGEST_REPEATS:-3}
producers=${BENCH_PRODUCERS:-4}
recovery_frames=${BENCH_RECOVERY_FRAMES:-1000000}
skip=" ${BENCH_SKIP:-} "
script_start=$EPOCHREALTIME

workdir=$(mktemp -d "$parent/bw-durability.XXXXXX")
extra_dirs=()
daemon_pid=
bench_pid=
cleanup() {
  if [[ -n $bench_pid ]] && kill -0 "$bench_pid" 2>/dev/null; then
    kill -TERM "$bench_pid" 2>/dev/null || true
    wait "$bench_pid" 2>/dev/null || true
  fi
  if [[ -n $daemon_pid ]] && kill -0 "$daemon_pid" 2>/dev/null; then
    kill -KILL "$daemon_pid" 2>/dev/null || true
    wait "$daemon_pid" 2>/dev/null || true
  fi
  rm -rf "$workdir"
  for d in "${extra_dirs[@]}"; do rm -rf "$d"; done
}
trap cleanup EXIT
trap 'exit 130' INT
trap 'exit 143' TERM

# Seconds (3 decimals) since an $EPOCHREALTIME reading.
since() { awk -v a="$1" -v b="$EPOCHREALTIME" 'BEGIN { printf "%.3f", b - a }'; }

fs_type() { df -T "$1" | awk 'NR == 2 { print $2 }'; }

# start_daemon NAME [DAEMON FLAGS...]: starts bellwetherd on 127.0.0.1:0 and waits for
# `ready`. Sets daemon_pid, address and ready_s (seconds from exec to `ready` on stdout).
start_daemon() {
  local name=$1
  shift
  local out=$workdir/$name.out err=$workdir/$name.err
  local t0=$EPOCHREALTIME
  "$daemon" --listen 127.0.0.1:0 "$@" >"$out" 2>"$err" &
  daemon_pid=$!
  local i
  for ((i = 0; i < 30000; i++)); do  # up to 10 minutes, polled every 20 ms
    if grep -qx ready "$out" 2>/dev/null; then break; fi
    if ! kill -0 "$daemon_pid" 2>/dev/null; then
      echo "durability_bench.sh: bellwetherd ($name) exited early:" >&2
      cat "$err" >&2
      exit 1
    fi
    sleep 0.02
  done
  ready_s=$(since "$t0")
  address=$(sed -n 's/^listening on \([0-9.]*:[0-9]*\)$/\1/p' "$out" | head -n1)
  if [[ -z $address ]] || ! grep -qx ready "$out"; then
    echo "durability_bench.sh: bellwetherd ($name) not ready" >&2
    exit 1
  fi
}

# stop_daemon [KILL|TERM]: kill -9 (a crash) or SIGTERM (clean, final checkpoint).
stop_daemon() {
  local sig=${1:-TERM}
  [[ -n $daemon_pid ]] || return 0
  kill "-$sig" "$daemon_pid" 2>/dev/null || true
  wait "$daemon_pid" 2>/dev/null || true
  daemon_pid=
}

# The daemon's `loaded N pools (FILE, R log records replayed) in S s` line, and S.
loaded_line() { grep -m1 'bellwetherd: loaded' "$workdir/$1.err" || true; }
loaded_s() { loaded_line "$1" | sed -n 's/.* in \([0-9.e+-]*\) s$/\1/p'; }

# Memory of the running daemon (MiB): VmRSS or VmHWM.
daemon_mem() {
  awk -v k="$1:" '$1 == k { printf "%.0f", $2 / 1024 }' "/proc/$daemon_pid/status" 2>/dev/null || true
}

# run_bench LABEL ARGS...: runs the benchmark binary (in the background, so a signal to
# this script is handled at once), shows its output, keeps its "@ key value" lines.
run_bench() {
  local label=$1
  shift
  echo "\$ $bench $*"
  timeout --signal=TERM --kill-after=10 900 "$bench" "$@" >"$workdir/$label.log" 2>&1 &
  bench_pid=$!
  local status=0
  wait "$bench_pid" || status=$?
  bench_pid=
  grep -v '^@ ' "$workdir/$label.log" || true
  grep '^@ ' "$workdir/$label.log" | cut -c3- >"$workdir/$label.res" || true
  if ((status != 0)); then
    echo "durability_bench.sh: $label failed (exit $status)" >&2
    exit 1
  fi
}
get() { awk -v k="$2" '$1 == k { print $2 }' "$workdir/$1.res"; }
# get, rounded to $3 decimals (default 3).
getf() { get "$1" "$2" | awk -v d="${3:-3}" '{ printf "%.*f", d, $1 }'; }
mib() { awk -v b="$1" 'BEGIN { printf "%.1f MiB", b / 1048576 }'; }

summary=()
row() { summary+=("$(printf '%-58s %s' "$1" "$2")"); }

echo "Bellwether durability benchmarks (invented cold-storage rooms, synthetic frames;"
echo "predictions are advisory, Bellwether is not a safety system)"
load_start=$(cut -d' ' -f1-3 /proc/loadavg)
echo "machine: $(nproc) cores, $(awk '/MemTotal/ { printf "%.1f GiB", $2 / 1048576 }' /proc/meminfo) RAM; load average $load_start"
if awk -v l="${load_start%% *}" -v n="$(nproc)" 'BEGIN { exit !(l > n / 2) }'; then
  echo "NOTE: the machine is already busy (load average $load_start on $(nproc) cores): figures will be slower and noisier"
fi
echo "/tmp is $(fs_type /tmp); work directory $workdir is $(fs_type "$workdir")"
df -T /tmp "$workdir" | sed 's/^/  /'
echo

# ----------------------------------------------------------------------------------------
# 1. Checkpoint of the large pool.
if [[ $skip != *" checkpoint "* ]]; then
  echo "=== 1. checkpoint: $questions questions, featureTableSize $table, $ck_frames frames, $learning ==="
  mkdir -p "$workdir/ck-inproc"
  run_bench ck_inproc inproc-checkpoint --dir "$workdir/ck-inproc" --questions "$questions" \
    --table "$table" --frames "$ck_frames" --learning "$learning"
  rm -rf "$workdir/ck-inproc"
  echo
  start_daemon ck1 --state-dir "$workdir/ck-state" --checkpoint-seconds 100000 \
    --checkpoint-frames 1000000000
  echo "bellwetherd pid $daemon_pid on $address (ready in ${ready_s} s, empty state dir)"
  run_bench ck_daemon daemon-checkpoint --server "$address" --daemon-pid "$daemon_pid" \
    --questions "$questions" --table "$table" --frames "$ck_frames" --learning "$learning"
  stop_daemon KILL
  echo "kill -9; restarting on the same --state-dir"
  start_daemon ck2 --state-dir "$workdir/ck-state" --checkpoint-seconds 100000 \
    --checkpoint-frames 1000000000
  ck_restart_peak=$(daemon_mem VmHWM)
  ck_restart_rss=$(daemon_mem VmRSS)
  echo "restart: ready ${ready_s} s after exec; $(loaded_line ck2)"
  echo "restarted daemon: RSS $ck_restart_rss MiB, peak $ck_restart_peak MiB"
  ck_ready_s=$ready_s
  run_bench ck_check check-stream --server "$address" --pool coldstore --stream room-000
  echo "a second checkpoint while one producer streams into the pool (batches of 8):"
  run_bench ck_stall checkpoint-stall --server "$address" --pool coldstore --stream room-000 \
    --batch 8
  stop_daemon KILL
  rm -rf "$workdir/ck-state"
  echo
  row "1. pool" "$questions questions, $(get ck_inproc pool.blocks) blocks, $(get ck_inproc pool.rows) rows, $(getf ck_inproc pool.array_mib 1) MiB per float array ($learning, 1 stream)"
  row "1. in-process: state bytes (SaveState)" "$(mib "$(get ck_inproc inproc.state_bytes)") in $(getf ck_inproc inproc.save_s) s"
  row "1. in-process: SaveState, reserved string / pages warm" "$(getf ck_inproc inproc.save_reserved_s) s / $(getf ck_inproc inproc.save_copy_s) s"
  row "1. in-process: EncodeCheckpoint (serialize / crc alone)" "$(getf ck_inproc inproc.encode_s) s ($(getf ck_inproc inproc.serialize_s) / $(getf ck_inproc inproc.crc_s) s)"
  row "1. in-process: WriteFileDurably of the encoded bytes" "$(getf ck_inproc inproc.durable_write_s) s"
  row "1. in-process: WriteCheckpoint (streamed write+fsync)" "$(getf ck_inproc inproc.write_s) s, file $(mib "$(get ck_inproc inproc.file_bytes)")"
  row "1. in-process: peak RSS EncodeCheckpoint / WriteCheckpoint" "$(getf ck_inproc inproc.encode_peak_mib 0) / $(getf ck_inproc inproc.write_peak_mib 0) MiB (pool alone $(getf ck_inproc inproc.rss_after_feed_mib 0) MiB)"
  row "1. in-process: load (read+decode+create+restore)" "$(getf ck_inproc inproc.load_s) s (read $(getf ck_inproc inproc.read_s), decode $(getf ck_inproc inproc.decode_s), restore $(getf ck_inproc inproc.restore_s))"
  row "1. in-process: peak RSS loading (RSS before)" "$(getf ck_inproc inproc.load_peak_mib 0) MiB ($(getf ck_inproc inproc.rss_before_load_mib 0) MiB)"
  row "1. in-process: Recover() on the directory" "$(getf ck_inproc inproc.recover_s) s, peak RSS $(getf ck_inproc inproc.recover_peak_mib 0) MiB ($(getf ck_inproc inproc.rss_before_recover_mib 0) MiB before)"
  row "1. daemon: Checkpoint RPC (client / daemon)" "$(getf ck_daemon daemon.checkpoint_rpc_s) s / $(getf ck_daemon daemon.checkpoint_s) s, $(mib "$(get ck_daemon daemon.checkpoint_bytes)")"
  row "1. daemon: RSS before -> peak after checkpoint" "$(getf ck_daemon daemon.rss_before_mib 0) -> $(getf ck_daemon daemon.peak_after_mib 0) MiB"
  row "1. daemon: restart after kill -9, loaded ... in" "$(printf '%.3f' "$(loaded_s ck2)") s (ready after ${ck_ready_s} s), peak RSS $ck_restart_peak MiB"
  row "1. daemon: answers after restart as of seq" "$(get ck_check check.as_of_seq) (fed $(get ck_daemon daemon.stream_seq))"
  row "1. daemon: Checkpoint RPC under ingest, longest ack gap" "$(getf ck_stall stall.rpc_s) s, $(getf ck_stall stall.max_gap_s) s (median gap before $(getf ck_stall stall.median_gap_ms 1) ms)"
  row "1. feed (learning) $questions questions" "in-process $(getf ck_inproc inproc.feed_s) s, daemon $(getf ck_daemon daemon.feed_s) s for $ck_frames frames"
fi

# ----------------------------------------------------------------------------------------
# 2. Ingest throughput by sync mode.
if [[ $skip != *" ingest "* ]]; then
  echo "=== 2. ingest: $ingest_frames frames per run, $producers producers (one stream each), 10-question pool ==="
  # Directories to measure on: the work directory; a real disk if /tmp was tmpfs; tmpfs
  # for contrast (fsync is free there) when /dev/shm is one.
  ingest_dirs=("$workdir")
  if [[ $(fs_type "$workdir") == tmpfs ]]; then
    real=$(mktemp -d /var/tmp/bw-durability.XXXXXX)
    extra_dirs+=("$real")
    ingest_dirs+=("$real")
  elif [[ -d /dev/shm && $(fs_type /dev/shm) == tmpfs ]]; then
    shm=$(mktemp -d /dev/shm/bw-durability.XXXXXX)
    extra_dirs+=("$shm")
    ingest_dirs+=("$shm")
  fi
  configs=()  # "batch mode dir"
  for batch in 64 8; do
    for mode in memory none batch; do
      for dir in "${ingest_dirs[@]}"; do
        if [[ $mode == memory && $dir != "$workdir" ]]; then continue; fi
        configs+=("$batch $mode $dir")
      done
    done
  done
  # Repeats are interleaved (every configuration once, then again) so that a slow spell
  # of the machine does not land on one configuration only; the summary shows the median.
  n=0
  for ((rep = 1; rep <= ingest_repeats; rep++)); do
    for c in "${!configs[@]}"; do
      read -r batch mode dir <<<"${configs[$c]}"
      n=$((n + 1))
      label=ingest_${n}
      if [[ $mode == memory ]]; then
        start_daemon "$label"
        where="no --state-dir"
      else
        start_daemon "$label" --state-dir "$dir/state-$n" --sync "$mode"
        where="--sync=$mode on $(fs_type "$dir") ($dir)"
      fi
      echo "--- run $rep of $ingest_repeats: batch $batch, $where"
      run_bench "$label" ingest --server "$address" --frames "$ingest_frames" --batch "$batch" \
        --producers "$producers" --max-seconds 60
      stop_daemon TERM
      rm -rf "$dir/state-$n"
      get "$label" ingest.fps >>"$workdir/config_$c.fps"
    done
  done
  for c in "${!configs[@]}"; do
    read -r batch mode dir <<<"${configs[$c]}"
    if [[ $mode == memory ]]; then
      what="no --state-dir"
    else
      what="--sync=$mode, $(fs_type "$dir")"
    fi
    row "2. ingest batch $batch, $what" "$(sort -g "$workdir/config_$c.fps" | awk '
      { v[NR] = $1 }
      END { m = (NR % 2) ? v[(NR + 1) / 2] : (v[NR / 2] + v[NR / 2 + 1]) / 2
            printf "%.0f frames/s (median of %d; %.0f..%.0f)", m, NR, v[1], v[NR] }')"
  done
  echo
fi

# ----------------------------------------------------------------------------------------
# 3. Recovery time per million logged frames.
if [[ $skip != *" recovery "* ]]; then
  echo "=== 3. recovery: $recovery_frames frames logged (10-question pool, $producers streams), checkpoints off ==="
  ck_off=(--checkpoint-seconds 100000 --checkpoint-frames 1000000000)
  start_daemon rec1 --state-dir "$workdir/rec-state" "${ck_off[@]}"
  echo "bellwetherd pid $daemon_pid on $address"
  run_bench rec_feed ingest --server "$address" --frames "$recovery_frames" --batch 64 \
    --producers "$producers" --max-seconds 300 --pool coldstore-log
  fed=$(get rec_feed ingest.frames | awk '{ printf "%d", $1 }')
  stop_daemon KILL
  echo "kill -9 after $fed frames acknowledged; state dir: $(du -sh "$workdir/rec-state" | cut -f1)"
  cp -a "$workdir/rec-state" "$workdir/rec-copy"  # for the in-process timing below
  start_daemon rec2 --state-dir "$workdir/rec-state" "${ck_off[@]}"
  rec_ready_s=$ready_s
  rec_peak=$(daemon_mem VmHWM)
  echo "restart: ready ${rec_ready_s} s after exec; $(loaded_line rec2); peak RSS $rec_peak MiB"
  run_bench rec_check check-stream --server "$address" --pool coldstore-log --stream room-000
  stop_daemon KILL
  run_bench rec_inproc inproc-recover --dir "$workdir/rec-copy"
  rm -rf "$workdir/rec-copy" "$workdir/rec-state"
  rec_loaded=$(loaded_s rec2)
  per_m() { awk -v s="$1" -v n="$fed" 'BEGIN { if (n > 0) printf "%.2f", s * 1e6 / n }'; }
  row "3. frames logged (acked, --sync=batch, batch 64)" "$fed in $(get rec_feed ingest.seconds | awk '{ printf "%.1f", $1 }') s; log $(mib "$(get rec_inproc recover.log_bytes)")"
  row "3. restart after kill -9: loaded ... in" "$(printf '%.3f' "$rec_loaded") s = $(per_m "$rec_loaded") s per million frames"
  row "3. restart after kill -9: exec to ready" "$rec_ready_s s = $(per_m "$rec_ready_s") s per million frames"
  row "3. in-process Recover() / parse-only log pass" "$(getf rec_inproc recover.inproc_s) s / $(getf rec_inproc recover.scan_s) s"
  row "3. restarted daemon peak RSS" "$rec_peak MiB"
  row "3. stream room-000 answers as of seq after restart" "$(get rec_check check.as_of_seq)"
fi

echo
echo "=== summary ($(since "$script_start") s in all; load average at start $load_start, at end $(cut -d' ' -f1-3 /proc/loadavg); command: $0) ==="
for line in "${summary[@]}"; do echo "$line"; done
