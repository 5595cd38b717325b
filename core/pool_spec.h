// Validation of a pool spec and its compiled form, the shape the engine runs.
#ifndef BELLWETHER_CORE_POOL_SPEC_H_
#define BELLWETHER_CORE_POOL_SPEC_H_

#include <memory>
#include <string>
#include <vector>

#include "absl/status/statusor.h"
#include "absl/time/time.h"
#include "bellwether/v1/pool.pb.h"
#include "core/features/feature_recipe.h"

namespace bellwether {

inline constexpr double kDefaultStepSize = 0.1;

struct CompiledQuestion {
  std::string name;
  std::string unit;
  size_t cumulant_signal = 0;  // index into the declared signals
  double gamma = 0;
  double lambda = 0;
  double step_size = kDefaultStepSize;
  size_t block = 0;           // which block it belongs to
  size_t index_in_block = 0;  // its column in the block's weights
};

// Questions sharing continuation and trace decay: one weight matrix (feature-major,
// a column per question) and one trace per stream.
struct BlockSpec {
  double gamma = 0;
  double lambda = 0;
  std::vector<size_t> questions;  // indices into CompiledPoolSpec::questions
};

struct CompiledPoolSpec {
  v1::PoolSpec proto;
  absl::TimeZone time_zone;
  std::vector<std::string> signal_names;  // declared order
  std::vector<std::string> signal_units;
  std::shared_ptr<const FeatureRecipe> recipe;
  std::vector<CompiledQuestion> questions;
  std::vector<BlockSpec> blocks;
  bool pooled = false;

  // Declared signals plus clock signals.
  size_t num_extended_signals() const;
};

// Checks every field of `spec` and compiles it. Errors are INVALID_ARGUMENT with the
// pool name, the field path and the reason, e.g.
//   "pool grid: questions[0] (demand_next_12h): gamma 1.2 is outside [0, 1]".
absl::StatusOr<CompiledPoolSpec> CompilePoolSpec(const v1::PoolSpec& spec);

}  // namespace bellwether

#endif  // BELLWETHER_CORE_POOL_SPEC_H_
