#include "server/pool_worker.h"

#include <algorithm>
#include <chrono>
#include <utility>

#include "absl/strings/match.h"
#include "absl/strings/str_cat.h"
#include "absl/time/clock.h"
#include "server/thread_priority.h"

namespace bellwether::server {

std::string RejectionReason(absl::string_view message) {
  if (absl::StrContains(message, "seq does not increase") ||
      absl::StrContains(message, "seq must be")) {
    return "seq";
  }
  // Frame errors read "frame seq N: FIELD...: reason".
  const size_t colon = message.find(": ");
  absl::string_view rest = colon == absl::string_view::npos ? message : message.substr(colon + 2);
  for (const char* field : {"values", "missing", "action", "behavior_prob"}) {
    if (absl::StartsWith(rest, field)) return field;
  }
  if (absl::StartsWith(rest, "unix_micros") || absl::StartsWith(rest, "local_micros") ||
      absl::StartsWith(rest, "time")) {
    return "time";
  }
  return "other";
}

thread_local PoolWorker::ApplyContext* PoolWorker::current_context_ = nullptr;

PoolWorker::PoolWorker(std::unique_ptr<Pool> pool, Options options, uint64_t generation,
                       uint64_t last_lsn)
    : name_(pool->name()), options_(options), pool_(std::move(pool)), last_lsn_(last_lsn) {
  estimate_ = EstimateState(pool_->spec());
  generation_ = MakeGeneration(generation);
  for (const std::string& stream : pool_->stream_names()) {
    // Recovered streams: everything applied came from the log, so it is durable.
    durable_seq_[stream] = pool_->last_seq(stream);
    Publish(stream);
  }
  InstallSink();
  for (size_t i = 0; i < std::max<size_t>(options_.writer_threads, 1); ++i) {
    contexts_.push_back(std::make_unique<ApplyContext>());
    contexts_.back()->workspace = pool_->NewWorkspace();
  }
  for (auto& context : contexts_) {
    threads_.emplace_back([this, c = context.get()] {
      NameThisThread("bw-apply");
      SetThisThreadsPriority(options_.applier_priority);
      Run(c);
    });
  }
}

PoolWorker::~PoolWorker() {
  {
    absl::MutexLock lock(&queue_mu_);
    stopping_ = true;
  }
  for (std::thread& t : threads_) t.join();
  // Batch callbacks still waiting for the log's flusher touch this worker: let them run.
  while (pending_durable_.load() > 0) absl::SleepFor(absl::Milliseconds(1));
}

std::shared_ptr<PoolWorker::Generation> PoolWorker::MakeGeneration(uint64_t id) const {
  auto g = std::make_shared<Generation>();
  g->id = id;
  g->spec = pool_->spec().proto;
  g->signal_names = pool_->spec().signal_names;
  for (size_t q = 0; q < pool_->spec().num_visible_questions; ++q) {
    g->question_names.push_back(pool_->spec().questions[q].name);
    g->question_units.push_back(pool_->spec().questions[q].unit);
  }
  return g;
}

void PoolWorker::InstallSink() {
  // Called on whichever thread applies the batch: the points go to that thread's context.
  pool_->SetVerificationSink(
      [this](const std::string& stream, absl::Span<const VerifiedPoint> points) {
        ApplyContext* c = current_context_;
        // Only streams that keep history, and only visible questions.
        if (c == nullptr || c->current_stream == nullptr || stream != *c->current_stream) return;
        const size_t visible = pool_->spec().num_visible_questions;
        for (const VerifiedPoint& p : points) {
          if (p.question >= visible) continue;
          c->pending_points.push_back({p.seq, p.prediction, p.realized, p.question, p.truncated});
        }
      });
}

std::shared_ptr<const PoolWorker::Generation> PoolWorker::current() const {
  absl::MutexLock lock(&generation_mu_);
  return generation_;
}

absl::Status PoolWorker::Submit(BatchTask task) {
  PoolMetrics* m = options_.metrics.get();
  if (deleted_.load()) {
    if (m != nullptr) m->BatchRefused("pool_deleted");
    return absl::NotFoundError(absl::StrCat("pool ", name_, " was deleted"));
  }
  absl::MutexLock lock(&queue_mu_);
  if (queue_.size() >= options_.queue_capacity) {
    if (m != nullptr) m->BatchRefused("queue_full");
    return absl::ResourceExhaustedError(
        absl::StrCat("pool ", name_, ": ingest queue full (", options_.queue_capacity,
                     " batches waiting); back off and retry"));
  }
  if (options_.max_stream_frames_per_second > 0 &&
      !AdmitFramesLocked(*task.stream, static_cast<size_t>(task.batch->frames_size()))) {
    if (m != nullptr) m->BatchRefused("rate_limited");
    return absl::ResourceExhaustedError(absl::StrCat(
        "pool ", name_, ": stream '", *task.stream, "' is sending faster than ",
        options_.max_stream_frames_per_second,
        " frames/s (--max-stream-frames-per-second); back off and retry"));
  }
  Task t;
  t.batch = std::move(task);
  queue_.push_back(std::move(t));
  queue_depth_.store(queue_.size(), std::memory_order_relaxed);
  return absl::OkStatus();
}

bool PoolWorker::AdmitFramesLocked(const std::string& stream, size_t frames) {
  const double rate = options_.max_stream_frames_per_second;
  const auto now = std::chrono::steady_clock::now();
  auto refill = [&](RateBucket& b) {
    const double dt = std::chrono::duration<double>(now - b.last).count();
    b.tokens = std::min(rate, b.tokens + rate * dt);
    b.last = now;
  };
  // A flood of stream ids must not grow this map without bound: past the stream limit,
  // buckets that are full again (idle for a second) are forgotten, which loses nothing.
  const size_t floor = options_.max_streams + 1024;
  if (rate_.size() > std::max(rate_sweep_at_, floor)) {
    absl::erase_if(rate_, [&](auto& entry) {
      refill(entry.second);
      return entry.second.tokens >= rate;
    });
    rate_sweep_at_ = 2 * rate_.size();
  }
  auto [it, inserted] = rate_.try_emplace(stream);
  RateBucket& b = it->second;
  if (inserted) {
    b.tokens = rate;
    b.last = now;
  } else {
    refill(b);
  }
  if (b.tokens <= 0) return false;
  b.tokens -= static_cast<double>(frames);
  return true;
}

PoolWorker::BatchResult PoolWorker::ApplyBatch(const std::string& stream,
                                               const ColumnMap& columns, uint64_t generation,
                                               const v1::FrameBatch& batch) {
  absl::Mutex mu;
  bool done = false;
  BatchResult result;
  BatchTask task;
  task.stream = &stream;
  task.columns = &columns;
  task.generation = generation;
  task.batch = &batch;
  task.done = [&](BatchResult r) {
    absl::MutexLock lock(&mu);
    result = std::move(r);
    done = true;
  };
  if (absl::Status s = Submit(std::move(task)); !s.ok()) {
    result.status = s;
    return result;
  }
  absl::MutexLock lock(&mu);
  mu.Await(absl::Condition(&done));
  return result;
}

void PoolWorker::RunBlocking(Task task, bool* done) {
  absl::MutexLock lock(&queue_mu_);
  // Spec changes and captures wait for room rather than failing: they are rare.
  queue_mu_.Await(absl::Condition(
      +[](PoolWorker* w) ABSL_EXCLUSIVE_LOCKS_REQUIRED(w->queue_mu_) {
        return w->queue_.size() < w->options_.queue_capacity;
      },
      this));
  task.replace_done = done;
  queue_.push_back(std::move(task));
  queue_depth_.store(queue_.size(), std::memory_order_relaxed);
  queue_mu_.Await(absl::Condition(done));
}

absl::Status PoolWorker::Replace(const v1::PoolSpec& spec) {
  absl::Status status;
  bool done = false;
  Task t;
  t.replace = &spec;
  t.replace_status = &status;
  RunBlocking(std::move(t), &done);
  return status;
}

absl::StatusOr<v1::PoolCheckpoint> PoolWorker::Capture() {
  if (deleted_.load()) return absl::NotFoundError(absl::StrCat("pool ", name_, " was deleted"));
  v1::PoolCheckpoint c;
  absl::Status status;
  bool done = false;
  Task t;
  t.capture = &c;
  t.replace_status = &status;
  RunBlocking(std::move(t), &done);
  if (!status.ok()) return status;
  return c;
}

uint64_t PoolWorker::DurableSeq(const std::string& stream) const {
  absl::MutexLock lock(&durable_mu_);
  auto it = durable_seq_.find(stream);
  return it == durable_seq_.end() ? 0 : it->second;
}

void PoolWorker::MarkDeleted() { deleted_.store(true); }

std::shared_ptr<const PoolWorker::StreamSnapshot> PoolWorker::Snapshot(
    const std::string& stream) const {
  absl::MutexLock lock(&snapshot_mu_);
  auto it = snapshots_.find(stream);
  return it == snapshots_.end() ? nullptr : it->second;
}

std::vector<std::shared_ptr<const PoolWorker::StreamSnapshot>> PoolWorker::Snapshots() const {
  std::vector<std::shared_ptr<const StreamSnapshot>> out;
  {
    absl::MutexLock lock(&snapshot_mu_);
    out.reserve(snapshots_.size());
    for (const auto& [name, snap] : snapshots_) out.push_back(snap);
  }
  std::sort(out.begin(), out.end(), [](const auto& a, const auto& b) {
    return a->predictions.stream() < b->predictions.stream();
  });
  return out;
}

void PoolWorker::History(const std::string& stream, const std::vector<size_t>& questions,
                         std::vector<v1::QuestionHistory>* out, bool* kept) const {
  out->clear();
  absl::MutexLock lock(&history_mu_);
  auto it = history_.find(stream);
  *kept = it != history_.end();
  if (!*kept) return;
  const auto g = current();
  for (size_t q : questions) {
    v1::QuestionHistory h;
    if (q < g->question_names.size()) h.set_question(g->question_names[q]);
    it->second->CopyTo(q, &h);
    out->push_back(std::move(h));
  }
}

bool PoolWorker::RunsAloneLocked(const Task& task) const {
  if (task.capture != nullptr || task.replace != nullptr) return true;
  const std::string& stream = *task.batch.stream;
  return !pool_->supports_concurrent_streams() || !pool_->has_stream(stream) ||
         !counts_.contains(stream);
}

int PoolWorker::RunnableLocked(bool* alone) const {
  if (running_alone_ || running_ >= contexts_.size()) return -1;
  auto running = [this](const std::string& stream) {
    for (const auto& c : contexts_) {
      if (c->running && c->running_stream == stream) return true;
    }
    return false;
  };
  // An older queued batch that cannot run has a running stream (nothing else stops it
  // below), so a younger batch of the same stream is held back by the same test.
  for (size_t i = 0; i < queue_.size(); ++i) {
    const Task& t = queue_[i];
    // Nothing passes a task that runs alone, and it waits for everything before it.
    *alone = RunsAloneLocked(t);
    if (*alone) return i == 0 && running_ == 0 ? 0 : -1;
    if (running_ == 0 || !running(*t.batch.stream)) return static_cast<int>(i);
  }
  return -1;
}

bool PoolWorker::Take(Task* task, ApplyContext* context) {
  absl::MutexLock lock(&queue_mu_);
  queue_mu_.Await(absl::Condition(this, &PoolWorker::CanTakeLocked));
  bool alone = false;
  const int i = RunnableLocked(&alone);
  if (i < 0) return false;  // stopping with nothing left
  const auto it = queue_.begin() + i;
  *task = std::move(*it);
  if (alone) {
    running_alone_ = true;
  } else {
    if (running_ > 0) concurrent_batches_.fetch_add(1, std::memory_order_relaxed);
    context->running_stream = *task->batch.stream;  // keeps its capacity: no allocation
    context->running = true;
  }
  ++running_;
  queue_.erase(it);
  queue_depth_.store(queue_.size(), std::memory_order_relaxed);
  return true;
}

void PoolWorker::Finish(const Task& task, ApplyContext* context) {
  absl::MutexLock lock(&queue_mu_);
  --running_;
  running_alone_ = false;
  context->running = false;
  if (task.replace_done != nullptr) *task.replace_done = true;
}

void PoolWorker::Run(ApplyContext* context) {
  Task task;
  while (Take(&task, context)) {
    if (task.capture != nullptr) {
      if (deleted_.load()) {
        *task.replace_status = absl::NotFoundError(absl::StrCat("pool ", name_, " was deleted"));
      } else {
        *task.capture->mutable_spec() = pool_->spec().proto;
        task.capture->set_generation(current()->id);
        task.capture->set_wal_lsn(last_lsn_.load());
        pool_->SaveState(task.capture->mutable_state());
      }
    } else if (task.replace != nullptr) {
      ReplaceTask(task);
    } else {
      ApplyTask(task, *context);
    }
    Finish(task, context);
    task = Task();
  }
}

void PoolWorker::ReplaceTask(Task& task) {
  auto next = Pool::CreateFrom(*pool_, *task.replace);
  if (!next.ok()) {
    *task.replace_status = next.status();
    return;
  }
  if (options_.wal != nullptr) {
    v1::WalRecord rec;
    *rec.mutable_apply() = *task.replace;
    auto lsn = options_.wal->Append(rec);
    if (!lsn.ok()) {
      *task.replace_status = lsn.status();
      return;
    }
    last_lsn_.store(*lsn);
  }
  pool_ = std::move(*next);
  estimate_ = EstimateState(pool_->spec());
  // Scratch sized for the new spec (the other threads wait while a spec change runs alone).
  for (auto& c : contexts_) c->workspace = pool_->NewWorkspace();
  InstallSink();
  {
    absl::MutexLock lock(&generation_mu_);
    generation_ = MakeGeneration(generation_->id + 1);
  }
  {
    // Question indices changed: histories start over.
    absl::MutexLock lock(&history_mu_);
    for (auto& [stream, h] : history_) {
      h = std::make_unique<StreamHistory>(pool_->spec().num_visible_questions,
                                          options_.history_points);
    }
  }
  counts_.clear();
  for (const std::string& stream : pool_->stream_names()) Publish(stream);
}

namespace {

google::protobuf::ArenaOptions SnapshotArenaOptions(size_t block_hint) {
  google::protobuf::ArenaOptions options;
  if (block_hint > 0) {
    // Room for the previous snapshot's message and a little more, in one block.
    options.start_block_size = std::max<size_t>(block_hint + block_hint / 8, 1024);
    options.max_block_size = std::max(options.max_block_size, options.start_block_size);
  }
  return options;
}

}  // namespace

PoolWorker::StreamSnapshot::StreamSnapshot(size_t block_hint)
    : arena(SnapshotArenaOptions(block_hint)),
      predictions(*google::protobuf::Arena::CreateMessage<v1::StreamPredictions>(&arena)) {}

void PoolWorker::Publish(const std::string& stream) {
  size_t block_hint = 0;
  {
    absl::MutexLock lock(&snapshot_mu_);
    auto it = snapshots_.find(stream);
    if (it != snapshots_.end() && it->second != nullptr) {
      block_hint = static_cast<size_t>(it->second->arena.SpaceUsed());
    }
  }
  auto snapshot = std::make_shared<StreamSnapshot>(block_hint);
  if (!pool_->GetPredictions(stream, &snapshot->predictions).ok()) return;
  const StreamCounts& c = counts_[stream];
  snapshot->frames_applied = pool_->frames_applied(stream);
  snapshot->frames_rejected = c.rejected;
  absl::MutexLock lock(&snapshot_mu_);
  snapshots_[stream] = std::move(snapshot);
}

void PoolWorker::ApplyTask(Task& task, ApplyContext& context) {
  BatchTask& t = task.batch;
  BatchResult r;
  const auto start = std::chrono::steady_clock::now();
  if (deleted_.load()) {
    r.status = absl::NotFoundError(absl::StrCat("pool ", name_, " was deleted"));
  } else {
    absl::MutexLock lock(&generation_mu_);
    if (t.generation != generation_->id) {
      r.status = absl::FailedPreconditionError(
          absl::StrCat("pool ", name_,
                       " was changed by ApplyPool after this ingest stream opened; reopen it"));
    }
  }
  const std::string& stream = *t.stream;
  PoolMetrics* m = options_.metrics.get();
  // A new stream within the limits (streams per pool, the pool's learned-state bytes).
  if (r.status.ok() && !pool_->has_stream(stream)) {
    const uint64_t n = pool_->num_streams();
    const uint64_t bytes = estimate_.shared_bytes + (n + 1) * estimate_.per_stream_bytes;
    if (n >= options_.max_streams || bytes > options_.max_pool_bytes) {
      if (m != nullptr) m->BatchRefused("stream_limit");
      r.status = absl::ResourceExhaustedError(absl::StrCat(
          "pool ", name_, ": a new stream '", stream, "' would make ", n + 1, " streams and about ",
          bytes >> 20, " MiB of learned state (limits: --max-streams-per-pool ",
          options_.max_streams, ", --max-pool-mib ", options_.max_pool_bytes >> 20, ")"));
    }
  }
  // Log first: a batch is applied only once its record is in the log.
  uint64_t lsn = 0;
  if (r.status.ok() && options_.wal != nullptr) {
    v1::WalRecord rec;
    v1::WalBatch* b = rec.mutable_batch();
    b->set_pool(name_);
    b->set_stream(stream);
    for (size_t c = 0; c < t.columns->num_columns(); ++c) b->add_columns(t.columns->column_name(c));
    // The caller's batch is serialized where it is, not copied (a copy costs two
    // allocations per frame); the record lends it and gives it back before it is freed.
    b->unsafe_arena_set_allocated_batch(const_cast<v1::FrameBatch*>(t.batch));
    auto appended = options_.wal->Append(rec);
    b->unsafe_arena_release_batch();
    if (!appended.ok()) {
      if (m != nullptr) m->BatchRefused("disk_full");
      r.status = appended.status();
      r.applied_seq = pool_->last_seq(stream);
      r.durable_seq = DurableSeq(stream);
      t.done(std::move(r));
      return;
    }
    lsn = *appended;
    // Threads of a group append concurrently: keep the highest.
    uint64_t seen = last_lsn_.load();
    while (seen < lsn && !last_lsn_.compare_exchange_weak(seen, lsn)) {
    }
  }
  if (!r.status.ok()) {
    if (m != nullptr) {
      m->BatchRefused(r.status.code() == absl::StatusCode::kNotFound ? "pool_deleted"
                                                                     : "pool_changed");
    }
    r.applied_seq = pool_->last_seq(stream);
    t.done(std::move(r));
    return;
  }
  // History: the first `history_streams` streams to send frames keep one.
  bool keep_history;
  {
    absl::MutexLock lock(&history_mu_);
    auto it = history_.find(stream);
    if (it == history_.end() && history_.size() < options_.history_streams) {
      it = history_
               .emplace(stream, std::make_unique<StreamHistory>(
                                    pool_->spec().num_visible_questions, options_.history_points))
               .first;
    }
    keep_history = it != history_.end();
  }
  context.current_stream = keep_history ? &stream : nullptr;
  context.pending_points.clear();
  current_context_ = &context;

  if (m != nullptr) m->FramesReceived(static_cast<double>(t.batch->frames_size()));
  StreamCounts& counts = counts_[stream];
  FrameInput input;
  uint64_t next_sample_seq = 0;
  // The stream's last applied seq, kept here rather than looked up per frame: an applied
  // frame's seq becomes it.
  uint64_t last_seq = pool_->last_seq(stream);
  for (int i = 0; i < t.batch->frames_size(); ++i) {
    const v1::Frame& frame = t.batch->frames(i);
    if (frame.seq() != 0 && frame.seq() <= last_seq) {
      ++r.duplicates;  // a resend after a reconnect: already learned from
      continue;
    }
    absl::Status s = FrameFromProto(frame, *t.columns, &context.values, &input);
    if (s.ok()) s = pool_->Apply(stream, input, *context.workspace);
    if (s.ok()) last_seq = input.seq;
    if (s.ok() && keep_history && input.seq >= next_sample_seq) {
      // A progress sample every StreamHistory::kSampleEvery frames, taken mid-batch so
      // the trend has the same resolution whatever the producer's batch size.
      next_sample_seq = input.seq + StreamHistory::kSampleEvery;
      context.progress.resize(pool_->spec().num_visible_questions);
      if (pool_->SampleProgress(stream, absl::MakeSpan(context.progress)).ok()) {
        absl::MutexLock lock(&history_mu_);
        history_[stream]->AddSample(input.seq, context.progress);
      }
    }
    if (!s.ok()) {
      v1::FrameRejection* rej = &r.rejected.emplace_back();
      rej->set_seq(frame.seq());
      rej->set_index(static_cast<uint32_t>(i));
      rej->set_reason(std::string(s.message()));
      ++counts.rejected;
      if (m != nullptr) m->FrameRejected(RejectionReason(s.message()));
      continue;
    }
    ++r.frames_applied;
  }
  counts.applied += r.frames_applied;
  context.current_stream = nullptr;
  current_context_ = nullptr;
  r.applied_seq = pool_->last_seq(stream);
  if (r.frames_applied > 0 || !r.rejected.empty()) Publish(stream);
  if (keep_history && r.frames_applied > 0) {
    absl::MutexLock lock(&history_mu_);
    StreamHistory* h = history_[stream].get();
    h->AddVerified(context.pending_points);
  }
  if (m != nullptr) {
    m->FramesApplied(static_cast<double>(r.frames_applied));
    m->BatchApplied(
        std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count());
  }
  if (t.want_predictions && r.frames_applied > 0) {
    auto snap = Snapshot(stream);
    if (snap != nullptr) {
      r.predictions = std::shared_ptr<const v1::StreamPredictions>(snap, &snap->predictions);
    }
  }
  if (options_.frames_applied_total != nullptr) {
    options_.frames_applied_total->fetch_add(r.frames_applied, std::memory_order_relaxed);
  }
  if (m != nullptr && r.duplicates > 0) m->FramesDuplicate(static_cast<double>(r.duplicates));
  if (options_.wal == nullptr) {
    r.durable_seq = 0;
    t.done(std::move(r));
    return;
  }
  // Acknowledge once the record is on disk (at once with --sync=none).
  pending_durable_.fetch_add(1);
  options_.wal->WhenDurable(
      lsn, [this, done = std::move(t.done), r = std::move(r), stream]() mutable {
        r.durable_seq = r.applied_seq;
        {
          absl::MutexLock lock(&durable_mu_);
          uint64_t& d = durable_seq_[stream];
          d = std::max(d, r.applied_seq);
        }
        done(std::move(r));
        pending_durable_.fetch_sub(1);
      });
}

}  // namespace bellwether::server
