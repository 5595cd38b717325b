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

namespace bellwether {
namespace {

TEST(ReturnVerifier, NrmseIsRmseOverTheSpreadOfRealizedReturns) {
  ReturnVerifier v(0.0, 10, 100);  // gamma 0: the return is the next cumulant
  // Realized returns alternate 0 and 2 (sd 1); predictions always 1: RMSE 1, NRMSE 1.
  for (int t = 0; t < 50; ++t) {
    v.Hold(1.0);
    v.Observe(t % 2 == 0 ? 0.0 : 2.0, 0.0);
  }
  const VerifiedErrorStats s = v.stats();
  EXPECT_DOUBLE_EQ(s.rmse, 1.0);
  EXPECT_DOUBLE_EQ(s.nrmse, 1.0);
  EXPECT_DOUBLE_EQ(s.effective_sample_size, 50.0);
}

TEST(ReturnVerifier, CalibrationBinsCountPredictedAgainstObserved) {
  ReturnVerifier v(1.0, 100, 100, VerificationMode::kOnPolicy, /*probability=*/true);
  // Predictions of 0.25 realized as 1 one time in four; 0.85 realized three times in four.
  for (int t = 0; t < 40; ++t) {
    v.Hold(0.25);
    v.Observe(t % 4 == 0 ? 1.0 : 0.0, 0.0);  // the event ends each return at once
    v.Hold(0.85);
    v.Observe(t % 4 == 0 ? 0.0 : 1.0, 0.0);
  }
  const VerifiedErrorStats s = v.stats();
  EXPECT_EQ(s.calibration[2].count, 40u);
  EXPECT_DOUBLE_EQ(s.calibration[2].sum_observed / 40.0, 0.25);
  EXPECT_EQ(s.calibration[8].count, 40u);
  EXPECT_DOUBLE_EQ(s.calibration[8].sum_observed / 40.0, 0.75);
  EXPECT_EQ(s.calibration[5].count, 0u);
}

TEST(ReturnVerifier, OnTargetStretchesDropReturnsWhereTheBehaviorDeviated) {
  ReturnVerifier v(0.5, 100, 100, VerificationMode::kOnTargetStretches);
  v.Hold(1.0);
  v.Observe(1.0, 0.5, /*pi=*/1.0);
  v.Hold(1.0);
  v.Observe(1.0, 0.5, /*pi=*/0.0);  // the target would not have taken this action
  EXPECT_EQ(v.stats().unverifiable, 2u);
}

TEST(ReturnVerifier, ImportanceWeightedReturnsUsePerDecisionRatios) {
  // gamma 0.5 with termination after two steps: G = rho_0 (c_1 + 0.5 rho_1 c_2).
  ReturnVerifier v(0.5, 100, 100, VerificationMode::kImportanceWeighted);
  v.Hold(0.0);
  v.Observe(1.0, 0.5, 0.5, /*rho=*/2.0);
  v.Observe(4.0, 0.0, 0.5, /*rho=*/0.5);
  // 2 * (1 + 0.5 * 0.5 * 4) = 4; error -4.
  EXPECT_EQ(v.stats().count, 1u);
  EXPECT_DOUBLE_EQ(v.stats().bias, -4.0);
}

}  // namespace
}  // namespace bellwether

#include "core/io/state_codec.h"

namespace bellwether {
namespace {

// The verifier keeps returns as differences of running sums; this is the definition,
// summed term by term per held prediction (O(held) per step), as the verifier did before.
struct NaiveVerifier {
  struct Held {
    double prediction, realized = 0, discount = 1, weight = 1;
    uint64_t steps = 0;
  };
  std::vector<Held> held;
  std::vector<double> errors, realized;
  size_t horizon;
  void Observe(double c, double continuation, double rho) {
    for (Held& h : held) {
      h.weight *= rho;
      h.realized += h.discount * h.weight * c;
      h.discount *= continuation;
      ++h.steps;
    }
    while (!held.empty()) {
      const Held& h = held.front();
      if (!(h.discount < ReturnVerifier::kDiscountFloor || h.weight == 0.0) &&
          h.steps < horizon) {
        break;
      }
      errors.push_back(h.prediction - h.realized);
      realized.push_back(h.realized);
      held.erase(held.begin());
    }
  }
};

// A long importance-weighted run with varying continuations (terminations included) and
// ratios: thousands of rebases, and every verified return equal to the term-by-term sum.
TEST(ReturnVerifier, RunningSumsMatchTermByTermReturnsOverLongRuns) {
  for (const double gamma : {0.999, 0.9, 0.3}) {
    ReturnVerifier v(gamma, 100000, 1000000, VerificationMode::kImportanceWeighted);
    NaiveVerifier naive{{}, {}, {}, v.horizon()};
    std::vector<double> got_errors, got_realized;
    v.set_sink([&](uint64_t, double p, double g, bool) {
      got_errors.push_back(p - g);
      got_realized.push_back(g);
    });
    std::mt19937 rng(11);
    std::uniform_real_distribution<double> u(0.0, 1.0);
    for (int t = 0; t < 30000; ++t) {
      const double p = 100 * u(rng);
      v.Hold(p, static_cast<uint64_t>(t));
      naive.held.push_back({p});
      const double c = 10 * u(rng) - 2;
      const double continuation = u(rng) < 0.0005 ? 0.0 : gamma;
      const double rho = u(rng) < 0.001 ? 0.0 : 0.5 + u(rng);  // a zero now and then
      v.Observe(c, continuation, 1.0, rho);
      naive.Observe(c, continuation, rho);
    }
    ASSERT_EQ(got_errors.size(), naive.errors.size()) << gamma;
    ASSERT_GT(got_errors.size(), 20000u);
    double worst = 0;
    for (size_t i = 0; i < got_realized.size(); ++i) {
      const double scale = std::max(1.0, std::fabs(naive.realized[i]));
      worst = std::max(worst, std::fabs(got_realized[i] - naive.realized[i]) / scale);
    }
    EXPECT_LT(worst, 1e-9) << "gamma " << gamma;
  }
}

// A checkpoint written in pool-state version 2 (each held prediction's return so far,
// discount, weight and steps) loads into the running-sum form and continues exactly.
TEST(ReturnVerifier, LoadsTheVersion2Layout) {
  const double gamma = 0.9;
  ReturnVerifier reference(gamma, 1000, 100);
  NaiveVerifier naive{{}, {}, {}, reference.horizon()};
  for (int t = 0; t < 30; ++t) {
    reference.Hold(t);
    naive.held.push_back({static_cast<double>(t)});
    reference.Observe(1.0 + t % 3, gamma);
    naive.Observe(1.0 + t % 3, gamma, 1.0);
  }
  // The version 2 layout of `naive`'s held predictions, an empty window and totals.
  std::string payload;
  StateWriter w(&payload);
  w.Put<uint64_t>(reference.horizon() + 1);
  w.Put<uint64_t>(0);
  w.Put<uint64_t>(naive.held.size());
  for (const auto& h : naive.held) {
    w.Put(h.prediction);
    w.Put(h.realized);
    w.Put(h.discount);
    w.Put(h.weight);
    w.Put<uint64_t>(0);
    w.Put<uint32_t>(static_cast<uint32_t>(h.steps));
  }
  w.Put<uint64_t>(100);
  w.Put<uint64_t>(0);
  w.Put<uint64_t>(0);
  w.Put<uint64_t>(0);
  w.Put<uint64_t>(0);
  w.Put<uint64_t>(0);
  for (int b = 0; b < 10; ++b) {
    w.Put<uint64_t>(0);
    w.Put(0.0);
    w.Put(0.0);
  }
  ReturnVerifier loaded(gamma, 1000, 100);
  StateReader r(payload);
  r.set_version(2);
  ASSERT_TRUE(loaded.LoadState(r)) << r.status();
  naive.errors.clear();
  naive.realized.clear();
  std::vector<double> got;
  loaded.set_sink([&](uint64_t, double, double g, bool) { got.push_back(g); });
  for (int t = 0; t < 200; ++t) {
    loaded.Observe(2.0, gamma);
    naive.Observe(2.0, gamma, 1.0);
  }
  ASSERT_EQ(got.size(), naive.realized.size());
  ASSERT_EQ(got.size(), 30u);
  for (size_t i = 0; i < got.size(); ++i) EXPECT_NEAR(got[i], naive.realized[i], 1e-9);
}

}  // namespace
}  // namespace bellwether
