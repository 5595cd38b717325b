// Weights of one block of questions, stored feature-major: row j holds feature j's
// weight for every question of the block, contiguous, so the update for one active
// feature is one contiguous axpy over the block's questions.
#ifndef BELLWETHER_CORE_LEARNERS_BLOCK_WEIGHTS_H_
#define BELLWETHER_CORE_LEARNERS_BLOCK_WEIGHTS_H_

#include <cstdint>
#include <vector>

#include "absl/types/span.h"
#include "core/features/sparse_features.h"

namespace bellwether {

class BlockWeights {
 public:
  // All weights start at zero.
  BlockWeights(uint32_t num_features, uint32_t num_questions);

  uint32_t num_features() const { return num_features_; }
  uint32_t num_questions() const { return num_questions_; }

  float* row(uint32_t feature) { return &w_[static_cast<size_t>(feature) * num_questions_]; }
  const float* row(uint32_t feature) const {
    return &w_[static_cast<size_t>(feature) * num_questions_];
  }
  absl::Span<const float> data() const { return w_; }

  // v[q] = sum_j x_j * w[j][q] for every question q of the block. `v` has
  // num_questions() entries. Does not allocate.
  void Predict(const SparseFeatures& x, absl::Span<float> v) const;

 private:
  uint32_t num_features_;
  uint32_t num_questions_;
  std::vector<float> w_;
};

}  // namespace bellwether

#endif  // BELLWETHER_CORE_LEARNERS_BLOCK_WEIGHTS_H_
