// The daemon's Prometheus metrics: counters and histograms updated as work happens, and
// per-pool / per-question gauges computed at scrape time from published snapshots.
// Names follow Prometheus conventions (base units, `_total` counters).
//
//   bellwether_build_info{version}                    1
//   bellwether_start_time_seconds                     Unix time the daemon started
//   bellwether_recovery_seconds, bellwether_recovery_log_records,
//   bellwether_recovery_frames                        what loading the state took at start
//   bellwether_frames_received_total{pool}            frames in batches handed to a pool
//   bellwether_frames_applied_total{pool}
//   bellwether_frames_duplicate_total{pool}           resent frames at or below the applied
//                                                     seq: skipped, not learned twice
//   bellwether_frames_rejected_total{pool,reason}     reason: seq, values, missing, action,
//                                                     behavior_prob, time, other
//   bellwether_ingest_batches_refused_total{pool,reason}  whole batches turned away:
//                                                     queue_full, pool_deleted,
//                                                     pool_changed, draining, disk_full,
//                                                     stream_limit, rate_limited
//   bellwether_limit_refusals_total{limit}          requests refused by a configured limit
//                                                     that is not a pool's batch refusal:
//                                                     pools, pool_memory, questions,
//                                                     signals, feature_table (ApplyPool);
//                                                     ingest_calls (Ingest)
//   bellwether_auth_failures_total{reason}            grpc_unauthenticated (no or unknown
//                                                     token), grpc_permission_denied (scope
//                                                     or pool), http_unauthorized
//   bellwether_batch_apply_seconds{pool}              histogram: one batch in the writer
//   bellwether_predict_seconds{method}                histogram: Predict / PredictBatch /
//                                                     Progress handling time
//   bellwether_ingest_queue_depth{pool}               batches waiting for the writer
//   bellwether_streams{pool}, bellwether_questions{pool}
//   bellwether_pool_question_streams{pool,label}      (question, stream) pairs per label
//   Per question, for the first --metrics-max-questions (pool, question) pairs only
//   (beyond the cap, the pool-level series above are the aggregate):
//   bellwether_question_verified_rmse{pool,question,unit}  RMS over streams of verified RMSE,
//                                                     in the question's return units (the
//                                                     discounted sum of the cumulant)
//   bellwether_question_verified_nrmse{pool,question}      mean over streams
//   bellwether_question_td_error_rms{pool,question}        RMS over streams
//   bellwether_question_weight_change{pool,question}       mean over streams
//   bellwether_question_streams{pool,question,label}       streams per progress label
#ifndef BELLWETHER_SERVER_DAEMON_METRICS_H_
#define BELLWETHER_SERVER_DAEMON_METRICS_H_

#include <atomic>
#include <memory>
#include <string>

#include "prometheus/counter.h"
#include "prometheus/family.h"
#include "prometheus/gauge.h"
#include "prometheus/histogram.h"
#include "prometheus/registry.h"
#include "server/pool_metrics.h"

namespace bellwether::server {

class PoolRegistry;

class DaemonMetrics {
 public:
  DaemonMetrics(const std::string& version, size_t max_question_series);

  // Instruments for a new pool (its series go when the returned object goes).
  std::shared_ptr<PoolMetrics> NewPoolMetrics(const std::string& pool);

  // Counts a request refused by the limit `limit` (see the list above). Thread-safe.
  void LimitRefused(const std::string& limit);
  // Counts a request that failed authentication or authorization. Thread-safe.
  void AuthFailed(const std::string& reason);

  // Records the handling time of a read RPC.
  void ObserveRead(const std::string& method, double seconds);

  // What recovery did at start: its duration, log records and frames replayed.
  void SetRecovery(double seconds, double records, double frames);

  // Where scrape-time gauges come from; set once before serving.
  void SetPoolSource(const PoolRegistry* registry) { pools_.store(registry); }

  // The exposition text of every metric (Prometheus text format 0.0.4).
  std::string Scrape() const;

 private:
  class PoolCollector;
  std::shared_ptr<prometheus::Registry> registry_;
  prometheus::Family<prometheus::Counter>& received_;
  prometheus::Family<prometheus::Counter>& applied_;
  prometheus::Family<prometheus::Counter>& rejected_;
  prometheus::Family<prometheus::Histogram>& batch_seconds_;
  prometheus::Family<prometheus::Counter>& refused_;
  prometheus::Family<prometheus::Counter>& duplicate_;
  prometheus::Family<prometheus::Histogram>& read_seconds_;
  prometheus::Family<prometheus::Counter>& limit_refusals_;
  prometheus::Family<prometheus::Counter>& auth_failures_;
  prometheus::Gauge* recovery_seconds_;
  prometheus::Gauge* recovery_records_;
  prometheus::Gauge* recovery_frames_;
  prometheus::Histogram* predict_;
  prometheus::Histogram* predict_batch_;
  prometheus::Histogram* progress_;
  std::atomic<const PoolRegistry*> pools_{nullptr};
  const size_t max_question_series_;
};

}  // namespace bellwether::server

#endif  // BELLWETHER_SERVER_DAEMON_METRICS_H_
