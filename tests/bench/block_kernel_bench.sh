#!/bin/bash
# Block TD(lambda) kernel benchmark against the NumPy reference, in one run.
#
# For each block size (256, 1,024 and 4,096 questions; 65,536 features, 32 active), it
# writes the workload with ../shared/bench/block_td_reference.py gen, runs the reference
# (which prints its question-updates/s and three checksums), then block_kernel_bench on
# the same file, which measures this machine's triad bandwidth and FMA throughput, runs
# the project's lazy kernel, the eager loop and (256 questions only) the engine's
# BlockLearner with FIXED / AUTOSTEP / TIDBD steps, checks the checksums against the
# reference's (1e-4 relative) and prints the ratios. The load average is printed before
# and after each block size: the machine may be shared.
#
#   tests/bench/block_kernel_bench.sh                      all three sizes (about 5 min)
#   QUESTIONS=256 tests/bench/block_kernel_bench.sh        the default workload only
#   tests/bench/block_kernel_bench.sh --benchmark_filter=Lazy   extra flags go to the bench
#
# Environment: BUILD_DIR (default build/), SHARED_DIR (default ../shared beside the
# repository), QUESTIONS, ENGINE_FRAMES (default 2000; 0 skips the engine).
set -euo pipefail
root=$(cd "$(dirname "$0")/../.." && pwd)
build=${BUILD_DIR:-$root/build}
shared=${SHARED_DIR:-$root/../shared}
reference=$shared/bench/block_td_reference.py
if [[ ! -f $reference ]]; then
  echo "missing $reference: the shared directory must sit beside the repository" >&2
  exit 1
fi
if ! log=$(cmake --build "$build" --target block_kernel_bench -j2 2>&1); then
  echo "$log" >&2
  exit 1
fi
bench=$build/tests/bench/block_kernel_bench
work=$(mktemp -d /tmp/block_kernel_bench.XXXXXX)
trap 'rm -rf "$work"' EXIT

frames_for() {  # the reference takes about 10-25 s at each size
  case $1 in
    256) echo 20000 ;;
    1024) echo 10000 ;;
    *) echo 4000 ;;
  esac
}

status=0
for q in ${QUESTIONS:-256 1024 4096}; do
  frames=$(frames_for "$q")
  engine_frames=0
  [[ $q == 256 ]] && engine_frames=${ENGINE_FRAMES:-2000}
  echo "=== $q questions, $frames frames; $(uptime)"
  file=$work/block_q$q.bin
  /usr/bin/python3 "$reference" gen "$file" --questions "$q" --frames "$frames"
  # The reference's own run(), with its process's CPU time around it (which also covers
  # reading the file and the checksums: about 1 % of the run, in NumPy's disfavour).
  ref_out=$(/usr/bin/python3 -c '
import importlib.util, sys, time
spec = importlib.util.spec_from_file_location("block_td_reference", sys.argv[1])
ref = importlib.util.module_from_spec(spec)
spec.loader.exec_module(ref)
sys.argv = [sys.argv[1], "run", sys.argv[2]]
cpu = time.process_time()
ref.main()
print(f"process_cpu_s={time.process_time() - cpu:.3f}")
' "$reference" "$file")
  echo "NumPy reference: $ref_out" | tr '\n' ' '
  echo
  qups=$(sed -n 's/.*question_updates_per_s=\([0-9.e+]*\).*/\1/p' <<<"$ref_out")
  cpu=$(sed -n 's/^process_cpu_s=\(.*\)/\1/p' <<<"$ref_out")
  cpu_qups=$(/usr/bin/python3 -c "print(($frames - 1) * $q / $cpu)")
  sums=$(sed -n 's/.*checksum_w_sum=\(\S*\) checksum_w_sq=\(\S*\) last_prediction_mean=\(\S*\).*/\1,\2,\3/p' <<<"$ref_out")
  if ! "$bench" --workload="$file" --numpy_qups="$qups" --numpy_cpu_qups="$cpu_qups" \
      --numpy_checksums="$sums" \
      --engine_frames="$engine_frames" "$@"; then
    status=1
  fi
  rm -f "$file"
  echo "=== done $q questions; $(uptime)"
done
exit $status
