#include "server/bellwether_service.h"

#include <string>
#include <vector>

#include "absl/strings/str_cat.h"

namespace bellwether::server {
namespace {

constexpr size_t kMaxStreamName = 128;

absl::Status ValidateStreamName(const std::string& name) {
  if (name.empty() || name.size() > kMaxStreamName) {
    return absl::InvalidArgumentError("open.stream: must be 1..128 characters");
  }
  for (unsigned char c : name) {
    if (c < 0x20 || c == 0x7f) {
      return absl::InvalidArgumentError("open.stream: contains a control character");
    }
  }
  return absl::OkStatus();
}

}  // namespace

grpc::Status ToGrpc(const absl::Status& status) {
  if (status.ok()) return grpc::Status::OK;
  return grpc::Status(static_cast<grpc::StatusCode>(status.code()),
                      std::string(status.message()));
}

grpc::Status BellwetherService::ApplyPool(grpc::ServerContext*,
                                          const v1::ApplyPoolRequest* request,
                                          v1::ApplyPoolResponse* response) {
  if (!request->has_spec()) {
    return grpc::Status(grpc::StatusCode::INVALID_ARGUMENT, "spec: required");
  }
  auto applied = registry_->Apply(request->spec(), request->dry_run());
  if (!applied.ok()) return ToGrpc(applied.status());
  *response = *std::move(applied);
  return grpc::Status::OK;
}

grpc::Status BellwetherService::Ingest(
    grpc::ServerContext*,
    grpc::ServerReaderWriter<v1::IngestResponse, v1::IngestRequest>* stream) {
  v1::IngestRequest request;
  if (!stream->Read(&request)) return grpc::Status::OK;
  if (!request.has_open()) {
    return grpc::Status(grpc::StatusCode::INVALID_ARGUMENT,
                        "open: the first message of an ingest stream must name pool and stream");
  }
  const v1::IngestOpen open = request.open();
  if (auto s = ValidateStreamName(open.stream()); !s.ok()) return ToGrpc(s);
  auto worker = registry_->Find(open.pool());
  if (!worker.ok()) return ToGrpc(worker.status());
  std::vector<std::string> columns(open.columns().begin(), open.columns().end());
  const auto generation = (*worker)->current();
  auto column_map = ColumnMap::Create(generation->signal_names, columns);
  if (!column_map.ok()) {
    return grpc::Status(grpc::StatusCode::INVALID_ARGUMENT,
                        absl::StrCat("open.", column_map.status().message()));
  }
  uint64_t applied_total = 0;
  while (stream->Read(&request)) {
    if (!request.has_batch()) {
      return grpc::Status(grpc::StatusCode::INVALID_ARGUMENT,
                          "batch: every message after `open` must carry a frame batch");
    }
    PoolWorker::BatchResult r =
        (*worker)->ApplyBatch(open.stream(), *column_map, generation->id, request.batch());
    applied_total += r.frames_applied;
    if (!r.status.ok()) {
      return grpc::Status(static_cast<grpc::StatusCode>(r.status.code()),
                          absl::StrCat("pool ", open.pool(), " stream ", open.stream(), ": ",
                                       r.status.message(), " (", r.frames_applied,
                                       " earlier frames of the batch were applied; last "
                                       "applied seq ",
                                       r.applied_seq, ")"));
    }
    v1::IngestResponse response;
    response.set_applied_seq(r.applied_seq);
    response.set_frames_applied(applied_total);
    if (!stream->Write(response)) break;
  }
  return grpc::Status::OK;
}

grpc::Status BellwetherService::Predict(grpc::ServerContext*, const v1::PredictRequest* request,
                                        v1::StreamPredictions* response) {
  auto worker = registry_->Find(request->pool());
  if (!worker.ok()) return ToGrpc(worker.status());
  auto snapshot = (*worker)->Snapshot(request->stream());
  if (snapshot == nullptr) {
    return grpc::Status(grpc::StatusCode::NOT_FOUND,
                        absl::StrCat("pool ", request->pool(), ": stream '", request->stream(),
                                     "' has no applied frames"));
  }
  *response = *snapshot;
  return grpc::Status::OK;
}

}  // namespace bellwether::server
