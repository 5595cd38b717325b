// The pool worker's queue discipline, rejection reasons and history rings, in-process.
#include "server/pool_worker.h"

#include <memory>
#include <string>
#include <vector>

#include "absl/synchronization/notification.h"
#include "absl/time/clock.h"
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
  StreamHistory h(/*questions=*/1, /*points=*/3);
  for (uint64_t seq = 1; seq <= 5; ++seq) {
    h.AddVerified(0, {seq, static_cast<double>(seq) * 10, static_cast<double>(seq) * 11, false});
  }
  v1::StreamPredictions current;
  v1::Prediction* pred = current.add_predictions();
  pred->mutable_verified()->set_count(1);
  pred->mutable_verified()->set_rmse(2.5);
  pred->mutable_progress()->set_label("settled");
  for (uint64_t seq = 1; seq <= 40; ++seq) {
    current.set_as_of_seq(seq);
    h.MaybeSample(current);  // one sample per kSampleEvery frames
  }
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
}

}  // namespace
}  // namespace bellwether::server
