#include "server/pool_worker.h"

#include <utility>

#include "absl/strings/str_cat.h"

namespace bellwether::server {

PoolWorker::PoolWorker(std::unique_ptr<Pool> pool) : pool_(std::move(pool)) {
  auto g = std::make_shared<Generation>();
  g->id = 1;
  g->spec = pool_->spec().proto;
  g->signal_names = pool_->spec().signal_names;
  generation_ = std::move(g);
  thread_ = std::thread([this] { Run(); });
}

PoolWorker::~PoolWorker() {
  {
    absl::MutexLock lock(&queue_mu_);
    stopping_ = true;
  }
  thread_.join();
}

std::shared_ptr<const PoolWorker::Generation> PoolWorker::current() const {
  absl::MutexLock lock(&generation_mu_);
  return generation_;
}

void PoolWorker::Enqueue(Task* task) {
  absl::MutexLock lock(&queue_mu_);
  // Flow control: wait for room rather than grow the queue.
  queue_mu_.Await(absl::Condition(
      +[](std::deque<Task*>* q) { return q->size() < kQueueCapacity; }, &queue_));
  queue_.push_back(task);
  queue_mu_.Await(absl::Condition(+[](Task* t) { return t->done; }, task));
}

PoolWorker::BatchResult PoolWorker::ApplyBatch(const std::string& stream,
                                               const ColumnMap& columns, uint64_t generation,
                                               const v1::FrameBatch& batch) {
  BatchResult result;
  Task task;
  task.stream = &stream;
  task.columns = &columns;
  task.generation = generation;
  task.batch = &batch;
  task.result = &result;
  Enqueue(&task);
  return result;
}

absl::Status PoolWorker::Replace(const v1::PoolSpec& spec) {
  absl::Status status;
  Task task;
  task.replace = &spec;
  task.replace_status = &status;
  Enqueue(&task);
  return status;
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
    if (task->replace != nullptr) {
      ReplaceTask(*task);
    } else {
      ApplyTask(*task);
    }
    absl::MutexLock lock(&queue_mu_);
    task->done = true;
  }
}

void PoolWorker::ReplaceTask(Task& task) {
  auto next = Pool::CreateFrom(*pool_, *task.replace);
  if (!next.ok()) {
    *task.replace_status = next.status();
    return;
  }
  pool_ = std::move(*next);
  auto g = std::make_shared<Generation>();
  g->spec = pool_->spec().proto;
  g->signal_names = pool_->spec().signal_names;
  {
    absl::MutexLock lock(&generation_mu_);
    g->id = generation_->id + 1;
    generation_ = std::move(g);
  }
  for (const std::string& stream : pool_->stream_names()) Publish(stream);
}

void PoolWorker::Publish(const std::string& stream) {
  auto snapshot = std::make_shared<v1::StreamPredictions>();
  if (pool_->GetPredictions(stream, snapshot.get()).ok()) {
    absl::MutexLock lock(&snapshot_mu_);
    snapshots_[stream] = std::move(snapshot);
  }
}

void PoolWorker::ApplyTask(Task& task) {
  BatchResult& r = *task.result;
  {
    absl::MutexLock lock(&generation_mu_);
    if (task.generation != generation_->id) {
      r.status = absl::FailedPreconditionError(
          absl::StrCat("pool ", generation_->spec.name(),
                       " was changed by ApplyPool after this ingest stream opened; reopen it"));
    }
  }
  if (!r.status.ok()) {
    r.applied_seq = pool_->last_seq(*task.stream);
    return;
  }
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
  if (r.frames_applied > 0) Publish(*task.stream);
}

}  // namespace bellwether::server
