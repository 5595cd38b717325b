// Writes checkpoints of every pool: periodically (every `interval`, or sooner once
// `frames` frames were applied since the last one), on request, and at clean shutdown.
// Each pool is captured by its own writer between two batches (ingest pauses only for
// that pool, only while its state is copied out), then the file is written durably and
// the log is trimmed behind it.
#ifndef BELLWETHER_SERVER_CHECKPOINTER_H_
#define BELLWETHER_SERVER_CHECKPOINTER_H_

#include <atomic>
#include <cstdint>
#include <string>
#include <thread>

#include "absl/base/thread_annotations.h"
#include "absl/status/statusor.h"
#include "absl/synchronization/mutex.h"
#include "absl/time/time.h"
#include "bellwether/v1/service.pb.h"
#include "server/pool_registry.h"
#include "server/thread_priority.h"
#include "server/wal.h"

namespace bellwether::server {

class Checkpointer {
 public:
  struct Options {
    std::string dir;
    absl::Duration interval = absl::Minutes(5);
    uint64_t frames = 1'000'000;
    // Of the checkpoint thread (it copies and writes the whole state).
    BackgroundPriority priority = BackgroundPriority::kLow;
  };

  // `registry`, `wal` and `frames_applied` must outlive the checkpointer. Starts the
  // periodic thread. `loaded_start_lsn`: the start LSN of the checkpoint recovery loaded
  // (0 if none). The log is trimmed only behind the previous checkpoint, so falling back
  // to it still finds every record it needs.
  Checkpointer(PoolRegistry* registry, Wal* wal, const std::atomic<uint64_t>* frames_applied,
               Options options, uint64_t loaded_start_lsn = 0);
  ~Checkpointer();  // stops the thread (no final checkpoint: call CheckpointNow)

  // Writes one now. Serialized with the periodic ones. Thread-safe.
  absl::StatusOr<v1::CheckpointResponse> CheckpointNow();

 private:
  void Loop();

  PoolRegistry* const registry_;
  Wal* const wal_;
  const std::atomic<uint64_t>* const frames_applied_;
  const Options options_;
  absl::Mutex run_mu_;  // one checkpoint at a time
  absl::Mutex mu_;
  bool stop_ ABSL_GUARDED_BY(mu_) = false;
  std::atomic<uint64_t> frames_at_last_{0};
  uint64_t previous_start_lsn_ ABSL_GUARDED_BY(run_mu_) = 0;
  std::thread thread_;
};

}  // namespace bellwether::server

#endif  // BELLWETHER_SERVER_CHECKPOINTER_H_
