// The write-ahead log: accepted frame batches and pool-spec changes, appended in the
// order pools apply them, in segment files `wal-<first LSN, 20 digits>.log` under the
// state directory. Each record is framed as
//   [uint32 payload length][uint32 CRC-32C of the payload][payload: a WalRecord]
// (little-endian). One flusher thread makes appended records durable with fdatasync,
// grouping whatever was appended while the previous sync ran (group commit), and then
// runs the callbacks waiting for those LSNs.
//
// Sync modes: kBatch (the default) acknowledges a batch only after its record is on
// disk: a crash of the process or the machine loses nothing acknowledged. kNone
// acknowledges as soon as the record is written to the kernel: a process crash loses
// nothing, a machine crash or power loss can lose the last seconds of acknowledged frames.
//
// An fdatasync failure is fatal: the process logs it and exits (status 3), because the
// kernel may have dropped the pages and a retry could report success over lost data.
#ifndef BELLWETHER_SERVER_WAL_H_
#define BELLWETHER_SERVER_WAL_H_

#include <cstdint>
#include <deque>
#include <functional>
#include <string>
#include <thread>
#include <utility>
#include <vector>

#include "absl/base/thread_annotations.h"
#include "absl/status/status.h"
#include "absl/status/statusor.h"
#include "absl/synchronization/mutex.h"
#include "bellwether/v1/state.pb.h"

namespace bellwether::server {

class Wal {
 public:
  enum class Sync { kBatch, kNone };

  struct Options {
    std::string dir;
    Sync sync = Sync::kBatch;
    uint64_t segment_bytes = uint64_t{64} << 20;
    // Testing only: appends fail with RESOURCE_EXHAUSTED (as on a full disk) once this
    // many bytes were written by this process; 0 = never.
    uint64_t fail_after_bytes = 0;
  };

  // Starts a new segment whose first record will have `next_lsn`.
  static absl::StatusOr<std::unique_ptr<Wal>> Open(Options options, uint64_t next_lsn);
  // Syncs what was appended, runs pending callbacks, closes.
  ~Wal();

  Wal(const Wal&) = delete;
  Wal& operator=(const Wal&) = delete;

  // Appends `record` (its lsn is set here) and returns the LSN. RESOURCE_EXHAUSTED when
  // the disk is full: nothing of the record stays in the log. Thread-safe.
  absl::StatusOr<uint64_t> Append(v1::WalRecord& record);

  // Runs `done` once every record up to `lsn` is durable: on the flusher thread, or at
  // once (on this thread) if it already is or the sync mode is kNone. Callbacks run in
  // LSN order. Thread-safe.
  void WhenDurable(uint64_t lsn, std::function<void()> done);

  // The last LSN appended (0 if none this run and `next_lsn` was 1).
  uint64_t last_lsn() const;

  // Deletes whole segments whose records all have LSN <= `lsn` (never the open one).
  void TrimThrough(uint64_t lsn);

  Sync sync() const { return options_.sync; }
  uint64_t bytes_written() const;

 private:
  explicit Wal(Options options) : options_(std::move(options)) {}
  absl::Status OpenSegment(uint64_t first_lsn) ABSL_EXCLUSIVE_LOCKS_REQUIRED(mu_);
  void FlushLoop();

  const Options options_;
  mutable absl::Mutex mu_;
  int fd_ ABSL_GUARDED_BY(mu_) = -1;
  std::string framed_ ABSL_GUARDED_BY(mu_);  // Append's record buffer
  uint64_t segment_size_ ABSL_GUARDED_BY(mu_) = 0;
  uint64_t next_lsn_ ABSL_GUARDED_BY(mu_) = 1;
  uint64_t appended_lsn_ ABSL_GUARDED_BY(mu_) = 0;
  uint64_t durable_lsn_ ABSL_GUARDED_BY(mu_) = 0;
  uint64_t bytes_written_ ABSL_GUARDED_BY(mu_) = 0;
  // Segments by first LSN, oldest first (the last is open).
  std::vector<std::pair<uint64_t, std::string>> segments_ ABSL_GUARDED_BY(mu_);
  // Closed segments not yet synced (rotation hands them to the flusher).
  std::vector<int> to_sync_and_close_ ABSL_GUARDED_BY(mu_);
  std::deque<std::pair<uint64_t, std::function<void()>>> waiters_ ABSL_GUARDED_BY(mu_);
  bool stop_ ABSL_GUARDED_BY(mu_) = false;
  std::thread flusher_;
};

// Reads every record of the log in `dir` in LSN order, calling `fn` for each with LSN >
// `after_lsn`. A bad record (short, bad CRC, unparsable, LSN out of order) in the LAST
// segment ends the log there (a torn write at a crash): it and everything after it are
// dropped, and `warning` says so; with `repair` the segment is cut there (so the next
// start does not meet the same damage in a non-last segment). A bad record in an earlier
// segment is DATA_LOSS naming the file and offset. `next_lsn` receives the LSN the next
// record should have; `first_lsn` (if non-null) the first segment's first LSN (0 when the
// log is empty).
absl::Status ReadWal(const std::string& dir, uint64_t after_lsn,
                     const std::function<absl::Status(const v1::WalRecord&)>& fn,
                     uint64_t* next_lsn, std::string* warning, bool repair = false,
                     uint64_t* first_lsn = nullptr);

}  // namespace bellwether::server

#endif  // BELLWETHER_SERVER_WAL_H_
