// Fuzzes the CSV frame reader (core/io/csv_frame_reader.h) on in-memory text: every row
// until the end or the first error, then the same text replayed (core/replay.h, as the
// CLI's `replay` does) into the kitchen pool of fuzz_pools.h, whose signals are level,
// temp and done. Errors are expected; crashes, sanitizer reports and broken invariants
// are not: rows come back with seq 1, 2, ... and one value per signal column.
#include <cstddef>
#include <cstdint>
#include <memory>
#include <sstream>
#include <string>

#include "bellwether/v1/frame.pb.h"
#include "core/io/csv_frame_reader.h"
#include "core/pool.h"
#include "core/replay.h"
#include "tests/fuzz/fuzz_pools.h"

namespace {

using namespace bellwether;

absl::StatusOr<std::unique_ptr<CsvFrameReader>> Reader(const std::string& text) {
  return CsvFrameReader::FromStream(std::make_unique<std::istringstream>(text), "fuzz.csv");
}

}  // namespace

extern "C" int LLVMFuzzerTestOneInput(const uint8_t* data, size_t size) {
  const std::string text(reinterpret_cast<const char*>(data), size);
  auto reader = Reader(text);
  if (!reader.ok()) return 0;
  v1::Frame frame;
  uint64_t rows = 0;
  while (true) {
    auto more = (*reader)->Next(&frame);
    if (!more.ok() || !*more) break;
    ++rows;
    if (frame.seq() != rows) fuzz::Broken("row seq is not the row number");
    if (static_cast<size_t>(frame.values_size()) != (*reader)->signal_columns().size()) {
      fuzz::Broken("a row's value count differs from the signal columns");
    }
  }

  auto replay_reader = Reader(text);
  if (!replay_reader.ok()) fuzz::Broken("the same text opens once and not twice");
  auto pool = Pool::Create(fuzz::KitchenSpec(/*pooled=*/false));
  if (!pool.ok()) fuzz::Broken("kitchen pool: " + pool.status().ToString());
  uint64_t applied = 0;
  (void)Replay(**pool, **replay_reader, "csv", nullptr, &applied);
  if ((*pool)->has_stream("csv")) fuzz::CheckRoundTrip(**pool);
  return 0;
}
