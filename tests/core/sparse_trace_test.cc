// The sparse eligibility trace against the dense accumulating trace it stands for
// (Sutton & Barto, Reinforcement Learning, 2nd ed., 2018, eq. 12.5: e <- gamma lambda e
// + x), with entries below the pruning level dropped after each decay.
#include "core/learners/sparse_trace.h"

#include <cmath>
#include <random>
#include <string>
#include <vector>

#include "core/io/state_codec.h"
#include "gtest/gtest.h"

namespace bellwether {
namespace {

// Random frames of a few active features over a small table, with decays that sometimes
// prune, and a dense float mirror updated the textbook way.
TEST(SparseTrace, MatchesTheDenseAccumulatingTraceWithPruning) {
  constexpr uint32_t kRows = 64;
  SparseTrace trace(kRows, SparseTrace::kDefaultPrune);
  std::vector<float> dense(kRows, 0.0f);
  std::mt19937 rng(11);
  std::uniform_int_distribution<uint32_t> row(0, kRows - 1);
  std::uniform_real_distribution<float> unit(0.0f, 1.0f);
  size_t dropped = 0;
  for (int frame = 0; frame < 3000; ++frame) {
    const float decay = frame % 97 == 0 ? 0.0f : 0.3f + 0.69f * unit(rng);
    trace.DecayAndPrune(decay);
    for (float& v : dense) {
      const float was = v;
      v *= decay;
      if (std::fabs(v) < SparseTrace::kDefaultPrune) v = 0.0f;
      dropped += was != 0.0f && v == 0.0f;
    }
    SparseFeatures x;
    x.Reserve(4);
    for (int k = 0; k < 4; ++k) x.Add(row(rng), unit(rng) < 0.8f ? 1.0f : -0.5f);  // may repeat
    trace.Accumulate(x, 0.9f);
    for (size_t k = 0; k < x.size(); ++k) dense[x.index[k]] += 0.9f * x.value[k];

    // Same entries: every listed row holds the dense value, every other row is 0.
    std::vector<bool> listed(kRows, false);
    ASSERT_EQ(trace.active().size(), trace.values().size());
    for (size_t i = 0; i < trace.active().size(); ++i) {
      const uint32_t r = trace.active()[i];
      ASSERT_FALSE(listed[r]) << "row " << r << " listed twice at frame " << frame;
      listed[r] = true;
      ASSERT_EQ(trace.values()[i], dense[r]) << "row " << r << " frame " << frame;
      ASSERT_EQ(trace.value(r), dense[r]);
    }
    for (uint32_t r = 0; r < kRows; ++r) {
      if (!listed[r]) {
        ASSERT_EQ(dense[r], 0.0f) << "row " << r << " lost at frame " << frame;
      }
    }
  }
  EXPECT_GT(dropped, 1000u) << "the walk never exercised pruning";
}

TEST(SparseTrace, CheckpointRoundTripAndRepeatedRowsRefused) {
  SparseTrace a(16);
  SparseFeatures x;
  x.Reserve(3);
  x.Add(3, 1.0f);
  x.Add(7, 0.5f);
  x.Add(12, 2.0f);
  a.Accumulate(x);
  a.DecayAndPrune(0.5f);
  a.Accumulate(x);
  std::string saved;
  StateWriter w(&saved);
  a.SaveState(w);
  SparseTrace b(16);
  StateReader r(saved);
  ASSERT_TRUE(b.LoadState(r));
  EXPECT_EQ(a.active(), b.active());
  EXPECT_EQ(a.values(), b.values());

  // A payload listing row 7 twice is refused, and leaves the trace empty and usable.
  std::string bad;
  StateWriter bw(&bad);
  bw.PutVector(std::vector<uint32_t>{7, 3, 7});
  bw.PutVector(std::vector<float>{1.0f, 1.0f, 1.0f});
  SparseTrace c(16);
  StateReader br(bad);
  EXPECT_FALSE(c.LoadState(br));
  EXPECT_TRUE(c.active().empty());
  c.Accumulate(x);
  EXPECT_EQ(c.active().size(), 3u);
  EXPECT_EQ(c.value(7), 0.5f);
}

}  // namespace
}  // namespace bellwether
