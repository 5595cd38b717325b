#include "core/features/feature_recipe.h"

#include <cmath>
#include <utility>

namespace bellwether {

FeatureRecipe::FeatureRecipe(std::vector<TileGroup> groups, bool bias, uint32_t table_size)
    : groups_(std::move(groups)), bias_(bias) {
  uint64_t exact = 0;
  for (const TileGroup& g : groups_) {
    exact += g.coder.num_tiles();
    max_active_ += g.coder.num_active();
  }
  if (bias_) max_active_ += 1;
  const uint64_t bias_entries = bias_ ? 1 : 0;
  if (table_size == 0 || exact + bias_entries <= table_size) {
    uint64_t base = 0;
    for (const TileGroup& g : groups_) {
      bases_.push_back(static_cast<uint32_t>(base));
      base += g.coder.num_tiles();
    }
    bias_index_ = static_cast<uint32_t>(base);
    num_features_ = static_cast<uint32_t>(base + bias_entries);
  } else {
    // Hashed: all groups share [0, table_size - bias_entries); the bias takes the last.
    hash_size_ = static_cast<uint32_t>(table_size - bias_entries);
    bases_.assign(groups_.size(), 0);
    bias_index_ = hash_size_;
    num_features_ = table_size;
  }
}

void FeatureRecipe::Encode(absl::Span<const double> extended_values,
                           SparseFeatures* out) const {
  out->Clear();
  double inputs[8];
  for (size_t gi = 0; gi < groups_.size(); ++gi) {
    const TileGroup& g = groups_[gi];
    bool complete = true;
    for (size_t d = 0; d < g.inputs.size(); ++d) {
      inputs[d] = extended_values[g.inputs[d]];
      complete &= !std::isnan(inputs[d]);
    }
    if (!complete) continue;
    g.coder.Encode(absl::MakeConstSpan(inputs, g.inputs.size()), bases_[gi], hash_size_, out);
  }
  if (bias_) out->Add(bias_index_, 1.0f);
}

}  // namespace bellwether
