#include "server/daemon_metrics.h"

#include <cmath>
#include <map>
#include <utility>
#include <vector>

#include "absl/time/clock.h"
#include "prometheus/metric_family.h"
#include "prometheus/text_serializer.h"
#include "server/pool_registry.h"

namespace bellwether::server {
namespace {

using prometheus::ClientMetric;
using prometheus::MetricFamily;
using prometheus::MetricType;

// Read RPC latency buckets, seconds: 10 us .. 1 s.
prometheus::Histogram::BucketBoundaries ReadBuckets() {
  return {1e-5, 2.5e-5, 5e-5, 1e-4, 2.5e-4, 5e-4, 1e-3, 2.5e-3, 5e-3, 1e-2, 2.5e-2, 0.1, 1};
}

constexpr const char* kLabels[] = {"learning", "settled", "diverging"};

struct GaugeFamily {
  MetricFamily family;
  GaugeFamily(std::string name, std::string help) {
    family.name = std::move(name);
    family.help = std::move(help);
    family.type = MetricType::Gauge;
  }
  void Add(std::vector<ClientMetric::Label> labels, double value) {
    ClientMetric m;
    m.label = std::move(labels);
    m.gauge.value = value;
    family.metric.push_back(std::move(m));
  }
};

}  // namespace

DaemonMetrics::DaemonMetrics(const std::string& version, size_t max_question_series)
    : registry_(std::make_shared<prometheus::Registry>()),
      received_(prometheus::BuildCounter()
                    .Name("bellwether_frames_received_total")
                    .Help("Frames in batches handed to a pool's writer")
                    .Register(*registry_)),
      applied_(prometheus::BuildCounter()
                   .Name("bellwether_frames_applied_total")
                   .Help("Frames applied (learned from and answered)")
                   .Register(*registry_)),
      rejected_(prometheus::BuildCounter()
                    .Name("bellwether_frames_rejected_total")
                    .Help("Frames rejected, by the field at fault")
                    .Register(*registry_)),
      batch_seconds_(prometheus::BuildHistogram()
                         .Name("bellwether_batch_apply_seconds")
                         .Help("Time the writer spent applying one frame batch")
                         .Register(*registry_)),
      refused_(prometheus::BuildCounter()
                   .Name("bellwether_ingest_batches_refused_total")
                   .Help("Whole frame batches turned away (nothing of them applied), by reason")
                   .Register(*registry_)),
      duplicate_(prometheus::BuildCounter()
                     .Name("bellwether_frames_duplicate_total")
                     .Help("Resent frames at or below the stream's applied seq, skipped")
                     .Register(*registry_)),
      read_seconds_(prometheus::BuildHistogram()
                        .Name("bellwether_predict_seconds")
                        .Help("Time to answer a read RPC (Predict, PredictBatch, Progress)")
                        .Register(*registry_)),
      limit_refusals_(prometheus::BuildCounter()
                          .Name("bellwether_limit_refusals_total")
                          .Help("Requests refused by a configured limit (ApplyPool: pools, "
                                "pool_memory, questions, signals, feature_table; Ingest: "
                                "ingest_calls)")
                          .Register(*registry_)),
      auth_failures_(prometheus::BuildCounter()
                         .Name("bellwether_auth_failures_total")
                         .Help("Requests refused for want of a valid token, scope or "
                               "password, by reason")
                         .Register(*registry_)),
      predict_(&read_seconds_.Add({{"method", "Predict"}}, ReadBuckets())),
      predict_batch_(&read_seconds_.Add({{"method", "PredictBatch"}}, ReadBuckets())),
      progress_(&read_seconds_.Add({{"method", "Progress"}}, ReadBuckets())),
      max_question_series_(max_question_series) {
  prometheus::BuildGauge()
      .Name("bellwether_build_info")
      .Help("Build of the running daemon (value 1)")
      .Register(*registry_)
      .Add({{"version", version}})
      .Set(1);
  recovery_seconds_ = &prometheus::BuildGauge()
                           .Name("bellwether_recovery_seconds")
                           .Help("Time loading the checkpoint and replaying the log took at start")
                           .Register(*registry_)
                           .Add({});
  recovery_records_ = &prometheus::BuildGauge()
                           .Name("bellwether_recovery_log_records")
                           .Help("Write-ahead log records replayed at start")
                           .Register(*registry_)
                           .Add({});
  recovery_frames_ = &prometheus::BuildGauge()
                          .Name("bellwether_recovery_frames")
                          .Help("Frames replayed from the write-ahead log at start")
                          .Register(*registry_)
                          .Add({});
  prometheus::BuildGauge()
      .Name("bellwether_start_time_seconds")
      .Help("Unix time the daemon started, in seconds")
      .Register(*registry_)
      .Add({})
      .Set(static_cast<double>(absl::ToUnixMicros(absl::Now())) / 1e6);
}

void DaemonMetrics::SetRecovery(double seconds, double records, double frames) {
  recovery_seconds_->Set(seconds);
  recovery_records_->Set(records);
  recovery_frames_->Set(frames);
}

std::shared_ptr<PoolMetrics> DaemonMetrics::NewPoolMetrics(const std::string& pool) {
  return std::make_shared<PoolMetrics>(pool, received_, applied_, rejected_, batch_seconds_,
                                       refused_, duplicate_);
}

void DaemonMetrics::LimitRefused(const std::string& limit) {
  limit_refusals_.Add({{"limit", limit}}).Increment();
}

void DaemonMetrics::AuthFailed(const std::string& reason) {
  auth_failures_.Add({{"reason", reason}}).Increment();
}

void DaemonMetrics::ObserveRead(const std::string& method, double seconds) {
  if (method == "Predict") {
    predict_->Observe(seconds);
  } else if (method == "PredictBatch") {
    predict_batch_->Observe(seconds);
  } else if (method == "Progress") {
    progress_->Observe(seconds);
  }
}

std::string DaemonMetrics::Scrape() const {
  std::vector<MetricFamily> families = registry_->Collect();
  const PoolRegistry* registry = pools_.load();
  if (registry != nullptr) {
    GaugeFamily queue("bellwether_ingest_queue_depth", "Batches waiting for the pool's writer");
    GaugeFamily streams("bellwether_streams", "Streams the pool has applied frames of");
    GaugeFamily questions("bellwether_questions", "Questions in the pool's spec");
    GaugeFamily pool_labels("bellwether_pool_question_streams",
                            "(question, stream) pairs of the pool by progress label");
    GaugeFamily rmse("bellwether_question_verified_rmse",
                     "Root mean square over streams of the question's verified RMSE, in the "
                     "question's return units (discounted sum of the cumulant; `unit` is the "
                     "cumulant's)");
    GaugeFamily nrmse("bellwether_question_verified_nrmse",
                      "Mean over streams of the question's verified normalized RMSE");
    GaugeFamily td("bellwether_question_td_error_rms",
                   "Root mean square over streams of the question's TD-error RMS");
    GaugeFamily change("bellwether_question_weight_change",
                       "Mean over streams of the question's weight change per update");
    GaugeFamily q_labels("bellwether_question_streams",
                         "Streams of the question by progress label");
    size_t series = 0;
    for (const auto& worker : registry->All()) {
      const std::string& pool = worker->name();
      const auto g = worker->current();
      const auto snaps = worker->Snapshots();
      const size_t nq = g->question_names.size();
      queue.Add({{"pool", pool}}, static_cast<double>(worker->queue_depth()));
      streams.Add({{"pool", pool}}, static_cast<double>(snaps.size()));
      questions.Add({{"pool", pool}}, static_cast<double>(nq));
      struct Acc {
        double rmse_sq = 0, nrmse = 0, td_sq = 0, change = 0;
        size_t verified = 0, n = 0;
        size_t labels[3] = {};
      };
      std::vector<Acc> acc(nq);
      size_t pool_counts[3] = {};
      for (const auto& snap : snaps) {
        const int n = std::min(static_cast<int>(nq), snap->predictions.predictions_size());
        for (int i = 0; i < n; ++i) {
          const v1::Prediction& p = snap->predictions.predictions(i);
          Acc& a = acc[static_cast<size_t>(i)];
          if (p.verified().count() > 0) {
            a.rmse_sq += p.verified().rmse() * p.verified().rmse();
            a.nrmse += p.verified().nrmse();
            ++a.verified;
          }
          a.td_sq += p.progress().td_error_rms() * p.progress().td_error_rms();
          a.change += p.progress().weight_change();
          ++a.n;
          for (int l = 0; l < 3; ++l) {
            if (p.label() == kLabels[l]) {
              ++a.labels[l];
              ++pool_counts[l];
            }
          }
        }
      }
      for (int l = 0; l < 3; ++l) {
        pool_labels.Add({{"pool", pool}, {"label", kLabels[l]}},
                        static_cast<double>(pool_counts[l]));
      }
      for (size_t q = 0; q < nq && series < max_question_series_; ++q, ++series) {
        const Acc& a = acc[q];
        const std::string& name = g->question_names[q];
        if (a.verified > 0) {
          const double v = static_cast<double>(a.verified);
          rmse.Add({{"pool", pool}, {"question", name}, {"unit", g->question_units[q]}},
                   std::sqrt(a.rmse_sq / v));
          nrmse.Add({{"pool", pool}, {"question", name}}, a.nrmse / v);
        }
        if (a.n > 0) {
          const double n = static_cast<double>(a.n);
          td.Add({{"pool", pool}, {"question", name}}, std::sqrt(a.td_sq / n));
          change.Add({{"pool", pool}, {"question", name}}, a.change / n);
        }
        for (int l = 0; l < 3; ++l) {
          q_labels.Add({{"pool", pool}, {"question", name}, {"label", kLabels[l]}},
                       static_cast<double>(a.labels[l]));
        }
      }
    }
    for (GaugeFamily* f : {&queue, &streams, &questions, &pool_labels, &rmse, &nrmse, &td,
                           &change, &q_labels}) {
      families.push_back(std::move(f->family));
    }
  }
  return prometheus::TextSerializer().Serialize(families);
}

}  // namespace bellwether::server
