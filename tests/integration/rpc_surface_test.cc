// Integration: the daemon's RPC surface beyond apply/ingest/predict: describe, list and
// delete pools; predict subsets and batches; ingest replies (rejections, fresh answers,
// resume); progress history checked against realized returns computed here; watch;
// graceful drain on SIGTERM. The real bellwetherd on 127.0.0.1, port 0.
#include <chrono>
#include <cmath>
#include <string>
#include <thread>
#include <vector>

#include "client/bellwether_client.h"
#include "core/io/csv_frame_reader.h"
#include "core/io/spec_json.h"
#include "gmock/gmock.h"
#include "grpcpp/grpcpp.h"
#include "gtest/gtest.h"
#include "grpc/health/v1/health.grpc.pb.h"
#include "tests/integration/daemon_process.h"
#include "tests/test_util.h"

namespace bellwether {
namespace {

using ::testing::HasSubstr;

std::string GridSpecPath() { return std::string(BW_TEST_DATA_DIR) + "/grid_pool.json"; }
std::string DemandPath() {
  return std::string(BW_SHARED_DATA_DIR) + "/halfhourly-demand-2000.csv";
}

v1::FrameBatch Frames(uint64_t first_seq, const std::vector<double>& values) {
  v1::FrameBatch b;
  for (size_t i = 0; i < values.size(); ++i) {
    v1::Frame* f = b.add_frames();
    f->set_seq(first_seq + i);
    f->set_local_micros(static_cast<int64_t>(first_seq + i) * 1800 * 1000000);
    f->add_values(values[i]);
  }
  return b;
}

class RpcSurfaceTest : public ::testing::Test {
 protected:
  void SetUp() override {
    ASSERT_THAT(daemon_.address(), HasSubstr("127.0.0.1:")) << "daemon did not start";
    client_ = Client::Connect(daemon_.address());
    auto spec = ReadPoolSpecFile(GridSpecPath());
    ASSERT_TRUE(spec.ok()) << spec.status();
    spec_ = *spec;
    ASSERT_TRUE(client_->ApplyPool(spec_).ok());
  }

  // Streams the demand CSV's first `rows` rows into `stream` in batches of 64.
  void StreamDemand(const std::string& stream, size_t rows) {
    auto reader = CsvFrameReader::Open(DemandPath());
    ASSERT_TRUE(reader.ok());
    auto session = client_->OpenIngest("grid", stream, (*reader)->signal_columns());
    ASSERT_TRUE(session.ok());
    v1::FrameBatch batch;
    for (size_t i = 0; i < rows; ++i) {
      v1::Frame frame;
      auto more = (*reader)->Next(&frame);
      ASSERT_TRUE(more.ok() && *more);
      *batch.add_frames() = std::move(frame);
      if (batch.frames_size() == 64 || i + 1 == rows) {
        auto ack = (*session)->Send(batch);
        ASSERT_TRUE(ack.ok()) << ack.status();
        ASSERT_EQ(ack->rejected_size(), 0);
        batch.Clear();
      }
    }
    ASSERT_TRUE((*session)->Finish().ok());
  }

  testing::DaemonProcess daemon_;
  std::unique_ptr<Client> client_;
  v1::PoolSpec spec_;
};

TEST_F(RpcSurfaceTest, DescribeListAndDeletePools) {
  v1::PoolSpec other = spec_;
  other.set_name("annex");
  ASSERT_TRUE(client_->ApplyPool(other).ok());
  StreamDemand("uk", 100);

  auto list = client_->ListPools();
  ASSERT_TRUE(list.ok()) << list.status();
  ASSERT_EQ(list->pools_size(), 2);
  EXPECT_EQ(list->pools(0).name(), "annex");  // name order
  EXPECT_EQ(list->pools(1).name(), "grid");
  EXPECT_EQ(list->pools(1).streams(), 1u);
  EXPECT_EQ(list->pools(1).questions(), static_cast<uint32_t>(spec_.questions_size()));

  auto described = client_->DescribePool("grid");
  ASSERT_TRUE(described.ok()) << described.status();
  EXPECT_EQ(described->spec().name(), "grid");
  EXPECT_EQ(described->generation(), 1u);
  ASSERT_EQ(described->streams_size(), 1);
  EXPECT_EQ(described->streams(0).name(), "uk");
  EXPECT_EQ(described->streams(0).last_seq(), 100u);
  EXPECT_EQ(described->streams(0).frames_applied(), 100u);
  ASSERT_EQ(described->questions_size(), spec_.questions_size());
  const v1::QuestionInfo& q = described->questions(0);
  EXPECT_EQ(q.streams_learning() + q.streams_settled() + q.streams_diverging(), 1u);

  // create_only refuses an existing pool.
  v1::ApplyPoolRequest create_only;
  auto again = client_->ApplyPool(spec_);
  ASSERT_TRUE(again.ok());
  {
    auto channel = grpc::CreateChannel(daemon_.address(), grpc::InsecureChannelCredentials());
    auto stub = v1::Bellwether::NewStub(channel);
    grpc::ClientContext ctx;
    *create_only.mutable_spec() = spec_;
    create_only.set_create_only(true);
    v1::ApplyPoolResponse r;
    EXPECT_EQ(stub->ApplyPool(&ctx, create_only, &r).error_code(),
              grpc::StatusCode::ALREADY_EXISTS);
  }

  // An ingest session open on the pool sees NOT_FOUND at its next batch after delete.
  auto session = client_->OpenIngest("grid", "uk", {});
  ASSERT_TRUE(session.ok());
  ASSERT_TRUE(client_->DeletePool("grid").ok());
  auto ack = (*session)->Send(Frames(101, {25000}));
  EXPECT_EQ(ack.status().code(), absl::StatusCode::kNotFound) << ack.status();
  EXPECT_EQ(client_->Predict("grid", "uk").status().code(), absl::StatusCode::kNotFound);
  EXPECT_EQ(client_->DescribePool("grid").status().code(), absl::StatusCode::kNotFound);
  EXPECT_EQ(client_->DeletePool("grid").code(), absl::StatusCode::kNotFound);
  EXPECT_EQ(client_->DeletePool("").code(), absl::StatusCode::kInvalidArgument);
  list = client_->ListPools();
  ASSERT_TRUE(list.ok());
  ASSERT_EQ(list->pools_size(), 1);
  // The name can be used again, from scratch.
  ASSERT_TRUE(client_->ApplyPool(spec_).ok());
  EXPECT_EQ(client_->Predict("grid", "uk").status().code(), absl::StatusCode::kNotFound);
}

TEST_F(RpcSurfaceTest, PredictSubsetsAndBatches) {
  v1::PoolSpec two = spec_;
  v1::QuestionSpec* extra = two.add_questions();
  *extra = spec_.questions(0);
  extra->set_name("demand_next_hour");
  extra->set_gamma(0.5);
  ASSERT_TRUE(client_->ApplyPool(two).ok());
  StreamDemand("uk", 400);

  auto all = client_->Predict("grid", "uk");
  ASSERT_TRUE(all.ok());
  ASSERT_EQ(all->predictions_size(), 2);
  for (const v1::Prediction& p : all->predictions()) {
    EXPECT_EQ(p.as_of_seq(), 400u);
    EXPECT_EQ(p.unit(), "MW");
    EXPECT_EQ(p.label(), p.progress().label());
    EXPECT_GT(p.verified().count(), 0u);
    EXPECT_EQ(p.error_band(), p.verified().rmse());
  }
  auto subset = client_->Predict("grid", "uk", absl::Seconds(10),
                                 {"demand_next_hour", two.questions(0).name()});
  ASSERT_TRUE(subset.ok());
  ASSERT_EQ(subset->predictions_size(), 2);
  EXPECT_EQ(subset->predictions(0).question(), "demand_next_hour");
  EXPECT_EQ(subset->predictions(0).value(), all->predictions(1).value());
  auto unknown = client_->Predict("grid", "uk", absl::Seconds(10), {"nope"});
  EXPECT_EQ(unknown.status().code(), absl::StatusCode::kNotFound);
  EXPECT_THAT(unknown.status().message(), HasSubstr("questions[0]"));

  v1::PredictBatchRequest batch;
  for (const char* stream : {"uk", "missing", "uk"}) {
    v1::PredictRequest* r = batch.add_requests();
    r->set_pool("grid");
    r->set_stream(stream);
  }
  batch.mutable_requests(2)->add_questions("demand_next_hour");
  auto answers = client_->PredictBatch(batch);
  ASSERT_TRUE(answers.ok()) << answers.status();
  ASSERT_EQ(answers->items_size(), 3);
  EXPECT_EQ(answers->items(0).predictions().predictions_size(), 2);
  EXPECT_EQ(answers->items(1).error().code(), static_cast<int>(grpc::StatusCode::NOT_FOUND));
  EXPECT_THAT(answers->items(1).error().message(), HasSubstr("requests[1]"));
  ASSERT_EQ(answers->items(2).predictions().predictions_size(), 1);

  v1::PredictBatchRequest too_many;
  for (int i = 0; i < 1001; ++i) *too_many.add_requests() = batch.requests(0);
  EXPECT_EQ(client_->PredictBatch(too_many).status().code(), absl::StatusCode::kInvalidArgument);

  // A deadline that has already passed is honoured (DEADLINE_EXCEEDED, not an answer).
  EXPECT_EQ(client_->Predict("grid", "uk", absl::Seconds(-1)).status().code(),
            absl::StatusCode::kDeadlineExceeded);
}

TEST_F(RpcSurfaceTest, IngestRepliesRejectionsAnswersAndResume) {
  IngestOptions options;
  options.return_predictions = true;
  auto session = client_->OpenIngest("grid", "uk", {}, options);
  ASSERT_TRUE(session.ok());
  // Frames 1, 2, (2 again: a duplicate), 3, (NaN: rejected), 4: the good ones apply in
  // order.
  v1::FrameBatch batch = Frames(1, {25000, 26000, 26500, 27000, 0, 28000});
  batch.mutable_frames(2)->set_seq(2);
  batch.mutable_frames(3)->set_seq(3);
  batch.mutable_frames(4)->set_seq(4);
  batch.mutable_frames(4)->set_values(0, std::nan(""));
  batch.mutable_frames(5)->set_seq(4);
  auto ack = (*session)->Send(batch);
  ASSERT_TRUE(ack.ok()) << ack.status();
  EXPECT_EQ(ack->applied_seq(), 4u);
  EXPECT_EQ(ack->frames_applied(), 4u);
  EXPECT_EQ(ack->duplicates(), 1u);
  ASSERT_EQ(ack->rejected_size(), 1);
  EXPECT_EQ(ack->rejected(0).index(), 4u);
  EXPECT_THAT(ack->rejected(0).reason(), HasSubstr("values[0] (demand_mw)"));
  // The daemon runs with --state-dir: the reply comes once the batch is in the log.
  EXPECT_EQ(ack->durable_seq(), 4u);
  // The fresh answers ride on the reply and equal Predict's.
  ASSERT_EQ(ack->predictions().as_of_seq(), 4u);
  auto predicted = client_->Predict("grid", "uk");
  ASSERT_TRUE(predicted.ok());
  EXPECT_EQ(ack->predictions().predictions(0).value(), predicted->predictions(0).value());
  // The same call keeps going after rejections.
  ack = (*session)->Send(Frames(5, {29000}));
  ASSERT_TRUE(ack.ok());
  EXPECT_EQ(ack->applied_seq(), 5u);
  EXPECT_EQ(ack->rejected_size(), 0);
  ASSERT_TRUE((*session)->Finish().ok());

  // A reconnecting producer learns where to resume.
  IngestOptions resume;
  resume.resume = true;
  auto again = client_->OpenIngest("grid", "uk", {}, resume);
  ASSERT_TRUE(again.ok());
  EXPECT_EQ((*again)->resumed_seq(), 5u);
  ASSERT_TRUE((*again)->Finish().ok());
  auto fresh = client_->OpenIngest("grid", "new-stream", {}, resume);
  ASSERT_TRUE(fresh.ok());
  EXPECT_EQ((*fresh)->resumed_seq(), 0u);

  auto described = client_->DescribePool("grid");
  ASSERT_TRUE(described.ok());
  EXPECT_EQ(described->streams(0).frames_rejected(), 1u);
}

// The history's realized returns are checked against the discounted sums computed here
// from the same CSV rows: G_t = sum_k gamma^k c_{t+k+1}, truncated where the verifier
// stops (remaining discount under 1e-3), i.e. the definition of the return (Sutton &
// Barto 2018, eq. 3.8).
TEST_F(RpcSurfaceTest, ProgressHistoryMatchesReturnsComputedFromTheData) {
  const size_t kRows = 1200;
  StreamDemand("uk", kRows);
  auto progress = client_->Progress("grid", "uk");
  ASSERT_TRUE(progress.ok()) << progress.status();
  EXPECT_TRUE(progress->history_kept());
  ASSERT_EQ(progress->history_size(), spec_.questions_size());
  const v1::QuestionHistory& h = progress->history(0);
  EXPECT_EQ(h.question(), spec_.questions(0).name());
  ASSERT_GT(h.verified_size(), 100);
  ASSERT_GT(h.progress_size(), 10);

  std::vector<std::vector<double>> rows = testing::ReadNumericCsv(DemandPath());
  const double gamma = spec_.questions(0).gamma();
  // Horizon: the smallest k with gamma^k < 1e-3.
  const size_t horizon =
      static_cast<size_t>(std::ceil(std::log(1e-3) / std::log(gamma)));
  size_t checked = 0;
  uint64_t prev_seq = 0;
  for (const v1::VerifiedPoint& p : h.verified()) {
    EXPECT_GT(p.seq(), prev_seq);  // oldest first
    prev_seq = p.seq();
    const size_t t = static_cast<size_t>(p.seq()) - 1;  // row index of frame seq
    if (t + horizon >= rows.size()) continue;
    double g = 0, discount = 1;
    for (size_t k = 1; k <= horizon; ++k) {
      g += discount * rows[t + k][1];
      discount *= gamma;
    }
    EXPECT_NEAR(p.realized(), g, 1e-6 * g) << "seq " << p.seq();
    ++checked;
  }
  EXPECT_GT(checked, 100u);
  // Progress samples are in seq order and carry a label.
  for (int i = 1; i < h.progress_size(); ++i) {
    EXPECT_GT(h.progress(i).seq(), h.progress(i - 1).seq());
    EXPECT_FALSE(h.progress(i).label().empty());
  }
  EXPECT_EQ(client_->Progress("grid", "nobody").status().code(), absl::StatusCode::kNotFound);
}

TEST_F(RpcSurfaceTest, WatchSendsFreshAnswersAndCoalesces) {
  StreamDemand("uk", 10);
  v1::WatchRequest request;
  request.set_pool("grid");
  request.set_stream("uk");
  request.set_min_interval_ms(1000);
  auto watch = client_->Watch(request);
  ASSERT_TRUE(watch.ok());
  v1::StreamPredictions first;
  ASSERT_TRUE((*watch)->Next(&first));
  EXPECT_EQ(first.as_of_seq(), 10u);  // the current answers come first

  // 50 quick batches; with a 1 s minimum interval the watcher sees far fewer messages,
  // the last one as of the last frame.
  auto session = client_->OpenIngest("grid", "uk", {});
  ASSERT_TRUE(session.ok());
  constexpr int kBatches = 50;
  for (int b = 0; b < kBatches; ++b) {
    ASSERT_TRUE((*session)->Send(Frames(11 + static_cast<uint64_t>(b) * 2, {25000, 25500})).ok());
  }
  const uint64_t last = 10 + 2 * kBatches;
  int messages = 0;
  uint64_t seen = first.as_of_seq();
  v1::StreamPredictions next;
  while (seen < last && (*watch)->Next(&next)) {
    EXPECT_GT(next.as_of_seq(), seen);
    seen = next.as_of_seq();
    ++messages;
  }
  EXPECT_EQ(seen, last);
  EXPECT_LT(messages, kBatches);
  (*watch)->Cancel();
  EXPECT_EQ((*watch)->Finish().code(), absl::StatusCode::kCancelled);

  // Bad requests.
  v1::WatchRequest bad = request;
  bad.set_min_interval_ms(5);
  auto w2 = client_->Watch(bad);
  ASSERT_TRUE(w2.ok());
  EXPECT_FALSE((*w2)->Next(&next));
  EXPECT_EQ((*w2)->Finish().code(), absl::StatusCode::kInvalidArgument);
  bad = request;
  bad.add_questions("nope");
  auto w3 = client_->Watch(bad);
  ASSERT_TRUE(w3.ok());
  EXPECT_FALSE((*w3)->Next(&next));
  EXPECT_EQ((*w3)->Finish().code(), absl::StatusCode::kNotFound);
}

// The README's client example against the daemon; and a TLS client against this
// plaintext daemon fails cleanly (the option is wired; the handshake cannot succeed).
TEST_F(RpcSurfaceTest, ClientExampleProgramAndTlsOption) {
  StreamDemand("uk", 400);
  const auto r = testing::RunCommand({BW_FORECAST_READER_PATH, daemon_.address(), "grid", "uk"});
  ASSERT_EQ(r.exit_code, 0) << r.err;
  EXPECT_THAT(r.out, HasSubstr("demand_next_12h"));
  EXPECT_THAT(r.out, HasSubstr("+/- "));
  EXPECT_THAT(r.out, HasSubstr("seq 400"));
  const auto missing = testing::RunCommand({BW_FORECAST_READER_PATH, daemon_.address(), "nope", "uk"});
  EXPECT_EQ(missing.exit_code, 2);
  EXPECT_THAT(missing.err, HasSubstr("NOT_FOUND"));

  ClientOptions tls;
  tls.tls = true;
  auto secure = Client::Connect(daemon_.address(), tls);
  auto p = secure->Predict("grid", "uk", absl::Seconds(3));
  EXPECT_EQ(p.status().code(), absl::StatusCode::kUnavailable) << p.status();
}

// SIGTERM: health turns NOT_SERVING, an open ingest call ends with UNAVAILABLE, and the
// daemon exits 0 well before its grace period (nothing left to wait for).
TEST(RpcDrain, SigtermDrainsThenExitsCleanly) {
  testing::DaemonProcess daemon({"--shutdown-grace-seconds", "30"});
  ASSERT_THAT(daemon.address(), HasSubstr("127.0.0.1:"));
  auto client = Client::Connect(daemon.address());
  auto spec = ReadPoolSpecFile(GridSpecPath());
  ASSERT_TRUE(spec.ok());
  ASSERT_TRUE(client->ApplyPool(*spec).ok());
  auto session = client->OpenIngest("grid", "uk", {});
  ASSERT_TRUE(session.ok());
  ASSERT_TRUE((*session)->Send(Frames(1, {25000})).ok());

  auto channel = grpc::CreateChannel(daemon.address(), grpc::InsecureChannelCredentials());
  auto health = grpc::health::v1::Health::NewStub(channel);
  grpc::ClientContext watch_ctx;
  watch_ctx.set_deadline(std::chrono::system_clock::now() + std::chrono::seconds(20));
  grpc::health::v1::HealthCheckRequest hreq;
  auto reader = health->Watch(&watch_ctx, hreq);
  grpc::health::v1::HealthCheckResponse hres;
  ASSERT_TRUE(reader->Read(&hres));
  EXPECT_EQ(hres.status(), grpc::health::v1::HealthCheckResponse::SERVING);  // after "ready"

  daemon.Terminate();
  bool saw_not_serving = false;
  while (reader->Read(&hres)) {
    if (hres.status() == grpc::health::v1::HealthCheckResponse::NOT_SERVING) {
      saw_not_serving = true;
      break;
    }
  }
  EXPECT_TRUE(saw_not_serving);
  // Health turns first; the ingest call ends with UNAVAILABLE once draining begins
  // (a batch sent in between may still be applied).
  absl::StatusCode code = absl::StatusCode::kOk;
  for (uint64_t seq = 2; seq < 200 && code == absl::StatusCode::kOk; ++seq) {
    code = (*session)->Send(Frames(seq, {25500})).status().code();
    if (code == absl::StatusCode::kOk) std::this_thread::sleep_for(std::chrono::milliseconds(10));
  }
  EXPECT_EQ(code, absl::StatusCode::kUnavailable);
  watch_ctx.TryCancel();
  (void)reader->Finish();
  // Idle connections would hold gRPC's Shutdown until the grace deadline: let go.
  session->reset();
  client.reset();
  health.reset();
  channel.reset();
  EXPECT_EQ(daemon.Stop(), 0);
}

}  // namespace
}  // namespace bellwether
