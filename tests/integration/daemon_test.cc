// Integration: the real bellwetherd on 127.0.0.1 (port 0), driven over real gRPC.
#include <fcntl.h>
#include <signal.h>
#include <sys/prctl.h>
#include <sys/wait.h>
#include <unistd.h>

#include <atomic>
#include <cstdio>
#include <fstream>
#include <string>
#include <thread>
#include <vector>

#include "absl/strings/match.h"
#include "client/bellwether_client.h"
#include "client/cli/campus_sim.h"
#include "core/io/csv_frame_reader.h"
#include "core/io/spec_json.h"
#include "core/pool.h"
#include "gmock/gmock.h"
#include "gtest/gtest.h"
#include "tests/integration/daemon_process.h"
#include "tests/test_util.h"

namespace bellwether {
namespace {

using ::testing::HasSubstr;

using Daemon = testing::DaemonProcess;

std::string GridSpecPath() { return std::string(BW_TEST_DATA_DIR) + "/grid_pool.json"; }
std::string DemandPath() {
  return std::string(BW_SHARED_DATA_DIR) + "/halfhourly-demand-2000.csv";
}

class DaemonTest : public ::testing::Test {
 protected:
  void SetUp() override {
    ASSERT_THAT(daemon_.address(), HasSubstr("127.0.0.1:")) << "daemon did not start";
    client_ = Client::Connect(daemon_.address());
    auto spec = ReadPoolSpecFile(GridSpecPath());
    ASSERT_TRUE(spec.ok()) << spec.status();
    spec_ = *spec;
    auto created = client_->ApplyPool(spec_);
    ASSERT_TRUE(created.ok()) << created.status();
    EXPECT_TRUE(created->created());
  }

  Daemon daemon_;  // declared first: destroyed (stopped) after the client
  std::unique_ptr<Client> client_;
  v1::PoolSpec spec_;
};

TEST_F(DaemonTest, StreamedPredictionsEqualReplayOfTheSameRows) {
  const size_t kRows = 1000;
  // Replay through the real CLI binary.
  const std::string dir = testing::MakeTempDir("e2e");
  const std::string head = dir + "/head.csv", pred = dir + "/pred.csv";
  {
    std::ifstream in(DemandPath());
    std::ofstream out(head);
    std::string line;
    for (size_t i = 0; i <= kRows && std::getline(in, line); ++i) out << line << "\n";
  }
  const auto r = testing::RunCommand(
      {BW_CLI_PATH, "replay", "--spec", GridSpecPath(), "--csv", head, "--out", pred});
  ASSERT_EQ(r.exit_code, 0) << r.err;
  const auto replayed = testing::ReadNumericCsv(pred);
  ASSERT_EQ(replayed.size(), kRows);

  // Stream the same rows over gRPC in batches of 64 and compare after every batch.
  auto reader = CsvFrameReader::Open(head);
  ASSERT_TRUE(reader.ok());
  auto session = client_->OpenIngest("grid", "england", (*reader)->signal_columns());
  ASSERT_TRUE(session.ok()) << session.status();
  v1::FrameBatch batch;
  size_t sent = 0, checked = 0;
  while (true) {
    v1::Frame f;
    auto more = (*reader)->Next(&f);
    ASSERT_TRUE(more.ok()) << more.status();
    if (*more) *batch.add_frames() = f;
    if (batch.frames_size() == 64 || (!*more && batch.frames_size() > 0)) {
      auto ack = (*session)->Send(batch);
      ASSERT_TRUE(ack.ok()) << ack.status();
      sent += static_cast<size_t>(batch.frames_size());
      EXPECT_EQ(ack->applied_seq(), sent);
      batch.Clear();
      auto p = client_->Predict("grid", "england");
      ASSERT_TRUE(p.ok()) << p.status();
      ASSERT_EQ(p->as_of_seq(), sent);
      ASSERT_EQ(p->predictions_size(), 1);
      EXPECT_EQ(p->predictions(0).value(), replayed[sent - 1][1]) << "after row " << sent;
      EXPECT_EQ(p->predictions(0).unit(), "MW");
      ++checked;
    }
    if (!*more) break;
  }
  EXPECT_EQ(sent, kRows);
  EXPECT_GT(checked, 10u);
  ASSERT_TRUE((*session)->Finish().ok());
  session->reset();
  // Verified error exists once returns have been realized (~163 rows after each).
  auto p = client_->Predict("grid", "england");
  ASSERT_TRUE(p.ok());
  EXPECT_GT(p->predictions(0).verified().count(), 800u);
  EXPECT_GT(p->predictions(0).verified().rmse(), 0.0);
  // gRPC 1.51 holds a shutdown until connected clients drop their idle connections (or
  // the grace period ends), so close ours first.
  client_.reset();
  EXPECT_EQ(daemon_.Stop(), 0) << "SIGTERM is a clean shutdown";
}

// Several appliers (--writer-threads 3) learning six streams fed at once from three
// producer threads: every stream's answers must equal, to the last bit, those of the
// engine applying that stream's rows in order on one thread (the real demand data, cut
// into six streams).
TEST(DaemonAppliers, StreamsFedAtOnceLearnWhatOneThreadLearns) {
  Daemon daemon({"--writer-threads", "3"});
  ASSERT_THAT(daemon.address(), HasSubstr("127.0.0.1:")) << "daemon did not start";
  auto client = Client::Connect(daemon.address());
  auto spec = ReadPoolSpecFile(GridSpecPath());
  ASSERT_TRUE(spec.ok()) << spec.status();
  ASSERT_TRUE(client->ApplyPool(*spec).ok());
  auto reference = Pool::Create(*spec);
  ASSERT_TRUE(reference.ok()) << reference.status();

  constexpr int kStreams = 6, kRows = 300;
  auto reader = CsvFrameReader::Open(DemandPath());
  ASSERT_TRUE(reader.ok());
  const std::vector<std::string> columns = (*reader)->signal_columns();
  auto column_map = ColumnMap::Create((*reference)->spec().signal_names, columns);
  ASSERT_TRUE(column_map.ok());
  std::vector<std::vector<v1::Frame>> rows(kStreams);
  std::vector<std::string> names;
  std::vector<double> buffer;
  FrameInput input;
  for (int s = 0; s < kStreams; ++s) {
    names.push_back("region-" + std::to_string(s));
    for (int k = 0; k < kRows; ++k) {
      v1::Frame f;
      auto more = (*reader)->Next(&f);
      ASSERT_TRUE(more.ok() && *more) << "the demand data has fewer rows than the test needs";
      f.set_seq(static_cast<uint64_t>(k + 1));
      ASSERT_TRUE(FrameFromProto(f, *column_map, &buffer, &input).ok());
      ASSERT_TRUE((*reference)->Apply(names[s], input).ok());
      rows[s].push_back(f);
    }
  }
  // Each producer feeds two streams, alternating batches of 20 between them.
  std::atomic<int> failures{0};
  auto produce = [&](int first) {
    std::vector<std::unique_ptr<IngestSession>> sessions;
    for (int s = first; s < kStreams; s += 3) {
      auto session = client->OpenIngest("grid", names[s], columns);
      if (!session.ok()) {
        ++failures;
        return;
      }
      sessions.push_back(*std::move(session));
    }
    for (int k = 0; k < kRows; k += 20) {
      for (size_t i = 0; i < sessions.size(); ++i) {
        const int s = first + 3 * static_cast<int>(i);
        v1::FrameBatch batch;
        for (int j = k; j < k + 20 && j < kRows; ++j) *batch.add_frames() = rows[s][j];
        auto ack = sessions[i]->Send(batch);
        if (!ack.ok() || ack->rejected_size() > 0) ++failures;
      }
    }
    for (auto& session : sessions) {
      if (!session->Finish().ok()) ++failures;
    }
  };
  std::vector<std::thread> producers;
  for (int p = 0; p < 3; ++p) producers.emplace_back(produce, p);
  for (std::thread& t : producers) t.join();
  ASSERT_EQ(failures.load(), 0);
  for (int s = 0; s < kStreams; ++s) {
    auto p = client->Predict("grid", names[s]);
    ASSERT_TRUE(p.ok()) << p.status();
    EXPECT_EQ(p->as_of_seq(), static_cast<uint64_t>(kRows));
    const auto want = (*reference)->predictions(names[s]);
    ASSERT_EQ(static_cast<size_t>(p->predictions_size()), want.size());
    for (size_t q = 0; q < want.size(); ++q) {
      EXPECT_EQ(p->predictions(static_cast<int>(q)).value(), want[q]) << names[s];
    }
  }
  client.reset();
  EXPECT_EQ(daemon.Stop(), 0);
}

TEST_F(DaemonTest, BadInputIsInvalidArgumentNamingTheFieldAndChangesNothing) {
  // A spec with gamma outside [0, 1].
  v1::PoolSpec bad = spec_;
  bad.set_name("grid2");
  bad.mutable_questions(0)->set_gamma(1.5);
  auto applied = client_->ApplyPool(bad);
  EXPECT_EQ(applied.status().code(), absl::StatusCode::kInvalidArgument);
  EXPECT_THAT(applied.status().message(), HasSubstr("questions[0] (demand_next_12h).gamma"));
  // The same name with a different spec, as a dry run: reported, nothing changes.
  v1::PoolSpec changed = spec_;
  changed.mutable_questions(0)->set_lambda(0.5);
  auto dry = client_->ApplyPool(changed, /*dry_run=*/true);
  ASSERT_TRUE(dry.ok()) << dry.status();
  EXPECT_TRUE(dry->updated());
  ASSERT_EQ(dry->changed_size(), 1);
  EXPECT_EQ(dry->changed(0), "demand_next_12h");
  // Identical spec again: fine, not created, not updated.
  auto again = client_->ApplyPool(spec_);
  ASSERT_TRUE(again.ok());
  EXPECT_FALSE(again->created());
  EXPECT_FALSE(again->updated());

  auto frame = [](uint64_t seq, double v) {
    v1::FrameBatch b;
    v1::Frame* f = b.add_frames();
    f->set_seq(seq);
    f->set_local_micros(static_cast<int64_t>(seq) * 1800 * 1000000);
    f->add_values(v);
    return b;
  };
  {
    auto s = client_->OpenIngest("grid", "x", {});
    ASSERT_TRUE(s.ok());
    ASSERT_TRUE((*s)->Send(frame(1, 25000)).ok());
    ASSERT_TRUE((*s)->Send(frame(2, 26000)).ok());
  }
  auto before = client_->Predict("grid", "x");
  ASSERT_TRUE(before.ok());

  struct Case {
    v1::FrameBatch batch;
    const char* message;
  };
  std::vector<Case> cases = {
      {frame(3, std::nan("")), "frame seq 3: values[0] (demand_mw): NaN"},
      {frame(3, HUGE_VAL), "frame seq 3: values[0] (demand_mw)"},
  };
  v1::FrameBatch two_values = frame(3, 1);
  two_values.mutable_frames(0)->add_values(2);
  cases.push_back({two_values, "values: has 2 entries, expected 1"});
  for (const Case& c : cases) {
    // The bad frame is rejected in the reply; the call stays open.
    auto s = client_->OpenIngest("grid", "x", {});
    ASSERT_TRUE(s.ok());
    auto ack = (*s)->Send(c.batch);
    ASSERT_TRUE(ack.ok()) << ack.status();
    ASSERT_EQ(ack->rejected_size(), 1) << c.message;
    EXPECT_EQ(ack->rejected(0).seq(), c.batch.frames(0).seq());
    EXPECT_THAT(ack->rejected(0).reason(), HasSubstr(c.message));
    EXPECT_EQ(ack->applied_seq(), 2u);
    EXPECT_EQ(ack->frames_applied(), 0u);
    EXPECT_TRUE((*s)->Finish().ok());
  }
  // Unknown pool / column / stream.
  auto s = client_->OpenIngest("nope", "x", {});
  ASSERT_TRUE(s.ok());
  EXPECT_EQ((*s)->Send(frame(3, 1)).status().code(), absl::StatusCode::kNotFound);
  s = client_->OpenIngest("grid", "x", {"demand_gw"});
  ASSERT_TRUE(s.ok());
  auto col = (*s)->Send(frame(3, 1));
  EXPECT_EQ(col.status().code(), absl::StatusCode::kInvalidArgument);
  EXPECT_THAT(col.status().message(), HasSubstr("open.columns[0]: 'demand_gw'"));
  EXPECT_EQ(client_->Predict("grid", "nobody").status().code(), absl::StatusCode::kNotFound);

  auto after = client_->Predict("grid", "x");
  ASSERT_TRUE(after.ok());
  EXPECT_EQ(after->SerializeAsString(), before->SerializeAsString())
      << "rejected input must not change learned state";
}

TEST_F(DaemonTest, UpdatingAPoolKeepsUnchangedQuestionsAndRebindsIngest) {
  auto reader = CsvFrameReader::Open(DemandPath());
  ASSERT_TRUE(reader.ok());
  auto session = client_->OpenIngest("grid", "england", (*reader)->signal_columns());
  ASSERT_TRUE(session.ok());
  v1::FrameBatch batch;
  for (int i = 0; i < 500; ++i) {
    v1::Frame f;
    ASSERT_TRUE(*(*reader)->Next(&f));
    *batch.add_frames() = f;
  }
  ASSERT_TRUE((*session)->Send(batch).ok());
  auto before = client_->Predict("grid", "england");
  ASSERT_TRUE(before.ok());
  // Add a question; the existing one keeps what it learned.
  v1::PoolSpec grown = spec_;
  v1::QuestionSpec* added = grown.add_questions();
  *added = spec_.questions(0);
  added->set_name("demand_next_hour");
  added->set_gamma(0.5);
  auto applied = client_->ApplyPool(grown);
  ASSERT_TRUE(applied.ok()) << applied.status();
  EXPECT_TRUE(applied->updated());
  ASSERT_EQ(applied->added_size(), 1);
  ASSERT_EQ(applied->unchanged_size(), 1);
  auto after = client_->Predict("grid", "england");
  ASSERT_TRUE(after.ok());
  ASSERT_EQ(after->predictions_size(), 2);
  EXPECT_EQ(after->predictions(0).value(), before->predictions(0).value());
  EXPECT_EQ(after->predictions(0).verified().count(), before->predictions(0).verified().count());
  EXPECT_EQ(after->as_of_seq(), 500u);
  // The open ingest stream was bound to the old spec: its next batch is refused.
  batch.Clear();
  v1::Frame f;
  ASSERT_TRUE(*(*reader)->Next(&f));
  *batch.add_frames() = f;
  auto refused = (*session)->Send(batch);
  EXPECT_EQ(refused.status().code(), absl::StatusCode::kFailedPrecondition);
  EXPECT_THAT(refused.status().message(), HasSubstr("reopen"));
  // A new stream continues from seq 501.
  auto reopened = client_->OpenIngest("grid", "england", (*reader)->signal_columns());
  ASSERT_TRUE(reopened.ok());
  auto ack = (*reopened)->Send(batch);
  ASSERT_TRUE(ack.ok()) << ack.status();
  EXPECT_EQ(ack->applied_seq(), 501u);
}

TEST(DaemonCli, ApplyStreamPredictThroughTheCli) {
  Daemon daemon;
  ASSERT_THAT(daemon.address(), HasSubstr("127.0.0.1:"));
  const std::string server = daemon.address();
  auto r = testing::RunCommand({BW_CLI_PATH, "--server", server, "apply", GridSpecPath()});
  ASSERT_EQ(r.exit_code, 0) << r.err;
  EXPECT_THAT(r.out, HasSubstr("pool grid created"));
  r = testing::RunCommand(
      {BW_CLI_PATH, "--server", server, "stream", "--pool", "grid", "--stream", "uk", DemandPath()});
  ASSERT_EQ(r.exit_code, 0) << r.err;
  EXPECT_THAT(r.out, HasSubstr("streamed 2688 frames"));
  r = testing::RunCommand({BW_CLI_PATH, "--server", server, "predict", "--pool", "grid",
                           "--stream", "uk"});
  ASSERT_EQ(r.exit_code, 0) << r.err;
  EXPECT_THAT(r.out, HasSubstr("demand_next_12h"));
  EXPECT_THAT(r.out, HasSubstr("as of seq 2688"));
  // Streaming the same file again (a producer resending after a reconnect): every frame
  // is a duplicate, skipped and counted, not learned twice; exit code 0.
  r = testing::RunCommand(
      {BW_CLI_PATH, "--server", server, "stream", "--pool", "grid", "--stream", "uk", DemandPath()});
  EXPECT_EQ(r.exit_code, 0) << r.err;
  EXPECT_THAT(r.out, HasSubstr("2688 frames were already applied"));
  EXPECT_THAT(r.out, HasSubstr("applied seq 2688"));
  r = testing::RunCommand({BW_CLI_PATH, "--server", server, "pools"});
  ASSERT_EQ(r.exit_code, 0) << r.err;
  EXPECT_THAT(r.out, HasSubstr("grid"));
  r = testing::RunCommand({BW_CLI_PATH, "--server", server, "describe", "--pool", "grid"});
  ASSERT_EQ(r.exit_code, 0) << r.err;
  EXPECT_THAT(r.out, ::testing::ContainsRegex("uk +2688 +2688 +0"));
  // Unknown pool: NOT_FOUND, exit code 2.
  r = testing::RunCommand({BW_CLI_PATH, "--server", server, "predict", "--pool", "nope",
                           "--stream", "uk"});
  EXPECT_EQ(r.exit_code, 2);
  EXPECT_THAT(r.err, HasSubstr("NOT_FOUND"));
  r = testing::RunCommand({BW_CLI_PATH, "--server", server, "delete", "--pool", "grid"});
  ASSERT_EQ(r.exit_code, 0) << r.err;
  r = testing::RunCommand({BW_CLI_PATH, "--server", server, "describe", "--pool", "grid"});
  EXPECT_EQ(r.exit_code, 2);
}

TEST(DaemonCli, DemoRunsABoundedNumberOfSteps) {
  Daemon daemon;
  ASSERT_THAT(daemon.address(), HasSubstr("127.0.0.1:"));
  auto r = testing::RunCommand({BW_CLI_PATH, "--server", daemon.address(), "demo", "--rate",
                                "100000", "--steps", "800", "--status-url",
                                "http://127.0.0.1:9/"});
  ASSERT_EQ(r.exit_code, 0) << r.err;
  EXPECT_THAT(r.out, HasSubstr("energy_next_12h"));
  EXPECT_THAT(r.out, HasSubstr("seconds_until_recharge"));
  EXPECT_THAT(r.out, HasSubstr("p_reach_charger_if_sent"));
  EXPECT_THAT(r.out, HasSubstr("status page: http://127.0.0.1:9/"));
  EXPECT_THAT(r.out, HasSubstr("not a safety system"));
  EXPECT_THAT(r.out, HasSubstr("demo stopped after 800 steps"));

  // Both pools answer for every stream.
  auto client = Client::Connect(daemon.address());
  const cli::DeliveryRobots robots;
  const cli::CampusBuildings buildings;
  for (const std::string& b : buildings.names()) {
    auto p = client->Predict(cli::CampusBuildings::kPool, b);
    ASSERT_TRUE(p.ok()) << b << ": " << p.status();
    EXPECT_EQ(p->as_of_seq(), 800u);
    ASSERT_EQ(p->predictions_size(), 2);
    EXPECT_EQ(p->predictions(0).question(), "energy_next_12h");
    EXPECT_GT(p->predictions(0).value(), 0);
  }
  for (const std::string& robot : robots.names()) {
    auto p = client->Predict(cli::DeliveryRobots::kPool, robot);
    ASSERT_TRUE(p.ok()) << robot << ": " << p.status();
    EXPECT_EQ(p->as_of_seq(), 800u);
    ASSERT_EQ(p->predictions_size(), 3);
    EXPECT_EQ(p->predictions(0).question(), "seconds_until_recharge");
    EXPECT_EQ(p->predictions(0).unit(), "s");
    EXPECT_GT(p->predictions(0).verified().count(), 0u);
    EXPECT_EQ(p->predictions(1).question(), "p_reach_charger");
    EXPECT_EQ(p->predictions(2).question(), "p_reach_charger_if_sent");
  }

  // A longer, unpaced run starts afresh (the pools are recreated: every stream has
  // exactly this run's frames) and verifies each robot's off-policy answers on the
  // stretches where the robot did head straight back. A frame far ahead in one stream
  // would make every frame of a run that kept the old pool a duplicate.
  {
    auto session = client->OpenIngest(cli::DeliveryRobots::kPool, robots.names()[0], {});
    ASSERT_TRUE(session.ok()) << session.status();
    v1::FrameBatch batch;
    v1::Frame* f = batch.add_frames();
    f->set_seq(50000);
    for (double v : {50.0, 100.0, 0.0, 5.0}) f->add_values(v);
    auto ack = (*session)->Send(batch);
    ASSERT_TRUE(ack.ok()) << ack.status();
    ASSERT_EQ(ack->applied_seq(), 50000u);
    ASSERT_TRUE((*session)->Finish().ok());
  }
  r = testing::RunCommand({BW_CLI_PATH, "--server", daemon.address(), "demo", "--rate", "0",
                           "--steps", "3000"});
  ASSERT_EQ(r.exit_code, 0) << r.err;
  EXPECT_THAT(r.out, HasSubstr("demo stopped after 3000 steps"));
  auto d = client->DescribePool(cli::DeliveryRobots::kPool);
  ASSERT_TRUE(d.ok()) << d.status();
  ASSERT_EQ(d->streams_size(), static_cast<int>(robots.names().size()));
  for (const v1::StreamInfo& s : d->streams()) {
    EXPECT_EQ(s.last_seq(), 3000u) << s.name();
    EXPECT_EQ(s.frames_applied(), 3000u) << s.name();
    EXPECT_EQ(s.frames_rejected(), 0u) << s.name();
  }
  for (const std::string& robot : robots.names()) {
    auto p = client->Predict(cli::DeliveryRobots::kPool, robot, absl::Seconds(10),
                             {"p_reach_charger", "p_reach_charger_if_sent"});
    ASSERT_TRUE(p.ok()) << robot << ": " << p.status();
    ASSERT_EQ(p->predictions_size(), 2);
    const v1::VerifiedError& usual = p->predictions(0).verified();
    const v1::VerifiedError& sent = p->predictions(1).verified();
    EXPECT_GT(usual.count(), 1000u) << robot;
    EXPECT_EQ(sent.mode(), "on-target stretches") << robot;
    EXPECT_GT(sent.count(), 0u) << robot;
    // Far fewer than on-policy: only returns during which the robot kept heading back.
    EXPECT_LT(sent.count(), usual.count()) << robot;
    EXPECT_GT(sent.unverifiable(), 0u) << robot;
    // Probability questions carry a calibration table.
    EXPECT_EQ(sent.calibration_size(), 10) << robot;
  }

  // Usage errors.
  r = testing::RunCommand({BW_CLI_PATH, "--server", daemon.address(), "demo", "--rate", "-1"});
  EXPECT_EQ(r.exit_code, 1);
  r = testing::RunCommand({BW_CLI_PATH, "demo", "--help"});
  EXPECT_EQ(r.exit_code, 0);
  EXPECT_THAT(r.out, HasSubstr("example:"));
}

TEST(Cli, UsageAndLocalInputErrors) {
  auto r = testing::RunCommand({BW_CLI_PATH, "--help"});
  EXPECT_EQ(r.exit_code, 0);
  EXPECT_THAT(r.out, HasSubstr("not a safety system"));
  r = testing::RunCommand({BW_CLI_PATH, "frobnicate"});
  EXPECT_EQ(r.exit_code, 1);
  r = testing::RunCommand({BW_CLI_PATH, "apply", "/nonexistent/spec.json"});
  EXPECT_EQ(r.exit_code, 1);
  EXPECT_THAT(r.err, HasSubstr("/nonexistent/spec.json: cannot open"));
  // Server down: a clear message and exit code 2.
  r = testing::RunCommand(
      {BW_CLI_PATH, "--server", "127.0.0.1:1", "apply", GridSpecPath()});
  EXPECT_EQ(r.exit_code, 2);
  EXPECT_THAT(r.err, HasSubstr("UNAVAILABLE"));
}

}  // namespace
}  // namespace bellwether
