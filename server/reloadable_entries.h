// Entries parsed from a configuration file that SIGHUP re-reads (bearer tokens, HTTP
// users): a reload that fails keeps the entries already loaded, so a bad edit never
// locks everyone out.
#ifndef BELLWETHER_SERVER_RELOADABLE_ENTRIES_H_
#define BELLWETHER_SERVER_RELOADABLE_ENTRIES_H_

#include <string>
#include <utility>

#include "absl/base/thread_annotations.h"
#include "absl/status/status.h"
#include "absl/status/statusor.h"
#include "absl/synchronization/mutex.h"

namespace bellwether::server {

template <typename Map>
class ReloadableEntries {
 public:
  using Parser = absl::StatusOr<Map> (*)(const std::string& path);

  ReloadableEntries(std::string path, Parser parse) : path_(std::move(path)), parse_(parse) {}

  // Parses the file again; on error nothing changes. Thread-safe.
  absl::Status Reload() {
    absl::StatusOr<Map> parsed = parse_(path_);
    if (!parsed.ok()) return parsed.status();
    absl::MutexLock lock(&mu_);
    map_ = *std::move(parsed);
    return absl::OkStatus();
  }

  size_t size() const {
    absl::MutexLock lock(&mu_);
    return map_.size();
  }

  // Runs `f(const Map&)` under the lock and returns what it returns.
  template <typename F>
  auto Read(F f) const {
    absl::MutexLock lock(&mu_);
    return f(map_);
  }

 private:
  const std::string path_;
  const Parser parse_;
  mutable absl::Mutex mu_;
  Map map_ ABSL_GUARDED_BY(mu_);
};

}  // namespace bellwether::server

#endif  // BELLWETHER_SERVER_RELOADABLE_ENTRIES_H_
