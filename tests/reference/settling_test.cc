// Reference checks of the SETTLING step rule and of reward centering (see
// core/learners/block_learner.h), driven in-process through bellwether::Pool.
//
// Sources:
//   [S&B 2018] R. S. Sutton and A. G. Barto, "Reinforcement Learning: An Introduction",
//       2nd ed., 2018: Exercise 2.7, the unbiased constant-step-size trick
//       beta_n = alpha / o_n, o_n = o_{n-1} + alpha (1 - o_{n-1}), o_0 = 0, which gives an
//       exponential recency-weighted average with no initial bias (the first step is 1).
//   [Naik 2024] A. Naik, Y. Wan, M. Tomar and R. S. Sutton, "Reward Centering", RLC 2024:
//       learning the discounted value of r - r_bar and adding r_bar / (1 - gamma) gives the
//       same values (tabular), and removes the offset the learner would otherwise have to
//       climb from zero when rewards share a large common mean.
#include <cmath>
#include <cstdio>
#include <random>
#include <vector>

#include "Eigen/Dense"
#include "bellwether/v1/pool.pb.h"
#include "core/frame_input.h"
#include "core/learners/block_learner.h"
#include "core/pool.h"
#include "gtest/gtest.h"
#include "tests/chain_spec.h"

namespace bellwether {
namespace {

using ::Eigen::MatrixXd;
using ::Eigen::VectorXd;

// Frame t carries state s_t and the reward of the transition into it.
absl::Status ApplyChainFrame(Pool& pool, uint64_t seq, int state, double reward) {
  const double values[2] = {static_cast<double>(state) + 0.5, reward};
  FrameInput f;
  f.seq = seq;
  f.values = values;
  return pool.Apply("chain", f);
}

// One always-active feature, gamma = 0, lambda = 0: the answer after frame t is the
// running estimate of the next reward, updated exactly like the bandit estimate of
// [S&B 2018] Exercise 2.7.
TEST(SettlingStepRule, SingleFeatureIsTheUnbiasedConstantStepAverage) {
  constexpr double kAlpha = 0.05;
  v1::PoolSpec spec = testing::OneHotChainSpec(1, 0.0, 0.0, kAlpha);
  spec.mutable_signals(1)->set_min(-100);
  spec.mutable_signals(1)->set_max(100);
  spec.mutable_questions(0)->set_step_rule(v1::SETTLING);
  auto pool = Pool::Create(spec);
  ASSERT_TRUE(pool.ok()) << pool.status();

  std::mt19937 rng(7);
  std::normal_distribution<double> reward(40.0, 10.0);
  double q = 0, o = 0, max_diff = 0;
  ASSERT_TRUE(ApplyChainFrame(**pool, 1, 0, 0.0).ok());
  for (int n = 1; n <= 5000; ++n) {
    const double r = reward(rng);
    ASSERT_TRUE(ApplyChainFrame(**pool, static_cast<uint64_t>(n) + 1, 0, r).ok());
    o += kAlpha * (1.0 - o);
    q += kAlpha / o * (r - q);
    const double answer = (*pool)->predictions("chain")[0];
    if (n == 1) {
      // No initial bias: the first estimate is the first reward (the weight started at 0).
      EXPECT_NEAR(answer, r, 1e-4 * std::fabs(r));
    }
    max_diff = std::max(max_diff, std::fabs(answer - q) / std::fabs(q));
  }
  const double final_step =
      static_cast<double>((*pool)->block_params("chain", 0)->step_size(0, 0));
  std::printf("settling: max relative difference to [S&B 2018] Ex. 2.7 %.2g; final step %.4f\n",
              max_diff, final_step);
  EXPECT_LT(max_diff, 1e-4);
  // o_n -> 1, so the step settles at alpha.
  EXPECT_NEAR(final_step, kAlpha, 1e-3 * kAlpha);
}

// A random 6-state chain with rewards around a common mean of 50, gamma = 0.9, tabular
// (one-hot) TD(0) with SETTLING steps: a centered and an uncentered question on the same
// cumulant. Both converge to the closed form (I - gamma P)^-1 r (Eigen); the centered one
// starts at the right scale, so its early error is far smaller [Naik 2024].
TEST(RewardCentering, TabularValuesMatchTheClosedFormAndStartAtScale) {
  constexpr int kStates = 6;
  constexpr double kGamma = 0.9, kStep = 0.02, kMean = 50.0;
  constexpr int kSteps = 400'000, kAverageFrom = 200'000, kEarly = 300;
  std::mt19937 rng(5);
  std::uniform_real_distribution<double> u(0.0, 1.0);
  MatrixXd p(kStates, kStates), reward(kStates, kStates);
  for (int i = 0; i < kStates; ++i) {
    for (int j = 0; j < kStates; ++j) {
      p(i, j) = u(rng) + 0.05;
      reward(i, j) = kMean + 20.0 * (u(rng) - 0.5);
    }
    p.row(i) /= p.row(i).sum();
  }
  const VectorXd r = p.cwiseProduct(reward).rowwise().sum();
  const VectorXd v_true =
      (MatrixXd::Identity(kStates, kStates) - kGamma * p).fullPivLu().solve(r);

  v1::PoolSpec spec = testing::OneHotChainSpec(kStates, kGamma, 0.0, kStep);
  spec.mutable_signals(1)->set_min(0);
  spec.mutable_signals(1)->set_max(100);
  spec.mutable_questions(0)->set_step_rule(v1::SETTLING);
  v1::QuestionSpec* centered = spec.add_questions();
  *centered = spec.questions(0);
  centered->set_name("value_centered");
  centered->set_centered(true);
  auto pool = Pool::Create(spec);
  ASSERT_TRUE(pool.ok()) << pool.status();
  ASSERT_EQ((*pool)->spec().blocks.size(), 2u);

  std::vector<double> sum_raw(kStates, 0.0), sum_centered(kStates, 0.0);
  std::vector<int64_t> visits(kStates, 0);
  double early_raw = 0, early_centered = 0;
  int s = 0;
  double into = 0;
  for (int t = 0; t < kSteps; ++t) {
    ASSERT_TRUE(ApplyChainFrame(**pool, static_cast<uint64_t>(t) + 1, s, into).ok());
    const absl::Span<const double> answers = (*pool)->predictions("chain");
    if (t < kEarly) {
      early_raw += std::fabs(answers[0] - v_true(s));
      early_centered += std::fabs(answers[1] - v_true(s));
    }
    if (t >= kAverageFrom) {
      sum_raw[static_cast<size_t>(s)] += answers[0];
      sum_centered[static_cast<size_t>(s)] += answers[1];
      ++visits[static_cast<size_t>(s)];
    }
    double pick = u(rng);
    int next = 0;
    while (next < kStates - 1 && pick >= p(s, next)) pick -= p(s, next++);
    into = reward(s, next);
    s = next;
  }
  double worst_raw = 0, worst_centered = 0;
  for (int i = 0; i < kStates; ++i) {
    const double n = static_cast<double>(visits[static_cast<size_t>(i)]);
    worst_raw = std::max(worst_raw, std::fabs(sum_raw[static_cast<size_t>(i)] / n - v_true(i)));
    worst_centered =
        std::max(worst_centered, std::fabs(sum_centered[static_cast<size_t>(i)] / n - v_true(i)));
  }
  const double scale = v_true.cwiseAbs().maxCoeff();
  std::printf(
      "centering: true values ~%.0f; worst averaged error raw %.3f, centered %.3f; mean "
      "|error| over the first %d frames raw %.1f, centered %.1f\n",
      scale, worst_raw, worst_centered, kEarly, early_raw / kEarly, early_centered / kEarly);
  EXPECT_LT(worst_raw, 0.01 * scale);
  EXPECT_LT(worst_centered, 0.01 * scale);
  EXPECT_LT(early_centered, 0.25 * early_raw);
}

TEST(RewardCentering, RefusedWhereTheOffsetWouldBeWrong) {
  v1::PoolSpec spec = testing::OneHotChainSpec(4, 1.0, 0.0, 0.1);
  spec.mutable_questions(0)->set_centered(true);
  absl::StatusOr<std::unique_ptr<Pool>> pool = Pool::Create(spec);
  ASSERT_FALSE(pool.ok());
  EXPECT_EQ(pool.status().code(), absl::StatusCode::kInvalidArgument);
  EXPECT_NE(pool.status().message().find("questions[0] (value).centered"), std::string::npos)
      << pool.status();
}

}  // namespace
}  // namespace bellwether
