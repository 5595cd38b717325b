// The single writer of one pool: a thread that applies frame batches in arrival order and
// publishes each stream's answers as immutable snapshots, so readers never wait for it.
#ifndef BELLWETHER_SERVER_POOL_WORKER_H_
#define BELLWETHER_SERVER_POOL_WORKER_H_

#include <cstdint>
#include <deque>
#include <memory>
#include <string>
#include <thread>
#include <vector>

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
    absl::Status status;          // first rejected frame's error, if any
    uint64_t applied_seq = 0;     // the stream's last applied seq after the batch
    uint64_t frames_applied = 0;  // frames of this batch applied
  };

  // One version of the pool's spec. An ingest session is bound to the generation it
  // opened with; after the spec changes, its batches are refused (FAILED_PRECONDITION).
  struct Generation {
    uint64_t id = 0;
    v1::PoolSpec spec;
    std::vector<std::string> signal_names;
  };

  // Takes ownership of `pool` and starts the writer thread.
  explicit PoolWorker(std::unique_ptr<Pool> pool);
  // Applies every queued task, then stops the thread.
  ~PoolWorker();

  PoolWorker(const PoolWorker&) = delete;
  PoolWorker& operator=(const PoolWorker&) = delete;

  // The current spec generation. Thread-safe.
  std::shared_ptr<const Generation> current() const;

  // Queues `batch` of `stream` (columns mapped by `columns`, made for generation
  // `generation`) and waits until the writer has applied it. Frames are applied in
  // order; the first bad frame stops the batch, and its error is returned with the
  // frames before it applied. Thread-safe.
  BatchResult ApplyBatch(const std::string& stream, const ColumnMap& columns,
                         uint64_t generation, const v1::FrameBatch& batch);

  // Replaces the pool's spec in the writer thread, between batches, keeping what the
  // pool learned for unchanged questions (Pool::CreateFrom). On error nothing changes.
  // Thread-safe.
  absl::Status Replace(const v1::PoolSpec& spec);

  // The stream's answers as of its last applied batch, or nullptr if it has none.
  // Thread-safe; never waits for the writer.
  std::shared_ptr<const v1::StreamPredictions> Snapshot(const std::string& stream) const;

 private:
  struct Task {
    const std::string* stream = nullptr;
    const ColumnMap* columns = nullptr;
    uint64_t generation = 0;
    const v1::FrameBatch* batch = nullptr;
    BatchResult* result = nullptr;
    const v1::PoolSpec* replace = nullptr;  // a spec change instead of a batch
    absl::Status* replace_status = nullptr;
    bool done = false;
  };

  void Run();
  void ApplyTask(Task& task);
  void ReplaceTask(Task& task);
  void Publish(const std::string& stream);
  void Enqueue(Task* task);

  std::unique_ptr<Pool> pool_;  // touched only by the writer thread

  mutable absl::Mutex generation_mu_;
  std::shared_ptr<const Generation> generation_ ABSL_GUARDED_BY(generation_mu_);

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
