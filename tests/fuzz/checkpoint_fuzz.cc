// Fuzzes the loaders of checkpoints (server/state_dir.h, core/pool.h), which read files
// anyone with access to the state directory, a disk error or a torn copy may have
// changed:
//   1. DecodeCheckpoint on the bytes, then for each pool in it Pool::Create(spec) and
//      RestoreState(state), as recovery does;
//   2. Pool::RestoreState on the raw bytes, into a fresh kitchen pool (fuzz_pools.h) per
//      stream and pooled.
// Errors are expected; crashes, sanitizer reports and broken invariants are not: a pool
// that restores without error takes valid frames, answers for every stream, and
// round-trips its state.
//
// A checkpoint file's header holds the payload's length and CRC-32C, which random
// mutation almost never keeps right. The custom mutator below fixes both in three
// mutants in four that still start with the magic "BWCK"; the fourth keeps whatever the
// mutation left, for the checks of the header itself.
#include <cstddef>
#include <cstdint>
#include <cstring>
#include <string>

#include "absl/strings/string_view.h"
#include "bellwether/v1/state.pb.h"
#include "core/io/crc32c.h"
#include "core/pool.h"
#include "server/state_dir.h"
#include "tests/fuzz/fuzz_pools.h"

namespace {

using namespace bellwether;

void RestoreAndProbe(const v1::PoolSpec& spec, absl::string_view state) {
  auto pool = Pool::Create(spec);
  if (!pool.ok()) return;
  if (!(*pool)->RestoreState(state).ok()) return;
  fuzz::ProbePool(**pool);
  fuzz::CheckRoundTrip(**pool);
}

// "BWCK", uint32 version, uint64 payload length, uint32 CRC-32C (server/state_dir.h).
constexpr size_t kHeader = 20;

void FixHeader(uint8_t* data, size_t size) {
  if (size < kHeader || std::memcmp(data, "BWCK", 4) != 0) return;
  const uint64_t len = size - kHeader;
  std::memcpy(data + 8, &len, 8);
  const uint32_t crc =
      Crc32c(absl::string_view(reinterpret_cast<const char*>(data + kHeader), size - kHeader));
  std::memcpy(data + 16, &crc, 4);
}

}  // namespace

extern "C" size_t LLVMFuzzerMutate(uint8_t* data, size_t size, size_t max_size);

extern "C" size_t LLVMFuzzerCustomMutator(uint8_t* data, size_t size, size_t max_size,
                                          unsigned int seed) {
  size = LLVMFuzzerMutate(data, size, max_size);
  if (seed % 4 != 0) FixHeader(data, size);
  return size;
}

extern "C" int LLVMFuzzerTestOneInput(const uint8_t* data, size_t size) {
  const absl::string_view bytes(reinterpret_cast<const char*>(data), size);
  auto checkpoint = server::DecodeCheckpoint(bytes);
  if (checkpoint.ok()) {
    for (const v1::PoolCheckpoint& pc : checkpoint->pools()) RestoreAndProbe(pc.spec(), pc.state());
  }
  RestoreAndProbe(fuzz::KitchenSpec(/*pooled=*/false), bytes);
  RestoreAndProbe(fuzz::KitchenSpec(/*pooled=*/true), bytes);
  return 0;
}
