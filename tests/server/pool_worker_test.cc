// The pool worker's queue discipline, rejection reasons and history rings, in-process.
#include "server/pool_worker.h"

#include <memory>
#include <string>
#include <thread>
#include <vector>

#include "absl/strings/str_cat.h"
#include "absl/synchronization/notification.h"
#include "absl/time/clock.h"
#include "core/io/csv_frame_reader.h"
#include "core/io/spec_json.h"
#include "core/pool.h"
#include "gmock/gmock.h"
#include "gtest/gtest.h"
#include "server/stream_history.h"
#include "tests/chain_spec.h"

namespace bellwether::server {
namespace {

using ::testing::HasSubstr;

std::unique_ptr<PoolWorker> MakeWorker(size_t capacity) {
  auto pool = Pool::Create(testing::OneHotChainSpec(4, 0.9, 0.0, 0.1));
  EXPECT_TRUE(pool.ok()) << pool.status();
  PoolWorker::Options options;
  options.queue_capacity = capacity;
  return std::make_unique<PoolWorker>(*std::move(pool), options);
}

v1::FrameBatch OneFrame(uint64_t seq) {
  v1::FrameBatch b;
  v1::Frame* f = b.add_frames();
  f->set_seq(seq);
  f->add_values(1.5);
  f->add_values(0.25);
  return b;
}

// A full queue refuses at once with RESOURCE_EXHAUSTED instead of growing or blocking;
// once the writer catches up, batches are accepted again and every accepted one is
// applied in order.
TEST(PoolWorkerQueue, FullQueueIsResourceExhaustedAndNothingAcceptedIsLost) {
  auto worker = MakeWorker(/*capacity=*/2);
  const auto g = worker->current();
  auto columns = ColumnMap::Create(g->signal_names, {});
  ASSERT_TRUE(columns.ok());
  const std::string stream = "s";
  std::vector<v1::FrameBatch> batches;
  for (uint64_t seq = 1; seq <= 5; ++seq) batches.push_back(OneFrame(seq));

  absl::Notification started, release;
  std::vector<uint64_t> applied_seqs;  // written by the writer thread only
  absl::Mutex mu;
  auto submit = [&](size_t i, bool block) {
    PoolWorker::BatchTask t;
    t.stream = &stream;
    t.columns = &*columns;
    t.generation = g->id;
    t.batch = &batches[i];
    t.done = [&, block](PoolWorker::BatchResult r) {
      {
        absl::MutexLock lock(&mu);
        applied_seqs.push_back(r.applied_seq);
      }
      if (block) {
        started.Notify();
        release.WaitForNotification();
      }
    };
    return worker->Submit(std::move(t));
  };
  ASSERT_TRUE(submit(0, /*block=*/true).ok());
  started.WaitForNotification();  // the writer is busy with batch 0; the queue is empty
  EXPECT_TRUE(submit(1, false).ok());
  EXPECT_TRUE(submit(2, false).ok());
  EXPECT_EQ(worker->queue_depth(), 2u);
  const absl::Status full = submit(3, false);
  EXPECT_EQ(full.code(), absl::StatusCode::kResourceExhausted);
  EXPECT_THAT(full.message(), HasSubstr("ingest queue full"));
  release.Notify();
  // ApplyBatch waits for its own batch, so every earlier one is done after it. It backs
  // off while the writer is still draining the queue, as a producer would.
  PoolWorker::BatchResult last;
  for (int attempt = 0; attempt < 1000; ++attempt) {
    last = worker->ApplyBatch(stream, *columns, g->id, batches[4]);
    if (last.status.code() != absl::StatusCode::kResourceExhausted) break;
    absl::SleepFor(absl::Milliseconds(1));
  }
  ASSERT_TRUE(last.status.ok()) << last.status;
  EXPECT_EQ(last.applied_seq, 5u);
  absl::MutexLock lock(&mu);
  EXPECT_EQ(applied_seqs, (std::vector<uint64_t>{1, 2, 3}));  // batch 3 was refused
  EXPECT_EQ(worker->Snapshot(stream)->frames_applied, 4u);
}

// Several writer threads apply batches of different streams at once. Each stream learns
// from its own frames only, so the pool must end bit for bit where applying every stream's
// frames in order on one thread ends: checked on the building recipe with real metered
// data (deploy/examples/campus-library.csv, cut into six streams), submitted by three
// producer threads at once.
TEST(PoolWorkerGroups, ConcurrentWritersLearnWhatOneThreadLearns) {
  const std::string root = std::string(BW_TEST_DATA_DIR) + "/../../";
  auto spec = ReadPoolSpecFile(root + "deploy/examples/recipes/building-energy.json");
  ASSERT_TRUE(spec.ok()) << spec.status();
  auto reference = Pool::Create(*spec);
  auto pool = Pool::Create(*spec);
  ASSERT_TRUE(reference.ok() && pool.ok());
  ASSERT_TRUE((*pool)->supports_concurrent_streams());
  PoolWorker::Options options;
  options.queue_capacity = 1024;
  options.writer_threads = 3;
  options.history_streams = 4;  // some streams keep a history, some do not
  PoolWorker worker(*std::move(pool), options);
  const auto g = worker.current();

  auto reader = CsvFrameReader::Open(root + "deploy/examples/campus-library.csv");
  ASSERT_TRUE(reader.ok()) << reader.status();
  auto columns = ColumnMap::Create(g->signal_names, (*reader)->signal_columns());
  ASSERT_TRUE(columns.ok()) << columns.status();
  constexpr int kStreams = 6, kFramesPerStream = 600, kBatch = 40;
  std::vector<std::string> names;
  std::vector<std::vector<v1::FrameBatch>> batches(kStreams);  // per stream, in order
  v1::Frame f;
  for (int s = 0; s < kStreams; ++s) {
    names.push_back("building-" + std::to_string(s));
    for (int k = 0; k < kFramesPerStream; ++k) {
      auto more = (*reader)->Next(&f);
      ASSERT_TRUE(more.ok() && *more) << "the CSV has fewer rows than the test needs";
      if (k % kBatch == 0) batches[s].emplace_back();
      v1::Frame* copy = batches[s].back().add_frames();
      *copy = f;
      copy->set_seq(static_cast<uint64_t>(k + 1));
    }
  }
  // The reference: every stream's frames in order, on this thread.
  std::vector<double> buffer;
  FrameInput input;
  for (int s = 0; s < kStreams; ++s) {
    for (const v1::FrameBatch& b : batches[s]) {
      for (const v1::Frame& frame : b.frames()) {
        ASSERT_TRUE(FrameFromProto(frame, *columns, &buffer, &input).ok());
        ASSERT_TRUE((*reference)->Apply(names[s], input).ok());
      }
    }
  }
  // The first batch of each stream creates it (it runs alone); then three producers
  // submit the rest at once, each a share of the streams, every batch without waiting.
  for (int s = 0; s < kStreams; ++s) {
    const auto r = worker.ApplyBatch(names[s], *columns, g->id, batches[s][0]);
    ASSERT_TRUE(r.status.ok()) << r.status;
  }
  absl::Mutex mu;
  int outstanding = 0;
  bool failed = false;
  auto produce = [&](int first) {
    for (size_t i = 1; i < batches[0].size(); ++i) {
      for (int s = first; s < kStreams; s += 3) {
        PoolWorker::BatchTask t;
        t.stream = &names[s];
        t.columns = &*columns;
        t.generation = g->id;
        t.batch = &batches[s][i];
        t.done = [&](PoolWorker::BatchResult r) {
          absl::MutexLock lock(&mu);
          failed |= !r.status.ok() || !r.rejected.empty();
          --outstanding;
        };
        {
          absl::MutexLock lock(&mu);
          ++outstanding;
        }
        if (!worker.Submit(std::move(t)).ok()) {
          absl::MutexLock lock(&mu);
          failed = true;
          --outstanding;
        }
      }
    }
  };
  std::vector<std::thread> producers;
  for (int p = 0; p < 3; ++p) producers.emplace_back(produce, p);
  for (std::thread& t : producers) t.join();
  {
    absl::MutexLock lock(&mu);
    mu.Await(absl::Condition(+[](int* n) { return *n == 0; }, &outstanding));
    EXPECT_FALSE(failed);
  }
  EXPECT_GT(worker.concurrent_batches(), 0u) << "no batches were applied side by side";
  auto captured = worker.Capture();
  ASSERT_TRUE(captured.ok()) << captured.status();
  std::string expected;
  (*reference)->SaveState(&expected);
  EXPECT_TRUE(captured->state() == expected) << "the pool's state differs from one thread's";
  for (int s = 0; s < kStreams; ++s) {
    const auto snap = worker.Snapshot(names[s]);
    ASSERT_NE(snap, nullptr);
    EXPECT_EQ(snap->frames_applied, static_cast<uint64_t>(kFramesPerStream));
  }
}

// With two writer threads, one stream's batch that takes long (here: its callback holds
// its thread) must not hold up another stream's batches behind it, and a capture (which
// runs alone) waits for it and is not passed by batches queued after it. Each thread
// takes the next batch it may run; none waits for a group to end.
TEST(PoolWorkerQueue, AStreamsLongBatchDoesNotHoldUpOtherStreams) {
  auto pool = Pool::Create(testing::OneHotChainSpec(4, 0.9, 0.0, 0.1));
  ASSERT_TRUE(pool.ok()) << pool.status();
  ASSERT_TRUE((*pool)->supports_concurrent_streams());
  PoolWorker::Options options;
  options.queue_capacity = 64;
  options.writer_threads = 2;
  PoolWorker worker(*std::move(pool), options);
  const auto g = worker.current();
  auto columns = ColumnMap::Create(g->signal_names, {});
  ASSERT_TRUE(columns.ok());
  const std::string slow = "slow", fast = "fast";
  std::vector<v1::FrameBatch> batches;
  for (uint64_t seq = 1; seq <= 8; ++seq) batches.push_back(OneFrame(seq));
  // First batches create the streams (each runs alone).
  ASSERT_TRUE(worker.ApplyBatch(slow, *columns, g->id, batches[0]).status.ok());
  ASSERT_TRUE(worker.ApplyBatch(fast, *columns, g->id, batches[0]).status.ok());

  absl::Notification slow_started, release_slow;
  absl::Mutex mu;
  std::vector<std::string> order;  // which batch finished, in order
  auto submit = [&](const std::string& stream, size_t i, bool hold) {
    PoolWorker::BatchTask t;
    t.stream = &stream;
    t.columns = &*columns;
    t.generation = g->id;
    t.batch = &batches[i];
    t.done = [&, hold, i](PoolWorker::BatchResult r) {
      EXPECT_TRUE(r.status.ok()) << r.status;
      if (hold) {
        slow_started.Notify();
        release_slow.WaitForNotificationWithTimeout(absl::Seconds(30));
      }
      absl::MutexLock lock(&mu);
      order.push_back(absl::StrCat(stream, i));
    };
    ASSERT_TRUE(worker.Submit(std::move(t)).ok());
  };
  submit(slow, 1, /*hold=*/true);
  ASSERT_TRUE(slow_started.WaitForNotificationWithTimeout(absl::Seconds(30)));
  submit(slow, 2, false);  // must wait behind slow1: same stream
  for (size_t i = 1; i <= 4; ++i) submit(fast, i, false);
  {
    // The fast stream's four batches finish while slow1 still holds its thread.
    absl::MutexLock lock(&mu);
    const bool fast_done = mu.AwaitWithTimeout(
        absl::Condition(
            +[](std::vector<std::string>* o) { return o->size() >= 4; }, &order),
        absl::Seconds(30));
    ASSERT_TRUE(fast_done) << "the fast stream waited for the slow stream's batch";
    EXPECT_EQ(order, (std::vector<std::string>{"fast1", "fast2", "fast3", "fast4"}));
  }
  // A capture queued now waits for slow1 (and slow2, queued before it); a batch queued
  // after the capture does not pass it.
  absl::Notification captured;
  std::thread capture([&] {
    auto c = worker.Capture();
    EXPECT_TRUE(c.ok()) << c.status();
    captured.Notify();
  });
  while (worker.queue_depth() < 2) absl::SleepFor(absl::Milliseconds(1));  // slow2, capture
  submit(fast, 5, false);
  absl::SleepFor(absl::Milliseconds(50));
  EXPECT_FALSE(captured.HasBeenNotified()) << "the capture ran beside a running batch";
  {
    absl::MutexLock lock(&mu);
    EXPECT_EQ(order.size(), 4u) << "a batch passed the capture queued before it";
  }
  release_slow.Notify();
  capture.join();
  const PoolWorker::BatchResult last = worker.ApplyBatch(fast, *columns, g->id, batches[6]);
  ASSERT_TRUE(last.status.ok()) << last.status;
  absl::MutexLock lock(&mu);
  EXPECT_EQ(order, (std::vector<std::string>{"fast1", "fast2", "fast3", "fast4", "slow1", "slow2",
                                             "fast5"}));
  EXPECT_EQ(worker.Snapshot(slow)->frames_applied, 3u);
  EXPECT_EQ(worker.Snapshot(fast)->frames_applied, 7u);
}

TEST(PoolWorkerQueue, DeletedPoolRefusesBatches) {
  auto worker = MakeWorker(4);
  const auto g = worker->current();
  auto columns = ColumnMap::Create(g->signal_names, {});
  ASSERT_TRUE(columns.ok());
  worker->MarkDeleted();
  const PoolWorker::BatchResult r = worker->ApplyBatch("s", *columns, g->id, OneFrame(1));
  EXPECT_EQ(r.status.code(), absl::StatusCode::kNotFound);
}

TEST(PoolWorkerQueue, BadFramesAreRejectedOneByOne) {
  auto worker = MakeWorker(4);
  const auto g = worker->current();
  auto columns = ColumnMap::Create(g->signal_names, {});
  ASSERT_TRUE(columns.ok());
  v1::FrameBatch batch = OneFrame(1);
  *batch.add_frames() = OneFrame(1).frames(0);  // repeated seq: a duplicate, skipped
  *batch.add_frames() = OneFrame(2).frames(0);
  batch.mutable_frames(2)->add_values(3);  // one value too many
  *batch.add_frames() = OneFrame(3).frames(0);
  batch.mutable_frames(3)->set_seq(0);     // seq must be >= 1
  *batch.add_frames() = OneFrame(4).frames(0);
  const PoolWorker::BatchResult r = worker->ApplyBatch("s", *columns, g->id, batch);
  ASSERT_TRUE(r.status.ok());
  EXPECT_EQ(r.frames_applied, 2u);
  EXPECT_EQ(r.duplicates, 1u);
  EXPECT_EQ(r.applied_seq, 4u);
  ASSERT_EQ(r.rejected.size(), 2u);
  EXPECT_EQ(r.rejected[0].index(), 2u);
  EXPECT_EQ(RejectionReason(r.rejected[0].reason()), "values");
  EXPECT_EQ(r.rejected[1].index(), 3u);
  EXPECT_EQ(RejectionReason(r.rejected[1].reason()), "seq");
  EXPECT_EQ(worker->Snapshot("s")->frames_rejected, 2u);
}

TEST(RejectionReason, NamesTheFieldAtFault) {
  EXPECT_EQ(RejectionReason("frame seq 4: missing[0]: column 7 is out of range"), "missing");
  EXPECT_EQ(RejectionReason("frame seq 4: behavior_prob: 2 is outside (0, 1]"), "behavior_prob");
  EXPECT_EQ(RejectionReason("frame seq 4: action: 9 is not an action of pool p"), "action");
  EXPECT_EQ(RejectionReason("frame: seq must be >= 1"), "seq");
  EXPECT_EQ(RejectionReason("something else"), "other");
}

TEST(StreamHistory, RingsKeepTheNewestPointsOldestFirst) {
  StreamHistory h(/*questions=*/2, /*points=*/3);
  for (uint64_t seq = 1; seq <= 5; ++seq) {
    const double x = static_cast<double>(seq);
    // Question 1 verifies nothing at seq 2 (its cumulant went missing, say).
    std::vector<StreamHistory::Verified> points = {{seq, x * 10, x * 11, 0, false}};
    if (seq != 2) points.push_back({seq, x * 20, x * 21, 1, seq == 5});
    h.AddVerified(points);
  }
  std::vector<Pool::ProgressSample> sample(2);
  sample[0].verified_rmse = 2.5;
  sample[0].label = ProgressLabel::kSettled;
  sample[1].label = ProgressLabel::kDiverging;
  for (uint64_t seq = 1; seq <= 40; ++seq) h.AddSample(seq, sample);  // every kSampleEvery
  v1::QuestionHistory out;
  h.CopyTo(0, &out);
  ASSERT_EQ(out.verified_size(), 3);
  EXPECT_EQ(out.verified(0).seq(), 3u);
  EXPECT_EQ(out.verified(2).seq(), 5u);
  EXPECT_EQ(out.verified(2).realized(), 55.0);
  ASSERT_EQ(out.progress_size(), 3);  // samples at 1, 9, 17, 25, 33: the newest three kept
  EXPECT_EQ(out.progress(0).seq(), 17u);
  EXPECT_EQ(out.progress(2).seq(), 33u);
  EXPECT_EQ(out.progress(2).verified_rmse(), 2.5);
  EXPECT_EQ(out.progress(2).label(), "settled");
  // The shared ring held 6 points, question 1's newest three among them.
  v1::QuestionHistory other;
  h.CopyTo(1, &other);
  ASSERT_EQ(other.verified_size(), 3);
  EXPECT_EQ(other.verified(0).seq(), 3u);
  EXPECT_EQ(other.verified(2).seq(), 5u);
  EXPECT_EQ(other.verified(2).predicted(), 100.0);
  EXPECT_TRUE(other.verified(2).truncated());
  EXPECT_EQ(other.progress(2).label(), "diverging");
}

}  // namespace
}  // namespace bellwether::server
