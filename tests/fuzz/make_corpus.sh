#!/usr/bin/env bash
# Rebuilds the seed corpus under tests/fuzz/corpus/ (committed; small: < 1 MB in all):
#   spec_json/    the example specs and the test spec, and the harnesses' kitchen spec
#   frame_batch/  serialized FrameBatch messages (make_fuzz_corpus)
#   csv_reader/   the first 20 lines of the shared demand data and of the example CSVs,
#                 and kitchen-pool CSV text (make_fuzz_corpus)
#   checkpoint/   a checkpoint file and raw pool states (make_fuzz_corpus)
#   wal/          a write-ahead log segment (make_fuzz_corpus)
# Run by hand when a format changes; builds make_fuzz_corpus in build-fuzz first.
set -euo pipefail
root=$(cd "$(dirname "${BASH_SOURCE[0]}")/../.." && pwd)
build=${BELLWETHER_FUZZ_BUILD_DIR:-$root/build-fuzz}
corpus=$root/tests/fuzz/corpus
shared=${BELLWETHER_SHARED_DATA_DIR:-$root/../shared/data}

if [ ! -f "$build/build.ninja" ]; then
  CC=clang-14 CXX=clang++-14 cmake -S "$root" -B "$build" -G Ninja \
    -DCMAKE_BUILD_TYPE=Release -DBELLWETHER_FUZZ=ON >/dev/null
fi
cmake --build "$build" --parallel "$(nproc 2>/dev/null || echo 2)" --target make_fuzz_corpus

# Seeds in older formats are kept, as the loaders still read them: checkpoint/v5-* are
# the checkpoint seeds in pool-state version 5, written by this script at commit 6988c2f.
kept=$(mktemp -d)
trap 'rm -rf "$kept"' EXIT
cp "$corpus"/checkpoint/v5-* "$kept"/ 2>/dev/null || true
rm -rf "$corpus"
mkdir -p "$corpus"/{spec_json,frame_batch,csv_reader,checkpoint,wal}
cp "$kept"/* "$corpus/checkpoint/" 2>/dev/null || true
cp "$root"/deploy/examples/grid.json "$root"/deploy/examples/recipes/*.json \
   "$root"/tests/data/grid_pool.json "$corpus/spec_json/"
head -n 20 "$shared/halfhourly-demand-2000.csv" > "$corpus/csv_reader/demand-head.csv"
for f in "$root"/deploy/examples/*.csv; do
  head -n 20 "$f" > "$corpus/csv_reader/$(basename "$f" .csv)-head.csv"
done
# The generator runs instrumented; leaks of the process at exit are not the corpus's
# concern.
ASAN_OPTIONS=detect_leaks=0 "$build/tests/fuzz/make_fuzz_corpus" "$corpus"
du -sh "$corpus"
