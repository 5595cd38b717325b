#include "server/pool_registry.h"

#include <algorithm>
#include <utility>

#include "absl/strings/str_cat.h"
#include "core/pool.h"
#include "core/spec_diff.h"
#include "core/status_macros.h"
#include "google/protobuf/util/message_differencer.h"

namespace bellwether::server {

PoolRegistry::PoolRegistry(DaemonMetrics* metrics, PoolWorker::Options options, Limits limits)
    : metrics_(metrics), options_(options), limits_(limits) {}

absl::Status PoolRegistry::CheckLimits(const v1::PoolSpec& spec,
                                       const CompiledPoolSpec& compiled) const {
  auto refuse = [&](const char* limit, std::string message) {
    if (metrics_ != nullptr) metrics_->LimitRefused(limit);
    return absl::ResourceExhaustedError(absl::StrCat("pool ", spec.name(), ": ", message));
  };
  if (static_cast<size_t>(spec.questions_size()) > limits_.max_questions_per_pool) {
    return refuse("questions", absl::StrCat("questions: ", spec.questions_size(),
                                            " questions; at most ", limits_.max_questions_per_pool,
                                            " per pool (--max-questions-per-pool)"));
  }
  if (static_cast<size_t>(spec.signals_size()) > limits_.max_signals_per_pool) {
    return refuse("signals", absl::StrCat("signals: ", spec.signals_size(), " signals; at most ",
                                          limits_.max_signals_per_pool,
                                          " per pool (--max-signals-per-pool)"));
  }
  const uint64_t table = compiled.recipe != nullptr ? compiled.recipe->num_features() : 0;
  if (table > limits_.max_feature_table) {
    return refuse("feature_table",
                  absl::StrCat("featureTableSize: the feature table would have ", table,
                               " entries; at most ", limits_.max_feature_table,
                               " (--max-feature-table); set a smaller featureTableSize"));
  }
  const StateEstimate e = EstimateState(compiled);
  if (e.shared_bytes + e.per_stream_bytes > options_.max_pool_bytes) {
    return refuse(
        "pool_memory",
        absl::StrCat("its learned state would need about ",
                     (e.shared_bytes + e.per_stream_bytes) >> 20, " MiB with one stream (",
                     e.per_stream_bytes >> 20, " MiB per stream, ", e.shared_bytes >> 20,
                     " MiB shared); the limit is ", options_.max_pool_bytes >> 20,
                     " MiB (--max-pool-mib). Use fewer questions, a smaller featureTableSize, "
                     "or POOLED learning"));
  }
  return absl::OkStatus();
}

PoolRegistry::~PoolRegistry() {
  absl::MutexLock lock(&mu_);
  for (auto& [name, worker] : pools_) worker->MarkDeleted();
}

absl::StatusOr<v1::ApplyPoolResponse> PoolRegistry::Apply(const v1::PoolSpec& spec, bool dry_run,
                                                          bool create_only) {
  // Validate (and compile) before touching anything.
  BW_ASSIGN_OR_RETURN(std::unique_ptr<Pool> pool, Pool::Create(spec));
  BW_RETURN_IF_ERROR(CheckLimits(spec, pool->spec()));
  v1::ApplyPoolResponse response;
  std::shared_ptr<PoolWorker> existing;
  {
    absl::MutexLock lock(&mu_);
    auto it = pools_.find(spec.name());
    if (it == pools_.end()) {
      if (pools_.size() >= limits_.max_pools) {
        if (metrics_ != nullptr) metrics_->LimitRefused("pools");
        return absl::ResourceExhaustedError(absl::StrCat(
            "pool ", spec.name(), ": the daemon already has ", pools_.size(),
            " pools (--max-pools ", limits_.max_pools, ")"));
      }
      response.set_created(true);
      for (const v1::QuestionSpec& q : spec.questions()) response.add_added(q.name());
      if (!dry_run) {
        uint64_t lsn = 0;
        if (options_.wal != nullptr) {
          v1::WalRecord rec;
          *rec.mutable_apply() = spec;
          BW_ASSIGN_OR_RETURN(lsn, options_.wal->Append(rec));
        }
        PoolWorker::Options o = options_;
        if (metrics_ != nullptr) o.metrics = metrics_->NewPoolMetrics(spec.name());
        pools_.emplace(spec.name(), std::make_shared<PoolWorker>(std::move(pool), o, 1, lsn));
      }
      return response;
    }
    if (create_only) {
      return absl::AlreadyExistsError(
          absl::StrCat("pool '", spec.name(), "' already exists (create_only was set)"));
    }
    existing = it->second;
  }
  const auto current = existing->current();
  const SpecDiff diff = DiffPoolSpecs(current->spec, spec);
  for (const std::string& n : diff.added) response.add_added(n);
  for (const std::string& n : diff.changed) response.add_changed(n);
  for (const std::string& n : diff.retired) response.add_retired(n);
  for (const std::string& n : diff.unchanged) response.add_unchanged(n);
  response.set_recipe_changed(diff.recipe_changed);
  const bool same = google::protobuf::util::MessageDifferencer::Equals(current->spec, spec);
  response.set_updated(!same);
  if (!same && !dry_run) BW_RETURN_IF_ERROR(existing->Replace(spec));
  return response;
}

absl::StatusOr<std::shared_ptr<PoolWorker>> PoolRegistry::Find(const std::string& name) const {
  absl::MutexLock lock(&mu_);
  auto it = pools_.find(name);
  if (it == pools_.end()) return absl::NotFoundError(absl::StrCat("pool '", name, "' not found"));
  return it->second;
}

absl::Status PoolRegistry::Delete(const std::string& name) {
  std::shared_ptr<PoolWorker> dropped;
  {
    absl::MutexLock lock(&mu_);
    auto it = pools_.find(name);
    if (it == pools_.end()) return absl::NotFoundError(absl::StrCat("pool '", name, "' not found"));
    if (options_.wal != nullptr) {
      v1::WalRecord rec;
      rec.set_delete_pool(name);
      BW_RETURN_IF_ERROR(options_.wal->Append(rec).status());
    }
    dropped = std::move(it->second);
    pools_.erase(it);
  }
  // Open calls may still hold the worker; they see NOT_FOUND at their next batch, and
  // the worker (with its metric series) goes when the last of them lets go.
  dropped->MarkDeleted();
  return absl::OkStatus();
}

std::vector<std::shared_ptr<PoolWorker>> PoolRegistry::All() const {
  std::vector<std::shared_ptr<PoolWorker>> out;
  absl::MutexLock lock(&mu_);
  for (const auto& [name, w] : pools_) out.push_back(w);
  return out;
}

std::vector<std::shared_ptr<PoolWorker>> PoolRegistry::AllForCheckpoint(
    uint64_t* start_lsn) const {
  std::vector<std::shared_ptr<PoolWorker>> out;
  absl::MutexLock lock(&mu_);
  *start_lsn = options_.wal != nullptr ? options_.wal->last_lsn() : 0;
  for (const auto& [name, w] : pools_) out.push_back(w);
  return out;
}

void PoolRegistry::Adopt(std::map<std::string, RecoveredPool> pools) {
  absl::MutexLock lock(&mu_);
  for (auto& [name, p] : pools) {
    PoolWorker::Options o = options_;
    if (metrics_ != nullptr) o.metrics = metrics_->NewPoolMetrics(name);
    pools_[name] = std::make_shared<PoolWorker>(std::move(p.pool), o, p.generation, p.last_lsn);
  }
}

v1::PoolDescription PoolRegistry::Describe(const PoolWorker& worker) {
  v1::PoolDescription d;
  const auto g = worker.current();
  *d.mutable_spec() = g->spec;
  d.set_generation(g->id);
  d.set_queue_depth(static_cast<uint32_t>(worker.queue_depth()));
  for (size_t q = 0; q < g->question_names.size(); ++q) {
    v1::QuestionInfo* qi = d.add_questions();
    qi->set_name(g->question_names[q]);
    qi->set_unit(g->question_units[q]);
  }
  for (const auto& snap : worker.Snapshots()) {
    v1::StreamInfo* s = d.add_streams();
    s->set_name(snap->predictions.stream());
    s->set_last_seq(snap->predictions.as_of_seq());
    s->set_frames_applied(snap->frames_applied);
    s->set_frames_rejected(snap->frames_rejected);
    // Snapshots list questions in spec order (all are republished on a spec change).
    const int n = std::min(snap->predictions.predictions_size(), d.questions_size());
    for (int i = 0; i < n; ++i) {
      const v1::Prediction& p = snap->predictions.predictions(i);
      v1::QuestionInfo* qi = d.mutable_questions(i);
      if (qi->name() != p.question()) continue;
      if (p.label() == "learning") qi->set_streams_learning(qi->streams_learning() + 1);
      if (p.label() == "settled") qi->set_streams_settled(qi->streams_settled() + 1);
      if (p.label() == "diverging") qi->set_streams_diverging(qi->streams_diverging() + 1);
    }
  }
  return d;
}

size_t PoolRegistry::size() const {
  absl::MutexLock lock(&mu_);
  return pools_.size();
}

}  // namespace bellwether::server
