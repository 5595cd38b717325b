// Outside check: the 5-state random walk of Sutton & Barto, "Reinforcement Learning: An
// Introduction", 2nd ed., 2018, Example 6.2. States A..E (here 1..5) start at C, step left
// or right with equal probability; the episode ends at either end, with reward 1 only on
// the right. Undiscounted true values: 1/6, 2/6, 3/6, 4/6, 5/6.
//
// The walk is written as a CSV and fed through the real `bellwether replay` binary;
// features are one-hot (tile coding, one tiling, tiles of width one). Step size 0.002 and
// 10,000 episodes keep the constant-step iterate within 0.05 of the true values: over 12
// other seeds (measured with the same binary) the largest error was 0.023 (lambda 0),
// 0.024 (lambda 0.5) and 0.028 (lambda 0.9); with 5,000 episodes TD(0) had not yet
// converged (0.068).
#include <cmath>
#include <fstream>
#include <random>
#include <string>

#include "gtest/gtest.h"
#include "tests/test_util.h"

namespace bellwether {
namespace {

using testing::ReadNumericCsv;
using testing::RunCommand;

constexpr char kSpec[] = R"json({
  "name": "random_walk",
  "signals": [{"name": "state", "min": 0, "max": 7},
              {"name": "reward", "min": 0, "max": 1}],
  "features": [{"tiles": {"signals": ["state"], "tilings": 1, "tilesPerDim": 7}}],
  "questions": [{"name": "value", "cumulant": {"signal": "reward"},
                 "gamma": 1.0, "lambda": LAMBDA, "stepSize": 0.002,
                 "stepRule": "FIXED"}]
})json";

// Writes `episodes` episodes. Each frame is a state with the reward of
// the step into it; the first frame of every episode after the first has restart=1.
void WriteWalk(const std::string& path, int episodes, uint32_t seed) {
  std::mt19937 rng(seed);
  std::bernoulli_distribution right(0.5);
  std::ofstream out(path);
  out << "state,reward,restart\n";
  for (int e = 0; e < episodes; ++e) {
    int s = 3;
    out << s << ",0," << (e > 0 ? 1 : 0) << "\n";
    while (s != 0 && s != 6) {
      s += right(rng) ? 1 : -1;
      out << s << "," << (s == 6 ? 1 : 0) << ",0\n";
    }
  }
}

class RandomWalk : public ::testing::TestWithParam<double> {};

TEST_P(RandomWalk, TdLambdaConvergesToTrueValuesThroughReplay) {
  const std::string dir = testing::MakeTempDir("walk");
  const std::string csv = dir + "/walk.csv", spec = dir + "/spec.json", out = dir + "/pred.csv";
  WriteWalk(csv, 10000, 12345);
  std::string text = kSpec;
  text.replace(text.find("LAMBDA"), 6, std::to_string(GetParam()));
  std::ofstream(spec) << text;

  const auto r = RunCommand({BW_CLI_PATH, "replay", "--spec", spec, "--csv", csv, "--out", out});
  ASSERT_EQ(r.exit_code, 0) << r.err;

  // The prediction at a row is v(state of that row); take each state's last one.
  const auto pred = ReadNumericCsv(out);
  std::ifstream in(csv);
  std::string line;
  std::getline(in, line);
  double value[7] = {};
  for (size_t row = 0; std::getline(in, line); ++row) {
    const int s = line[0] - '0';
    value[s] = pred.at(row).at(1);
  }
  for (int s = 1; s <= 5; ++s) {
    EXPECT_NEAR(value[s], s / 6.0, 0.05) << "state " << s << " lambda " << GetParam();
  }
  // Terminal states are never learned from (no transition out of them): value 0.
  EXPECT_EQ(value[0], 0.0);
  EXPECT_EQ(value[6], 0.0);
}

INSTANTIATE_TEST_SUITE_P(Lambdas, RandomWalk, ::testing::Values(0.0, 0.5, 0.9));

}  // namespace
}  // namespace bellwether
