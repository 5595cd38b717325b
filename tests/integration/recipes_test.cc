// The README's question recipes run as written through `bellwether replay` on the
// example data shipped in deploy/examples/ (invented data: a simulation of our own).
#include <cmath>
#include <fstream>
#include <sstream>
#include <string>
#include <vector>

#include "absl/strings/str_split.h"
#include "gmock/gmock.h"
#include "gtest/gtest.h"
#include "tests/test_util.h"

namespace bellwether {
namespace {

using ::testing::HasSubstr;

const std::string kRoot = std::string(BW_TEST_DATA_DIR) + "/../..";

std::string Read(const std::string& path) {
  std::ifstream in(path);
  std::ostringstream s;
  s << in.rdbuf();
  return s.str();
}

struct Recipe {
  const char* spec;
  const char* csv;
  std::vector<std::string> questions;
};

class RecipeTest : public ::testing::TestWithParam<Recipe> {};

TEST_P(RecipeTest, RunsAsWrittenInTheReadme) {
  const Recipe& r = GetParam();
  const std::string spec = kRoot + "/deploy/examples/recipes/" + r.spec;
  const std::string csv = kRoot + "/deploy/examples/" + r.csv;
  // The README shows the spec file verbatim.
  const std::string text = Read(spec);
  ASSERT_FALSE(text.empty()) << spec;
  EXPECT_THAT(Read(kRoot + "/README.md"), HasSubstr(text));
  const std::string out = testing::MakeTempDir("recipe") + "/out.csv";
  const auto run = testing::RunCommand({BW_CLI_PATH, "replay", "--spec", spec, "--csv", csv,
                                        "--out", out});
  ASSERT_EQ(run.exit_code, 0) << run.err;
  std::vector<std::string> header;
  const auto rows = testing::ReadNumericCsv(out, &header);
  std::vector<std::string> expected = {"row"};
  expected.insert(expected.end(), r.questions.begin(), r.questions.end());
  EXPECT_EQ(header, expected);
  size_t data_rows = 0;
  {
    std::ifstream in(csv);
    std::string line;
    std::getline(in, line);
    while (std::getline(in, line)) ++data_rows;
  }
  ASSERT_EQ(rows.size(), data_rows);
  for (const auto& row : rows) {
    for (double v : row) ASSERT_TRUE(std::isfinite(v));
  }
}

INSTANTIATE_TEST_SUITE_P(
    Readme, RecipeTest,
    ::testing::Values(Recipe{"building-energy.json", "campus-library.csv", {"energy_next_12h"}},
                      Recipe{"robot-charging.json", "robot-fleet.csv",
                             {"seconds_to_charger", "p_low_before_charger",
                              "p_low_if_heading_back"}}),
    [](const ::testing::TestParamInfo<Recipe>& p) {
      return std::string(p.param.spec[0] == 'b' ? "BuildingEnergy" : "RobotCharging");
    });

// Seconds until the charger, realized from the data itself: the learned answer, scored
// after a warm-up of 5,000 frames (common practice for online learners), beats the best
// constant answer chosen in hindsight (the mean realized time, whose RMSE is the
// standard deviation).
TEST(RobotRecipe, SecondsToChargerBeatsTheHindsightMean) {
  const std::string csv = kRoot + "/deploy/examples/robot-fleet.csv";
  const std::string out = testing::MakeTempDir("robot") + "/out.csv";
  const auto run = testing::RunCommand(
      {BW_CLI_PATH, "replay", "--spec", kRoot + "/deploy/examples/recipes/robot-charging.json",
       "--csv", csv, "--out", out});
  ASSERT_EQ(run.exit_code, 0) << run.err;
  const auto pred = testing::ReadNumericCsv(out);
  const auto data = testing::ReadNumericCsv(csv);  // timestamp, battery, dist, at_charger, ...
  ASSERT_EQ(pred.size(), data.size());
  std::vector<double> realized(data.size(), std::nan(""));
  double next_arrival = std::nan("");
  for (size_t t = data.size(); t-- > 0;) {
    realized[t] = next_arrival - data[t][0];
    if (data[t][3] >= 1) next_arrival = data[t][0];
  }
  double se = 0, sum = 0, sum2 = 0;
  size_t n = 0;
  for (size_t t = 5000; t < data.size(); ++t) {
    if (std::isnan(realized[t])) continue;
    se += (pred[t][1] - realized[t]) * (pred[t][1] - realized[t]);
    sum += realized[t];
    sum2 += realized[t] * realized[t];
    ++n;
  }
  ASSERT_GT(n, 5000u);
  const double rmse = std::sqrt(se / n);
  const double sd = std::sqrt(sum2 / n - (sum / n) * (sum / n));
  std::printf("seconds_to_charger: RMSE %.0f s, hindsight-mean RMSE %.0f s over %zu frames\n",
              rmse, sd, n);
  EXPECT_LT(rmse, 0.8 * sd);
}

}  // namespace
}  // namespace bellwether
