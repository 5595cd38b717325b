#include "server/pool_metrics.h"

#include <utility>

namespace bellwether::server {
namespace {

// Batch apply latency buckets, seconds: 50 us .. 2.5 s.
prometheus::Histogram::BucketBoundaries BatchBuckets() {
  return {5e-5, 1e-4, 2.5e-4, 5e-4, 1e-3, 2.5e-3, 5e-3, 1e-2, 2.5e-2, 5e-2, 0.1, 0.25, 0.5, 1, 2.5};
}

}  // namespace

PoolMetrics::PoolMetrics(std::string pool, prometheus::Family<prometheus::Counter>& received,
                         prometheus::Family<prometheus::Counter>& applied,
                         prometheus::Family<prometheus::Counter>& rejected,
                         prometheus::Family<prometheus::Histogram>& batch_seconds,
                         prometheus::Family<prometheus::Counter>& refused,
                         prometheus::Family<prometheus::Counter>& duplicate)
    : pool_(std::move(pool)),
      received_family_(received),
      applied_family_(applied),
      rejected_family_(rejected),
      batch_family_(batch_seconds),
      refused_family_(refused),
      duplicate_family_(duplicate),
      duplicate_(&duplicate.Add({{"pool", pool_}})),
      received_(&received.Add({{"pool", pool_}})),
      applied_(&applied.Add({{"pool", pool_}})),
      batch_seconds_(&batch_seconds.Add({{"pool", pool_}}, BatchBuckets())) {
  // Every series exists from the start (at 0), so rate() sees the first event.
  absl::MutexLock lock(&mu_);
  for (const char* reason : {"seq", "values", "missing", "action", "behavior_prob", "time",
                             "other"}) {
    rejected_[reason] = &rejected_family_.Add({{"pool", pool_}, {"reason", reason}});
  }
  for (const char* reason :
       {"queue_full", "pool_deleted", "pool_changed", "draining", "disk_full", "stream_limit"}) {
    refused_[reason] = &refused_family_.Add({{"pool", pool_}, {"reason", reason}});
  }
}

PoolMetrics::~PoolMetrics() {
  received_family_.Remove(received_);
  applied_family_.Remove(applied_);
  batch_family_.Remove(batch_seconds_);
  duplicate_family_.Remove(duplicate_);
  absl::MutexLock lock(&mu_);
  for (auto& [reason, counter] : rejected_) rejected_family_.Remove(counter);
  for (auto& [reason, counter] : refused_) refused_family_.Remove(counter);
}

prometheus::Counter& PoolMetrics::ByReason(
    absl::flat_hash_map<std::string, prometheus::Counter*>& counters,
    prometheus::Family<prometheus::Counter>& family, const std::string& reason) {
  absl::MutexLock lock(&mu_);
  auto it = counters.find(reason);
  if (it == counters.end()) {
    it = counters.emplace(reason, &family.Add({{"pool", pool_}, {"reason", reason}})).first;
  }
  return *it->second;
}

void PoolMetrics::BatchRefused(const std::string& reason) {
  ByReason(refused_, refused_family_, reason).Increment();
}

void PoolMetrics::FrameRejected(const std::string& reason) {
  ByReason(rejected_, rejected_family_, reason).Increment();
}

}  // namespace bellwether::server
