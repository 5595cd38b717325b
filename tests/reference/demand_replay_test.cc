// Outside check on real data: half-hourly electricity demand for England and Wales,
// June-July 2000 (../shared/data/halfhourly-demand-2000.csv; J. W. Taylor 2003, "Short-term
// electricity demand forecasting using double seasonal exponential smoothing", Journal of
// the Operational Research Society 54, 799-805, via the R package `forecast`).
//
// The grid fixture asks for discounted demand, G_t = sum_k gamma^k d_{t+k+1} with
// gamma = 0.9583 (about 12 hours). The test computes the realized G_t from the data
// itself (truncated where gamma^k < 1e-3) and compares `bellwether replay`'s predictions
// with the persistence baseline d_t / (1 - gamma) on the same rows. Scoring starts after
// the first two weeks, as an online learner is scored after its warm-up (common practice).
#include <cmath>
#include <fstream>
#include <cstdio>
#include <string>
#include <vector>

#include "gtest/gtest.h"
#include "tests/test_util.h"

namespace bellwether {
namespace {

using testing::ReadNumericCsv;
using testing::RunCommand;

std::vector<double> ReadDemand(const std::string& path) {
  std::ifstream in(path);
  std::string line;
  std::getline(in, line);
  std::vector<double> d;
  while (std::getline(in, line)) d.push_back(std::stod(line.substr(line.find(',') + 1)));
  return d;
}

TEST(DemandReplay, BeatsPersistenceOnRealizedDiscountedDemand) {
  const std::string data = std::string(BW_SHARED_DATA_DIR) + "/halfhourly-demand-2000.csv";
  const std::string dir = testing::MakeTempDir("demand");
  const std::string out = dir + "/pred.csv";
  const auto r = RunCommand({BW_CLI_PATH, "replay", "--spec",
                             std::string(BW_TEST_DATA_DIR) + "/grid_pool.json", "--csv", data,
                             "--out", out});
  ASSERT_EQ(r.exit_code, 0) << r.err;

  const std::vector<double> d = ReadDemand(data);
  ASSERT_EQ(d.size(), 2688u);
  std::vector<std::string> header;
  const auto pred = ReadNumericCsv(out, &header);
  ASSERT_EQ(pred.size(), d.size());
  ASSERT_EQ(header, (std::vector<std::string>{"row", "demand_next_12h"}));

  const double gamma = 0.9583;
  const size_t horizon = static_cast<size_t>(std::ceil(std::log(1e-3) / std::log(gamma)));
  const size_t first = 2 * 336;  // two weeks of half-hours
  double se_td = 0, se_persist = 0, sum_g = 0, sum_g2 = 0;
  size_t n = 0;
  for (size_t t = first; t + horizon < d.size(); ++t) {
    double g = 0, disc = 1;
    for (size_t k = 0; k < horizon; ++k) {
      g += disc * d[t + k + 1];
      disc *= gamma;
    }
    const double td = pred[t][1];
    const double persist = d[t] / (1 - gamma);
    se_td += (td - g) * (td - g);
    se_persist += (persist - g) * (persist - g);
    sum_g += g;
    sum_g2 += g * g;
    ++n;
  }
  const double rmse_td = std::sqrt(se_td / n), rmse_persist = std::sqrt(se_persist / n);
  const double sd = std::sqrt(sum_g2 / n - (sum_g / n) * (sum_g / n));
  RecordProperty("rmse_td", std::to_string(rmse_td));
  RecordProperty("rmse_persistence", std::to_string(rmse_persist));
  std::printf("scored rows %zu: TD RMSE %.0f (NRMSE %.3f), persistence RMSE %.0f (NRMSE %.3f)\n",
              n, rmse_td, rmse_td / sd, rmse_persist, rmse_persist / sd);
  EXPECT_LT(rmse_td, rmse_persist);
}

}  // namespace
}  // namespace bellwether

namespace bellwether {
namespace {

// `replay --summary` scores the baselines on the same rows as the learned question. The
// team's NumPy measurement on these rows (scored after the first two weeks, gamma
// 1 - 1/24), quoted in the accuracy target of the progress issue: persistence NRMSE 1.9,
// repeating last week's realized return 0.23 (two significant digits).
TEST(DemandReplay, SummaryBaselinesMatchTheNumPyMeasurement) {
  const std::string data = std::string(BW_SHARED_DATA_DIR) + "/halfhourly-demand-2000.csv";
  const std::string out = testing::MakeTempDir("summary") + "/pred.csv";
  const auto r = testing::RunCommand({BW_CLI_PATH, "replay", "--spec",
                                      std::string(BW_TEST_DATA_DIR) + "/grid_pool.json", "--csv",
                                      data, "--out", out, "--summary", "--score-from-row", "673"});
  ASSERT_EQ(r.exit_code, 0) << r.err;
  auto nrmse_of = [&](const std::string& who) {
    const size_t at = r.out.find("demand_next_12h          " + who);
    EXPECT_NE(at, std::string::npos) << r.out;
    if (at == std::string::npos) return -1.0;
    const std::string line = r.out.substr(at, r.out.find('\n', at) - at);
    return std::stod(line.substr(line.find_last_of(' ') + 1));
  };
  EXPECT_NEAR(nrmse_of("persistence"), 1.9, 0.05);
  EXPECT_NEAR(nrmse_of("last week"), 0.23, 0.005);
  EXPECT_GT(nrmse_of("bellwether"), 0.0);
  EXPECT_NE(r.out.find("1853"), std::string::npos) << "rows scored: 2688 - 672 - 163 held";
}

// The accuracy benchmark's recipe (tests/bench/demand_recipe.json: SETTLING steps at
// their default size, reward centering), one pass, scored as above, must stay under the
// issue's target NRMSE 0.20 and beat last week's realized return (the NumPy figure 0.23).
// A regression guard for the engine, not a claim about unseen series: the recipe's
// layout and lambda were chosen after looking at this file (see tests/bench/accuracy.sh).
TEST(DemandReplay, BenchRecipeMeetsTheAccuracyTarget) {
  const std::string data = std::string(BW_SHARED_DATA_DIR) + "/halfhourly-demand-2000.csv";
  const std::string out = testing::MakeTempDir("bench_recipe") + "/pred.csv";
  const auto r = testing::RunCommand(
      {BW_CLI_PATH, "replay", "--spec", std::string(BW_TEST_DATA_DIR) + "/../bench/demand_recipe.json",
       "--csv", data, "--out", out, "--summary", "--score-from-row", "673"});
  ASSERT_EQ(r.exit_code, 0) << r.err;
  auto nrmse_of = [&](const std::string& who) {
    const size_t at = r.out.find("discounted_demand        " + who);
    EXPECT_NE(at, std::string::npos) << r.out;
    if (at == std::string::npos) return -1.0;
    const std::string line = r.out.substr(at, r.out.find('\n', at) - at);
    return std::stod(line.substr(line.find_last_of(' ') + 1));
  };
  const double ours = nrmse_of("bellwether");
  std::printf("bench recipe: NRMSE %.3f (target 0.20; last week %.3f)\n", ours,
              nrmse_of("last week"));
  EXPECT_GT(ours, 0.0);
  EXPECT_LE(ours, 0.20);
  EXPECT_LT(ours, nrmse_of("last week"));
}

}  // namespace
}  // namespace bellwether
