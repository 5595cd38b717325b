#include "core/progress/learning_progress.h"

#include <random>

#include "gtest/gtest.h"

namespace bellwether {
namespace {

TEST(LearningProgress, SettlesWhenErrorsAreUsualAndLearningSlows) {
  LearningProgress p;
  const double decay = 0.99;  // a window of 100 updates
  std::mt19937 rng(1);
  std::normal_distribution<double> noise(0.0, 1.0);
  // Weight changes shrink as 1/t: learning slows down.
  for (int t = 1; t <= 1000; ++t) p.Update(noise(rng), 1.0 / t, 1.0, decay);
  EXPECT_LT(p.ude(), 2.0);
  EXPECT_NEAR(p.td_rms(), 1.0, 0.3);
  EXPECT_EQ(p.Label(decay), ProgressLabel::kSettled);
}

TEST(LearningProgress, OneSidedErrorsRaiseUdeAndKeepLearning) {
  LearningProgress p;
  const double decay = 0.99;
  std::mt19937 rng(2);
  std::normal_distribution<double> noise(0.0, 1.0);
  for (int t = 1; t <= 1000; ++t) p.Update(noise(rng), 0.01, 1.0, decay);
  const double before = p.ude();
  // The target shifts by three standard deviations: errors become one-sided, and weights
  // move again.
  for (int t = 0; t < 20; ++t) p.Update(3.0 + noise(rng), 0.5, 1.0, decay);
  EXPECT_LT(before, 0.5);
  EXPECT_GT(p.ude(), 1.5);
  EXPECT_GT(p.ude(), 4 * before);
  EXPECT_EQ(p.Label(decay), ProgressLabel::kLearning);
}

TEST(LearningProgress, ARecentResetIsDiverging) {
  LearningProgress p;
  for (int t = 0; t < 500; ++t) p.Update(0.1, 0.01, 1.0, 0.99);
  p.MarkReset();
  for (int t = 0; t < 50; ++t) p.Update(0.1, 0.01, 1.0, 0.99);
  EXPECT_EQ(p.Label(0.99), ProgressLabel::kDiverging);
  for (int t = 0; t < 100; ++t) p.Update(0.1, 0.01, 1.0, 0.99);
  EXPECT_NE(p.Label(0.99), ProgressLabel::kDiverging);
}

TEST(LearningProgress, EffectiveSampleFractionOfImportanceRatios) {
  LearningProgress p;
  // Ratios 0 and 2 with equal frequency: mean 1, mean square 2, fraction 1/2.
  for (int t = 0; t < 2000; ++t) p.Update(0.0, 0.0, t % 2 == 0 ? 0.0 : 2.0, 0.999);
  EXPECT_NEAR(p.effective_sample_fraction(), 0.5, 0.02);
}

}  // namespace
}  // namespace bellwether
