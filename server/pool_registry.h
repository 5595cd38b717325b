// The daemon's pools by name. Pools are held in memory (durability arrives later).
#ifndef BELLWETHER_SERVER_POOL_REGISTRY_H_
#define BELLWETHER_SERVER_POOL_REGISTRY_H_

#include <map>
#include <memory>
#include <string>
#include <vector>

#include "absl/base/thread_annotations.h"
#include "absl/status/statusor.h"
#include "absl/synchronization/mutex.h"
#include "bellwether/v1/pool.pb.h"
#include "bellwether/v1/service.pb.h"
#include "server/daemon_metrics.h"
#include "server/pool_worker.h"
#include "server/state_dir.h"

namespace bellwether::server {

// What ApplyPool accepts. A spec past any of them is refused with RESOURCE_EXHAUSTED
// naming the limit, its flag and the spec's figure (and counted in
// bellwether_limit_refusals_total). The learned-state limit is the worker options'
// max_pool_bytes.
struct PoolLimits {
  size_t max_pools = 1000;
  size_t max_questions_per_pool = 4096;     // the spec's questions
  size_t max_signals_per_pool = 1024;       // declared signals
  uint64_t max_feature_table = 1u << 24;    // entries of the compiled feature table
};

class PoolRegistry {
 public:
  using Limits = PoolLimits;

  // `metrics` may be null (no metrics); it must outlive the registry. `options` is the
  // template for every pool's worker (its `metrics` field is set per pool).
  explicit PoolRegistry(DaemonMetrics* metrics = nullptr,
                        PoolWorker::Options options = PoolWorker::Options(),
                        Limits limits = Limits());
  ~PoolRegistry();

  // Creates the pool, or updates it (unchanged questions keep their learned state), and
  // reports what changed; with `dry_run` only validates and reports. INVALID_ARGUMENT
  // for a bad spec (naming the field); ALREADY_EXISTS with `create_only` when the pool
  // exists. Thread-safe.
  absl::StatusOr<v1::ApplyPoolResponse> Apply(const v1::PoolSpec& spec, bool dry_run,
                                              bool create_only = false);

  // The pool's worker, or NOT_FOUND. Callers may hold it after the pool is deleted (its
  // later batches are refused).
  absl::StatusOr<std::shared_ptr<PoolWorker>> Find(const std::string& name) const;

  // Drops the pool; NOT_FOUND if unknown. Its worker stops once the last holder lets go.
  absl::Status Delete(const std::string& name);

  // Every pool's worker, in name order.
  std::vector<std::shared_ptr<PoolWorker>> All() const;

  // Every pool's worker and the log's last LSN, read together (no pool is created or
  // deleted in between): what a checkpoint must capture.
  std::vector<std::shared_ptr<PoolWorker>> AllForCheckpoint(uint64_t* start_lsn) const;

  // Logs pool changes and batches to `wal` from now on (set before serving).
  void SetWal(Wal* wal) { options_.wal = wal; }

  // Takes the pools recovery rebuilt (before serving).
  void Adopt(std::map<std::string, RecoveredPool> pools);

  // The pool's description (spec, generation, streams, per-question label counts).
  static v1::PoolDescription Describe(const PoolWorker& worker);

  size_t size() const;

 private:
  DaemonMetrics* const metrics_;
  PoolWorker::Options options_;
  const Limits limits_;
  // Refuses `spec` if it is past a limit (counts the refusal).
  absl::Status CheckLimits(const v1::PoolSpec& spec, const CompiledPoolSpec& compiled) const;
  mutable absl::Mutex mu_;
  std::map<std::string, std::shared_ptr<PoolWorker>> pools_ ABSL_GUARDED_BY(mu_);
};

}  // namespace bellwether::server

#endif  // BELLWETHER_SERVER_POOL_REGISTRY_H_
