// The single writer of one pool: a thread that applies frame batches in arrival order and
// publishes each stream's answers as immutable snapshots, so readers never wait for it.
//
// Producers hand batches over through a bounded queue and never learn on their own
// threads: Submit() either queues a batch (its callback runs on the writer thread once
// the batch is applied) or refuses it at once when the queue is full, so memory never
// grows with a producer that outpaces the engine.
#ifndef BELLWETHER_SERVER_POOL_WORKER_H_
#define BELLWETHER_SERVER_POOL_WORKER_H_

#include <atomic>
#include <chrono>
#include <cstdint>
#include <deque>
#include <functional>
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
#include "bellwether/v1/service.pb.h"
#include "bellwether/v1/state.pb.h"
#include "core/frame_input.h"
#include "core/pool.h"
#include "google/protobuf/arena.h"
#include "server/pool_metrics.h"
#include "server/stream_history.h"
#include "server/thread_priority.h"
#include "server/wal.h"

namespace bellwether::server {

class PoolWorker {
 public:
  // Batches (and spec changes) waiting for the writer, across all of the pool's streams.
  static constexpr size_t kDefaultQueueCapacity = 64;

  struct Options {
    size_t queue_capacity = kDefaultQueueCapacity;
    // Streams of this pool that keep a history for the status page and Progress (the
    // first ones to send frames); 0 keeps none.
    size_t history_streams = 16;
    size_t history_points = StreamHistory::kDefaultPoints;
    // Metrics sink; may be null (tests). Its series go when the worker goes.
    std::shared_ptr<PoolMetrics> metrics;
    // The write-ahead log (null: no durability). Must outlive the worker.
    Wal* wal = nullptr;
    // Counts applied frames across the daemon (for checkpoint scheduling); may be null.
    std::atomic<uint64_t>* frames_applied_total = nullptr;
    // Limits: a batch that would start a stream past either is refused whole with
    // RESOURCE_EXHAUSTED (refusal reason "stream_limit").
    size_t max_streams = 100000;
    uint64_t max_pool_bytes = uint64_t{2047} << 20;
    // Frames per second one stream may send, averaged over a token bucket that holds one
    // second's worth (a batch is admitted while the bucket is not empty and may leave it
    // in debt, so any batch size gets through at the average rate). A batch past it is
    // refused at Submit with RESOURCE_EXHAUSTED (refusal reason "rate_limited").
    // 0: no limit.
    double max_stream_frames_per_second = 0;
    // Threads that apply batches, those of DIFFERENT streams at once for pools whose
    // streams learn independently (Pool::supports_concurrent_streams). Each thread
    // takes the oldest queued batch whose stream no other thread is applying and that
    // no older queued task must precede, so a stream's batches still apply one at a
    // time and in order, and no thread waits for another's batch to end. Spec changes,
    // checkpoints and a stream's first batch run alone. 1 (or 0): one writer thread.
    size_t writer_threads = 1;
    // Scheduling priority of those threads (server/thread_priority.h; the daemon's
    // --background-priority), so that RPC threads answering Predict run first when the
    // cores are busy learning.
    BackgroundPriority applier_priority = BackgroundPriority::kNormal;
  };

  // The outcome of one batch.
  struct BatchResult {
    // OK, or why the whole batch was refused (nothing of it applied): the spec changed
    // since the stream opened (FAILED_PRECONDITION) or the pool was deleted (NOT_FOUND).
    absl::Status status;
    uint64_t applied_seq = 0;     // the stream's last applied seq after the batch
    uint64_t frames_applied = 0;  // frames of this batch applied
    uint64_t duplicates = 0;      // frames at or below the stream's applied seq, skipped
    // The stream's last seq whose frames are on disk (equal to applied_seq once the
    // batch's log record is durable, which is when the callback runs; 0 without a log).
    uint64_t durable_seq = 0;
    std::vector<v1::FrameRejection> rejected;
    // The stream's answers after the batch (when asked for and any frame applied).
    std::shared_ptr<const v1::StreamPredictions> predictions;
  };

  // Everything a reader may want about one stream, published after each batch. The
  // message lives on an arena of its own, made in a block or two and freed at once: the
  // writer publishes one per batch, where building and freeing a heap message cost an
  // allocation per field. `block_hint` sizes the arena's first block (0: the default;
  // the writer passes the previous snapshot's size).
  struct StreamSnapshot {
    explicit StreamSnapshot(size_t block_hint = 0);
    StreamSnapshot(const StreamSnapshot&) = delete;
    StreamSnapshot& operator=(const StreamSnapshot&) = delete;
    google::protobuf::Arena arena;  // first: destroyed last
    v1::StreamPredictions& predictions;
    uint64_t frames_applied = 0;
    uint64_t frames_rejected = 0;
  };

  // One version of the pool's spec. An ingest session is bound to the generation it
  // opened with; after the spec changes, its batches are refused (FAILED_PRECONDITION).
  struct Generation {
    uint64_t id = 0;
    v1::PoolSpec spec;
    std::vector<std::string> signal_names;
    std::vector<std::string> question_names;  // visible questions, spec order
    std::vector<std::string> question_units;
  };

  // Takes ownership of `pool` and starts the writer thread. `generation` and `last_lsn`
  // continue a recovered pool's.
  PoolWorker(std::unique_ptr<Pool> pool, Options options, uint64_t generation = 1,
             uint64_t last_lsn = 0);
  // Applies every queued task, then stops the thread. Must not run on the writer thread.
  ~PoolWorker();

  PoolWorker(const PoolWorker&) = delete;
  PoolWorker& operator=(const PoolWorker&) = delete;

  const std::string& name() const { return name_; }

  // The current spec generation. Thread-safe.
  std::shared_ptr<const Generation> current() const;

  // A batch of `stream` (columns mapped by `columns`, made for generation `generation`).
  // `stream`, `columns` and `batch` must outlive the callback.
  struct BatchTask {
    const std::string* stream = nullptr;
    const ColumnMap* columns = nullptr;
    uint64_t generation = 0;
    const v1::FrameBatch* batch = nullptr;
    bool want_predictions = false;
    // Runs on the thread that applied the batch, after it; must not block.
    std::function<void(BatchResult)> done;
  };

  // Queues a batch. Returns RESOURCE_EXHAUSTED (the task is dropped, its callback never
  // runs) when the queue is full, NOT_FOUND if the pool was deleted. Thread-safe.
  absl::Status Submit(BatchTask task);

  // Queues `batch` and waits for it (for in-process callers and tests); RESOURCE_EXHAUSTED
  // when the queue is full.
  BatchResult ApplyBatch(const std::string& stream, const ColumnMap& columns, uint64_t generation,
                         const v1::FrameBatch& batch);

  // Replaces the pool's spec in the writer thread, between batches, keeping what the
  // pool learned for unchanged questions (Pool::CreateFrom). Waits for room in the queue
  // rather than failing. On error nothing changes. Thread-safe.
  absl::Status Replace(const v1::PoolSpec& spec);

  // A checkpoint of the pool taken between batches (spec, generation, state and the last
  // log LSN it includes). Waits for room in the queue. NOT_FOUND if the pool was deleted.
  absl::StatusOr<v1::PoolCheckpoint> Capture();

  // The stream's last seq on disk (its applied seq when there is no log).
  uint64_t DurableSeq(const std::string& stream) const;

  // Refuses every later batch with NOT_FOUND (the registry dropped the pool). Queued
  // batches are refused too. Thread-safe.
  void MarkDeleted();

  // The stream's state as of its last applied batch, or nullptr if it has none.
  // Thread-safe; never waits for the writer.
  std::shared_ptr<const StreamSnapshot> Snapshot(const std::string& stream) const;
  // Every stream's snapshot, in name order. Thread-safe.
  std::vector<std::shared_ptr<const StreamSnapshot>> Snapshots() const;

  // The stream's history (empty with `kept` false when the stream keeps none).
  // Thread-safe; holds the history lock only while copying.
  void History(const std::string& stream, const std::vector<size_t>& questions,
               std::vector<v1::QuestionHistory>* out, bool* kept) const;

  // The pool's metrics (null without metrics).
  PoolMetrics* metrics() const { return options_.metrics.get(); }

  // Batches and spec changes waiting for the writer.
  size_t queue_depth() const { return queue_depth_.load(std::memory_order_relaxed); }
  // Batches applied beside others of different streams (Options::writer_threads).
  uint64_t concurrent_batches() const { return concurrent_batches_.load(); }

 private:
  struct Task {
    BatchTask batch;
    const v1::PoolSpec* replace = nullptr;  // a spec change instead of a batch
    v1::PoolCheckpoint* capture = nullptr;  // a checkpoint instead of a batch
    absl::Status* replace_status = nullptr;
    bool* replace_done = nullptr;
  };
  // Queues a spec change or capture and waits for it.
  void RunBlocking(Task task, bool* done);

  // What one applying thread uses: scratch, and the verified points of its current batch.
  struct ApplyContext {
    std::unique_ptr<Pool::Workspace> workspace;
    std::vector<double> values;
    std::vector<Pool::ProgressSample> progress;  // progress samples (reused)
    // Verified points gathered during a batch, moved into `history_` after it.
    std::vector<StreamHistory::Verified> pending_points;
    const std::string* current_stream = nullptr;
    // The stream of the batch this thread runs (a copy: the batch's own name may be
    // freed once its callback ran), and whether it runs one; guarded by queue_mu_.
    std::string running_stream;
    bool running = false;
  };
  // The context of the batch this thread is applying, for the verification sink.
  static thread_local ApplyContext* current_context_;

  // The loop of each applying thread.
  void Run(ApplyContext* context);
  // Waits for a task this thread may run now (see Options::writer_threads), takes it out
  // of the queue into `task` and marks it running. False when stopping with the queue
  // empty.
  bool Take(Task* task, ApplyContext* context);
  // Marks the task done (its stream free again, or the pool no longer held alone).
  void Finish(const Task& task, ApplyContext* context);
  // The index of the first queued task that may run now (`alone`: whether it must run
  // with nothing else running), or -1.
  int RunnableLocked(bool* alone) const ABSL_SHARED_LOCKS_REQUIRED(queue_mu_);
  // A task that must run with nothing else running: a spec change, a capture, a batch of
  // a stream that does not exist yet, or any batch of a pool whose streams share what
  // they learn. Reads the pool: only while no task runs alone.
  bool RunsAloneLocked(const Task& task) const ABSL_SHARED_LOCKS_REQUIRED(queue_mu_);
  bool CanTakeLocked() const ABSL_SHARED_LOCKS_REQUIRED(queue_mu_) {
    bool alone;
    return RunnableLocked(&alone) >= 0 || (stopping_ && queue_.empty());
  }
  void ApplyTask(Task& task, ApplyContext& context);
  void ReplaceTask(Task& task);
  void Publish(const std::string& stream);
  void InstallSink();
  std::shared_ptr<Generation> MakeGeneration(uint64_t id) const;

  const std::string name_;
  const Options options_;
  std::unique_ptr<Pool> pool_;  // touched only by the writer thread

  mutable absl::Mutex generation_mu_;
  std::shared_ptr<const Generation> generation_ ABSL_GUARDED_BY(generation_mu_);
  std::atomic<bool> deleted_{false};

  mutable absl::Mutex queue_mu_;
  std::deque<Task> queue_ ABSL_GUARDED_BY(queue_mu_);
  bool stopping_ ABSL_GUARDED_BY(queue_mu_) = false;
  std::atomic<size_t> queue_depth_{0};
  // Per-stream frame-rate buckets (Options::max_stream_frames_per_second).
  struct RateBucket {
    double tokens = 0;
    std::chrono::steady_clock::time_point last;
  };
  absl::flat_hash_map<std::string, RateBucket> rate_ ABSL_GUARDED_BY(queue_mu_);
  // Size past which idle buckets are swept; doubles with what a sweep keeps, so a map
  // of many live streams is not scanned on every batch.
  size_t rate_sweep_at_ ABSL_GUARDED_BY(queue_mu_) = 0;
  // Whether `frames` more frames of `stream` are within the rate; takes them if so.
  bool AdmitFramesLocked(const std::string& stream, size_t frames)
      ABSL_EXCLUSIVE_LOCKS_REQUIRED(queue_mu_);

  mutable absl::Mutex snapshot_mu_;
  absl::flat_hash_map<std::string, std::shared_ptr<const StreamSnapshot>> snapshots_
      ABSL_GUARDED_BY(snapshot_mu_);

  // Writer-thread state.
  struct StreamCounts {
    uint64_t applied = 0;
    uint64_t rejected = 0;
  };
  // Entries are added only by a task that runs alone (a stream's first batch, or a
  // batch whose stream has none yet runs alone), so concurrent threads only look up.
  absl::flat_hash_map<std::string, StreamCounts> counts_;

  mutable absl::Mutex history_mu_;
  absl::flat_hash_map<std::string, std::unique_ptr<StreamHistory>> history_
      ABSL_GUARDED_BY(history_mu_);

  std::atomic<uint64_t> last_lsn_{0};  // the highest LSN this pool appended
  StateEstimate estimate_;  // writer thread: the current spec's state sizes
  std::atomic<int64_t> pending_durable_{0};  // batch callbacks waiting for the log
  mutable absl::Mutex durable_mu_;
  absl::flat_hash_map<std::string, uint64_t> durable_seq_ ABSL_GUARDED_BY(durable_mu_);

  // One context per applying thread (Options::writer_threads, at least one); the
  // vector is fixed after construction.
  std::vector<std::unique_ptr<ApplyContext>> contexts_;
  std::vector<std::thread> threads_;
  // How many tasks run now, and whether one holds the pool alone.
  size_t running_ ABSL_GUARDED_BY(queue_mu_) = 0;
  bool running_alone_ ABSL_GUARDED_BY(queue_mu_) = false;
  std::atomic<uint64_t> concurrent_batches_{0};
};

// A short label for why a frame was rejected, for metrics: "seq", "values", "missing",
// "action", "behavior_prob", "time" or "other".
std::string RejectionReason(absl::string_view message);

}  // namespace bellwether::server

#endif  // BELLWETHER_SERVER_POOL_WORKER_H_
