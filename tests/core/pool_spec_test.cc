#include "core/pool_spec.h"

#include "core/io/spec_json.h"
#include "gmock/gmock.h"
#include "gtest/gtest.h"

namespace bellwether {
namespace {

using ::testing::HasSubstr;

constexpr char kGrid[] = R"json(
{"name": "grid",
 "signals": [{"name": "demand_mw", "unit": "MW", "min": 15000, "max": 40000}],
 "features": [
   {"tiles": {"signals": ["clock.hour_of_day"], "tilings": 8, "tilesPerDim": 12, "periodic": true}},
   {"tiles": {"signals": ["demand_mw"], "tilings": 8, "tilesPerDim": 10}},
   {"bias": {}}],
 "questions": [{"name": "demand_next_12h", "cumulant": {"signal": "demand_mw"},
                "gamma": 0.9583, "lambda": 0.9}]})json";

v1::PoolSpec Grid() {
  auto spec = PoolSpecFromJson(kGrid);
  EXPECT_TRUE(spec.ok()) << spec.status();
  return *spec;
}

TEST(PoolSpec, CompilesTheGridFixture) {
  auto c = CompilePoolSpec(Grid());
  ASSERT_TRUE(c.ok()) << c.status();
  EXPECT_EQ(c->signal_names.size(), 1u);
  ASSERT_EQ(c->questions.size(), 1u);
  EXPECT_EQ(c->questions[0].unit, "MW");
  EXPECT_DOUBLE_EQ(c->questions[0].step_size, kDefaultStepSize);
  // 8 x 12 periodic hour tiles + 8 x 11 demand tiles + bias, unhashed.
  EXPECT_EQ(c->recipe->num_features(), 8u * 12u + 8u * 11u + 1u);
  EXPECT_EQ(c->recipe->max_active(), 17u);
  EXPECT_FALSE(c->recipe->hashed());
}

TEST(PoolSpec, GroupsQuestionsWithTheSameGammaAndLambdaIntoBlocks) {
  v1::PoolSpec spec = Grid();
  v1::QuestionSpec q = spec.questions(0);
  q.set_name("same_block");
  *spec.add_questions() = q;
  q.set_name("other_block");
  q.set_gamma(0.5);
  *spec.add_questions() = q;
  auto c = CompilePoolSpec(spec);
  ASSERT_TRUE(c.ok()) << c.status();
  ASSERT_EQ(c->blocks.size(), 2u);
  EXPECT_EQ(c->blocks[0].questions.size(), 2u);
  EXPECT_EQ(c->questions[1].block, 0u);
  EXPECT_EQ(c->questions[1].index_in_block, 1u);
  EXPECT_EQ(c->questions[2].block, 1u);
}

TEST(PoolSpec, HashesWhenTheRecipeExceedsTheTable) {
  v1::PoolSpec spec = Grid();
  spec.set_feature_table_size(64);
  auto c = CompilePoolSpec(spec);
  ASSERT_TRUE(c.ok()) << c.status();
  EXPECT_TRUE(c->recipe->hashed());
  EXPECT_EQ(c->recipe->num_features(), 64u);
}

struct BadSpecCase {
  const char* name;
  void (*mutate)(v1::PoolSpec*);
  const char* message;
};

void PrintTo(const BadSpecCase& c, std::ostream* os) { *os << c.name; }

class BadSpec : public ::testing::TestWithParam<BadSpecCase> {};

TEST_P(BadSpec, IsRejectedNamingTheField) {
  v1::PoolSpec spec = Grid();
  GetParam().mutate(&spec);
  auto c = CompilePoolSpec(spec);
  ASSERT_FALSE(c.ok());
  EXPECT_EQ(c.status().code(), absl::StatusCode::kInvalidArgument);
  EXPECT_THAT(c.status().message(), HasSubstr(GetParam().message));
}

INSTANTIATE_TEST_SUITE_P(
    Cases, BadSpec,
    ::testing::Values(
        BadSpecCase{"UnknownCumulantSignal",
                    [](v1::PoolSpec* s) {
                      s->mutable_questions(0)->mutable_cumulant()->set_signal("demand_gw");
                    },
                    "pool grid: questions[0] (demand_next_12h).cumulant.signal: unknown signal "
                    "'demand_gw'"},
        BadSpecCase{"UnknownTileSignal",
                    [](v1::PoolSpec* s) {
                      s->mutable_features(1)->mutable_tiles()->set_signals(0, "load");
                    },
                    "features[1].tiles.signals[0]: unknown signal 'load'"},
        BadSpecCase{"GammaAboveOne",
                    [](v1::PoolSpec* s) { s->mutable_questions(0)->set_gamma(1.2); },
                    "questions[0] (demand_next_12h).gamma: 1.2 is outside [0, 1]"},
        BadSpecCase{"GammaNegative",
                    [](v1::PoolSpec* s) { s->mutable_questions(0)->set_gamma(-0.1); },
                    ".gamma: -0.1 is outside [0, 1]"},
        BadSpecCase{"LambdaAboveOne",
                    [](v1::PoolSpec* s) { s->mutable_questions(0)->set_lambda(1.5); },
                    ".lambda: 1.5 is outside [0, 1]"},
        BadSpecCase{"StepSizeTooLarge",
                    [](v1::PoolSpec* s) { s->mutable_questions(0)->set_step_size(2); },
                    ".step_size: 2 is outside (0, 1]"},
        BadSpecCase{"EmptyRange",
                    [](v1::PoolSpec* s) { s->mutable_signals(0)->set_max(15000); },
                    "signals[0] (demand_mw): range [15000, 15000] is invalid"},
        BadSpecCase{"ReservedClockPrefix",
                    [](v1::PoolSpec* s) { s->mutable_signals(0)->set_name("clock.x"); },
                    "the prefix 'clock.' is reserved"},
        BadSpecCase{"DuplicateQuestion",
                    [](v1::PoolSpec* s) { *s->add_questions() = s->questions(0); },
                    "questions[1] (demand_next_12h): the name is used by another question"},
        BadSpecCase{"UnknownTimeZone",
                    [](v1::PoolSpec* s) { s->set_time_zone("Mars/Olympus"); },
                    "time_zone: 'Mars/Olympus' is not a known IANA time zone"},
        BadSpecCase{"NoQuestions", [](v1::PoolSpec* s) { s->clear_questions(); },
                    "questions: the pool asks no questions"},
        BadSpecCase{"TooManyTilings",
                    [](v1::PoolSpec* s) { s->mutable_features(0)->mutable_tiles()->set_tilings(65); },
                    "features[0].tiles.tilings: 65 is outside 1..64"},
        BadSpecCase{"BadPoolName", [](v1::PoolSpec* s) { s->set_name("grid one"); },
                    "pool: name 'grid one'"}),
    [](const ::testing::TestParamInfo<BadSpecCase>& p) { return std::string(p.param.name); });

TEST(PoolSpecJson, UnknownFieldsAndSyntaxErrorsAreRejected) {
  EXPECT_FALSE(PoolSpecFromJson(R"({"name": "x", "signalz": []})").ok());
  EXPECT_FALSE(PoolSpecFromJson(R"({"name": )").ok());
}

}  // namespace
}  // namespace bellwether
