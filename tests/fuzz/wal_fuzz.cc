// Fuzzes the write-ahead log reader and recovery (server/wal.h, server/state_dir.h): the
// bytes become the only segment, wal-00000000000000000001.log, of an otherwise empty
// state directory (under $BELLWETHER_FUZZ_SCRATCH if set, else in /dev/shm when it
// exists, so no disk is touched), then
//   1. ReadWal(dir, 0, ...) without repair;
//   2. Recover(dir), which replays the log into pools (creating them from the log's
//      spec records) and cuts a torn tail.
// Errors are expected; crashes, sanitizer reports and broken invariants are not: records
// reach the callback in increasing LSN order, next_lsn follows the last of them, and
// every recovered pool takes valid frames, answers and round-trips its state.
//
// Every record carries a CRC-32C of its payload, which random mutation almost never
// keeps right, so the fuzzer would rarely get past the framing. The custom mutator below
// re-frames three mutants in four (lengths cut to what is left, CRCs recomputed); the
// fourth keeps whatever framing the mutation left, for the checks of the framing itself.
#include <unistd.h>

#include <cstddef>
#include <cstdint>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <string>
#include <system_error>

#include "absl/status/status.h"
#include "bellwether/v1/state.pb.h"
#include "core/io/crc32c.h"
#include "server/state_dir.h"
#include "server/wal.h"
#include "tests/fuzz/fuzz_pools.h"

namespace {

using namespace bellwether;
namespace fs = std::filesystem;

// One directory per process, removed at exit (a crash leaves it behind: run.sh points
// BELLWETHER_FUZZ_SCRATCH at a directory of its own, which it removes).
class TempDir {
 public:
  TempDir() {
    std::error_code ec;
    const char* scratch = std::getenv("BELLWETHER_FUZZ_SCRATCH");
    std::string base = scratch != nullptr && *scratch != '\0' ? scratch
                       : fs::is_directory("/dev/shm", ec)     ? "/dev/shm"
                                                               : fs::temp_directory_path().string();
    std::string templ = base + "/bellwether-wal-fuzz-XXXXXX";
    if (mkdtemp(templ.data()) == nullptr) fuzz::Broken("mkdtemp failed in " + base);
    path_ = templ;
  }
  ~TempDir() {
    std::error_code ec;
    fs::remove_all(path_, ec);
  }
  const std::string& path() const { return path_; }
  // Leaves the directory empty.
  void Clear() const {
    std::error_code ec;
    for (const auto& e : fs::directory_iterator(path_, ec)) fs::remove_all(e.path(), ec);
  }

 private:
  std::string path_;
};

uint32_t GetU32(const uint8_t* p) {
  return uint32_t{p[0]} | uint32_t{p[1]} << 8 | uint32_t{p[2]} << 16 | uint32_t{p[3]} << 24;
}
void PutU32(uint8_t* p, uint32_t v) {
  for (int i = 0; i < 4; ++i) p[i] = static_cast<uint8_t>(v >> (8 * i));
}

// [uint32 length][uint32 CRC-32C][payload], little-endian, as server/wal.h frames them.
void Reframe(uint8_t* data, size_t size) {
  size_t off = 0;
  while (size - off >= 8) {
    uint32_t len = GetU32(data + off);
    if (len > size - off - 8) {
      len = static_cast<uint32_t>(size - off - 8);
      PutU32(data + off, len);
    }
    const absl::string_view payload(reinterpret_cast<const char*>(data + off + 8), len);
    PutU32(data + off + 4, Crc32c(payload));
    off += 8 + len;
  }
}

}  // namespace

extern "C" size_t LLVMFuzzerMutate(uint8_t* data, size_t size, size_t max_size);

extern "C" size_t LLVMFuzzerCustomMutator(uint8_t* data, size_t size, size_t max_size,
                                          unsigned int seed) {
  size = LLVMFuzzerMutate(data, size, max_size);
  if (seed % 4 != 0) Reframe(data, size);
  return size;
}

extern "C" int LLVMFuzzerTestOneInput(const uint8_t* data, size_t size) {
  static const TempDir dir;
  dir.Clear();
  {
    std::ofstream out(dir.path() + "/wal-00000000000000000001.log", std::ios::binary);
    out.write(reinterpret_cast<const char*>(data), static_cast<std::streamsize>(size));
    if (!out) fuzz::Broken("cannot write the segment in " + dir.path());
  }

  uint64_t last = 0, next_lsn = 0, first_lsn = 0;
  std::string warning;
  const absl::Status read = server::ReadWal(
      dir.path(), 0,
      [&](const v1::WalRecord& r) {
        if (r.lsn() <= last) fuzz::Broken("ReadWal: LSN out of order");
        last = r.lsn();
        return absl::OkStatus();
      },
      &next_lsn, &warning, /*repair=*/false, &first_lsn);
  if (read.ok() && last > 0 && next_lsn != last + 1) {
    fuzz::Broken("ReadWal: next_lsn is not the last LSN + 1");
  }

  auto recovered = server::Recover(dir.path());
  if (recovered.ok()) {
    for (auto& [name, p] : recovered->pools) {
      if (p.pool == nullptr) fuzz::Broken("Recover: pool " + name + " is null");
      fuzz::ProbePool(*p.pool);
      fuzz::CheckRoundTrip(*p.pool);
    }
  }
  return 0;
}
