#include "server/bellwether_service.h"

#include <chrono>
#include <deque>
#include <string>
#include <utility>
#include <vector>

#include "absl/strings/str_cat.h"
#include "absl/time/clock.h"

namespace bellwether::server {
namespace {

constexpr size_t kMaxStreamName = 128;
constexpr int kMaxBatchItems = 1000;
constexpr uint32_t kDefaultWatchIntervalMs = 1000;
constexpr uint32_t kMinWatchIntervalMs = 100;
constexpr uint32_t kMaxWatchIntervalMs = 3'600'000;

absl::Status ValidateStreamName(const std::string& name, const char* field) {
  if (name.empty() || name.size() > kMaxStreamName) {
    return absl::InvalidArgumentError(absl::StrCat(field, ": must be 1..128 characters"));
  }
  for (unsigned char c : name) {
    if (c < 0x20 || c == 0x7f) {
      return absl::InvalidArgumentError(absl::StrCat(field, ": contains a control character"));
    }
  }
  return absl::OkStatus();
}

absl::Status RequirePool(const std::string& pool, const char* field) {
  if (pool.empty()) return absl::InvalidArgumentError(absl::StrCat(field, ": required"));
  return absl::OkStatus();
}

const grpc::Status kDraining(grpc::StatusCode::UNAVAILABLE,
                             "bellwetherd is draining for shutdown; retry after it restarts");
const grpc::Status kLoading(grpc::StatusCode::UNAVAILABLE,
                            "bellwetherd is loading its state (recovery); retry shortly");

// Whether the call's deadline has already passed.
bool Expired(const grpc::CallbackServerContext* context) {
  return context->deadline() <= std::chrono::system_clock::now();
}

const grpc::Status kExpired(grpc::StatusCode::DEADLINE_EXCEEDED,
                            "the call's deadline passed before it could be served");

grpc::ServerUnaryReactor* Done(grpc::CallbackServerContext* context, const grpc::Status& status) {
  grpc::ServerUnaryReactor* reactor = context->DefaultReactor();
  reactor->Finish(status);
  return reactor;
}

double SecondsSince(std::chrono::steady_clock::time_point start) {
  return std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
}

}  // namespace

grpc::Status ToGrpc(const absl::Status& status) {
  if (status.ok()) return grpc::Status::OK;
  return grpc::Status(static_cast<grpc::StatusCode>(status.code()),
                      std::string(status.message()));
}

absl::Status FilterQuestions(const v1::StreamPredictions& in,
                             const google::protobuf::RepeatedPtrField<std::string>& questions,
                             v1::StreamPredictions* out) {
  if (questions.empty()) {
    *out = in;
    return absl::OkStatus();
  }
  out->set_pool(in.pool());
  out->set_stream(in.stream());
  out->set_as_of_seq(in.as_of_seq());
  for (int i = 0; i < questions.size(); ++i) {
    const std::string& name = questions[i];
    const v1::Prediction* found = nullptr;
    for (const v1::Prediction& p : in.predictions()) {
      if (p.question() == name) {
        found = &p;
        break;
      }
    }
    if (found == nullptr) {
      return absl::NotFoundError(absl::StrCat("questions[", i, "]: pool ", in.pool(),
                                              " has no question '", name, "'"));
    }
    *out->add_predictions() = *found;
  }
  return absl::OkStatus();
}

// ---------------------------------------------------------------------------------------
// Ingest: one reactor per call. Reads one message at a time; each batch goes to the
// pool's writer queue; at most `max_batches_in_flight` batches are outstanding, after
// which the reactor stops reading until one is applied. Responses are written in order.

class BellwetherService::IngestReactor
    : public grpc::ServerBidiReactor<v1::IngestRequest, v1::IngestResponse> {
 public:
  IngestReactor(BellwetherService* service, grpc::CallbackServerContext* context)
      : service_(service), context_(context) {
    const size_t open_calls = service_->Register(this);
    if (grpc::Status g = service_->Gate(); !g.ok()) {
      finishing_ = true;
      Finish(g);
      return;
    }
    if (open_calls > static_cast<size_t>(service_->options_.max_ingest_calls)) {
      if (service_->metrics_ != nullptr) service_->metrics_->LimitRefused("ingest_calls");
      finishing_ = true;
      Finish(grpc::Status(grpc::StatusCode::RESOURCE_EXHAUSTED,
                          absl::StrCat("ingest: ", open_calls - 1,
                                       " ingest calls are open, the most the daemon takes "
                                       "(--max-ingest-calls ",
                                       service_->options_.max_ingest_calls, "); retry later")));
      return;
    }
    read_outstanding_ = true;
    StartRead(&request_);
  }

  void OnReadDone(bool ok) override {
    absl::ReleasableMutexLock lock(&mu_);
    read_outstanding_ = false;
    if (!ok) {  // the client closed its side (or the call broke)
      client_done_ = true;
      MaybeFinishLocked(lock);
      return;
    }
    if (error_ || finishing_) return;
    grpc::Status s = opened_ ? HandleBatchLocked() : HandleOpenLocked();
    if (!s.ok()) {
      Fail(s);
      MaybeFinishLocked(lock);
      return;
    }
    MaybeWriteLocked();
    MaybeReadLocked();
    MaybeFinishLocked(lock);
  }

  void OnWriteDone(bool ok) override {
    absl::ReleasableMutexLock lock(&mu_);
    writing_ = false;
    if (!ok) Fail(grpc::Status(grpc::StatusCode::CANCELLED, "the client went away"));
    MaybeWriteLocked();
    MaybeFinishLocked(lock);
  }

  void OnCancel() override {
    absl::ReleasableMutexLock lock(&mu_);
    Fail(grpc::Status(grpc::StatusCode::CANCELLED, "cancelled"));
    MaybeFinishLocked(lock);
  }

  void OnDone() override {
    service_->Unregister(this);
    delete this;
  }

  // Called by the service when it starts draining.
  void Drain() {
    absl::ReleasableMutexLock lock(&mu_);
    Fail(kDraining);
    MaybeFinishLocked(lock);
  }

 private:
  grpc::Status HandleOpenLocked() ABSL_EXCLUSIVE_LOCKS_REQUIRED(mu_) {
    if (!request_.has_open()) {
      return grpc::Status(grpc::StatusCode::INVALID_ARGUMENT,
                          "open: the first message of an ingest stream must name pool and stream");
    }
    const v1::IngestOpen& open = request_.open();
    if (grpc::Status a = service_->Authorize(*context_, Scope::kIngest, open.pool()); !a.ok()) {
      return a;
    }
    if (auto s = RequirePool(open.pool(), "open.pool"); !s.ok()) return ToGrpc(s);
    if (auto s = ValidateStreamName(open.stream(), "open.stream"); !s.ok()) return ToGrpc(s);
    auto worker = service_->registry_->Find(open.pool());
    if (!worker.ok()) return ToGrpc(worker.status());
    worker_ = *std::move(worker);
    pool_ = open.pool();
    stream_ = open.stream();
    want_predictions_ = open.return_predictions();
    std::vector<std::string> columns(open.columns().begin(), open.columns().end());
    const auto generation = worker_->current();
    generation_ = generation->id;
    auto column_map = ColumnMap::Create(generation->signal_names, columns);
    if (!column_map.ok()) {
      return grpc::Status(grpc::StatusCode::INVALID_ARGUMENT,
                          absl::StrCat("open.", column_map.status().message()));
    }
    columns_ = *std::move(column_map);
    opened_ = true;
    if (open.resume()) {
      v1::IngestResponse r;
      const auto snap = worker_->Snapshot(stream_);
      r.set_applied_seq(snap == nullptr ? 0 : snap->predictions.as_of_seq());
      r.set_durable_seq(worker_->DurableSeq(stream_));
      writes_.push_back(std::move(r));
    }
    return grpc::Status::OK;
  }

  grpc::Status HandleBatchLocked() ABSL_EXCLUSIVE_LOCKS_REQUIRED(mu_) {
    if (!request_.has_batch()) {
      return grpc::Status(grpc::StatusCode::INVALID_ARGUMENT,
                          "batch: every message after `open` must carry a frame batch");
    }
    if (service_->draining()) {
      if (worker_->metrics() != nullptr) worker_->metrics()->BatchRefused("draining");
      return kDraining;
    }
    if (Expired(context_)) return kExpired;
    if (request_.batch().frames_size() > service_->options_.max_batch_frames) {
      return grpc::Status(grpc::StatusCode::INVALID_ARGUMENT,
                          absl::StrCat("batch.frames: ", request_.batch().frames_size(),
                                       " frames; at most ", service_->options_.max_batch_frames,
                                       " per batch (--max-batch-frames)"));
    }
    batches_.push_back(std::move(*request_.mutable_batch()));
    PoolWorker::BatchTask task;
    task.stream = &stream_;
    task.columns = &columns_;
    task.generation = generation_;
    task.batch = &batches_.back();
    task.want_predictions = want_predictions_;
    task.done = [this](PoolWorker::BatchResult r) { OnBatchApplied(std::move(r)); };
    if (absl::Status s = worker_->Submit(std::move(task)); !s.ok()) {
      batches_.pop_back();
      return grpc::Status(static_cast<grpc::StatusCode>(s.code()),
                          absl::StrCat("pool ", pool_, " stream ", stream_, ": ", s.message()));
    }
    ++in_flight_;
    return grpc::Status::OK;
  }

  // On the pool's writer thread.
  void OnBatchApplied(PoolWorker::BatchResult r) {
    absl::ReleasableMutexLock lock(&mu_);
    batches_.pop_front();
    --in_flight_;
    if (!r.status.ok()) {
      Fail(grpc::Status(static_cast<grpc::StatusCode>(r.status.code()),
                        absl::StrCat("pool ", pool_, " stream ", stream_, ": ", r.status.message(),
                                     " (last applied seq ", r.applied_seq, ")")));
    } else {
      frames_applied_ += r.frames_applied;
      v1::IngestResponse response;
      response.set_applied_seq(r.applied_seq);
      response.set_frames_applied(frames_applied_);
      response.set_durable_seq(r.durable_seq);
      response.set_duplicates(r.duplicates);
      for (v1::FrameRejection& rej : r.rejected) *response.add_rejected() = std::move(rej);
      if (r.predictions != nullptr) *response.mutable_predictions() = *r.predictions;
      writes_.push_back(std::move(response));
      MaybeWriteLocked();
      MaybeReadLocked();
    }
    MaybeFinishLocked(lock);
  }

  void Fail(const grpc::Status& s) ABSL_EXCLUSIVE_LOCKS_REQUIRED(mu_) {
    if (error_) return;
    error_ = true;
    final_ = s;
  }

  void MaybeWriteLocked() ABSL_EXCLUSIVE_LOCKS_REQUIRED(mu_) {
    if (writing_ || writes_.empty() || finishing_) return;
    if (error_ && final_.error_code() == grpc::StatusCode::CANCELLED) return;
    current_write_ = std::move(writes_.front());
    writes_.pop_front();
    writing_ = true;
    StartWrite(&current_write_);
  }

  void MaybeReadLocked() ABSL_EXCLUSIVE_LOCKS_REQUIRED(mu_) {
    if (read_outstanding_ || client_done_ || error_ || finishing_) return;
    if (in_flight_ >= service_->options_.max_batches_in_flight) return;  // back-pressure
    read_outstanding_ = true;
    StartRead(&request_);
  }

  // Finishes once nothing is in flight and every response is written (or the call broke).
  void MaybeFinishLocked(absl::ReleasableMutexLock& lock) ABSL_EXCLUSIVE_LOCKS_REQUIRED(mu_) {
    if (finishing_) return;
    const bool cancelled = error_ && final_.error_code() == grpc::StatusCode::CANCELLED;
    if (!(client_done_ || error_)) return;
    if (in_flight_ > 0) return;
    if (!cancelled && (writing_ || !writes_.empty())) return;
    finishing_ = true;
    const grpc::Status status = error_ ? final_ : grpc::Status::OK;
    lock.Release();
    Finish(status);  // OnDone (which deletes this) may follow at any time: touch nothing
  }

  BellwetherService* const service_;
  grpc::CallbackServerContext* const context_;
  absl::Mutex mu_;
  v1::IngestRequest request_;
  bool read_outstanding_ ABSL_GUARDED_BY(mu_) = false;
  bool client_done_ ABSL_GUARDED_BY(mu_) = false;
  bool opened_ ABSL_GUARDED_BY(mu_) = false;
  bool error_ ABSL_GUARDED_BY(mu_) = false;
  bool finishing_ ABSL_GUARDED_BY(mu_) = false;
  bool writing_ ABSL_GUARDED_BY(mu_) = false;
  grpc::Status final_ ABSL_GUARDED_BY(mu_);
  std::shared_ptr<PoolWorker> worker_;
  std::string pool_, stream_;
  ColumnMap columns_;
  uint64_t generation_ = 0;
  bool want_predictions_ = false;
  int in_flight_ ABSL_GUARDED_BY(mu_) = 0;
  uint64_t frames_applied_ ABSL_GUARDED_BY(mu_) = 0;
  std::deque<v1::FrameBatch> batches_ ABSL_GUARDED_BY(mu_);  // in flight, oldest first
  std::deque<v1::IngestResponse> writes_ ABSL_GUARDED_BY(mu_);
  v1::IngestResponse current_write_;
};

// ---------------------------------------------------------------------------------------
// Watch: the service's watch thread polls each watcher's stream snapshot every tick and
// writes when the answers moved on and the interval has passed.

class BellwetherService::WatchReactor : public grpc::ServerWriteReactor<v1::StreamPredictions> {
 public:
  WatchReactor(BellwetherService* service, const grpc::CallbackServerContext* context,
               const v1::WatchRequest& request)
      : service_(service), context_(context), request_(request) {
    service_->Register(this);
    grpc::Status s = Start();
    if (!s.ok()) {
      absl::MutexLock lock(&mu_);
      finishing_ = true;
      Finish(s);
    }
  }

  // On the watch thread: write fresh answers if due; finish if the pool went away or
  // the service drains.
  void Tick(absl::Time now) {
    absl::MutexLock lock(&mu_);
    if (finishing_) return;
    if (cancelled_ || service_->draining()) {
      finishing_ = true;
      Finish(cancelled_ ? grpc::Status::CANCELLED : kDraining);
      return;
    }
    if (writing_) return;
    if (now - last_write_ < interval_) return;
    if (worker_->current()->id == 0) return;
    if (service_->registry_->Find(request_.pool()).ok() == false) {
      finishing_ = true;
      Finish(grpc::Status(grpc::StatusCode::NOT_FOUND,
                          absl::StrCat("pool '", request_.pool(), "' was deleted")));
      return;
    }
    const auto snap = worker_->Snapshot(request_.stream());
    if (snap == nullptr || (sent_any_ && snap->predictions.as_of_seq() == last_seq_)) return;
    out_.Clear();
    absl::Status s = FilterQuestions(snap->predictions, request_.questions(), &out_);
    if (!s.ok()) {  // a question was retired by a spec change
      finishing_ = true;
      Finish(ToGrpc(s));
      return;
    }
    last_seq_ = snap->predictions.as_of_seq();
    last_write_ = now;
    sent_any_ = true;
    writing_ = true;
    StartWrite(&out_);
  }

  void OnWriteDone(bool ok) override {
    absl::MutexLock lock(&mu_);
    writing_ = false;
    if (!ok) cancelled_ = true;
  }
  void OnCancel() override {
    absl::MutexLock lock(&mu_);
    cancelled_ = true;
  }
  void OnDone() override {
    service_->Unregister(this);
    delete this;
  }

 private:
  grpc::Status Start() {
    if (grpc::Status g = service_->Gate(); !g.ok()) return g;
    if (grpc::Status a = service_->Authorize(*context_, Scope::kRead, request_.pool()); !a.ok()) {
      return a;
    }
    if (auto s = RequirePool(request_.pool(), "pool"); !s.ok()) return ToGrpc(s);
    if (auto s = ValidateStreamName(request_.stream(), "stream"); !s.ok()) return ToGrpc(s);
    const uint32_t ms =
        request_.min_interval_ms() == 0 ? kDefaultWatchIntervalMs : request_.min_interval_ms();
    if (ms < kMinWatchIntervalMs || ms > kMaxWatchIntervalMs) {
      return grpc::Status(grpc::StatusCode::INVALID_ARGUMENT,
                          absl::StrCat("min_interval_ms: ", ms, " is outside [100, 3600000]"));
    }
    interval_ = absl::Milliseconds(ms);
    auto worker = service_->registry_->Find(request_.pool());
    if (!worker.ok()) return ToGrpc(worker.status());
    worker_ = *std::move(worker);
    // Unknown questions fail now rather than at the first frame.
    const auto g = worker_->current();
    for (int i = 0; i < request_.questions_size(); ++i) {
      bool known = false;
      for (const std::string& n : g->question_names) known |= n == request_.questions(i);
      if (!known) {
        return grpc::Status(grpc::StatusCode::NOT_FOUND,
                            absl::StrCat("questions[", i, "]: pool ", request_.pool(),
                                         " has no question '", request_.questions(i), "'"));
      }
    }
    return grpc::Status::OK;
  }

  BellwetherService* const service_;
  const grpc::CallbackServerContext* const context_;
  const v1::WatchRequest request_;
  absl::Mutex mu_;
  std::shared_ptr<PoolWorker> worker_;
  absl::Duration interval_ = absl::Seconds(1);
  absl::Time last_write_ = absl::InfinitePast();
  uint64_t last_seq_ = 0;
  bool sent_any_ = false;
  bool writing_ ABSL_GUARDED_BY(mu_) = false;
  bool cancelled_ ABSL_GUARDED_BY(mu_) = false;
  bool finishing_ ABSL_GUARDED_BY(mu_) = false;
  v1::StreamPredictions out_;
};

// ---------------------------------------------------------------------------------------

BellwetherService::BellwetherService(PoolRegistry* registry, DaemonMetrics* metrics,
                                     Options options)
    : registry_(registry), metrics_(metrics), options_(options) {
  watch_thread_ = std::thread([this] { WatchLoop(); });
}

BellwetherService::~BellwetherService() {
  {
    absl::MutexLock lock(&calls_mu_);
    stop_watch_loop_ = true;
  }
  watch_thread_.join();
}

size_t BellwetherService::Register(IngestReactor* r) {
  absl::MutexLock lock(&calls_mu_);
  ingests_.insert(r);
  return ingests_.size();
}
void BellwetherService::Unregister(IngestReactor* r) {
  absl::MutexLock lock(&calls_mu_);
  ingests_.erase(r);
}
void BellwetherService::Register(WatchReactor* r) {
  absl::MutexLock lock(&calls_mu_);
  watches_.insert(r);
}
void BellwetherService::Unregister(WatchReactor* r) {
  absl::MutexLock lock(&calls_mu_);
  watches_.erase(r);
}

void BellwetherService::WatchLoop() {
  absl::MutexLock lock(&calls_mu_);
  while (!stop_watch_loop_) {
    calls_mu_.AwaitWithTimeout(absl::Condition(&stop_watch_loop_), options_.watch_tick);
    if (stop_watch_loop_) break;
    // OnDone (which unregisters and deletes) takes calls_mu_, so every reactor in the
    // set is alive while we hold it; gRPC runs OnDone on its own threads.
    const absl::Time now = absl::Now();
    for (WatchReactor* w : watches_) w->Tick(now);
  }
}

grpc::Status BellwetherService::Authorize(const grpc::ServerContextBase& context, Scope scope,
                                          const std::string& pool) const {
  if (auth_ == nullptr) return grpc::Status::OK;
  const absl::Status s = auth_->Check(context, scope, pool);
  if (!s.ok() && metrics_ != nullptr) {
    metrics_->AuthFailed(absl::IsUnauthenticated(s) ? "grpc_unauthenticated"
                                                    : "grpc_permission_denied");
  }
  return ToGrpc(s);
}

grpc::Status BellwetherService::Gate() const {
  if (loading_.load()) return kLoading;
  if (draining_.load()) return kDraining;
  return grpc::Status::OK;
}

grpc::ServerUnaryReactor* BellwetherService::Checkpoint(grpc::CallbackServerContext* context,
                                                        const v1::CheckpointRequest*,
                                                        v1::CheckpointResponse* response) {
  if (grpc::Status g = Gate(); !g.ok()) return Done(context, g);
  if (grpc::Status a = Authorize(*context, Scope::kAdmin, ""); !a.ok()) return Done(context, a);
  if (checkpointer_ == nullptr) {
    return Done(context, grpc::Status(grpc::StatusCode::FAILED_PRECONDITION,
                                      "bellwetherd runs without --state-dir: nothing to "
                                      "checkpoint"));
  }
  auto done = checkpointer_->CheckpointNow();
  if (!done.ok()) return Done(context, ToGrpc(done.status()));
  *response = *std::move(done);
  return Done(context, grpc::Status::OK);
}

void BellwetherService::StartDraining() {
  draining_.store(true);
  absl::MutexLock lock(&calls_mu_);
  for (IngestReactor* r : ingests_) r->Drain();
  // Watches end at their next tick.
}

bool BellwetherService::WaitForStreamsToEnd(absl::Time deadline) {
  absl::MutexLock lock(&calls_mu_);
  return calls_mu_.AwaitWithDeadline(
      absl::Condition(
          +[](BellwetherService* s) ABSL_EXCLUSIVE_LOCKS_REQUIRED(s->calls_mu_) {
            return s->ingests_.empty() && s->watches_.empty();
          },
          this),
      deadline);
}

grpc::ServerUnaryReactor* BellwetherService::ApplyPool(grpc::CallbackServerContext* context,
                                                       const v1::ApplyPoolRequest* request,
                                                       v1::ApplyPoolResponse* response) {
  if (grpc::Status g = Gate(); !g.ok()) return Done(context, g);
  if (grpc::Status a = Authorize(*context, Scope::kAdmin, ""); !a.ok()) return Done(context, a);
  if (Expired(context)) return Done(context, kExpired);
  if (!request->has_spec()) {
    return Done(context, grpc::Status(grpc::StatusCode::INVALID_ARGUMENT, "spec: required"));
  }
  auto applied = registry_->Apply(request->spec(), request->dry_run(), request->create_only());
  if (!applied.ok()) return Done(context, ToGrpc(applied.status()));
  *response = *std::move(applied);
  return Done(context, grpc::Status::OK);
}

grpc::ServerUnaryReactor* BellwetherService::DescribePool(grpc::CallbackServerContext* context,
                                                          const v1::DescribePoolRequest* request,
                                                          v1::PoolDescription* response) {
  if (grpc::Status g = Gate(); !g.ok()) return Done(context, g);
  if (grpc::Status a = Authorize(*context, Scope::kRead, request->pool()); !a.ok()) return Done(context, a);
  if (auto s = RequirePool(request->pool(), "pool"); !s.ok()) return Done(context, ToGrpc(s));
  auto worker = registry_->Find(request->pool());
  if (!worker.ok()) return Done(context, ToGrpc(worker.status()));
  *response = PoolRegistry::Describe(**worker);
  return Done(context, grpc::Status::OK);
}

grpc::ServerUnaryReactor* BellwetherService::ListPools(grpc::CallbackServerContext* context,
                                                       const v1::ListPoolsRequest*,
                                                       v1::ListPoolsResponse* response) {
  if (grpc::Status g = Gate(); !g.ok()) return Done(context, g);
  if (grpc::Status a = Authorize(*context, Scope::kRead, ""); !a.ok()) return Done(context, a);
  for (const auto& worker : registry_->All()) {
    if (auth_ != nullptr && !auth_->Allows(*context, Scope::kRead, worker->name())) continue;
    const auto g = worker->current();
    v1::PoolSummary* p = response->add_pools();
    p->set_name(worker->name());
    p->set_generation(g->id);
    p->set_questions(static_cast<uint32_t>(g->question_names.size()));
    p->set_streams(static_cast<uint32_t>(worker->Snapshots().size()));
  }
  return Done(context, grpc::Status::OK);
}

grpc::ServerUnaryReactor* BellwetherService::DeletePool(grpc::CallbackServerContext* context,
                                                        const v1::DeletePoolRequest* request,
                                                        v1::DeletePoolResponse*) {
  if (grpc::Status g = Gate(); !g.ok()) return Done(context, g);
  if (grpc::Status a = Authorize(*context, Scope::kAdmin, ""); !a.ok()) return Done(context, a);
  if (Expired(context)) return Done(context, kExpired);
  if (auto s = RequirePool(request->pool(), "pool"); !s.ok()) return Done(context, ToGrpc(s));
  return Done(context, ToGrpc(registry_->Delete(request->pool())));
}

grpc::ServerBidiReactor<v1::IngestRequest, v1::IngestResponse>* BellwetherService::Ingest(
    grpc::CallbackServerContext* context) {
  return new IngestReactor(this, context);
}

absl::Status BellwetherService::ReadPredictions(const v1::PredictRequest& request,
                                                v1::StreamPredictions* out) const {
  if (auto s = RequirePool(request.pool(), "pool"); !s.ok()) return s;
  if (auto s = ValidateStreamName(request.stream(), "stream"); !s.ok()) return s;
  auto worker = registry_->Find(request.pool());
  if (!worker.ok()) return worker.status();
  auto snapshot = (*worker)->Snapshot(request.stream());
  if (snapshot == nullptr) {
    return absl::NotFoundError(absl::StrCat("pool ", request.pool(), ": stream '",
                                            request.stream(), "' has no applied frames"));
  }
  return FilterQuestions(snapshot->predictions, request.questions(), out);
}

absl::Status BellwetherService::ReadProgress(const v1::ProgressRequest& request,
                                             v1::ProgressResponse* out) const {
  v1::PredictRequest predict;
  predict.set_pool(request.pool());
  predict.set_stream(request.stream());
  *predict.mutable_questions() = request.questions();
  if (auto s = ReadPredictions(predict, out->mutable_current()); !s.ok()) return s;
  auto worker = registry_->Find(request.pool());
  if (!worker.ok()) return worker.status();
  const auto g = (*worker)->current();
  std::vector<size_t> indices;
  for (const v1::Prediction& p : out->current().predictions()) {
    for (size_t q = 0; q < g->question_names.size(); ++q) {
      if (g->question_names[q] == p.question()) indices.push_back(q);
    }
  }
  std::vector<v1::QuestionHistory> history;
  bool kept = false;
  (*worker)->History(request.stream(), indices, &history, &kept);
  out->set_history_kept(kept);
  for (v1::QuestionHistory& h : history) *out->add_history() = std::move(h);
  return absl::OkStatus();
}

grpc::ServerUnaryReactor* BellwetherService::Predict(grpc::CallbackServerContext* context,
                                                     const v1::PredictRequest* request,
                                                     v1::StreamPredictions* response) {
  const auto start = std::chrono::steady_clock::now();
  if (grpc::Status g = Gate(); !g.ok()) return Done(context, g);
  if (grpc::Status a = Authorize(*context, Scope::kRead, request->pool()); !a.ok()) return Done(context, a);
  if (Expired(context)) return Done(context, kExpired);
  const absl::Status s = ReadPredictions(*request, response);
  if (metrics_ != nullptr) metrics_->ObserveRead("Predict", SecondsSince(start));
  return Done(context, ToGrpc(s));
}

grpc::ServerUnaryReactor* BellwetherService::PredictBatch(grpc::CallbackServerContext* context,
                                                          const v1::PredictBatchRequest* request,
                                                          v1::PredictBatchResponse* response) {
  const auto start = std::chrono::steady_clock::now();
  if (grpc::Status g = Gate(); !g.ok()) return Done(context, g);
  if (grpc::Status a = Authorize(*context, Scope::kRead, ""); !a.ok()) return Done(context, a);
  if (Expired(context)) return Done(context, kExpired);
  if (request->requests_size() > kMaxBatchItems) {
    return Done(context, grpc::Status(grpc::StatusCode::INVALID_ARGUMENT,
                                      absl::StrCat("requests: ", request->requests_size(),
                                                   " items, at most 1000")));
  }
  for (int i = 0; i < request->requests_size(); ++i) {
    v1::PredictBatchItem* item = response->add_items();
    absl::Status s = auth_ == nullptr ? absl::OkStatus()
                                      : auth_->Check(*context, Scope::kRead,
                                                     request->requests(i).pool());
    if (s.ok()) s = ReadPredictions(request->requests(i), item->mutable_predictions());
    if (!s.ok()) {
      item->mutable_error()->set_code(static_cast<int32_t>(s.code()));
      item->mutable_error()->set_message(absl::StrCat("requests[", i, "]: ", s.message()));
    }
  }
  if (metrics_ != nullptr) metrics_->ObserveRead("PredictBatch", SecondsSince(start));
  return Done(context, grpc::Status::OK);
}

grpc::ServerWriteReactor<v1::StreamPredictions>* BellwetherService::Watch(
    grpc::CallbackServerContext* context, const v1::WatchRequest* request) {
  return new WatchReactor(this, context, *request);
}

grpc::ServerUnaryReactor* BellwetherService::Progress(grpc::CallbackServerContext* context,
                                                      const v1::ProgressRequest* request,
                                                      v1::ProgressResponse* response) {
  const auto start = std::chrono::steady_clock::now();
  if (grpc::Status g = Gate(); !g.ok()) return Done(context, g);
  if (grpc::Status a = Authorize(*context, Scope::kRead, request->pool()); !a.ok()) return Done(context, a);
  if (Expired(context)) return Done(context, kExpired);
  const absl::Status s = ReadProgress(*request, response);
  if (metrics_ != nullptr) metrics_->ObserveRead("Progress", SecondsSince(start));
  return Done(context, ToGrpc(s));
}

}  // namespace bellwether::server
