// The gRPC face of the engine (callback API): validates requests, hands frame batches to
// pool workers through their bounded queues (no learning on gRPC threads), and answers
// reads from published snapshots, so a read never waits for a batch.
#ifndef BELLWETHER_SERVER_BELLWETHER_SERVICE_H_
#define BELLWETHER_SERVER_BELLWETHER_SERVICE_H_

#include <atomic>
#include <memory>
#include <thread>

#include "absl/base/thread_annotations.h"
#include "absl/container/flat_hash_set.h"
#include "absl/synchronization/mutex.h"
#include "absl/time/time.h"
#include "bellwether/v1/service.grpc.pb.h"
#include "server/auth.h"
#include "server/checkpointer.h"
#include "server/daemon_metrics.h"
#include "server/pool_registry.h"

namespace bellwether::server {

// Converts an absl::Status to a grpc::Status with the same code and message.
grpc::Status ToGrpc(const absl::Status& status);

// Keeps `questions` (by name, in that order) of `in` in `out`; every question if empty.
// NOT_FOUND names an unknown question.
absl::Status FilterQuestions(const v1::StreamPredictions& in,
                             const google::protobuf::RepeatedPtrField<std::string>& questions,
                             v1::StreamPredictions* out);

class BellwetherService final : public v1::Bellwether::CallbackService {
 public:
  struct Options {
    // Batches one ingest call may have queued or in the writer at once; past it the call
    // stops reading, so HTTP/2 flow control slows the producer.
    int max_batches_in_flight = 4;
    // Frames one ingest message may carry.
    int max_batch_frames = 10000;
    // Ingest calls open at once; a call past it ends at once with RESOURCE_EXHAUSTED
    // (bellwether_limit_refusals_total{limit="ingest_calls"}).
    int max_ingest_calls = 4096;
    // How often Watch calls look for fresh answers.
    absl::Duration watch_tick = absl::Milliseconds(50);
  };

  // `registry` (and `metrics`, which may be null) must outlive the service.
  BellwetherService(PoolRegistry* registry, DaemonMetrics* metrics, Options options);
  ~BellwetherService() override;

  // New calls fail with UNAVAILABLE; open ingest calls end with UNAVAILABLE once their
  // queued batches are applied (or at once when idle); watches end.
  void StartDraining();
  bool draining() const { return draining_.load(); }
  // While loading (recovery), every call fails with UNAVAILABLE.
  void SetLoading(bool loading) { loading_.store(loading); }
  // Serves the Checkpoint RPC (null: FAILED_PRECONDITION). Set before serving.
  void SetCheckpointer(Checkpointer* c) { checkpointer_ = c; }
  // Checks bearer tokens on every RPC (null: no authentication). Set before serving.
  void SetAuth(const TokenAuth* auth) { auth_ = auth; }
  // Waits until every ingest and watch call has ended, or `deadline`. True if all ended.
  bool WaitForStreamsToEnd(absl::Time deadline);

  grpc::ServerUnaryReactor* ApplyPool(grpc::CallbackServerContext* context,
                                      const v1::ApplyPoolRequest* request,
                                      v1::ApplyPoolResponse* response) override;
  grpc::ServerUnaryReactor* DescribePool(grpc::CallbackServerContext* context,
                                         const v1::DescribePoolRequest* request,
                                         v1::PoolDescription* response) override;
  grpc::ServerUnaryReactor* ListPools(grpc::CallbackServerContext* context,
                                      const v1::ListPoolsRequest* request,
                                      v1::ListPoolsResponse* response) override;
  grpc::ServerUnaryReactor* DeletePool(grpc::CallbackServerContext* context,
                                       const v1::DeletePoolRequest* request,
                                       v1::DeletePoolResponse* response) override;
  grpc::ServerBidiReactor<v1::IngestRequest, v1::IngestResponse>* Ingest(
      grpc::CallbackServerContext* context) override;
  grpc::ServerUnaryReactor* Predict(grpc::CallbackServerContext* context,
                                    const v1::PredictRequest* request,
                                    v1::StreamPredictions* response) override;
  grpc::ServerUnaryReactor* PredictBatch(grpc::CallbackServerContext* context,
                                         const v1::PredictBatchRequest* request,
                                         v1::PredictBatchResponse* response) override;
  grpc::ServerWriteReactor<v1::StreamPredictions>* Watch(
      grpc::CallbackServerContext* context, const v1::WatchRequest* request) override;
  grpc::ServerUnaryReactor* Progress(grpc::CallbackServerContext* context,
                                     const v1::ProgressRequest* request,
                                     v1::ProgressResponse* response) override;
  grpc::ServerUnaryReactor* Checkpoint(grpc::CallbackServerContext* context,
                                       const v1::CheckpointRequest* request,
                                       v1::CheckpointResponse* response) override;

  // The answers of one stream (filtered), as Predict gives them. Thread-safe.
  absl::Status ReadPredictions(const v1::PredictRequest& request, v1::StreamPredictions* out) const;
  // Progress with history, as the Progress RPC gives it. Thread-safe.
  absl::Status ReadProgress(const v1::ProgressRequest& request, v1::ProgressResponse* out) const;

 private:
  class IngestReactor;
  class WatchReactor;
  friend class IngestReactor;
  friend class WatchReactor;

  void WatchLoop();
  size_t Register(IngestReactor* r);  // returns the ingest calls now open
  void Unregister(IngestReactor* r);
  void Register(WatchReactor* r);
  void Unregister(WatchReactor* r);

  PoolRegistry* const registry_;
  DaemonMetrics* const metrics_;
  const Options options_;
  std::atomic<bool> draining_{false};
  std::atomic<bool> loading_{false};
  Checkpointer* checkpointer_ = nullptr;
  const TokenAuth* auth_ = nullptr;
  // OK without authentication, else the token check for `scope` on `pool`.
  grpc::Status Authorize(const grpc::ServerContextBase& context, Scope scope,
                         const std::string& pool) const;
  // UNAVAILABLE while loading or draining, else OK.
  grpc::Status Gate() const;

  mutable absl::Mutex calls_mu_;
  absl::flat_hash_set<IngestReactor*> ingests_ ABSL_GUARDED_BY(calls_mu_);
  absl::flat_hash_set<WatchReactor*> watches_ ABSL_GUARDED_BY(calls_mu_);
  bool stop_watch_loop_ ABSL_GUARDED_BY(calls_mu_) = false;
  std::thread watch_thread_;
};

}  // namespace bellwether::server

#endif  // BELLWETHER_SERVER_BELLWETHER_SERVICE_H_
