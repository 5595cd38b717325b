#include "core/pool.h"

#include <cmath>
#include <limits>
#include <random>
#include <vector>

#include "absl/time/civil_time.h"
#include "absl/time/time.h"
#include "core/io/spec_json.h"
#include "gmock/gmock.h"
#include "gtest/gtest.h"
#include "tests/chain_spec.h"

namespace bellwether {
namespace {

using ::testing::HasSubstr;

v1::PoolSpec OneHotSpec(int states, double gamma, double lambda, double step) {
  return testing::OneHotChainSpec(states, gamma, lambda, step);
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
  v1::StreamPredictions p;
  ASSERT_TRUE((*a)->GetPredictions("s", &p).ok());
  EXPECT_EQ(p.predictions(0).progress().skipped_missing(), 1u);
  EXPECT_EQ(p.predictions(0).progress().updates(), 1u);
  // A missing state signal leaves its features inactive and is noted.
  ASSERT_TRUE(ApplyValues(**a, "s", 4, {nan, 0}).ok());
  ASSERT_TRUE((*a)->GetPredictions("s", &p).ok());
  EXPECT_EQ(p.predictions(0).progress().feature_gap_frames(), 1u);
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

TEST(Pool, CumulantKindsFeedTheTdError) {
  // gamma 0, lambda 0, one-hot state, FIXED step 1: after one transition the weight of the
  // previous state equals the cumulant exactly (w += 1 * (c - 0)), so each question's
  // answer after returning to state 0 is its cumulant of the first transition.
  v1::PoolSpec spec = OneHotSpec(2, 0.0, 0.0, 1.0);
  spec.set_time_zone("Europe/Berlin");
  auto add = [&](const char* name) {
    v1::QuestionSpec* q = spec.add_questions();
    *q = spec.questions(0);
    q->set_name(name);
    return q;
  };
  v1::Condition* ind = add("indicator")->mutable_cumulant()->mutable_indicator();
  ind->set_signal("reward");
  ind->set_op(">=");
  ind->set_threshold(0.5);
  add("constant")->mutable_cumulant()->set_constant(-2.5);
  add("period")->mutable_cumulant()->set_frame_period(true);
  add("composed")->mutable_cumulant()->set_question("constant");
  auto pool = Pool::Create(spec);
  ASSERT_TRUE(pool.ok()) << pool.status();
  std::vector<double> v0 = {0, 0}, v1 = {1, 0.75};
  FrameInput f;
  f.seq = 1;
  f.values = v0;
  f.time_kind = FrameTimeKind::kLocal;
  // 2026-03-29 01:30 local in Berlin; the next frame at 03:30 local is one real hour
  // later (clocks jump from 02:00 to 03:00 that night).
  f.time_micros = absl::ToUnixMicros(
      absl::FromCivil(absl::CivilSecond(2026, 3, 29, 1, 30, 0), absl::UTCTimeZone()));
  ASSERT_TRUE((*pool)->Apply("s", f).ok());
  f.seq = 2;
  f.values = v1;
  f.time_micros += int64_t{2} * 3600 * 1000000;
  ASSERT_TRUE((*pool)->Apply("s", f).ok());
  f.seq = 3;
  f.values = v0;
  f.time_kind = FrameTimeKind::kNone;
  ASSERT_TRUE((*pool)->Apply("s", f).ok());
  auto p = (*pool)->predictions("s");
  EXPECT_DOUBLE_EQ(p[0], 0.75);   // signal
  EXPECT_DOUBLE_EQ(p[1], 1.0);    // indicator 0.75 >= 0.5
  EXPECT_DOUBLE_EQ(p[2], -2.5);   // constant
  EXPECT_DOUBLE_EQ(p[3], 3600.0); // one real hour across the daylight-saving jump
  // composed: at frame 2, the constant question's answer at state 1 was 0 (untrained).
  EXPECT_DOUBLE_EQ(p[4], 0.0);
}

TEST(Pool, TerminationEndsTheReturnAndCutsTheTrace) {
  // Expected steps until `reward >= 1` with cumulant 1, gamma 1: on the chain
  // 0 -> 1 -> (event) the answer at state 0 converges to 2 and at state 1 to 1.
  v1::PoolSpec spec = OneHotSpec(3, 1.0, 0.9, 0.5);
  spec.mutable_questions(0)->mutable_cumulant()->set_constant(1.0);
  v1::Condition* t = spec.mutable_questions(0)->add_terminate_when();
  t->set_signal("reward");
  t->set_op(">=");
  t->set_threshold(1.0);
  auto pool = Pool::Create(spec);
  ASSERT_TRUE(pool.ok()) << pool.status();
  uint64_t seq = 0;
  for (int episode = 0; episode < 200; ++episode) {
    ASSERT_TRUE(ApplyValues(**pool, "s", ++seq, {0, 0}).ok());
    ASSERT_TRUE(ApplyValues(**pool, "s", ++seq, {1, 0}).ok());
    ASSERT_TRUE(ApplyValues(**pool, "s", ++seq, {2, 1}).ok());  // the event
  }
  ASSERT_TRUE(ApplyValues(**pool, "s", ++seq, {0, 0}).ok());
  EXPECT_NEAR((*pool)->predictions("s")[0], 2.0, 1e-3);
  ASSERT_TRUE(ApplyValues(**pool, "s", ++seq, {1, 0}).ok());
  EXPECT_NEAR((*pool)->predictions("s")[0], 1.0, 1e-3);
  // Verified error: each held prediction was realized at the event, not truncated.
  v1::StreamPredictions out;
  ASSERT_TRUE((*pool)->GetPredictions("s", &out).ok());
  EXPECT_GT(out.predictions(0).verified().count(), 500u);
}

TEST(Pool, RejectsAnUndeclaredActionWithoutChangingState) {
  v1::PoolSpec spec = OneHotSpec(2, 0.5, 0.5, 0.5);
  spec.add_actions("left");
  spec.add_actions("right");
  auto pool = Pool::Create(spec);
  ASSERT_TRUE(pool.ok());
  FrameInput f;
  std::vector<double> v = {0, 0};
  f.seq = 1;
  f.values = v;
  f.action = 2;
  absl::Status s = (*pool)->Apply("s", f);
  EXPECT_THAT(s.message(), HasSubstr("frame seq 1: action: 2 is not an action of pool chain"));
  EXPECT_FALSE((*pool)->has_stream("s"));
}

TEST(Pool, ChangingTheSpecKeepsUnchangedQuestionsLearnedState) {
  v1::PoolSpec spec = OneHotSpec(3, 0.9, 0.8, 0.3);
  auto old_pool = Pool::Create(spec);
  ASSERT_TRUE(old_pool.ok());
  for (uint64_t t = 1; t <= 150; ++t) {
    ASSERT_TRUE(ApplyValues(**old_pool, "s", t, {static_cast<double>(t % 3), t % 3 == 2 ? 1.0 : 0.0})
                    .ok());
  }
  const double before = (*old_pool)->predictions("s")[0];
  ASSERT_NE(before, 0.0);
  // Add a question in front (so indices shift) and change nothing else.
  v1::PoolSpec next = spec;
  v1::QuestionSpec added = spec.questions(0);
  added.set_name("added");
  added.set_gamma(0.5);
  next.clear_questions();
  *next.add_questions() = added;
  *next.add_questions() = spec.questions(0);
  auto new_pool = Pool::CreateFrom(**old_pool, next);
  ASSERT_TRUE(new_pool.ok()) << new_pool.status();
  EXPECT_EQ((*new_pool)->last_seq("s"), 150u);
  EXPECT_EQ((*new_pool)->predictions("s")[1], before) << "kept question keeps its answer";
  EXPECT_EQ((*new_pool)->predictions("s")[0], 0.0) << "added question starts fresh";
  const BlockParams* kept_old = (*old_pool)->block_params("s", 0);
  const BlockParams* kept_new =
      (*new_pool)->block_params("s", (*new_pool)->spec().questions[1].block);
  for (uint32_t r = 0; r < kept_old->rows(); ++r) {
    EXPECT_EQ(kept_new->row(r)[(*new_pool)->spec().questions[1].index_in_block],
              kept_old->row(r)[0]);
  }
  // The kept question keeps its verified error (its held predictions and window move to
  // the new pool's verifier group); the added one has verified nothing.
  v1::StreamPredictions old_answers, new_answers;
  ASSERT_TRUE((*old_pool)->GetPredictions("s", &old_answers).ok());
  ASSERT_TRUE((*new_pool)->GetPredictions("s", &new_answers).ok());
  const v1::VerifiedError was = old_answers.predictions(0).verified();
  const v1::VerifiedError is = new_answers.predictions(1).verified();
  ASSERT_GT(was.count(), 0u);
  EXPECT_EQ(is.count(), was.count());
  EXPECT_EQ(is.window(), was.window());
  EXPECT_NEAR(is.rmse(), was.rmse(), 1e-12 * was.rmse());
  EXPECT_EQ(new_answers.predictions(0).verified().count(), 0u);
  for (uint64_t t = 151; t <= 300; ++t) {
    const std::vector<double> row = {static_cast<double>(t % 3), t % 3 == 2 ? 1.0 : 0.0};
    ASSERT_TRUE(ApplyValues(**old_pool, "s", t, row).ok());
    ASSERT_TRUE(ApplyValues(**new_pool, "s", t, row).ok());
  }
  ASSERT_TRUE((*old_pool)->GetPredictions("s", &old_answers).ok());
  ASSERT_TRUE((*new_pool)->GetPredictions("s", &new_answers).ok());
  // Predictions verified since the change (a count, not a time): verification went on.
  const uint64_t verified_since = new_answers.predictions(1).verified().count() - was.count();
  EXPECT_GT(verified_since, 100u);
  EXPECT_EQ(new_answers.predictions(1).verified().count(),
            old_answers.predictions(0).verified().count());
  // (The new pool's traces restart at the change, so its answers differ slightly.)
  EXPECT_NEAR(new_answers.predictions(1).verified().rmse(),
              old_answers.predictions(0).verified().rmse(),
              1e-3 * old_answers.predictions(0).verified().rmse());
  const double before_change = (*old_pool)->predictions("s")[0];
  // A changed question (different lambda) starts fresh.
  v1::PoolSpec changed = spec;
  changed.mutable_questions(0)->set_lambda(0.1);
  auto changed_pool = Pool::CreateFrom(**old_pool, changed);
  ASSERT_TRUE(changed_pool.ok());
  EXPECT_EQ((*changed_pool)->predictions("s")[0], 0.0);
  // A bad spec is refused and the old pool is untouched.
  v1::PoolSpec bad = spec;
  bad.mutable_questions(0)->set_gamma(3);
  EXPECT_FALSE(Pool::CreateFrom(**old_pool, bad).ok());
  EXPECT_EQ((*old_pool)->predictions("s")[0], before_change);
}

TEST(Pool, ControlQuestionLearnsTheGreedyActionAndDrivesATarget) {
  // Two states; from either state action "go" reaches state 1 whose frame has reward 1,
  // action "stay" returns to state 0 with reward 0. Q-learning's greedy action is "go".
  v1::PoolSpec spec = OneHotSpec(2, 0.5, 0.0, 0.5);
  spec.add_actions("stay");
  spec.add_actions("go");
  spec.mutable_questions(0)->set_control(true);
  spec.mutable_questions(0)->clear_step_rule();
  v1::QuestionSpec* follower = spec.add_questions();
  follower->set_name("follower");
  follower->mutable_cumulant()->set_signal("reward");
  follower->set_gamma(0.5);
  follower->mutable_policy()->set_greedy("value");
  follower->set_learner(v1::TREE_BACKUP);
  auto pool = Pool::Create(spec);
  ASSERT_TRUE(pool.ok()) << pool.status();
  std::mt19937 rng(5);
  std::bernoulli_distribution coin(0.5);
  int state = 0;
  for (uint64_t t = 1; t <= 4000; ++t) {
    const bool go = coin(rng);
    FrameInput f;
    std::vector<double> v = {static_cast<double>(state), state == 1 ? 1.0 : 0.0};
    f.seq = t;
    f.values = v;
    f.action = go ? 1u : 0u;
    f.behavior_prob = 0.5;
    ASSERT_TRUE((*pool)->Apply("s", f).ok());
    state = go ? 1 : 0;
  }
  v1::StreamPredictions out;
  ASSERT_TRUE((*pool)->GetPredictions("s", &out).ok());
  EXPECT_EQ(out.predictions(0).greedy_action(), "go");
  // Under the greedy policy every step earns 1: q*(s, go) = 1 / (1 - 0.5) = 2.
  EXPECT_NEAR(out.predictions(0).value(), 2.0, 0.1);
  EXPECT_NEAR(out.predictions(1).value(), 2.0, 0.1);
}

TEST(Pool, EstimatesBehaviorProbabilitiesWhenFramesLackThem) {
  v1::PoolSpec spec = OneHotSpec(2, 0.0, 0.0, 0.5);
  spec.add_actions("a");
  spec.add_actions("b");
  spec.mutable_behavior()->set_estimate(true);
  spec.mutable_questions(0)->mutable_policy()->set_action("a");
  auto pool = Pool::Create(spec);
  ASSERT_TRUE(pool.ok()) << pool.status();
  // Behavior takes "a" 3 times in 4; reward 1 only after "a". The on-target value of
  // state 0 under "always a" is 1; rho = 1 / mu(a) with mu estimated near 0.75.
  std::mt19937 rng(9);
  std::bernoulli_distribution take_a(0.75);
  bool last_a = false;
  for (uint64_t t = 1; t <= 6000; ++t) {
    const bool a = take_a(rng);
    FrameInput f;
    std::vector<double> v = {0, last_a ? 1.0 : 0.0};
    f.seq = t;
    f.values = v;
    f.action = a ? 0u : 1u;
    ASSERT_TRUE((*pool)->Apply("s", f).ok());
    last_a = a;
  }
  v1::StreamPredictions out;
  ASSERT_TRUE((*pool)->GetPredictions("s", &out).ok());
  EXPECT_TRUE(out.predictions(0).progress().behavior_estimated());
  EXPECT_NEAR(out.predictions(0).value(), 1.0, 0.1);
}

// The daemon's history samples progress through SampleProgress, without a message: the
// same figures GetPredictions reports.
TEST(Pool, SampleProgressEqualsWhatGetPredictionsReports) {
  v1::PoolSpec spec = OneHotSpec(3, 0.9, 0.8, 0.3);
  v1::QuestionSpec second = spec.questions(0);
  second.set_name("second");
  second.set_gamma(0.5);
  *spec.add_questions() = second;
  auto pool = Pool::Create(spec);
  ASSERT_TRUE(pool.ok()) << pool.status();
  std::vector<Pool::ProgressSample> samples(2);
  EXPECT_EQ((*pool)->SampleProgress("s", absl::MakeSpan(samples)).code(),
            absl::StatusCode::kNotFound);
  for (uint64_t t = 1; t <= 300; ++t) {
    ASSERT_TRUE(
        ApplyValues(**pool, "s", t, {static_cast<double>(t % 3), t % 3 == 2 ? 1.0 : 0.0}).ok());
  }
  v1::StreamPredictions p;
  ASSERT_TRUE((*pool)->GetPredictions("s", &p).ok());
  ASSERT_TRUE((*pool)->SampleProgress("s", absl::MakeSpan(samples)).ok());
  for (int q = 0; q < 2; ++q) {
    const v1::Prediction& want = p.predictions(q);
    ASSERT_GT(want.verified().count(), 0u);
    EXPECT_EQ(samples[q].verified_rmse, want.verified().rmse()) << q;
    EXPECT_EQ(samples[q].td_error_rms, want.progress().td_error_rms()) << q;
    EXPECT_EQ(samples[q].weight_change, want.progress().weight_change()) << q;
    EXPECT_EQ(ProgressLabelName(samples[q].label), want.progress().label()) << q;
  }
}

TEST(Pool, UnknownStreamIsNotFound) {
  auto a = Pool::Create(OneHotSpec(2, 0.5, 0.0, 0.5));
  ASSERT_TRUE(a.ok());
  v1::StreamPredictions p;
  EXPECT_EQ((*a)->GetPredictions("nobody", &p).code(), absl::StatusCode::kNotFound);
}

}  // namespace
}  // namespace bellwether
