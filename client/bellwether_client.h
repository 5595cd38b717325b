// A small C++ client for bellwetherd: apply pool specs, stream frames, read answers.
//
//   auto client = bellwether::Client::Connect("127.0.0.1:50151");
//   auto applied = client->ApplyPool(spec);        // applied->created(), ->added(), ...
//   auto session = client->OpenIngest("campus", "hall-a", {"power_kw", "energy_kwh"});
//   auto ack = (*session)->Send(batch);           // waits for the batch's acknowledgement
//   auto answers = client->Predict("campus", "hall-a");
//
// Errors are absl::Status values carrying the server's gRPC code and message.
// A Client is thread-safe; an IngestSession is used by one thread at a time.
#ifndef BELLWETHER_CLIENT_BELLWETHER_CLIENT_H_
#define BELLWETHER_CLIENT_BELLWETHER_CLIENT_H_

#include <memory>
#include <string>
#include <vector>

#include "absl/status/statusor.h"
#include "absl/time/time.h"
#include "bellwether/v1/service.grpc.pb.h"

namespace bellwether {

// The name of a gRPC status code, e.g. "INVALID_ARGUMENT".
std::string GrpcCodeName(grpc::StatusCode code);
// grpc::Status -> absl::Status (same code, same message).
absl::Status FromGrpc(const grpc::Status& status);

class IngestSession {
 public:
  ~IngestSession();
  IngestSession(const IngestSession&) = delete;
  IngestSession& operator=(const IngestSession&) = delete;

  // Sends one batch and waits for its acknowledgement. A bad frame does not end the
  // call: it is listed in the response's `rejected` (seq and reason naming the field) and
  // the batch's other frames are applied. Errors of the whole stream (pool changed or
  // deleted, queue full, daemon draining) end the call with the server's status.
  absl::StatusOr<v1::IngestResponse> Send(const v1::FrameBatch& batch);
  // Closes the stream and returns the server's final status.
  absl::Status Finish();

  // With IngestOptions::resume: the stream's applied and durable seq when it opened.
  uint64_t resumed_seq() const { return resumed_seq_; }
  uint64_t resumed_durable_seq() const { return resumed_durable_seq_; }

 private:
  friend class Client;
  IngestSession() = default;
  uint64_t resumed_seq_ = 0;
  uint64_t resumed_durable_seq_ = 0;
  std::unique_ptr<grpc::ClientContext> context_;
  std::unique_ptr<grpc::ClientReaderWriter<v1::IngestRequest, v1::IngestResponse>> stream_;
  bool finished_ = false;
};

// A Watch call: the stream's answers as they change.
class WatchSession {
 public:
  ~WatchSession();
  WatchSession(const WatchSession&) = delete;
  WatchSession& operator=(const WatchSession&) = delete;

  // Waits for the next answers; false when the call ended (see Finish()).
  bool Next(v1::StreamPredictions* out);
  // Ends the call from this side.
  void Cancel();
  // The call's final status (CANCELLED after Cancel()).
  absl::Status Finish();

 private:
  friend class Client;
  WatchSession() = default;
  std::unique_ptr<grpc::ClientContext> context_;
  std::unique_ptr<grpc::ClientReader<v1::StreamPredictions>> reader_;
  bool finished_ = false;
};

class Client;

// How a Client reaches the daemon.
struct ClientOptions {
  // Plaintext unless `tls` is set (the daemon serves plaintext on 127.0.0.1 or a private
  // network until it has TLS; these options are ready for then).
  bool tls = false;
  std::string tls_root_certs_pem;   // empty: the system's roots
  std::string tls_client_cert_pem;  // with the key: mutual TLS
  std::string tls_client_key_pem;
  std::string tls_server_name;      // overrides the name checked in the certificate
  // Sent as 'authorization: Bearer TOKEN' on every call (daemons with --token-file).
  std::string bearer_token;
};

// An ingest stream that survives daemon restarts and broken connections: it keeps every
// frame it sent until the daemon reports it durable, and when a call breaks
// (UNAVAILABLE, RESOURCE_EXHAUSTED, CANCELLED, DEADLINE_EXCEEDED, or FAILED_PRECONDITION
// after a spec change) it reopens with `resume`, learns the stream's durable_seq and
// resends what came after it, backing off between attempts. Frames the daemon already
// applied are skipped there as duplicates, so nothing is learned twice. Errors that a
// resend cannot fix (INVALID_ARGUMENT, NOT_FOUND) are returned.
class ResumingIngest {
 public:
  struct Options {
    int max_attempts = 20;  // per Send, reconnects included
    absl::Duration initial_backoff = absl::Milliseconds(50);
    absl::Duration max_backoff = absl::Seconds(2);
  };
  // `client` must outlive this.
  ResumingIngest(Client* client, std::string pool, std::string stream,
                 std::vector<std::string> columns, Options options);
  ResumingIngest(Client* client, std::string pool, std::string stream,
                 std::vector<std::string> columns)
      : ResumingIngest(client, std::move(pool), std::move(stream), std::move(columns),
                       Options()) {}

  // Sends `batch` (and any earlier frames not yet durable) until acknowledged.
  absl::StatusOr<v1::IngestResponse> Send(const v1::FrameBatch& batch);
  // Closes the stream.
  absl::Status Finish();

  uint64_t durable_seq() const { return durable_seq_; }
  int reconnects() const { return reconnects_; }
  // Frames sent but not yet reported durable.
  size_t pending() const { return pending_.size(); }
  // Frames handed to Send that the daemon already had durable (not sent again).
  uint64_t already_durable() const { return already_durable_; }

 private:
  Client* client_;
  std::string pool_, stream_;
  std::vector<std::string> columns_;
  Options options_;
  std::unique_ptr<IngestSession> session_;
  std::vector<v1::Frame> pending_;  // seq order, all above durable_seq_
  uint64_t durable_seq_ = 0;
  uint64_t already_durable_ = 0;
  int reconnects_ = 0;
};

struct IngestOptions {
  // Ask for the stream's applied seq at once (IngestSession::resumed_seq()).
  bool resume = false;
  // Every acknowledgement carries the stream's fresh answers.
  bool return_predictions = false;
};

class Client {
 public:
  // Connects lazily to `target` ("HOST:PORT"), plaintext or with `options`.
  static std::unique_ptr<Client> Connect(const std::string& target);
  static std::unique_ptr<Client> Connect(const std::string& target, const ClientOptions& options);

  // Creates or updates the pool (unchanged questions keep their learned state) and says
  // what changed; with `dry_run`, only validates and reports.
  absl::StatusOr<v1::ApplyPoolResponse> ApplyPool(const v1::PoolSpec& spec, bool dry_run = false,
                                                  absl::Duration timeout = absl::Seconds(10));
  // Opens an ingest stream for one stream of a pool. `columns` gives the order of
  // Frame.values (empty: the pool's declared order). Fails if the server rejects the open.
  absl::StatusOr<std::unique_ptr<IngestSession>> OpenIngest(
      const std::string& pool, const std::string& stream, const std::vector<std::string>& columns,
      IngestOptions options = IngestOptions());
  // Current answers of one stream (every question, or the named ones in that order).
  absl::StatusOr<v1::StreamPredictions> Predict(const std::string& pool, const std::string& stream,
                                                absl::Duration timeout = absl::Seconds(10),
                                                const std::vector<std::string>& questions = {});
  // Answers of many streams; each item has its own result.
  absl::StatusOr<v1::PredictBatchResponse> PredictBatch(const v1::PredictBatchRequest& request,
                                                        absl::Duration timeout = absl::Seconds(10));
  // Progress measures and history of one stream's questions.
  absl::StatusOr<v1::ProgressResponse> Progress(const std::string& pool, const std::string& stream,
                                                absl::Duration timeout = absl::Seconds(10));
  absl::StatusOr<v1::PoolDescription> DescribePool(const std::string& pool,
                                                   absl::Duration timeout = absl::Seconds(10));
  absl::StatusOr<v1::ListPoolsResponse> ListPools(absl::Duration timeout = absl::Seconds(10));
  absl::Status DeletePool(const std::string& pool, absl::Duration timeout = absl::Seconds(10));
  // Asks the daemon to write a checkpoint now.
  absl::StatusOr<v1::CheckpointResponse> Checkpoint(absl::Duration timeout = absl::Seconds(60));
  // Opens a Watch call (no deadline; end it with Cancel()).
  absl::StatusOr<std::unique_ptr<WatchSession>> Watch(const v1::WatchRequest& request);
  // OK once the channel is connected, UNAVAILABLE if not within `timeout`.
  absl::Status WaitUntilReachable(absl::Duration timeout = absl::Seconds(5));

 private:
  explicit Client(std::shared_ptr<grpc::Channel> channel);
  // Deadline (if finite) and credentials metadata for one call.
  void Prepare(grpc::ClientContext* context, absl::Duration timeout) const;
  std::string bearer_token_;
  std::shared_ptr<grpc::Channel> channel_;
  std::unique_ptr<v1::Bellwether::Stub> stub_;
};

}  // namespace bellwether

#endif  // BELLWETHER_CLIENT_BELLWETHER_CLIENT_H_
