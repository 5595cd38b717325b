#include "core/progress/return_verifier.h"

#include <cmath>
#include <random>
#include <string>
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

// The tail of a per-question record of pool-state versions 2 to 5 with an empty window
// of `window` entries: the window's size, next slot and fill, its sums (version 4 on),
// the totals (`count` verified, none truncated or unverifiable) and ten empty bins.
void PutLegacyEmptyWindowAndTotals(StateWriter& w, uint64_t window, bool sums, uint64_t count) {
  w.Put<uint64_t>(window);
  w.Put<uint64_t>(0);
  w.Put<uint64_t>(0);
  for (int k = 0; sums && k < 6; ++k) w.Put(0.0);
  w.Put<uint64_t>(count);
  w.Put<uint64_t>(0);
  w.Put<uint64_t>(0);
  for (int b = 0; b < 10; ++b) {
    w.Put<uint64_t>(0);
    w.Put(0.0);
    w.Put(0.0);
  }
}

// A long importance-weighted run with varying continuations (terminations included) and
// ratios: thousands of rebases, and every verified return equal to the term-by-term sum.
TEST(ReturnVerifier, RunningSumsMatchTermByTermReturnsOverLongRuns) {
  for (const double gamma : {0.999, 0.9, 0.3}) {
    ReturnVerifier v(gamma, 100000, 1000000, VerificationMode::kImportanceWeighted);
    NaiveVerifier naive{{}, {}, {}, v.horizon()};
    std::vector<double> got_errors, got_realized;
    v.set_sink([&](absl::Span<const VerifiedPoint> points) {
      for (const VerifiedPoint& p : points) {
        got_errors.push_back(p.prediction - p.realized);
        got_realized.push_back(p.realized);
      }
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
  PutLegacyEmptyWindowAndTotals(w, 100, /*sums=*/false, 0);
  ReturnVerifier loaded(gamma, 1000, 100);
  StateReader r(payload);
  r.set_version(2);
  ASSERT_TRUE(loaded.LoadState(r)) << r.status();
  naive.errors.clear();
  naive.realized.clear();
  std::vector<double> got;
  loaded.set_sink([&](absl::Span<const VerifiedPoint> points) {
    for (const VerifiedPoint& p : points) got.push_back(p.realized);
  });
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

namespace bellwether {
namespace {

// The stats a test compares: every field of VerifiedErrorStats but the calibration.
void ExpectSameStats(const VerifiedErrorStats& a, const VerifiedErrorStats& b, double tol,
                     const std::string& where) {
  EXPECT_EQ(a.count, b.count) << where;
  EXPECT_EQ(a.truncated, b.truncated) << where;
  EXPECT_EQ(a.unverifiable, b.unverifiable) << where;
  EXPECT_EQ(a.window, b.window) << where;
  if (tol == 0) {
    EXPECT_EQ(a.rmse, b.rmse) << where;
    EXPECT_EQ(a.bias, b.bias) << where;
    EXPECT_EQ(a.nrmse, b.nrmse) << where;
    EXPECT_EQ(a.effective_sample_size, b.effective_sample_size) << where;
  } else {
    EXPECT_NEAR(a.rmse, b.rmse, tol * std::max(1.0, std::fabs(b.rmse))) << where;
    EXPECT_NEAR(a.bias, b.bias, tol * std::max(1.0, std::fabs(b.bias))) << where;
    EXPECT_NEAR(a.nrmse, b.nrmse, tol * std::max(1.0, std::fabs(b.nrmse))) << where;
    EXPECT_NEAR(a.effective_sample_size, b.effective_sample_size,
                tol * std::max(1.0, b.effective_sample_size))
        << where;
  }
}

// Inputs of a run of a group of questions: per step, predictions to hold, cumulants (NaN
// sometimes, if asked), a continuation (terminations included) and an importance ratio.
struct GroupRun {
  size_t nq;
  std::vector<std::vector<double>> predictions, cumulants;
  std::vector<double> continuation, rho;
  GroupRun(size_t questions, int steps, double gamma, double missing_rate, uint32_t seed)
      : nq(questions) {
    std::mt19937 rng(seed);
    std::uniform_real_distribution<double> u(0.0, 1.0);
    for (int t = 0; t < steps; ++t) {
      std::vector<double> p(nq), c(nq);
      for (size_t q = 0; q < nq; ++q) {
        p[q] = 50 * u(rng) + static_cast<double>(q);
        c[q] = u(rng) < missing_rate ? std::nan("") : 10 * u(rng) - 2;
      }
      predictions.push_back(p);
      cumulants.push_back(c);
      continuation.push_back(u(rng) < 0.002 ? 0.0 : gamma);
      rho.push_back(u(rng) < 0.001 ? 0.0 : 0.5 + u(rng));
    }
  }
};

// A group of questions that share their timing is Q one-question verifiers in one: with
// every cumulant present, each question's stats and verified points equal, bit for bit,
// those of a verifier of its own fed the same steps (the one-question verifier is checked
// against term-by-term returns above).
TEST(ReturnVerifier, GroupEqualsOneVerifierPerQuestion) {
  for (const VerificationMode mode :
       {VerificationMode::kOnPolicy, VerificationMode::kImportanceWeighted}) {
    const double gamma = 0.97;
    const GroupRun run(5, 6000, gamma, 0.0, 21);
    ReturnVerifier group(gamma, 10000, 300, mode, std::vector<bool>(run.nq, false));
    std::vector<ReturnVerifier> single(run.nq, ReturnVerifier(gamma, 10000, 300, mode));
    std::vector<std::vector<VerifiedPoint>> got(run.nq), want(run.nq);
    group.set_sink([&](absl::Span<const VerifiedPoint> points) {
      for (const VerifiedPoint& p : points) got[p.question].push_back(p);
    });
    for (size_t q = 0; q < run.nq; ++q) {
      single[q].set_sink([&want, q](absl::Span<const VerifiedPoint> points) {
        for (VerifiedPoint p : points) {
          p.question = static_cast<uint32_t>(q);
          want[q].push_back(p);
        }
      });
    }
    for (size_t t = 0; t < run.predictions.size(); ++t) {
      group.Hold(run.predictions[t], t);
      group.Observe(run.cumulants[t], run.continuation[t], 1.0, run.rho[t]);
      for (size_t q = 0; q < run.nq; ++q) {
        single[q].Hold(run.predictions[t][q], t);
        single[q].Observe(run.cumulants[t][q], run.continuation[t], 1.0, run.rho[t]);
      }
    }
    for (size_t q = 0; q < run.nq; ++q) {
      const std::string where = "question " + std::to_string(q);
      ExpectSameStats(group.stats(q), single[q].stats(), 0, where);
      ASSERT_EQ(got[q].size(), want[q].size()) << where;
      ASSERT_GT(got[q].size(), 5000u) << where;
      for (size_t i = 0; i < got[q].size(); ++i) {
        ASSERT_EQ(got[q][i].seq, want[q][i].seq) << where;
        ASSERT_EQ(got[q][i].realized, want[q][i].realized) << where;
        ASSERT_EQ(got[q][i].truncated, want[q][i].truncated) << where;
      }
    }
  }
}

// A missing cumulant drops only its own question's held predictions. Each question's
// counts equal, and its errors match to rounding, the definition summed term by term per
// held prediction (NaiveVerifier above) with the question's own misses.
TEST(ReturnVerifier, MissingCumulantDropsOnlyItsQuestion) {
  const double gamma = 0.9;
  const GroupRun run(4, 20000, gamma, 0.002, 5);
  // The window spans the whole run, so its errors are all the verified ones.
  ReturnVerifier group(gamma, 10000, 100000, VerificationMode::kOnPolicy,
                       std::vector<bool>(run.nq, false));
  std::vector<NaiveVerifier> naive(run.nq, NaiveVerifier{{}, {}, {}, group.horizon()});
  std::vector<uint64_t> dropped(run.nq, 0);
  for (size_t t = 0; t < run.predictions.size(); ++t) {
    group.Hold(run.predictions[t], t);
    group.Observe(run.cumulants[t], run.continuation[t]);
    for (size_t q = 0; q < run.nq; ++q) {
      naive[q].held.push_back({run.predictions[t][q]});
      if (std::isnan(run.cumulants[t][q])) {
        dropped[q] += naive[q].held.size();
        naive[q].held.clear();
      } else {
        naive[q].Observe(run.cumulants[t][q], run.continuation[t], 1.0);
      }
    }
  }
  for (size_t q = 0; q < run.nq; ++q) {
    const VerifiedErrorStats s = group.stats(q);
    double sum = 0, sq = 0;
    for (double e : naive[q].errors) {
      sum += e;
      sq += e * e;
    }
    const double n = static_cast<double>(naive[q].errors.size());
    EXPECT_GT(dropped[q], 100u);
    EXPECT_EQ(s.unverifiable, dropped[q]) << q;
    EXPECT_EQ(s.count, naive[q].errors.size()) << q;
    EXPECT_EQ(s.window, naive[q].errors.size()) << q;
    EXPECT_NEAR(s.rmse, std::sqrt(sq / n), 1e-9 * std::sqrt(sq / n)) << q;
    EXPECT_NEAR(s.bias, sum / n, 1e-9 * std::max(1.0, std::fabs(sum / n))) << q;
  }
  // The questions' misses differ, so do their counts.
  EXPECT_NE(group.stats(0).unverifiable, group.stats(1).unverifiable);
}

// Feeds steps [from, to) of `run` to `v`.
void Feed(ReturnVerifier& v, const GroupRun& run, size_t from, size_t to) {
  for (size_t t = from; t < to; ++t) {
    v.Hold(run.predictions[t], t);
    v.Observe(run.cumulants[t], run.continuation[t], 1.0, run.rho[t]);
  }
}

TEST(ReturnVerifier, GroupStateRoundTripsAndContinuesBitIdentical) {
  const double gamma = 0.95;
  const GroupRun run(3, 5000, gamma, 0.001, 8);
  ReturnVerifier a(gamma, 10000, 200, VerificationMode::kImportanceWeighted, {false, true, false});
  Feed(a, run, 0, 2500);
  std::string payload;
  StateWriter w(&payload);
  a.SaveState(w);
  ReturnVerifier b(gamma, 10000, 200, VerificationMode::kImportanceWeighted, {false, true, false});
  StateReader r(payload);
  r.set_version(6);
  ASSERT_TRUE(b.LoadState(r)) << r.status();
  EXPECT_TRUE(r.done());
  Feed(a, run, 2500, 5000);
  Feed(b, run, 2500, 5000);
  for (size_t q = 0; q < run.nq; ++q) {
    ExpectSameStats(b.stats(q), a.stats(q), 0, "question " + std::to_string(q));
  }
  // Another group's shape is refused, naming what differs.
  ReturnVerifier narrower(gamma, 10000, 200, VerificationMode::kImportanceWeighted, {false, true});
  StateReader r2(payload);
  r2.set_version(6);
  EXPECT_FALSE(narrower.LoadState(r2));
  EXPECT_NE(r2.status().ToString().find("group size"), std::string::npos) << r2.status();
}

// A spec change regroups questions: a question exported from one group and adopted by
// another continues as if nothing happened (to rounding: its held returns change form).
TEST(ReturnVerifier, AdoptedQuestionContinuesInAnotherGroup) {
  const double gamma = 0.93;
  const GroupRun run(3, 4000, gamma, 0.0, 13);
  ReturnVerifier a(gamma, 10000, 300, VerificationMode::kOnPolicy, std::vector<bool>(3, false));
  Feed(a, run, 0, 2000);
  // The new group has two questions: old question 2 in place 0, a new question in place 1.
  ReturnVerifier b(gamma, 10000, 300, VerificationMode::kOnPolicy, {false, false});
  b.Adopt(0, a.Export(2));
  EXPECT_EQ(b.stats(0).count, a.stats(2).count);
  GroupRun two = run;
  for (size_t t = 0; t < run.predictions.size(); ++t) {
    two.predictions[t] = {run.predictions[t][2], run.predictions[t][0]};
    two.cumulants[t] = {run.cumulants[t][2], run.cumulants[t][0]};
  }
  two.nq = 2;
  Feed(a, run, 2000, 4000);
  Feed(b, two, 2000, 4000);
  ExpectSameStats(b.stats(0), a.stats(2), 1e-9, "adopted question");
  // The new question verifies what it held itself, as a verifier started then does.
  ReturnVerifier fresh(gamma, 10000, 300);
  for (size_t t = 2000; t < 4000; ++t) {
    fresh.Hold(two.predictions[t][1], t);
    fresh.Observe(two.cumulants[t][1], two.continuation[t]);
  }
  ASSERT_GT(fresh.stats().count, 1500u);
  ExpectSameStats(b.stats(1), fresh.stats(), 1e-9, "new question");
}

// Pool-state versions 3 to 5 kept one verifier per question as running sums; a group
// adopts one record per question and continues with the returns term by term.
TEST(ReturnVerifier, GroupLoadsPerQuestionRecordsOfVersion5) {
  const double gamma = 0.8;
  const size_t nq = 2;
  ReturnVerifier shape(gamma, 1000, 50);
  std::vector<NaiveVerifier> naive(nq, NaiveVerifier{{}, {}, {}, shape.horizon()});
  for (int t = 0; t < 40; ++t) {
    for (size_t q = 0; q < nq; ++q) {
      // Question 1's held predictions start later: its record holds fewer.
      if (q == 1 && t < 38) continue;
      naive[q].held.push_back({100.0 * static_cast<double>(q) + t});
    }
    for (size_t q = 0; q < nq; ++q) naive[q].Observe(1.0 + (t + q) % 4, gamma, 1.0);
  }
  ASSERT_GT(naive[0].held.size(), naive[1].held.size());
  std::string payload;
  StateWriter w(&payload);
  for (size_t q = 0; q < nq; ++q) {
    // The version 3 to 5 layout, with fresh running sums: A = 0, P = 1, W = 1.
    w.Put<uint64_t>(shape.horizon() + 1);
    w.Put<uint64_t>(0);
    w.Put<uint64_t>(naive[q].held.size());
    w.Put(0.0);
    w.Put(1.0);
    w.Put(1.0);
    w.Put<int64_t>(1000);
    for (const auto& h : naive[q].held) {
      w.Put(h.prediction);
      w.Put(h.realized);        // base
      w.Put(0.0);               // acc0
      w.Put(1.0 / h.discount);  // disc0
      w.Put(1.0);               // wt0
      w.Put(h.discount);        // inv_scale
      w.Put<uint64_t>(7);       // seq
      w.Put<int64_t>(1000 - static_cast<int64_t>(h.steps));
    }
    PutLegacyEmptyWindowAndTotals(w, 50, /*sums=*/true, q);
  }
  ReturnVerifier group(gamma, 1000, 50, VerificationMode::kOnPolicy, {false, false});
  StateReader r(payload);
  r.set_version(5);
  for (size_t q = 0; q < nq; ++q) {
    QuestionVerification from;
    ASSERT_TRUE(ReturnVerifier::ReadLegacy(r, group.ring_capacity(), group.window_size(), &from))
        << r.status();
    group.Adopt(q, from);
  }
  EXPECT_TRUE(r.done());
  std::vector<std::vector<double>> got(nq);
  group.set_sink([&](absl::Span<const VerifiedPoint> points) {
    for (const VerifiedPoint& p : points) got[p.question].push_back(p.realized);
  });
  for (size_t q = 0; q < nq; ++q) {
    naive[q].errors.clear();
    naive[q].realized.clear();
  }
  for (int t = 0; t < 100; ++t) {
    group.Observe(std::vector<double>{2.0, 3.0}, gamma);
    naive[0].Observe(2.0, gamma, 1.0);
    naive[1].Observe(3.0, gamma, 1.0);
  }
  for (size_t q = 0; q < nq; ++q) {
    ASSERT_EQ(got[q].size(), naive[q].realized.size()) << q;
    for (size_t i = 0; i < got[q].size(); ++i) {
      EXPECT_NEAR(got[q][i], naive[q].realized[i], 1e-9) << q;
    }
    EXPECT_EQ(group.stats(q).count, q + got[q].size());
  }
  EXPECT_EQ(got[1].size(), 2u);
}

// The window's sums are running sums, restarted from each full lap of the ring: a huge
// error that has left the window leaves no rounding residue behind in its statistics.
TEST(ReturnVerifier, HugeErrorsLeaveNoResidueOnceOutOfTheWindow) {
  ReturnVerifier v(0.0, 10, 4);  // gamma 0: the return is the next cumulant
  for (int t = 0; t < 12; ++t) {
    v.Hold(t < 4 ? 1e12 : 2.0);  // errors 1e12 - 1, then 1
    v.Observe(1.0, 0.0);
  }
  const VerifiedErrorStats s = v.stats();
  EXPECT_EQ(s.window, 4u);
  EXPECT_EQ(s.rmse, 1.0);
  EXPECT_EQ(s.bias, 1.0);
}

}  // namespace
}  // namespace bellwether
