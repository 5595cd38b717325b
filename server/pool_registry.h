// The daemon's pools by name. Pools are held in memory (durability arrives later).
#ifndef BELLWETHER_SERVER_POOL_REGISTRY_H_
#define BELLWETHER_SERVER_POOL_REGISTRY_H_

#include <memory>
#include <string>

#include "absl/base/thread_annotations.h"
#include "absl/container/flat_hash_map.h"
#include "absl/status/statusor.h"
#include "absl/synchronization/mutex.h"
#include "bellwether/v1/pool.pb.h"
#include "bellwether/v1/service.pb.h"
#include "server/pool_worker.h"

namespace bellwether::server {

class PoolRegistry {
 public:
  // Creates the pool, or updates it (unchanged questions keep their learned state), and
  // reports what changed; with `dry_run` only validates and reports. INVALID_ARGUMENT
  // for a bad spec (naming the field). Thread-safe.
  absl::StatusOr<v1::ApplyPoolResponse> Apply(const v1::PoolSpec& spec, bool dry_run);

  // The pool's worker, or NOT_FOUND. The worker lives as long as the registry.
  absl::StatusOr<PoolWorker*> Find(const std::string& name) const;

  size_t size() const;

 private:
  mutable absl::Mutex mu_;
  absl::flat_hash_map<std::string, std::unique_ptr<PoolWorker>> pools_ ABSL_GUARDED_BY(mu_);
};

}  // namespace bellwether::server

#endif  // BELLWETHER_SERVER_POOL_REGISTRY_H_
