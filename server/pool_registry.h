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
#include "server/pool_worker.h"

namespace bellwether::server {

class PoolRegistry {
 public:
  // Creates the pool. Returns true if created, false if an identical spec was already
  // applied. INVALID_ARGUMENT for a bad spec (naming the field), ALREADY_EXISTS for a
  // different spec under the same name. Thread-safe.
  absl::StatusOr<bool> Apply(const v1::PoolSpec& spec);

  // The pool's worker, or NOT_FOUND. The worker lives as long as the registry.
  absl::StatusOr<PoolWorker*> Find(const std::string& name) const;

  size_t size() const;

 private:
  mutable absl::Mutex mu_;
  absl::flat_hash_map<std::string, std::unique_ptr<PoolWorker>> pools_ ABSL_GUARDED_BY(mu_);
};

}  // namespace bellwether::server

#endif  // BELLWETHER_SERVER_POOL_REGISTRY_H_
