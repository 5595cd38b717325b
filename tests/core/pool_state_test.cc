// Pool checkpoints: a restored pool continues bit for bit like the one that was saved,
// for every learner family the recipes use; damaged payloads fail cleanly.
#include <cmath>
#include <cstring>
#include <random>
#include <string>
#include <vector>

#include "absl/strings/str_cat.h"
#include "core/io/csv_frame_reader.h"
#include "core/io/spec_json.h"
#include "core/pool.h"
#include "gmock/gmock.h"
#include "gtest/gtest.h"
#include "tests/legacy_state_frames.h"

namespace bellwether {
namespace {

struct Case {
  const char* name;
  std::string spec;  // path
  std::string csv;   // path
  bool pooled;
  // Every question on FIXED steps without RUPEE: per-stream pools then learn on the lazy
  // kernel (core/learners/lazy_block_td.h).
  bool fixed_no_rupee = false;
};

// Blocks of 32 or more such questions run on the kernel: each question is repeated (with
// its own name) until the pool has at least 40, its copies in the same block.
void MakeFixedNoRupee(v1::PoolSpec* spec) {
  for (v1::QuestionSpec& q : *spec->mutable_questions()) q.set_step_rule(v1::FIXED);
  spec->mutable_progress()->set_disable_rupee(true);
  const int n = spec->questions_size();
  for (int copy = 1; spec->questions_size() < 40 * n; ++copy) {
    for (int i = 0; i < n; ++i) {
      v1::QuestionSpec* q = spec->add_questions();
      *q = spec->questions(i);
      q->set_name(absl::StrCat(q->name(), "_copy", copy));
    }
  }
}

std::string Repo(const std::string& rel) { return std::string(BW_TEST_DATA_DIR) + "/../../" + rel; }

std::vector<Case> Cases() {
  return {
      {"grid", Repo("deploy/examples/grid.json"),
       std::string(BW_SHARED_DATA_DIR) + "/halfhourly-demand-2000.csv", false},
      {"grid_autostep_pooled", std::string(BW_TEST_DATA_DIR) + "/grid_pool.json",
       std::string(BW_SHARED_DATA_DIR) + "/halfhourly-demand-2000.csv", true},
      {"building", Repo("deploy/examples/recipes/building-energy.json"),
       Repo("deploy/examples/campus-library.csv"), false},
      {"robots", Repo("deploy/examples/recipes/robot-charging.json"),
       Repo("deploy/examples/robot-fleet.csv"), false},
      {"building_lazy", Repo("deploy/examples/recipes/building-energy.json"),
       Repo("deploy/examples/campus-library.csv"), false, true},
      {"grid_lazy", Repo("deploy/examples/grid.json"),
       std::string(BW_SHARED_DATA_DIR) + "/halfhourly-demand-2000.csv", false, true},
  };
}

// Reads every frame of `csv` in the pool's column mapping.
struct Frames {
  std::vector<v1::Frame> frames;
  std::unique_ptr<ColumnMap> columns;
};

Frames ReadFrames(const Pool& pool, const std::string& csv) {
  Frames out;
  auto reader = CsvFrameReader::Open(csv);
  EXPECT_TRUE(reader.ok()) << reader.status();
  auto columns = ColumnMap::Create(pool.spec().signal_names, (*reader)->signal_columns());
  EXPECT_TRUE(columns.ok()) << columns.status();
  out.columns = std::make_unique<ColumnMap>(*std::move(columns));
  v1::Frame f;
  while (true) {
    auto more = (*reader)->Next(&f);
    EXPECT_TRUE(more.ok()) << more.status();
    if (!more.ok() || !*more) break;
    out.frames.push_back(f);
  }
  return out;
}

void ApplyRange(Pool& pool, const Frames& f, size_t from, size_t to, const std::string& stream) {
  std::vector<double> buffer;
  FrameInput input;
  for (size_t i = from; i < to; ++i) {
    ASSERT_TRUE(FrameFromProto(f.frames[i], *f.columns, &buffer, &input).ok());
    ASSERT_TRUE(pool.Apply(stream, input).ok());
  }
}

class PoolStateTest : public ::testing::TestWithParam<Case> {};

TEST_P(PoolStateTest, RestoredPoolContinuesBitForBit) {
  const Case& c = GetParam();
  auto spec = ReadPoolSpecFile(c.spec);
  ASSERT_TRUE(spec.ok()) << spec.status();
  if (c.pooled) spec->set_learning(v1::PoolSpec::POOLED);
  if (c.fixed_no_rupee) MakeFixedNoRupee(&*spec);
  auto a = Pool::Create(*spec);
  ASSERT_TRUE(a.ok()) << a.status();
  const Frames f = ReadFrames(**a, c.csv);
  ASSERT_GT(f.frames.size(), 200u);
  const size_t cut = f.frames.size() / 2;
  // Two streams, so per-stream state and the stream table round-trip too.
  ApplyRange(**a, f, 0, cut, "s1");
  ApplyRange(**a, f, 0, cut / 2, "s2");

  std::string saved;
  (*a)->SaveState(&saved);
  // SaveState counts before it copies: the string was reserved to exactly the state's
  // size (libstdc++'s reserve gives that capacity), not grown by doubling.
  EXPECT_EQ(saved.capacity(), saved.size());
  auto b = Pool::Create(*spec);
  ASSERT_TRUE(b.ok());
  ASSERT_TRUE((*b)->RestoreState(saved).ok()) << (*b)->RestoreState(saved);
  std::string resaved;
  (*b)->SaveState(&resaved);
  EXPECT_TRUE(saved == resaved) << "save(restore(x)) differs from x";

  // Same later frames to both: every answer identical to the last bit.
  std::vector<double> buffer;
  FrameInput input;
  for (size_t i = cut; i < f.frames.size(); ++i) {
    ASSERT_TRUE(FrameFromProto(f.frames[i], *f.columns, &buffer, &input).ok());
    ASSERT_TRUE((*a)->Apply("s1", input).ok());
    ASSERT_TRUE((*b)->Apply("s1", input).ok());
    const auto pa = (*a)->predictions("s1"), pb = (*b)->predictions("s1");
    ASSERT_EQ(pa.size(), pb.size());
    ASSERT_EQ(std::memcmp(pa.data(), pb.data(), pa.size() * sizeof(double)), 0)
        << c.name << " frame " << i;
  }
  v1::StreamPredictions va, vb;
  ASSERT_TRUE((*a)->GetPredictions("s1", &va).ok());
  ASSERT_TRUE((*b)->GetPredictions("s1", &vb).ok());
  EXPECT_EQ(va.SerializeAsString(), vb.SerializeAsString());  // verified error and progress
  std::string end_a, end_b;
  (*a)->SaveState(&end_a);
  (*b)->SaveState(&end_b);
  EXPECT_TRUE(end_a == end_b);
}

INSTANTIATE_TEST_SUITE_P(Recipes, PoolStateTest, ::testing::ValuesIn(Cases()),
                         [](const ::testing::TestParamInfo<Case>& p) { return p.param.name; });

// The lazy kernel against the eager loop inside the engine: the same FIXED-step pool
// learned per stream (lazy: this stream's weights alone) and pooled from one stream (the
// eager loop: pooled weights may be shared), on the same frames, answer alike up to float
// rounding, and so do their weights. The eager loop is the textbook update (Sutton &
// Barto 2nd ed., eq. 12.5-12.7, accumulating trace); the kernel's exactness is proved in
// lazy_block_td_test against the same.
// The divergence guard's snapshot copies only the rows written since the previous one
// (BlockParams::MarkDirty). Whenever a snapshot is taken, the restore point must equal the
// weights of that moment in every row: a row written but not marked would keep its old
// value. Checked on every learner family of the recipes, per-stream (rows tracked) and
// pooled (whole copies), on the eager loop and on the lazy kernel.
TEST_P(PoolStateTest, GuardSnapshotEqualsTheWeightsWhenTaken) {
  const Case& c = GetParam();
  auto spec = ReadPoolSpecFile(c.spec);
  ASSERT_TRUE(spec.ok()) << spec.status();
  if (c.fixed_no_rupee) MakeFixedNoRupee(&*spec);
  spec->set_learning(c.pooled ? v1::PoolSpec::POOLED : v1::PoolSpec::PER_STREAM);
  auto pool = Pool::Create(*spec);
  ASSERT_TRUE(pool.ok()) << pool.status();
  const Frames f = ReadFrames(**pool, c.csv);
  const size_t n = std::min<size_t>(f.frames.size(), 4500);
  const size_t blocks = (*pool)->spec().blocks.size();
  std::vector<uint64_t> seen(2 * blocks, 0);
  std::vector<double> buffer;
  FrameInput input;
  size_t compared = 0, changed = 0;
  std::vector<float> previous;
  for (size_t i = 0; i < n; ++i) {
    ASSERT_TRUE(FrameFromProto(f.frames[i], *f.columns, &buffer, &input).ok());
    const int which = static_cast<int>(i % 2);  // two streams, interleaved
    const std::string stream = which == 0 ? "s1" : "s2";
    ASSERT_TRUE((*pool)->Apply(stream, input).ok());
    for (size_t b = 0; b < blocks; ++b) {
      const BlockParams* p = (*pool)->block_params(stream, b);
      ASSERT_NE(p, nullptr);
      uint64_t& last = seen[(c.pooled ? 0 : which) * blocks + b];
      if (p->snapshots() == last) continue;
      last = p->snapshots();
      const absl::Span<const float> good = p->restore_point();
      size_t differ = 0;
      for (uint32_t r = 0; r < p->rows(); ++r) {
        differ += std::memcmp(p->row(r), &good[static_cast<size_t>(r) * p->cols()],
                              p->cols() * sizeof(float)) != 0;
      }
      EXPECT_EQ(differ, 0u) << c.name << " block " << b << " frame " << i << ": rows whose "
                            << "restore point misses a write";
      ++compared;
      if (b == 0 && (c.pooled || which == 0)) {
        if (previous.empty()) previous.assign(good.size(), 0.0f);  // the weights start at 0
        changed += std::memcmp(previous.data(), good.data(), good.size() * sizeof(float)) != 0;
        previous.assign(good.begin(), good.end());
      }
    }
  }
  EXPECT_GE(compared, 2u) << c.name << ": too few snapshots to check";
  EXPECT_GE(changed, 1u) << c.name << ": the restore point never moved";
}

TEST(LazyKernelInTheEngine, AnswersAsTheEagerLoopDoes) {
  for (const auto& [spec_path, csv] :
       {std::pair{Repo("deploy/examples/recipes/building-energy.json"),
                  Repo("deploy/examples/campus-library.csv")},
        std::pair{Repo("deploy/examples/grid.json"),
                  std::string(BW_SHARED_DATA_DIR) + "/halfhourly-demand-2000.csv"}}) {
    auto spec = ReadPoolSpecFile(spec_path);
    ASSERT_TRUE(spec.ok()) << spec.status();
    MakeFixedNoRupee(&*spec);
    spec->set_learning(v1::PoolSpec::PER_STREAM);
    auto lazy = Pool::Create(*spec);
    spec->set_learning(v1::PoolSpec::POOLED);
    auto eager = Pool::Create(*spec);
    ASSERT_TRUE(lazy.ok() && eager.ok());
    const Frames f = ReadFrames(**lazy, csv);
    std::vector<double> buffer;
    FrameInput input;
    double worst = 0;
    for (size_t i = 0; i < f.frames.size(); ++i) {
      ASSERT_TRUE(FrameFromProto(f.frames[i], *f.columns, &buffer, &input).ok());
      ASSERT_TRUE((*lazy)->Apply("s", input).ok());
      ASSERT_TRUE((*eager)->Apply("s", input).ok());
      const auto a = (*lazy)->predictions("s"), b = (*eager)->predictions("s");
      ASSERT_EQ(a.size(), b.size());
      for (size_t q = 0; q < a.size(); ++q) {
        worst = std::max(worst, std::fabs(a[q] - b[q]) / std::max(1.0, std::fabs(b[q])));
      }
    }
    EXPECT_LT(worst, 1e-4) << spec_path;
    // The weights read through block_params include every pending update.
    for (size_t blk = 0; blk < (*lazy)->spec().blocks.size(); ++blk) {
      const BlockParams* pa = (*lazy)->block_params("s", blk);
      const BlockParams* pb = (*eager)->block_params("s", blk);
      ASSERT_TRUE(pa != nullptr && pb != nullptr);
      double diff = 0, norm = 0;
      for (uint32_t r = 0; r < pa->rows(); ++r) {
        for (uint32_t q = 0; q < pa->cols(); ++q) {
          const double d = static_cast<double>(pa->row(r)[q]) - static_cast<double>(pb->row(r)[q]);
          diff += d * d;
          norm += static_cast<double>(pb->row(r)[q]) * static_cast<double>(pb->row(r)[q]);
        }
      }
      EXPECT_LT(std::sqrt(diff), 1e-4 * std::max(1.0, std::sqrt(norm))) << spec_path << " block " << blk;
      EXPECT_GT(norm, 0.0) << "nothing learned";
    }
  }
}

// Every truncation and a sample of single-bit flips of a real payload: the loader never
// crashes or reads out of bounds; it fails with DATA_LOSS naming the offset, or (a flip in
// a value, not a length) loads numbers that differ.
TEST(PoolStateCorruption, TruncationsAndBitFlipsFailCleanly) {
  auto spec = ReadPoolSpecFile(Repo("deploy/examples/recipes/robot-charging.json"));
  ASSERT_TRUE(spec.ok());
  auto a = Pool::Create(*spec);
  ASSERT_TRUE(a.ok());
  const Frames f = ReadFrames(**a, Repo("deploy/examples/robot-fleet.csv"));
  ApplyRange(**a, f, 0, 300, "r1");
  std::string saved;
  (*a)->SaveState(&saved);
  ASSERT_GT(saved.size(), 1000u);

  size_t truncations_refused = 0;
  const size_t step = std::max<size_t>(1, saved.size() / 4000);
  for (size_t len = 0; len < saved.size(); len += step) {
    auto b = Pool::Create(*spec);
    ASSERT_TRUE(b.ok());
    const absl::Status s = (*b)->RestoreState(absl::string_view(saved).substr(0, len));
    EXPECT_FALSE(s.ok()) << "truncated to " << len;
    if (!s.ok()) {
      EXPECT_THAT(s.message(), ::testing::HasSubstr("byte"));
      ++truncations_refused;
    }
  }
  EXPECT_GT(truncations_refused, 0u);

  std::mt19937 rng(17);
  std::uniform_int_distribution<size_t> pos(0, saved.size() - 1);
  std::uniform_int_distribution<int> bit(0, 7);
  int refused = 0;
  for (int i = 0; i < 3000; ++i) {
    std::string damaged = saved;
    damaged[pos(rng)] ^= static_cast<char>(1 << bit(rng));
    auto b = Pool::Create(*spec);
    ASSERT_TRUE(b.ok());
    if (!(*b)->RestoreState(damaged).ok()) ++refused;
  }
  // Lengths and indices are checked, so some flips are caught; a flip inside a weight is
  // not detectable here (the checkpoint file's CRC catches those).
  EXPECT_GT(refused, 0);
}

// Found by fuzzing: a frame without an action in a pool whose questions learn action
// values used to index by action -1 (out of bounds). Now that transition is skipped and
// counted, the trace is cut, and answers stay finite.
TEST(ActionValues, FramesWithoutAnActionAreSkippedNotIndexed) {
  auto spec = ReadPoolSpecFile(Repo("deploy/examples/recipes/robot-charging.json"));
  ASSERT_TRUE(spec.ok());
  v1::QuestionSpec* control = spec->add_questions();
  control->set_name("best_return");
  control->mutable_cumulant()->set_constant(1.0);
  control->set_gamma(0.9);
  control->set_control(true);
  auto pool = Pool::Create(*spec);
  ASSERT_TRUE(pool.ok()) << pool.status();
  Frames f = ReadFrames(**pool, Repo("deploy/examples/robot-fleet.csv"));
  for (size_t i = 0; i < 200; ++i) {
    if (i % 3 == 0) {
      f.frames[i].clear_action();
      f.frames[i].clear_behavior_prob();
    }
  }
  ApplyRange(**pool, f, 0, 200, "r1");
  v1::StreamPredictions out;
  ASSERT_TRUE((*pool)->GetPredictions("r1", &out).ok());
  for (const v1::Prediction& p : out.predictions()) {
    EXPECT_TRUE(std::isfinite(p.value())) << p.question();
    if (p.question() == "best_return") {
      EXPECT_GT(p.progress().skipped_missing(), 0u);
    }
  }
}

// A checkpoint in pool-state version 5 (one verifier per question, before verifier
// groups), tests/data/pool_state_v5.bin, written by the version-5 build (commit 6988c2f)
// after frames 1 to 1,500 of tests/legacy_state_frames.h on two streams. It loads with
// every question's verified error as that build reported it (printed by the small writer
// compiled against that commit's core library: `kReported` below, rmse to six digits),
// and after 1,500 more frames it answers and verifies as a pool that saw every frame.
// (Version 5 windowed each question's last 1,000 verified predictions; version 6 the
// group's last 1,000 verification steps, fewer for a question whose cumulant went
// missing. A loaded window keeps its entries until newer steps push them out.)
TEST(PoolState, LoadsAVersion5CheckpointWithOneVerifierPerQuestion) {
  auto spec = ReadPoolSpecFile(std::string(BW_TEST_DATA_DIR) + "/legacy_state_pool.json");
  ASSERT_TRUE(spec.ok()) << spec.status();
  auto state = ReadFileToString(std::string(BW_TEST_DATA_DIR) + "/pool_state_v5.bin");
  ASSERT_TRUE(state.ok()) << state.status();
  auto loaded = Pool::Create(*spec);
  auto replayed = Pool::Create(*spec);
  ASSERT_TRUE(loaded.ok() && replayed.ok());
  ASSERT_TRUE((*loaded)->RestoreState(*state).ok());
  const std::vector<std::string> streams = {"north", "south"};
  auto apply = [&](Pool& pool, uint64_t from, uint64_t to) {
    for (uint64_t t = from; t <= to; ++t) {
      for (int s = 0; s < 2; ++s) {
        const std::vector<double> v = testing::LegacyStateFrame(t, s);
        FrameInput f;
        f.seq = t;
        f.values = v;
        ASSERT_TRUE(pool.Apply(streams[s], f).ok());
      }
    }
  };
  apply(**replayed, 1, 1500);
  // The file came from a Release build (-O3, FMA contraction); a build with other flags
  // (the sanitizer stage's -O1) rounds differently as it replays, so answers and errors
  // agree to 1e-5 rather than bit for bit. Counts agree exactly.
  constexpr double kClose = 1e-5;
  const auto Scale = [](const v1::StreamPredictions& p, int q) {
    return std::max(1.0, std::fabs(p.predictions(q).value()));
  };
  // What the version-5 build printed for north (count, unverifiable, window, rmse to six
  // digits), in question order.
  struct Reported {
    uint64_t count, unverifiable, window;
    double rmse;
  };
  const Reported kReported[] = {
      {464, 990, 464, 30.5591}, {464, 990, 464, 4.66727}, {1273, 0, 1000, 6.7133}};
  for (int q = 0; q < 3; ++q) {
    v1::StreamPredictions a, b;
    ASSERT_TRUE((*loaded)->GetPredictions("north", &a).ok());
    ASSERT_TRUE((*replayed)->GetPredictions("north", &b).ok());
    const v1::VerifiedError& va = a.predictions(q).verified();
    EXPECT_NEAR(a.predictions(q).value(), b.predictions(q).value(), kClose * Scale(b, q)) << q;
    EXPECT_EQ(va.count(), kReported[q].count) << q;
    EXPECT_EQ(va.count(), b.predictions(q).verified().count()) << q;
    EXPECT_EQ(va.unverifiable(), kReported[q].unverifiable) << q;
    EXPECT_EQ(va.window(), kReported[q].window) << q;
    EXPECT_NEAR(va.rmse(), kReported[q].rmse, 1e-5 * kReported[q].rmse) << q;
  }
  auto expect_alike = [&](const char* when) {
    for (int s = 0; s < 2; ++s) {
      v1::StreamPredictions a, b;
      ASSERT_TRUE((*loaded)->GetPredictions(streams[s], &a).ok());
      ASSERT_TRUE((*replayed)->GetPredictions(streams[s], &b).ok());
      for (int q = 0; q < 3; ++q) {
        const v1::VerifiedError& va = a.predictions(q).verified();
        const v1::VerifiedError& vb = b.predictions(q).verified();
        const std::string where = absl::StrCat(when, " ", streams[s], " question ", q);
        EXPECT_NEAR(a.predictions(q).value(), b.predictions(q).value(), kClose * Scale(b, q))
            << where;
        EXPECT_EQ(va.count(), vb.count()) << where;
        EXPECT_EQ(va.unverifiable(), vb.unverifiable()) << where;
        EXPECT_EQ(va.window(), vb.window()) << where;
        EXPECT_NEAR(va.rmse(), vb.rmse(), kClose * vb.rmse()) << where;
        EXPECT_NEAR(va.bias(), vb.bias(), kClose * std::max(1.0, std::fabs(vb.bias()))) << where;
      }
    }
  };
  apply(**loaded, 1501, 3000);
  apply(**replayed, 1501, 3000);
  expect_alike("continued");
}

}  // namespace
}  // namespace bellwether
