#include "client/bellwether_client.h"

#include <algorithm>

#include "absl/strings/str_cat.h"
#include "absl/time/clock.h"
#include "grpcpp/grpcpp.h"

namespace bellwether {
namespace {

void SetDeadline(grpc::ClientContext* context, absl::Duration timeout) {
  context->set_deadline(absl::ToChronoTime(absl::Now() + timeout));
}

}  // namespace

std::string GrpcCodeName(grpc::StatusCode code) {
  switch (code) {
    case grpc::StatusCode::OK: return "OK";
    case grpc::StatusCode::CANCELLED: return "CANCELLED";
    case grpc::StatusCode::UNKNOWN: return "UNKNOWN";
    case grpc::StatusCode::INVALID_ARGUMENT: return "INVALID_ARGUMENT";
    case grpc::StatusCode::DEADLINE_EXCEEDED: return "DEADLINE_EXCEEDED";
    case grpc::StatusCode::NOT_FOUND: return "NOT_FOUND";
    case grpc::StatusCode::ALREADY_EXISTS: return "ALREADY_EXISTS";
    case grpc::StatusCode::PERMISSION_DENIED: return "PERMISSION_DENIED";
    case grpc::StatusCode::UNAUTHENTICATED: return "UNAUTHENTICATED";
    case grpc::StatusCode::RESOURCE_EXHAUSTED: return "RESOURCE_EXHAUSTED";
    case grpc::StatusCode::FAILED_PRECONDITION: return "FAILED_PRECONDITION";
    case grpc::StatusCode::ABORTED: return "ABORTED";
    case grpc::StatusCode::OUT_OF_RANGE: return "OUT_OF_RANGE";
    case grpc::StatusCode::UNIMPLEMENTED: return "UNIMPLEMENTED";
    case grpc::StatusCode::INTERNAL: return "INTERNAL";
    case grpc::StatusCode::UNAVAILABLE: return "UNAVAILABLE";
    case grpc::StatusCode::DATA_LOSS: return "DATA_LOSS";
    default: return absl::StrCat("CODE_", static_cast<int>(code));
  }
}

absl::Status FromGrpc(const grpc::Status& status) {
  if (status.ok()) return absl::OkStatus();
  return absl::Status(static_cast<absl::StatusCode>(status.error_code()), status.error_message());
}

IngestSession::~IngestSession() {
  if (!finished_) (void)Finish();
}

absl::StatusOr<v1::IngestResponse> IngestSession::Send(const v1::FrameBatch& batch) {
  if (finished_) return absl::FailedPreconditionError("ingest session already finished");
  v1::IngestRequest request;
  *request.mutable_batch() = batch;
  v1::IngestResponse response;
  if (!stream_->Write(request) || !stream_->Read(&response)) {
    absl::Status s = Finish();
    if (s.ok()) s = absl::UnavailableError("ingest stream closed by the server");
    return s;
  }
  return response;
}

absl::Status IngestSession::Finish() {
  if (finished_) return absl::OkStatus();
  finished_ = true;
  stream_->WritesDone();
  v1::IngestResponse drain;
  while (stream_->Read(&drain)) {
  }
  return FromGrpc(stream_->Finish());
}

std::unique_ptr<Client> Client::Connect(const std::string& target) {
  return Connect(target, ClientOptions());
}

std::unique_ptr<Client> Client::Connect(const std::string& target, const ClientOptions& options) {
  std::shared_ptr<grpc::ChannelCredentials> credentials = grpc::InsecureChannelCredentials();
  if (options.tls) {
    grpc::SslCredentialsOptions ssl;
    ssl.pem_root_certs = options.tls_root_certs_pem;
    ssl.pem_cert_chain = options.tls_client_cert_pem;
    ssl.pem_private_key = options.tls_client_key_pem;
    credentials = grpc::SslCredentials(ssl);
  }
  grpc::ChannelArguments args;
  if (!options.tls_server_name.empty()) {
    args.SetSslTargetNameOverride(options.tls_server_name);
  }
  // A restarted daemon is found again within a couple of seconds (gRPC's default backoff
  // grows to two minutes).
  args.SetInt(GRPC_ARG_INITIAL_RECONNECT_BACKOFF_MS, 100);
  args.SetInt(GRPC_ARG_MIN_RECONNECT_BACKOFF_MS, 100);
  args.SetInt(GRPC_ARG_MAX_RECONNECT_BACKOFF_MS, 2000);
  std::unique_ptr<Client> client(new Client(grpc::CreateCustomChannel(target, credentials, args)));
  client->bearer_token_ = options.bearer_token;
  return client;
}

void Client::Prepare(grpc::ClientContext* context, absl::Duration timeout) const {
  if (timeout != absl::InfiniteDuration()) SetDeadline(context, timeout);
  if (!bearer_token_.empty()) context->AddMetadata("authorization", "Bearer " + bearer_token_);
}

Client::Client(std::shared_ptr<grpc::Channel> channel)
    : channel_(std::move(channel)), stub_(v1::Bellwether::NewStub(channel_)) {}

absl::StatusOr<v1::ApplyPoolResponse> Client::ApplyPool(const v1::PoolSpec& spec, bool dry_run,
                                                        absl::Duration timeout) {
  grpc::ClientContext context;
  Prepare(&context, timeout);
  v1::ApplyPoolRequest request;
  *request.mutable_spec() = spec;
  request.set_dry_run(dry_run);
  v1::ApplyPoolResponse response;
  const grpc::Status s = stub_->ApplyPool(&context, request, &response);
  if (!s.ok()) return FromGrpc(s);
  return response;
}

WatchSession::~WatchSession() {
  if (!finished_) {
    Cancel();
    (void)Finish();
  }
}

bool WatchSession::Next(v1::StreamPredictions* out) { return !finished_ && reader_->Read(out); }

void WatchSession::Cancel() { context_->TryCancel(); }

absl::Status WatchSession::Finish() {
  if (finished_) return absl::OkStatus();
  finished_ = true;
  v1::StreamPredictions drain;
  while (reader_->Read(&drain)) {
  }
  return FromGrpc(reader_->Finish());
}

absl::StatusOr<std::unique_ptr<IngestSession>> Client::OpenIngest(
    const std::string& pool, const std::string& stream, const std::vector<std::string>& columns,
    IngestOptions options) {
  std::unique_ptr<IngestSession> session(new IngestSession());
  session->context_ = std::make_unique<grpc::ClientContext>();
  Prepare(session->context_.get(), absl::InfiniteDuration());
  session->stream_ = stub_->Ingest(session->context_.get());
  v1::IngestRequest request;
  request.mutable_open()->set_pool(pool);
  request.mutable_open()->set_stream(stream);
  for (const std::string& c : columns) request.mutable_open()->add_columns(c);
  request.mutable_open()->set_resume(options.resume);
  request.mutable_open()->set_return_predictions(options.return_predictions);
  v1::IngestResponse first;
  if (!session->stream_->Write(request) ||
      (options.resume && !session->stream_->Read(&first))) {
    absl::Status s = session->Finish();
    if (s.ok()) s = absl::UnavailableError("ingest stream closed by the server");
    return s;
  }
  session->resumed_seq_ = first.applied_seq();
  session->resumed_durable_seq_ = first.durable_seq();
  return session;
}

ResumingIngest::ResumingIngest(Client* client, std::string pool, std::string stream,
                               std::vector<std::string> columns, Options options)
    : client_(client),
      pool_(std::move(pool)),
      stream_(std::move(stream)),
      columns_(std::move(columns)),
      options_(options) {}

namespace {

bool Retryable(absl::StatusCode code) {
  switch (code) {
    case absl::StatusCode::kUnavailable:
    case absl::StatusCode::kResourceExhausted:
    case absl::StatusCode::kCancelled:
    case absl::StatusCode::kDeadlineExceeded:
    case absl::StatusCode::kFailedPrecondition:  // the spec changed: reopen
    case absl::StatusCode::kAborted:
      return true;
    default:
      return false;
  }
}

}  // namespace

absl::StatusOr<v1::IngestResponse> ResumingIngest::Send(const v1::FrameBatch& batch) {
  for (const v1::Frame& f : batch.frames()) pending_.push_back(f);
  absl::Duration backoff = options_.initial_backoff;
  absl::Status last;
  for (int attempt = 0; attempt < options_.max_attempts; ++attempt) {
    if (attempt > 0) {
      absl::SleepFor(backoff);
      backoff = std::min(backoff * 2, options_.max_backoff);
    }
    if (session_ == nullptr) {
      IngestOptions o;
      o.resume = true;
      auto opened = client_->OpenIngest(pool_, stream_, columns_, o);
      if (!opened.ok()) {
        last = opened.status();
        if (!Retryable(last.code())) return last;
        continue;
      }
      session_ = *std::move(opened);
      if (attempt > 0 || reconnects_ > 0 || durable_seq_ > 0) ++reconnects_;
      durable_seq_ = std::max(durable_seq_, session_->resumed_durable_seq());
    }
    // Resend everything not yet durable (the daemon skips what it already applied).
    v1::FrameBatch resend;
    for (const v1::Frame& f : pending_) {
      if (f.seq() > durable_seq_) *resend.add_frames() = f;
    }
    already_durable_ += pending_.size() - static_cast<size_t>(resend.frames_size());
    pending_.erase(std::remove_if(pending_.begin(), pending_.end(),
                                  [&](const v1::Frame& f) { return f.seq() <= durable_seq_; }),
                   pending_.end());
    auto ack = session_->Send(resend);
    if (!ack.ok()) {
      last = ack.status();
      session_.reset();
      if (!Retryable(last.code())) return last;
      continue;
    }
    durable_seq_ = std::max(durable_seq_, ack->durable_seq());
    // Keep only what is not durable yet (all of it without a state dir: durable_seq 0).
    if (ack->durable_seq() > 0) {
      pending_.erase(std::remove_if(pending_.begin(), pending_.end(),
                                    [&](const v1::Frame& f) { return f.seq() <= durable_seq_; }),
                     pending_.end());
    } else {
      pending_.clear();  // the daemon keeps nothing durable: nothing to resend after a crash
    }
    return ack;
  }
  return absl::Status(last.code(), absl::StrCat("after ", options_.max_attempts,
                                                " attempts: ", last.message()));
}

absl::Status ResumingIngest::Finish() {
  if (session_ == nullptr) return absl::OkStatus();
  absl::Status s = session_->Finish();
  session_.reset();
  return s;
}

absl::StatusOr<v1::StreamPredictions> Client::Predict(const std::string& pool,
                                                      const std::string& stream,
                                                      absl::Duration timeout,
                                                      const std::vector<std::string>& questions) {
  grpc::ClientContext context;
  Prepare(&context, timeout);
  v1::PredictRequest request;
  request.set_pool(pool);
  request.set_stream(stream);
  for (const std::string& q : questions) request.add_questions(q);
  v1::StreamPredictions response;
  const grpc::Status s = stub_->Predict(&context, request, &response);
  if (!s.ok()) return FromGrpc(s);
  return response;
}

absl::StatusOr<v1::PredictBatchResponse> Client::PredictBatch(
    const v1::PredictBatchRequest& request, absl::Duration timeout) {
  grpc::ClientContext context;
  Prepare(&context, timeout);
  v1::PredictBatchResponse response;
  const grpc::Status s = stub_->PredictBatch(&context, request, &response);
  if (!s.ok()) return FromGrpc(s);
  return response;
}

absl::StatusOr<v1::ProgressResponse> Client::Progress(const std::string& pool,
                                                      const std::string& stream,
                                                      absl::Duration timeout) {
  grpc::ClientContext context;
  Prepare(&context, timeout);
  v1::ProgressRequest request;
  request.set_pool(pool);
  request.set_stream(stream);
  v1::ProgressResponse response;
  const grpc::Status s = stub_->Progress(&context, request, &response);
  if (!s.ok()) return FromGrpc(s);
  return response;
}

absl::StatusOr<v1::PoolDescription> Client::DescribePool(const std::string& pool,
                                                         absl::Duration timeout) {
  grpc::ClientContext context;
  Prepare(&context, timeout);
  v1::DescribePoolRequest request;
  request.set_pool(pool);
  v1::PoolDescription response;
  const grpc::Status s = stub_->DescribePool(&context, request, &response);
  if (!s.ok()) return FromGrpc(s);
  return response;
}

absl::StatusOr<v1::ListPoolsResponse> Client::ListPools(absl::Duration timeout) {
  grpc::ClientContext context;
  Prepare(&context, timeout);
  v1::ListPoolsResponse response;
  const grpc::Status s = stub_->ListPools(&context, v1::ListPoolsRequest(), &response);
  if (!s.ok()) return FromGrpc(s);
  return response;
}

absl::Status Client::DeletePool(const std::string& pool, absl::Duration timeout) {
  grpc::ClientContext context;
  Prepare(&context, timeout);
  v1::DeletePoolRequest request;
  request.set_pool(pool);
  v1::DeletePoolResponse response;
  return FromGrpc(stub_->DeletePool(&context, request, &response));
}

absl::StatusOr<v1::CheckpointResponse> Client::Checkpoint(absl::Duration timeout) {
  grpc::ClientContext context;
  Prepare(&context, timeout);
  v1::CheckpointResponse response;
  const grpc::Status s = stub_->Checkpoint(&context, v1::CheckpointRequest(), &response);
  if (!s.ok()) return FromGrpc(s);
  return response;
}

absl::StatusOr<std::unique_ptr<WatchSession>> Client::Watch(const v1::WatchRequest& request) {
  std::unique_ptr<WatchSession> session(new WatchSession());
  session->context_ = std::make_unique<grpc::ClientContext>();
  Prepare(session->context_.get(), absl::InfiniteDuration());
  session->reader_ = stub_->Watch(session->context_.get(), request);
  return session;
}

absl::Status Client::WaitUntilReachable(absl::Duration timeout) {
  if (!channel_->WaitForConnected(absl::ToChronoTime(absl::Now() + timeout))) {
    return absl::UnavailableError("server not reachable");
  }
  return absl::OkStatus();
}

}  // namespace bellwether
