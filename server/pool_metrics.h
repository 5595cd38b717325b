// Prometheus instruments of one pool, updated by its writer thread and ingest reactors.
// prometheus-cpp counters and histograms are thread-safe.
#ifndef BELLWETHER_SERVER_POOL_METRICS_H_
#define BELLWETHER_SERVER_POOL_METRICS_H_

#include <string>

#include "absl/base/thread_annotations.h"
#include "absl/container/flat_hash_map.h"
#include "absl/synchronization/mutex.h"
#include "prometheus/counter.h"
#include "prometheus/family.h"
#include "prometheus/histogram.h"

namespace bellwether::server {

class PoolMetrics {
 public:
  PoolMetrics(std::string pool, prometheus::Family<prometheus::Counter>& received,
              prometheus::Family<prometheus::Counter>& applied,
              prometheus::Family<prometheus::Counter>& rejected,
              prometheus::Family<prometheus::Histogram>& batch_seconds,
              prometheus::Family<prometheus::Counter>& refused,
              prometheus::Family<prometheus::Counter>& duplicate);
  // Removes this pool's series from the families.
  ~PoolMetrics();

  void FramesReceived(double n) { received_->Increment(n); }
  void FramesApplied(double n) { applied_->Increment(n); }
  void FramesDuplicate(double n) { duplicate_->Increment(n); }
  // `reason`: one of RejectionReason()'s labels.
  void FrameRejected(const std::string& reason);
  void BatchApplied(double seconds) { batch_seconds_->Observe(seconds); }
  // A whole batch turned away; `reason`: queue_full, pool_deleted, pool_changed, draining,
  // disk_full.
  void BatchRefused(const std::string& reason);

 private:
  // The counter of `reason` in `counters` (created in `family` on first use).
  prometheus::Counter& ByReason(absl::flat_hash_map<std::string, prometheus::Counter*>& counters,
                                prometheus::Family<prometheus::Counter>& family,
                                const std::string& reason);

  const std::string pool_;
  prometheus::Family<prometheus::Counter>& received_family_;
  prometheus::Family<prometheus::Counter>& applied_family_;
  prometheus::Family<prometheus::Counter>& rejected_family_;
  prometheus::Family<prometheus::Histogram>& batch_family_;
  prometheus::Family<prometheus::Counter>& refused_family_;
  prometheus::Family<prometheus::Counter>& duplicate_family_;
  prometheus::Counter* duplicate_;
  prometheus::Counter* received_;
  prometheus::Counter* applied_;
  prometheus::Histogram* batch_seconds_;
  absl::Mutex mu_;
  absl::flat_hash_map<std::string, prometheus::Counter*> rejected_ ABSL_GUARDED_BY(mu_);
  absl::flat_hash_map<std::string, prometheus::Counter*> refused_ ABSL_GUARDED_BY(mu_);
};

}  // namespace bellwether::server

#endif  // BELLWETHER_SERVER_POOL_METRICS_H_
