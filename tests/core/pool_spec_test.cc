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
        BadSpecCase{"FixedStepSizeTooLarge",
                    [](v1::PoolSpec* s) {
                      s->mutable_questions(0)->set_step_size(2);
                      s->mutable_questions(0)->set_step_rule(v1::FIXED);
                    },
                    ".step_size: 2 is outside (0, 1]"},
        BadSpecCase{"AutostepStepSizeTooLarge",
                    [](v1::PoolSpec* s) { s->mutable_questions(0)->set_step_size(200); },
                    ".step_size: 200 is outside (0, 100]"},
        BadSpecCase{"CompositionalCycle",
                    [](v1::PoolSpec* s) {
                      v1::QuestionSpec* a = s->add_questions();
                      a->set_name("a");
                      a->mutable_cumulant()->set_question("b");
                      v1::QuestionSpec* b = s->add_questions();
                      b->set_name("b");
                      b->mutable_cumulant()->set_question("a");
                    },
                    "questions: cycle a -> b -> a"},
        BadSpecCase{"SelfCycle",
                    [](v1::PoolSpec* s) {
                      s->mutable_questions(0)->mutable_cumulant()->set_question("demand_next_12h");
                    },
                    "cycle demand_next_12h -> demand_next_12h"},
        BadSpecCase{"UnknownQuestionCumulant",
                    [](v1::PoolSpec* s) {
                      s->mutable_questions(0)->mutable_cumulant()->set_question("nope");
                    },
                    ".cumulant.question: unknown question 'nope'"},
        BadSpecCase{"OffPolicyWithoutActions",
                    [](v1::PoolSpec* s) {
                      s->mutable_questions(0)->mutable_policy()->set_action("charge");
                    },
                    "needs actions: declare the pool's actions"},
        BadSpecCase{"UnknownAction",
                    [](v1::PoolSpec* s) {
                      s->add_actions("drive");
                      s->add_actions("charge");
                      s->mutable_questions(0)->mutable_policy()->set_action("fly");
                    },
                    ".policy.action: unknown action 'fly'"},
        BadSpecCase{"ProbabilitiesDoNotSumToOne",
                    [](v1::PoolSpec* s) {
                      s->add_actions("drive");
                      s->add_actions("charge");
                      auto* p = s->mutable_questions(0)->mutable_policy()->mutable_distribution()
                                    ->mutable_probabilities();
                      (*p)["drive"] = 0.5;
                      (*p)["charge"] = 0.6;
                    },
                    ".policy.distribution: probabilities sum to 1.1, not 1"},
        BadSpecCase{"GreedyOnNonControl",
                    [](v1::PoolSpec* s) {
                      s->add_actions("drive");
                      v1::QuestionSpec* q = s->add_questions();
                      *q = s->questions(0);
                      q->set_name("follower");
                      q->mutable_policy()->set_greedy("demand_next_12h");
                    },
                    ".policy.greedy: 'demand_next_12h' is not a control question"},
        BadSpecCase{"TrueOnlineOffPolicy",
                    [](v1::PoolSpec* s) {
                      s->add_actions("drive");
                      s->mutable_questions(0)->mutable_policy()->set_action("drive");
                      s->mutable_questions(0)->set_learner(v1::TRUE_ONLINE_TD);
                    },
                    "TRUE_ONLINE_TD is on-policy only"},
        BadSpecCase{"TdcWithAutostep",
                    [](v1::PoolSpec* s) {
                      s->mutable_questions(0)->set_learner(v1::TDC);
                      s->mutable_questions(0)->set_step_rule(v1::AUTOSTEP);
                    },
                    ".step_rule: this learner supports only FIXED step sizes"},
        BadSpecCase{"BadIndicatorOp",
                    [](v1::PoolSpec* s) {
                      auto* c = s->mutable_questions(0)->mutable_cumulant()->mutable_indicator();
                      c->set_signal("demand_mw");
                      c->set_op("==");
                    },
                    ".cumulant.indicator.op: '==' is not one of <, <=, >, >="},
        BadSpecCase{"UnknownTerminationSignal",
                    [](v1::PoolSpec* s) {
                      v1::Condition* c = s->mutable_questions(0)->add_terminate_when();
                      c->set_signal("soc");
                      c->set_op("<");
                    },
                    ".terminate_when[0].signal: unknown signal 'soc'"},
        BadSpecCase{"RbfTooManyCenters",
                    [](v1::PoolSpec* s) {
                      auto* r = s->add_features()->mutable_rbf();
                      r->add_signals("demand_mw");
                      r->add_signals("clock.hour_of_day");
                      r->add_signals("clock.day_of_week");
                      r->set_centers_per_dim(64);
                    },
                    "features[3].rbf: 262144 centers; at most 4096 are allowed"},
        BadSpecCase{"RawClockSignal",
                    [](v1::PoolSpec* s) {
                      s->add_features()->mutable_raw()->add_signals("clock.hour_of_day");
                    },
                    "features[3].raw.signals[0]: unknown signal 'clock.hour_of_day'"},
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
        BadSpecCase{"UnknownSuccessorTable",
                    [](v1::PoolSpec* s) { s->mutable_questions(0)->set_successor_table("sf"); },
                    ".successor_table: unknown successor table 'sf'"},
        BadSpecCase{"SuccessorGammaDiffers",
                    [](v1::PoolSpec* s) {
                      v1::SuccessorTable* table = s->add_successor_tables();
                      table->set_name("sf");
                      table->add_phi()->set_signal("demand_mw");
                      table->set_gamma(0.5);
                      s->mutable_questions(0)->set_successor_table("sf");
                    },
                    ".gamma: 0.9583 differs from successor table 'sf' (0.5)"},
        BadSpecCase{"SuccessorPhiKind",
                    [](v1::PoolSpec* s) {
                      v1::SuccessorTable* table = s->add_successor_tables();
                      table->set_name("sf");
                      table->add_phi()->set_frame_period(true);
                    },
                    "successor_tables[0] (sf).phi[0]: must be a signal, an indicator or a constant"},
        BadSpecCase{"BadPoolName", [](v1::PoolSpec* s) { s->set_name("grid one"); },
                    "pool: name 'grid one'"}),
    [](const ::testing::TestParamInfo<BadSpecCase>& p) { return std::string(p.param.name); });

TEST(PoolSpec, OrdersBlocksSoAQuestionComesAfterWhatItReads) {
  v1::PoolSpec spec = Grid();
  spec.add_actions("hold");
  spec.add_actions("shed");
  // Declared in reverse dependency order: reader, then control, then the base.
  v1::QuestionSpec* reader = spec.add_questions();
  reader->set_name("reader");
  reader->mutable_cumulant()->set_question("demand_next_12h");
  reader->set_gamma(0.5);
  reader->mutable_policy()->set_greedy("ctl");
  v1::QuestionSpec* ctl = spec.add_questions();
  ctl->set_name("ctl");
  ctl->mutable_cumulant()->set_signal("demand_mw");
  ctl->set_gamma(0.5);
  ctl->set_control(true);
  auto c = CompilePoolSpec(spec);
  ASSERT_TRUE(c.ok()) << c.status();
  EXPECT_EQ(c->questions[1].level, 1);
  EXPECT_EQ(c->questions[2].level, 0);
  EXPECT_LT(c->questions[0].block, c->questions[1].block);
  EXPECT_LT(c->questions[2].block, c->questions[1].block);
  EXPECT_EQ(c->questions[2].learner, LearnerKind::kQLambda);
  EXPECT_TRUE(c->blocks[c->questions[2].block].action_valued);
  EXPECT_EQ(c->blocks[c->questions[2].block].questions.size(), 1u);
}

TEST(PoolSpec, DefaultsToAutostepAndTdWhereAllowed) {
  v1::PoolSpec spec = Grid();
  spec.mutable_questions(0)->set_learner(v1::TDC);
  *spec.add_questions() = Grid().questions(0);
  spec.mutable_questions(1)->set_name("plain");
  auto c = CompilePoolSpec(spec);
  ASSERT_TRUE(c.ok()) << c.status();
  EXPECT_EQ(c->questions[0].step_rule, StepRuleKind::kFixed);
  EXPECT_EQ(c->questions[1].step_rule, StepRuleKind::kAutostep);
  EXPECT_EQ(c->questions[1].learner, LearnerKind::kTd);
  EXPECT_EQ(c->blocks.size(), 2u) << "different learners never share a block";
}

TEST(PoolSpecJson, UnknownFieldsAndSyntaxErrorsAreRejected) {
  EXPECT_FALSE(PoolSpecFromJson(R"({"name": "x", "signalz": []})").ok());
  EXPECT_FALSE(PoolSpecFromJson(R"({"name": )").ok());
}

}  // namespace
}  // namespace bellwether
