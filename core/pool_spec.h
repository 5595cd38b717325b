// Validation of a pool spec and its compiled form, the shape the engine runs.
#ifndef BELLWETHER_CORE_POOL_SPEC_H_
#define BELLWETHER_CORE_POOL_SPEC_H_

#include <memory>
#include <optional>
#include <string>
#include <vector>

#include "absl/status/statusor.h"
#include "absl/time/time.h"
#include "bellwether/v1/pool.pb.h"
#include "core/features/feature_recipe.h"

namespace bellwether {

inline constexpr double kDefaultStepSize = 0.1;
inline constexpr double kDefaultMetaStepSize = 0.01;

enum class CompareOp { kLess, kLessEqual, kGreater, kGreaterEqual };

// `signal op threshold` on a frame's declared signal.
struct CompiledCondition {
  size_t signal = 0;
  CompareOp op = CompareOp::kLess;
  double threshold = 0;

  // Whether it holds for `value` (a NaN value never holds).
  bool Holds(double value) const;
  bool operator==(const CompiledCondition&) const = default;
};

enum class CumulantKind { kSignal, kIndicator, kConstant, kFramePeriod, kQuestion };

struct CompiledCumulant {
  CumulantKind kind = CumulantKind::kSignal;
  size_t signal = 0;             // kSignal
  CompiledCondition condition;   // kIndicator
  double constant = 0;           // kConstant
  size_t question = 0;           // kQuestion: index of the question it reads
};

enum class PolicyKind { kBehavior, kAction, kDistribution, kGreedy };

struct CompiledPolicy {
  PolicyKind kind = PolicyKind::kBehavior;
  uint32_t action = 0;               // kAction
  std::vector<double> probabilities;  // kDistribution, one per action
  size_t control_question = 0;       // kGreedy

  bool operator==(const CompiledPolicy&) const = default;
};

enum class LearnerKind { kTd, kTrueOnlineTd, kTdc, kEmphaticTd, kTreeBackup, kQLambda };
enum class StepRuleKind { kFixed, kAutostep, kTidbd, kSettling };

struct CompiledQuestion {
  std::string name;
  std::string unit;
  CompiledCumulant cumulant;
  double gamma = 0;
  std::vector<CompiledCondition> terminate_when;  // any holds: continuation 0
  CompiledPolicy policy;
  double lambda = 0;
  LearnerKind learner = LearnerKind::kTd;
  StepRuleKind step_rule = StepRuleKind::kAutostep;
  double step_size = kDefaultStepSize;
  double secondary_step_size = kDefaultStepSize;
  double meta_step_size = kDefaultMetaStepSize;
  double rho_clip = 0;  // 0: none
  bool control = false;
  // Learns the cumulant's deviation from its running mean (see QuestionSpec.uncentered).
  bool centered = false;
  // Internal: one component of a successor table (not reported as a question).
  bool internal = false;
  // Answered from successor table `successor` (index into CompiledPoolSpec::tables), or -1.
  int successor = -1;
  double regression_step_size = 0.5;
  // Generalized policy improvement over these tables (the first is `successor`).
  std::vector<int> gpi_tables;
  // Evaluation order: a question comes after every question it reads.
  int level = 0;
  size_t block = 0;           // which block it belongs to
  size_t index_in_block = 0;  // its column in the block's weights
};

// Questions that share target policy, continuation, lambda, learner, step rule and
// evaluation level: one weight matrix (feature-major, a column per question) and one
// trace per stream. Control questions each form their own block.
struct BlockSpec {
  CompiledPolicy policy;
  double gamma = 0;
  std::vector<CompiledCondition> terminate_when;
  double lambda = 0;
  LearnerKind learner = LearnerKind::kTd;
  StepRuleKind step_rule = StepRuleKind::kAutostep;
  double shared_step_size = 0;  // TRUE_ONLINE_TD: the block's one step size
  int level = 0;
  bool action_valued = false;   // TREE_BACKUP and control questions learn q(s, a)
  bool centered = false;        // cumulants centered on their running mean
  double progress_decay = 0.999;  // the pool's progress averaging decay
  bool rupee = true;              // track RUPEE (costs two extra weight-sized arrays)
  std::vector<size_t> questions;  // indices into CompiledPoolSpec::questions
};

// A successor table: its components are internal questions
// questions[first, first + count), one per phi component, learned in one block.
struct SuccessorTableSpec {
  std::string name;
  size_t first = 0;
  size_t count = 0;
};

struct CompiledPoolSpec {
  v1::PoolSpec proto;
  absl::TimeZone time_zone;
  std::vector<std::string> signal_names;  // declared order
  std::vector<std::string> signal_units;
  std::vector<std::string> actions;
  std::shared_ptr<const FeatureRecipe> recipe;
  // The spec's questions first (num_visible_questions of them), then the successor
  // tables' internal components.
  std::vector<CompiledQuestion> questions;
  size_t num_visible_questions = 0;
  std::vector<SuccessorTableSpec> tables;
  std::vector<BlockSpec> blocks;  // in evaluation order (by level); successor-table
                                  // questions belong to no block
  bool pooled = false;
  double progress_decay = 0.999;
  size_t verify_window = 1000;
  size_t verify_max_held = 10000;
  // Behavior probabilities are estimated (not carried by frames).
  bool estimate_behavior = false;
  std::shared_ptr<const TileCoder> behavior_cells;  // coarse tiling for the estimate
  std::vector<size_t> behavior_cell_inputs;          // extended-signal indices

  // Declared signals plus clock signals.
  size_t num_extended_signals() const;
  // Whether any question needs frames' actions.
  bool needs_actions() const;
};

// Bytes of learned state one stream adds (per-stream learning: weights and step-size
// state of every block, traces, verifier rings) and bytes the pool holds once (pooled
// learning: the shared weights). An estimate from the compiled shapes, for limits.
struct StateEstimate {
  uint64_t per_stream_bytes = 0;
  uint64_t shared_bytes = 0;
};
StateEstimate EstimateState(const CompiledPoolSpec& spec);

// Checks every field of `spec` and compiles it. Errors are INVALID_ARGUMENT with the
// pool name, the field path and the reason, e.g.
//   "pool grid: questions[0] (demand_next_12h).gamma: 1.2 is outside [0, 1]".
// Question dependencies (a cumulant reading another question, a greedy target policy)
// must form no cycle; a cycle is named: "questions: cycle a -> b -> a".
absl::StatusOr<CompiledPoolSpec> CompilePoolSpec(const v1::PoolSpec& spec);

}  // namespace bellwether

#endif  // BELLWETHER_CORE_POOL_SPEC_H_
