#include "server/pool_worker.h"

#include <utility>

namespace bellwether::server {

PoolWorker::PoolWorker(std::unique_ptr<Pool> pool)
    : spec_(pool->spec().proto),
      signal_names_(pool->spec().signal_names),
      pool_(std::move(pool)),
      thread_([this] { Run(); }) {}

PoolWorker::~PoolWorker() {
  {
    absl::MutexLock lock(&queue_mu_);
    stopping_ = true;
  }
  thread_.join();
}

PoolWorker::BatchResult PoolWorker::ApplyBatch(const std::string& stream,
                                               const ColumnMap& columns,
                                               const v1::FrameBatch& batch) {
  BatchResult result;
  Task task{&stream, &columns, &batch, &result};
  absl::MutexLock lock(&queue_mu_);
  // Flow control: wait for room rather than grow the queue.
  queue_mu_.Await(absl::Condition(
      +[](std::deque<Task*>* q) { return q->size() < kQueueCapacity; }, &queue_));
  queue_.push_back(&task);
  queue_mu_.Await(absl::Condition(+[](Task* t) { return t->done; }, &task));
  return result;
}

std::shared_ptr<const v1::StreamPredictions> PoolWorker::Snapshot(
    const std::string& stream) const {
  absl::MutexLock lock(&snapshot_mu_);
  auto it = snapshots_.find(stream);
  return it == snapshots_.end() ? nullptr : it->second;
}

void PoolWorker::Run() {
  while (true) {
    Task* task = nullptr;
    {
      absl::MutexLock lock(&queue_mu_);
      queue_mu_.Await(absl::Condition(
          +[](PoolWorker* w) ABSL_EXCLUSIVE_LOCKS_REQUIRED(w->queue_mu_) {
            return w->stopping_ || !w->queue_.empty();
          },
          this));
      if (queue_.empty()) return;  // stopping with nothing left
      task = queue_.front();
      queue_.pop_front();
    }
    ApplyTask(*task);
    absl::MutexLock lock(&queue_mu_);
    task->done = true;
  }
}

void PoolWorker::ApplyTask(Task& task) {
  BatchResult& r = *task.result;
  FrameInput input;
  for (const v1::Frame& frame : task.batch->frames()) {
    absl::Status s = FrameFromProto(frame, *task.columns, &values_, &input);
    if (s.ok()) s = pool_->Apply(*task.stream, input);
    if (!s.ok()) {
      r.status = std::move(s);
      break;
    }
    ++r.frames_applied;
  }
  r.applied_seq = pool_->last_seq(*task.stream);
  if (r.frames_applied == 0) return;
  auto snapshot = std::make_shared<v1::StreamPredictions>();
  if (pool_->GetPredictions(*task.stream, snapshot.get()).ok()) {
    absl::MutexLock lock(&snapshot_mu_);
    snapshots_[*task.stream] = std::move(snapshot);
  }
}

}  // namespace bellwether::server
