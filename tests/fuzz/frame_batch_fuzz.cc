// Fuzzes the ingest path: bytes -> bellwether.v1.FrameBatch (as an Ingest call's batch
// arrives) -> ColumnMap + FrameFromProto -> Pool::Apply, on two fixed pools (the kitchen
// spec of fuzz_pools.h per stream with the frames' behavior probabilities, and pooled
// with estimated behavior), with the session's columns in declared order and in a
// permuted order that leaves one signal out. Frames go to stream "a" or "b" by the
// parity of their seq. Refused frames are fine; crashes, sanitizer reports and broken
// invariants are not: a refused frame changes nothing, an accepted one advances its
// stream's seq, and the pools round-trip their state afterwards.
#include <cstddef>
#include <cstdint>
#include <memory>
#include <string>
#include <vector>

#include "bellwether/v1/frame.pb.h"
#include "core/frame_input.h"
#include "core/pool.h"
#include "tests/fuzz/fuzz_pools.h"

namespace {

using namespace bellwether;

void Run(const v1::FrameBatch& batch, bool pooled, const std::vector<std::string>& columns) {
  auto pool = Pool::Create(fuzz::KitchenSpec(pooled));
  if (!pool.ok()) fuzz::Broken("kitchen pool: " + pool.status().ToString());
  auto map = ColumnMap::Create((*pool)->spec().signal_names, columns);
  if (!map.ok()) fuzz::Broken("column map: " + map.status().ToString());
  std::vector<double> buffer;
  FrameInput input;
  for (const v1::Frame& f : batch.frames()) {
    if (!FrameFromProto(f, *map, &buffer, &input).ok()) continue;
    const std::string stream = (f.seq() & 1) != 0 ? "a" : "b";
    const uint64_t last = (*pool)->last_seq(stream);
    const absl::Status s = (*pool)->Apply(stream, input);
    const uint64_t now = (*pool)->last_seq(stream);
    if (s.ok() ? now != f.seq() : now != last) {
      fuzz::Broken("stream seq after Apply (" + s.ToString() + ")");
    }
  }
  for (const std::string& stream : (*pool)->stream_names()) {
    v1::StreamPredictions out;
    if (absl::Status s = (*pool)->GetPredictions(stream, &out); !s.ok()) {
      fuzz::Broken("GetPredictions: " + s.ToString());
    }
  }
  fuzz::CheckRoundTrip(**pool);
}

}  // namespace

extern "C" int LLVMFuzzerTestOneInput(const uint8_t* data, size_t size) {
  v1::FrameBatch batch;
  if (!batch.ParseFromArray(data, static_cast<int>(size))) return 0;
  Run(batch, /*pooled=*/false, {});
  // Columns temp, level: `done` is left out (frames without it treat it as missing).
  Run(batch, /*pooled=*/true, {"temp", "level"});
  return 0;
}
