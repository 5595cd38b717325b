// Durability of the real daemon: SIGKILL at random moments while a producer streams,
// restart, resume from durable_seq; at the end the daemon's learned state equals, bit for
// bit, an in-process replay of the same frames. Also: checkpoints and restarts, a
// damaged newest checkpoint, a torn log tail, a full disk, a foreign state format.
#include <fcntl.h>
#include <unistd.h>

#include <atomic>
#include <chrono>
#include <filesystem>
#include <fstream>
#include <random>
#include <sstream>
#include <string>
#include <thread>
#include <vector>

#include "client/bellwether_client.h"
#include "core/io/csv_frame_reader.h"
#include "core/io/spec_json.h"
#include "core/pool.h"
#include "gmock/gmock.h"
#include "gtest/gtest.h"
#include "server/state_dir.h"
#include "tests/integration/daemon_process.h"
#include "tests/integration/learned_state.h"

namespace bellwether {
namespace {

using ::testing::HasSubstr;

std::string SpecPath() { return std::string(BW_TEST_DATA_DIR) + "/../../deploy/examples/grid.json"; }

using testing::DemandFrames;
using testing::ReferenceState;

// A long deterministic sequence: the demand series `copies` times over, each copy eight
// weeks later than the one before, seqs continuing.
std::vector<v1::Frame> LongSequence(int copies) {
  const std::vector<v1::Frame> base = DemandFrames();
  std::vector<v1::Frame> out;
  constexpr int64_t kEightWeeksMicros = int64_t{8} * 7 * 24 * 3600 * 1000000;
  for (int copy = 0; copy < copies; ++copy) {
    for (const v1::Frame& f : base) {
      v1::Frame g = f;
      g.set_seq(out.size() + 1);
      if (g.has_local_micros()) g.set_local_micros(g.local_micros() + copy * kEightWeeksMicros);
      if (g.has_unix_micros()) g.set_unix_micros(g.unix_micros() + copy * kEightWeeksMicros);
      out.push_back(std::move(g));
    }
  }
  return out;
}

// The daemon's state of pool `grid` (`dir` is only for messages).
std::string DaemonState(Client& client, const std::string& /*dir*/) {
  return testing::DaemonState(client);
}

// Streams frames from the stream's durable seq on, in batches of 8, until done or the
// call breaks; records the highest durable_seq acknowledged.
// `pause` between batches paces the producer (so kills land mid-stream).
void Produce(Client& client, const std::vector<v1::Frame>& frames, std::atomic<uint64_t>* acked,
             std::chrono::microseconds pause = std::chrono::microseconds(0)) {
  IngestOptions o;
  o.resume = true;
  auto session = client.OpenIngest("grid", "uk", {"demand_mw"}, o);
  if (!session.ok()) return;
  size_t next = (*session)->resumed_seq();  // frames[i] has seq i + 1
  while (next < frames.size()) {
    v1::FrameBatch batch;
    for (size_t i = next; i < frames.size() && batch.frames_size() < 8; ++i) {
      *batch.add_frames() = frames[i];
    }
    auto ack = (*session)->Send(batch);
    if (!ack.ok()) return;  // the daemon died
    uint64_t prev = acked->load();
    while (ack->durable_seq() > prev && !acked->compare_exchange_weak(prev, ack->durable_seq())) {
    }
    next += static_cast<size_t>(batch.frames_size());
    if (pause.count() > 0) std::this_thread::sleep_for(pause);
  }
  (void)(*session)->Finish();
}

// The crash loop of the durability issue: 20 SIGKILLs in CI (DURABILITY_KILLS overrides,
// e.g. 200 for the benchmark variant).
TEST(Durability, CrashLoopLosesNothingAcknowledgedAndEndsBitIdentical) {
  int kills = 20;
  if (const char* k = std::getenv("DURABILITY_KILLS")) kills = std::atoi(k);
  const std::string dir = testing::MakeTempDir("crash_loop");
  auto spec = ReadPoolSpecFile(SpecPath());
  ASSERT_TRUE(spec.ok());
  // Long enough that every kill lands mid-stream (about 5 kills per copy).
  const int copies = std::max(4, kills / 5);
  const std::vector<v1::Frame> frames = LongSequence(copies);
  ASSERT_EQ(frames.size(), static_cast<size_t>(copies) * 2688u);

  std::mt19937 rng(2026);
  std::uniform_int_distribution<int> delay_ms(5, 100);
  std::atomic<uint64_t> acked{0};
  int killed = 0, rounds_without_progress = 0;
  for (int round = 0; round <= kills; ++round) {
    testing::DaemonProcess daemon({"--checkpoint-frames", "700"}, dir);
    ASSERT_THAT(daemon.address(), HasSubstr("127.0.0.1:")) << "round " << round;
    auto client = Client::Connect(daemon.address());
    const auto applied = client->ApplyPool(*spec);  // no-op once it exists
    ASSERT_TRUE(applied.ok()) << "round " << round << ": " << applied.status();
    // Nothing acknowledged as durable may be missing after the restart.
    IngestOptions o;
    o.resume = true;
    {
      auto probe = client->OpenIngest("grid", "uk", {"demand_mw"}, o);
      ASSERT_TRUE(probe.ok());
      ASSERT_GE((*probe)->resumed_seq(), acked.load()) << "round " << round;
      ASSERT_TRUE((*probe)->Finish().ok());
    }
    if (round == kills) {  // the last run streams to the end
      std::printf("crash loop: %llu of %zu frames durable before the last, unkilled run\n",
                  static_cast<unsigned long long>(acked.load()), frames.size());
      Produce(*client, frames, &acked);
      const std::string got = DaemonState(*client, dir);
      const std::string want = ReferenceState(*spec, frames, frames.size());
      ASSERT_FALSE(got.empty());
      EXPECT_TRUE(got == want) << "daemon state (" << got.size() << " bytes) differs from the "
                               << "reference replay (" << want.size() << " bytes)";
      EXPECT_EQ(acked.load(), frames.size());
      break;
    }
    const uint64_t before = acked.load();
    std::thread producer(
        [&] { Produce(*client, frames, &acked, std::chrono::microseconds(1500)); });
    std::this_thread::sleep_for(std::chrono::milliseconds(delay_ms(rng)));
    daemon.Kill();
    ++killed;
    producer.join();
    client.reset();
    if (acked.load() == before) ++rounds_without_progress;
  }
  std::printf("crash loop: %d SIGKILLs (%d before any new frame was durable), %llu frames "
              "acknowledged durable\n",
              killed, rounds_without_progress, static_cast<unsigned long long>(acked.load()));
}

TEST(Durability, CleanRestartLoadsTheCheckpointAndReplaysNothing) {
  const std::string dir = testing::MakeTempDir("clean");
  auto spec = ReadPoolSpecFile(SpecPath());
  ASSERT_TRUE(spec.ok());
  const std::vector<v1::Frame> frames = DemandFrames();
  std::atomic<uint64_t> acked{0};
  {
    testing::DaemonProcess daemon({}, dir);
    auto client = Client::Connect(daemon.address());
    ASSERT_TRUE(client->ApplyPool(*spec).ok());
    Produce(*client, frames, &acked);
    client.reset();
    EXPECT_EQ(daemon.Stop(), 0);  // writes a final checkpoint
  }
  bool has_checkpoint = false;
  for (const auto& e : std::filesystem::directory_iterator(dir)) {
    has_checkpoint |= e.path().extension() == ".bwc";
  }
  EXPECT_TRUE(has_checkpoint);
  testing::DaemonProcess again({}, dir);
  auto client = Client::Connect(again.address());
  auto p = client->Predict("grid", "uk");
  ASSERT_TRUE(p.ok()) << p.status();
  EXPECT_EQ(p->as_of_seq(), 2688u);
  EXPECT_TRUE(DaemonState(*client, dir) == ReferenceState(*spec, frames, frames.size()));
}

// A damaged newest checkpoint: recovery falls back to the previous one (and the log
// after it), loudly, and ends in the same state.
TEST(Durability, DamagedNewestCheckpointFallsBackToThePreviousOne) {
  const std::string dir = testing::MakeTempDir("fallback");
  auto spec = ReadPoolSpecFile(SpecPath());
  ASSERT_TRUE(spec.ok());
  std::vector<v1::Frame> frames = DemandFrames();
  std::atomic<uint64_t> acked{0};
  {
    testing::DaemonProcess daemon({}, dir);
    auto client = Client::Connect(daemon.address());
    ASSERT_TRUE(client->ApplyPool(*spec).ok());
    std::vector<v1::Frame> first(frames.begin(), frames.begin() + 1000);
    Produce(*client, first, &acked);
    ASSERT_TRUE(client->Checkpoint().ok());
    Produce(*client, frames, &acked);
    auto newest = client->Checkpoint();
    ASSERT_TRUE(newest.ok());
    daemon.Kill();
    // Flip one byte in the middle of the newest checkpoint.
    std::fstream f(newest->file(), std::ios::in | std::ios::out | std::ios::binary);
    f.seekp(static_cast<std::streamoff>(newest->bytes() / 2));
    f.put('\x5a');
  }
  testing::DaemonProcess again({}, dir);
  ASSERT_THAT(again.address(), HasSubstr("127.0.0.1:"));
  auto client = Client::Connect(again.address());
  auto p = client->Predict("grid", "uk");
  ASSERT_TRUE(p.ok()) << p.status();
  EXPECT_EQ(p->as_of_seq(), 2688u);
  EXPECT_TRUE(DaemonState(*client, dir) == ReferenceState(*spec, frames, frames.size()));
}

// A torn last log record (a crash mid-write) is cut; everything before it is kept.
TEST(Durability, TornLogTailIsCutAndTheRestKept) {
  const std::string dir = testing::MakeTempDir("torn");
  auto spec = ReadPoolSpecFile(SpecPath());
  ASSERT_TRUE(spec.ok());
  std::vector<v1::Frame> frames = DemandFrames();
  frames.resize(500);
  std::atomic<uint64_t> acked{0};
  {
    testing::DaemonProcess daemon({}, dir);
    auto client = Client::Connect(daemon.address());
    ASSERT_TRUE(client->ApplyPool(*spec).ok());
    Produce(*client, frames, &acked);
    daemon.Kill();
  }
  // Append half a record to the newest segment.
  std::string newest;
  for (const auto& e : std::filesystem::directory_iterator(dir)) {
    const std::string n = e.path().filename().string();
    if (n.rfind("wal-", 0) == 0 && e.path().string() > newest) newest = e.path().string();
  }
  ASSERT_FALSE(newest.empty());
  {
    std::ofstream out(newest, std::ios::app | std::ios::binary);
    out.write("\x40\x00\x00\x00\x12\x34", 6);
  }
  testing::DaemonProcess again({}, dir);
  ASSERT_THAT(again.address(), HasSubstr("127.0.0.1:"));
  auto client = Client::Connect(again.address());
  auto p = client->Predict("grid", "uk");
  ASSERT_TRUE(p.ok());
  EXPECT_EQ(p->as_of_seq(), 500u);
  EXPECT_TRUE(DaemonState(*client, dir) == ReferenceState(*spec, frames, frames.size()));
  // And the next start meets a clean log (the tail was cut, not left in a middle segment).
  client.reset();
  EXPECT_EQ(again.Stop(), 0);
  testing::DaemonProcess third({}, dir);
  EXPECT_THAT(third.address(), HasSubstr("127.0.0.1:"));
}

// A full disk (injected at the log's write call): ingest answers RESOURCE_EXHAUSTED,
// predictions keep being served, and nothing durable is damaged.
TEST(Durability, FullDiskRefusesIngestAndKeepsServing) {
  const std::string dir = testing::MakeTempDir("full");
  auto spec = ReadPoolSpecFile(SpecPath());
  ASSERT_TRUE(spec.ok());
  const std::vector<v1::Frame> frames = DemandFrames();
  testing::DaemonProcess daemon({"--testing-wal-fail-after-bytes", "20000"}, dir);
  auto client = Client::Connect(daemon.address());
  ASSERT_TRUE(client->ApplyPool(*spec).ok());
  auto session = client->OpenIngest("grid", "uk", {"demand_mw"});
  ASSERT_TRUE(session.ok());
  absl::Status refused;
  uint64_t durable = 0;
  for (size_t i = 0; i < frames.size(); i += 16) {
    v1::FrameBatch batch;
    for (size_t k = i; k < std::min(frames.size(), i + 16); ++k) *batch.add_frames() = frames[k];
    auto ack = (*session)->Send(batch);
    if (!ack.ok()) {
      refused = ack.status();
      break;
    }
    durable = ack->durable_seq();
  }
  EXPECT_EQ(refused.code(), absl::StatusCode::kResourceExhausted) << refused;
  EXPECT_THAT(refused.message(), HasSubstr("full"));
  ASSERT_GT(durable, 0u);
  auto p = client->Predict("grid", "uk");
  ASSERT_TRUE(p.ok()) << p.status();
  EXPECT_EQ(p->as_of_seq(), durable);  // the refused batch was not applied
  client.reset();
  daemon.Kill();
  // Space returns (a restart without the fault): everything durable is there.
  testing::DaemonProcess again({}, dir);
  auto c2 = Client::Connect(again.address());
  auto p2 = c2->Predict("grid", "uk");
  ASSERT_TRUE(p2.ok());
  EXPECT_EQ(p2->as_of_seq(), durable);
  EXPECT_TRUE(DaemonState(*c2, dir) == ReferenceState(*spec, frames, durable));
}

// The client library's ResumingIngest rides through a SIGKILL and restart of the daemon
// on the same address: it reconnects, resends from durable_seq, and the end state is the
// reference replay's.
TEST(Durability, ResumingIngestSurvivesADaemonRestart) {
  const std::string dir = testing::MakeTempDir("resuming");
  auto spec = ReadPoolSpecFile(SpecPath());
  ASSERT_TRUE(spec.ok());
  const std::vector<v1::Frame> frames = DemandFrames();
  auto daemon = std::make_unique<testing::DaemonProcess>(std::vector<std::string>{}, dir);
  const std::string address = daemon->address();
  ASSERT_THAT(address, HasSubstr("127.0.0.1:"));
  auto client = Client::Connect(address);
  ASSERT_TRUE(client->ApplyPool(*spec).ok());
  ResumingIngest::Options options;
  options.initial_backoff = absl::Milliseconds(20);
  ResumingIngest ingest(client.get(), "grid", "uk", {"demand_mw"}, options);
  size_t i = 0;
  auto send_up_to = [&](size_t end) {
    while (i < end) {
      v1::FrameBatch batch;
      for (; i < end && batch.frames_size() < 64; ++i) *batch.add_frames() = frames[i];
      auto ack = ingest.Send(batch);
      ASSERT_TRUE(ack.ok()) << ack.status();
    }
  };
  send_up_to(1200);
  daemon->Kill();
  // The producer carries on (its first sends fail until the daemon is back) while this
  // thread restarts the daemon on the same address with the same state directory. (The
  // daemon is started from this thread: it dies with the thread that started it.)
  std::thread producer([&] { send_up_to(frames.size()); });
  std::this_thread::sleep_for(std::chrono::milliseconds(200));
  daemon = std::make_unique<testing::DaemonProcess>(std::vector<std::string>{"--listen", address},
                                                    dir);
  producer.join();
  EXPECT_EQ(daemon->address(), address);
  ASSERT_TRUE(ingest.Finish().ok());
  EXPECT_GE(ingest.reconnects(), 1);
  EXPECT_EQ(ingest.durable_seq(), frames.size());
  EXPECT_EQ(ingest.pending(), 0u);
  EXPECT_TRUE(DaemonState(*client, dir) == ReferenceState(*spec, frames, frames.size()));
}

TEST(Durability, ForeignStateFormatIsRefusedWithAClearMessage) {
  const std::string dir = testing::MakeTempDir("foreign");
  {
    std::ofstream f(dir + "/FORMAT");
    f << "bellwether state format 99\n";
  }
  const auto r = testing::RunCommand(
      {BW_DAEMON_PATH, "--listen", "127.0.0.1:0", "--state-dir", dir});
  EXPECT_EQ(r.exit_code, 1);
  EXPECT_THAT(r.err, HasSubstr("format 99"));
  EXPECT_THAT(r.err, HasSubstr("cannot migrate"));
}

}  // namespace
}  // namespace bellwether
