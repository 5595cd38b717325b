// The single writer of one pool: a thread that applies frame batches in arrival order and
// publishes each stream's answers as immutable snapshots, so readers never wait for it.
#ifndef BELLWETHER_SERVER_POOL_WORKER_H_
#define BELLWETHER_SERVER_POOL_WORKER_H_

#include <cstdint>
#include <deque>
#include <memory>
#include <string>
#include <thread>

#include "absl/base/thread_annotations.h"
#include "absl/container/flat_hash_map.h"
#include "absl/status/status.h"
#include "absl/synchronization/mutex.h"
#include "bellwether/v1/frame.pb.h"
#include "bellwether/v1/prediction.pb.h"
#include "core/frame_input.h"
#include "core/pool.h"

namespace bellwether::server {

class PoolWorker {
 public:
  // Batches waiting for the writer; a producer that finds the queue full waits.
  static constexpr size_t kQueueCapacity = 64;

  struct BatchResult {
    absl::Status status;        // first rejected frame's error, if any
    uint64_t applied_seq = 0;   // the stream's last applied seq after the batch
    uint64_t frames_applied = 0;  // frames of this batch applied
  };

  // Takes ownership of `pool` and starts the writer thread.
  explicit PoolWorker(std::unique_ptr<Pool> pool);
  // Applies every queued batch, then stops the thread.
  ~PoolWorker();

  PoolWorker(const PoolWorker&) = delete;
  PoolWorker& operator=(const PoolWorker&) = delete;

  // The spec the pool was created from (immutable).
  const v1::PoolSpec& spec() const { return spec_; }
  const std::vector<std::string>& signal_names() const { return signal_names_; }

  // Queues `batch` of `stream` (columns mapped by `columns`, which must outlive the call)
  // and waits until the writer has applied it. Frames are applied in order; the first
  // bad frame stops the batch, and its error is returned with the frames before it
  // applied. Thread-safe.
  BatchResult ApplyBatch(const std::string& stream, const ColumnMap& columns,
                         const v1::FrameBatch& batch);

  // The stream's answers as of its last applied batch, or nullptr if it has none.
  // Thread-safe; never waits for the writer.
  std::shared_ptr<const v1::StreamPredictions> Snapshot(const std::string& stream) const;

 private:
  struct Task {
    const std::string* stream;
    const ColumnMap* columns;
    const v1::FrameBatch* batch;
    BatchResult* result;
    bool done = false;
  };

  void Run();
  void ApplyTask(Task& task);

  const v1::PoolSpec spec_;
  const std::vector<std::string> signal_names_;
  std::unique_ptr<Pool> pool_;  // touched only by the writer thread

  mutable absl::Mutex queue_mu_;
  std::deque<Task*> queue_ ABSL_GUARDED_BY(queue_mu_);
  bool stopping_ ABSL_GUARDED_BY(queue_mu_) = false;

  mutable absl::Mutex snapshot_mu_;
  absl::flat_hash_map<std::string, std::shared_ptr<const v1::StreamPredictions>> snapshots_
      ABSL_GUARDED_BY(snapshot_mu_);

  // Writer-thread scratch.
  std::vector<double> values_;
  std::thread thread_;
};

}  // namespace bellwether::server

#endif  // BELLWETHER_SERVER_POOL_WORKER_H_
