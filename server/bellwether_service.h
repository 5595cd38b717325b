// The gRPC face of the engine: validates requests, hands frames to pool workers, and
// answers reads from published snapshots.
#ifndef BELLWETHER_SERVER_BELLWETHER_SERVICE_H_
#define BELLWETHER_SERVER_BELLWETHER_SERVICE_H_

#include "bellwether/v1/service.grpc.pb.h"
#include "server/pool_registry.h"

namespace bellwether::server {

// Converts an absl::Status to a grpc::Status with the same code and message.
grpc::Status ToGrpc(const absl::Status& status);

class BellwetherService final : public v1::Bellwether::Service {
 public:
  // `registry` must outlive the service.
  explicit BellwetherService(PoolRegistry* registry) : registry_(registry) {}

  grpc::Status ApplyPool(grpc::ServerContext* context, const v1::ApplyPoolRequest* request,
                         v1::ApplyPoolResponse* response) override;
  grpc::Status Ingest(
      grpc::ServerContext* context,
      grpc::ServerReaderWriter<v1::IngestResponse, v1::IngestRequest>* stream) override;
  grpc::Status Predict(grpc::ServerContext* context, const v1::PredictRequest* request,
                       v1::StreamPredictions* response) override;

 private:
  PoolRegistry* registry_;
};

}  // namespace bellwether::server

#endif  // BELLWETHER_SERVER_BELLWETHER_SERVICE_H_
