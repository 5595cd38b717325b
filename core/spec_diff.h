// What applying a new spec to an existing pool changes, question by question.
#ifndef BELLWETHER_CORE_SPEC_DIFF_H_
#define BELLWETHER_CORE_SPEC_DIFF_H_

#include <string>
#include <vector>

#include "bellwether/v1/pool.pb.h"

namespace bellwether {

struct SpecDiff {
  // The signals, features, actions, time zone, learning mode, progress settings or
  // successor tables changed: nothing learned carries over.
  bool recipe_changed = false;
  std::vector<std::string> added;      // questions new in `next`
  std::vector<std::string> changed;    // same name, different learning fields: start fresh
  std::vector<std::string> retired;    // questions only in `old`
  std::vector<std::string> unchanged;  // keep their learned state
};

// Compares two specs by question name. A question's unit is not a learning field.
SpecDiff DiffPoolSpecs(const v1::PoolSpec& old, const v1::PoolSpec& next);

}  // namespace bellwether

#endif  // BELLWETHER_CORE_SPEC_DIFF_H_
