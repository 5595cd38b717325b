#include "server/pool_registry.h"

#include "absl/strings/str_cat.h"
#include "core/pool.h"
#include "core/spec_diff.h"
#include "core/status_macros.h"
#include "google/protobuf/util/message_differencer.h"

namespace bellwether::server {

absl::StatusOr<v1::ApplyPoolResponse> PoolRegistry::Apply(const v1::PoolSpec& spec,
                                                          bool dry_run) {
  // Validate (and compile) before touching anything.
  BW_ASSIGN_OR_RETURN(std::unique_ptr<Pool> pool, Pool::Create(spec));
  v1::ApplyPoolResponse response;
  absl::MutexLock lock(&mu_);
  auto it = pools_.find(spec.name());
  if (it == pools_.end()) {
    response.set_created(true);
    for (const v1::QuestionSpec& q : spec.questions()) response.add_added(q.name());
    if (!dry_run) pools_.emplace(spec.name(), std::make_unique<PoolWorker>(std::move(pool)));
    return response;
  }
  const SpecDiff diff = DiffPoolSpecs(it->second->current()->spec, spec);
  for (const std::string& n : diff.added) response.add_added(n);
  for (const std::string& n : diff.changed) response.add_changed(n);
  for (const std::string& n : diff.retired) response.add_retired(n);
  for (const std::string& n : diff.unchanged) response.add_unchanged(n);
  response.set_recipe_changed(diff.recipe_changed);
  const bool same = google::protobuf::util::MessageDifferencer::Equals(
      it->second->current()->spec, spec);
  response.set_updated(!same);
  if (!same && !dry_run) BW_RETURN_IF_ERROR(it->second->Replace(spec));
  return response;
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
