#include "server/pool_registry.h"

#include "absl/strings/str_cat.h"
#include "core/pool.h"
#include "core/status_macros.h"
#include "google/protobuf/util/message_differencer.h"

namespace bellwether::server {

absl::StatusOr<bool> PoolRegistry::Apply(const v1::PoolSpec& spec) {
  BW_ASSIGN_OR_RETURN(std::unique_ptr<Pool> pool, Pool::Create(spec));
  absl::MutexLock lock(&mu_);
  auto it = pools_.find(spec.name());
  if (it != pools_.end()) {
    if (google::protobuf::util::MessageDifferencer::Equals(it->second->spec(), spec)) {
      return false;
    }
    return absl::AlreadyExistsError(
        absl::StrCat("pool ", spec.name(),
                     ": exists with a different spec (changing a pool's spec is not supported "
                     "yet; use a new pool name)"));
  }
  pools_.emplace(spec.name(), std::make_unique<PoolWorker>(std::move(pool)));
  return true;
}

absl::StatusOr<PoolWorker*> PoolRegistry::Find(const std::string& name) const {
  absl::MutexLock lock(&mu_);
  auto it = pools_.find(name);
  if (it == pools_.end()) return absl::NotFoundError(absl::StrCat("pool '", name, "' not found"));
  return it->second.get();
}

size_t PoolRegistry::size() const {
  absl::MutexLock lock(&mu_);
  return pools_.size();
}

}  // namespace bellwether::server
