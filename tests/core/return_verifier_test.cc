#include "core/progress/return_verifier.h"

#include <cmath>
#include <random>
#include <vector>

#include "gtest/gtest.h"

namespace bellwether {
namespace {

TEST(ReturnVerifier, HorizonIsWhereTheDiscountFallsBelowTheFloor) {
  // gamma^k < 1e-3  <=>  k > ln(1e-3) / ln(gamma): 0.9583 -> 163 steps.
  EXPECT_EQ(ReturnVerifier(0.9583).horizon(),
            static_cast<size_t>(std::ceil(std::log(1e-3) / std::log(0.9583))));
  EXPECT_EQ(ReturnVerifier(0.0).horizon(), 1u);
  EXPECT_EQ(ReturnVerifier(1.0, 50).horizon(), 50u);
}

TEST(ReturnVerifier, MatchesAnIndependentComputationOfTruncatedReturns) {
  const double gamma = 0.8;
  ReturnVerifier v(gamma, 10000, 100000);
  const size_t h = v.horizon();
  std::mt19937 rng(3);
  std::normal_distribution<double> noise(5.0, 2.0);
  const int n = 400;
  std::vector<double> c(n + 1), pred(n + 1);
  for (int t = 0; t <= n; ++t) {
    c[t] = noise(rng);
    pred[t] = noise(rng) * 3;
  }
  // Prediction at t, then cumulant c[t+1] arrives, ...
  v.Hold(pred[0]);
  for (int t = 1; t <= n; ++t) {
    v.Observe(c[t], gamma);
    v.Hold(pred[t]);
  }
  // Independent computation: G_t = sum_{k<h} gamma^k c[t+k+1] for every t with t+h <= n.
  double sq = 0, sum = 0;
  int count = 0;
  for (int t = 0; t + static_cast<int>(h) <= n; ++t) {
    double g = 0, d = 1;
    for (size_t k = 0; k < h; ++k) {
      g += d * c[t + k + 1];
      d *= gamma;
    }
    sq += (pred[t] - g) * (pred[t] - g);
    sum += pred[t] - g;
    ++count;
  }
  const VerifiedErrorStats s = v.stats();
  EXPECT_EQ(s.count, static_cast<uint64_t>(count));
  EXPECT_EQ(s.truncated, 0u);
  EXPECT_NEAR(s.rmse, std::sqrt(sq / count), 1e-9);
  EXPECT_NEAR(s.bias, sum / count, 1e-9);
}

TEST(ReturnVerifier, RestartAndMissingCumulantMakeHeldPredictionsUnverifiable) {
  ReturnVerifier v(0.5);
  v.Hold(1.0);
  v.Observe(1.0, 0.5);
  v.Hold(2.0);
  v.Interrupt();
  EXPECT_EQ(v.stats().unverifiable, 2u);
  EXPECT_EQ(v.stats().count, 0u);
  v.Hold(1.0);
  v.Observe(std::nan(""), 0.5);
  EXPECT_EQ(v.stats().unverifiable, 3u);
}

TEST(ReturnVerifier, WindowKeepsOnlyRecentErrors) {
  ReturnVerifier v(0.0, 10, 4);  // gamma 0: the return is the next cumulant
  for (int t = 0; t < 10; ++t) {
    v.Hold(t < 6 ? 100.0 : 1.0);
    v.Observe(1.0, 0.5);
  }
  const VerifiedErrorStats s = v.stats();
  EXPECT_EQ(s.count, 10u);
  EXPECT_EQ(s.window, 4u);
  EXPECT_DOUBLE_EQ(s.rmse, 0.0);
}

}  // namespace
}  // namespace bellwether
