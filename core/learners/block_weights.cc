#include "core/learners/block_weights.h"

#include <algorithm>

namespace bellwether {

BlockWeights::BlockWeights(uint32_t num_features, uint32_t num_questions)
    : num_features_(num_features),
      num_questions_(num_questions),
      w_(static_cast<size_t>(num_features) * num_questions, 0.0f) {}

void BlockWeights::Predict(const SparseFeatures& x, absl::Span<float> v) const {
  std::fill(v.begin(), v.end(), 0.0f);
  const uint32_t nq = num_questions_;
  for (size_t k = 0; k < x.size(); ++k) {
    const float xj = x.value[k];
    const float* __restrict w = row(x.index[k]);
    float* __restrict out = v.data();
    for (uint32_t q = 0; q < nq; ++q) out[q] += xj * w[q];
  }
}

}  // namespace bellwether
