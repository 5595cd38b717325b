#include "core/pool.h"

#include <cmath>
#include <limits>
#include <vector>

#include "core/io/spec_json.h"
#include "gmock/gmock.h"
#include "gtest/gtest.h"

namespace bellwether {
namespace {

using ::testing::HasSubstr;

// A single-signal pool with one-hot features over integer states 0..(n-1).
v1::PoolSpec OneHotSpec(int states, double gamma, double lambda, double step) {
  v1::PoolSpec spec;
  spec.set_name("chain");
  v1::SignalSpec* s = spec.add_signals();
  s->set_name("state");
  s->set_min(0);
  s->set_max(states);
  v1::SignalSpec* r = spec.add_signals();
  r->set_name("reward");
  r->set_min(-1);
  r->set_max(1);
  v1::TileCoding* t = spec.add_features()->mutable_tiles();
  t->add_signals("state");
  t->set_tilings(1);
  t->set_tiles_per_dim(states);
  v1::QuestionSpec* q = spec.add_questions();
  q->set_name("value");
  q->mutable_cumulant()->set_signal("reward");
  q->set_gamma(gamma);
  q->set_lambda(lambda);
  q->set_step_size(step);
  q->set_step_rule(v1::FIXED);
  return spec;
}

absl::Status ApplyValues(Pool& pool, const std::string& stream, uint64_t seq,
                         std::vector<double> values, bool restart = false) {
  FrameInput f;
  f.seq = seq;
  f.values = values;
  f.restart = restart;
  return pool.Apply(stream, f);
}

// Hand-computed TD(lambda) steps on a two-state chain (Sutton & Barto 2nd ed., Section
// 12.2, semi-gradient TD(lambda) with accumulating traces), one active feature per state.
TEST(Pool, TdLambdaMatchesHandComputedSteps) {
  auto pool = Pool::Create(OneHotSpec(2, 0.5, 0.5, 0.5));
  ASSERT_TRUE(pool.ok()) << pool.status();
  // Frame 1: state 0. Nothing to learn, predicts w0 = 0.
  ASSERT_TRUE(ApplyValues(**pool, "s", 1, {0, 0}).ok());
  // Frame 2: state 1, reward 1. delta = 1 + 0.5*0 - 0 = 1; e = [1, 0]; w0 = 0.5.
  ASSERT_TRUE(ApplyValues(**pool, "s", 2, {1, 1}).ok());
  EXPECT_DOUBLE_EQ((*pool)->predictions("s")[0], 0.0);  // v(state 1) = w1 = 0
  // Frame 3: state 0, reward 0. delta = 0 + 0.5*w0 - w1 = 0.25;
  // e = 0.25*[1,0] + [0,1] = [0.25, 1]; w0 = 0.5 + 0.5*0.25*0.25 = 0.53125, w1 = 0.125.
  ASSERT_TRUE(ApplyValues(**pool, "s", 3, {0, 0}).ok());
  EXPECT_DOUBLE_EQ((*pool)->predictions("s")[0], 0.53125);
  // Frame 4: state 1 with restart: no learning across it, traces cleared.
  ASSERT_TRUE(ApplyValues(**pool, "s", 4, {1, 1}, /*restart=*/true).ok());
  EXPECT_DOUBLE_EQ((*pool)->predictions("s")[0], 0.125);
}

TEST(Pool, RejectedFramesLeaveLearnedStateUnchanged) {
  auto a = Pool::Create(OneHotSpec(3, 0.9, 0.8, 0.2));
  auto b = Pool::Create(OneHotSpec(3, 0.9, 0.8, 0.2));
  ASSERT_TRUE(a.ok() && b.ok());
  uint64_t seq = 0;
  for (int t = 0; t < 50; ++t) {
    ++seq;
    const std::vector<double> v = {static_cast<double>(t % 3), (t % 3 == 2) ? 1.0 : 0.0};
    ASSERT_TRUE(ApplyValues(**a, "s", seq, v).ok());
    ASSERT_TRUE(ApplyValues(**b, "s", seq, v).ok());
    if (t == 20) {
      // Bad inputs into `a` only: a seq that does not increase, a wrong value count.
      absl::Status dup = ApplyValues(**a, "s", seq, v);
      EXPECT_THAT(dup.message(), HasSubstr("seq does not increase"));
      absl::Status count = ApplyValues(**a, "s", seq + 1, {1.0});
      EXPECT_THAT(count.message(), HasSubstr("values: has 1 entries"));
    }
  }
  EXPECT_EQ((*a)->predictions("s")[0], (*b)->predictions("s")[0]);
  v1::StreamPredictions pa, pb;
  ASSERT_TRUE((*a)->GetPredictions("s", &pa).ok());
  ASSERT_TRUE((*b)->GetPredictions("s", &pb).ok());
  EXPECT_EQ(pa.SerializeAsString(), pb.SerializeAsString());
}

TEST(Pool, MissingCumulantSkipsTheUpdate) {
  auto a = Pool::Create(OneHotSpec(2, 0.5, 0.0, 0.5));
  ASSERT_TRUE(a.ok());
  const double nan = std::numeric_limits<double>::quiet_NaN();
  ASSERT_TRUE(ApplyValues(**a, "s", 1, {0, 0}).ok());
  ASSERT_TRUE(ApplyValues(**a, "s", 2, {1, nan}).ok());
  ASSERT_TRUE(ApplyValues(**a, "s", 3, {0, 0}).ok());
  // Only the third frame's transition (state 1 -> 0, reward 0, all weights 0) learned.
  EXPECT_EQ((*a)->predictions("s")[0], 0.0);
}

TEST(Pool, PerStreamLearningKeepsStreamsApartAndPooledSharesWeights) {
  v1::PoolSpec spec = OneHotSpec(2, 0.0, 0.0, 0.5);
  auto per_stream = Pool::Create(spec);
  spec.set_learning(v1::PoolSpec::POOLED);
  auto pooled = Pool::Create(spec);
  ASSERT_TRUE(per_stream.ok() && pooled.ok());
  for (Pool* p : {per_stream->get(), pooled->get()}) {
    ASSERT_TRUE(ApplyValues(*p, "a", 1, {0, 0}).ok());
    ASSERT_TRUE(ApplyValues(*p, "a", 2, {0, 1}).ok());  // w0 += 0.5 * 1
    ASSERT_TRUE(ApplyValues(*p, "b", 1, {0, 0}).ok());  // b's first frame: predicts w0
  }
  EXPECT_EQ((*per_stream)->predictions("b")[0], 0.0);
  EXPECT_EQ((*pooled)->predictions("b")[0], 0.5);
  EXPECT_EQ((*pooled)->num_streams(), 2u);
}

TEST(Pool, UnknownStreamIsNotFound) {
  auto a = Pool::Create(OneHotSpec(2, 0.5, 0.0, 0.5));
  ASSERT_TRUE(a.ok());
  v1::StreamPredictions p;
  EXPECT_EQ((*a)->GetPredictions("nobody", &p).code(), absl::StatusCode::kNotFound);
}

}  // namespace
}  // namespace bellwether
