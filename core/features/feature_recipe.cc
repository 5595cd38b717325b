#include "core/features/feature_recipe.h"

#include <algorithm>
#include <cmath>
#include <utility>

namespace bellwether {
namespace {

constexpr double kClip = 5.0;

}  // namespace

uint32_t FeatureRecipe::RbfGroup::num_centers() const {
  uint32_t n = 1;
  for (size_t d = 0; d < inputs.size(); ++d) n *= centers_per_dim;
  return n;
}

FeatureRecipe::FeatureRecipe(std::vector<TileGroup> tiles, std::vector<RbfGroup> rbfs,
                             std::vector<RawGroup> raws, bool bias, uint32_t table_size)
    : tiles_(std::move(tiles)), rbfs_(std::move(rbfs)), raws_(std::move(raws)), bias_(bias) {
  uint64_t exact_tiles = 0;
  for (const TileGroup& g : tiles_) {
    exact_tiles += g.coder.num_tiles();
    max_active_ += g.coder.num_active();
    expected_norm_sq_ += g.coder.num_active();
  }
  uint64_t dense = 0;  // RBF + raw + bias entries, never hashed
  for (const RbfGroup& g : rbfs_) {
    dense += g.num_centers();
    max_active_ += g.num_centers();
    expected_norm_sq_ += 1.0;
  }
  for (const RawGroup& g : raws_) {
    dense += g.inputs.size();
    max_active_ += static_cast<uint32_t>(g.inputs.size());
    expected_norm_sq_ += static_cast<double>(g.inputs.size());
  }
  if (bias_) {
    dense += 1;
    max_active_ += 1;
    expected_norm_sq_ += 1.0;
  }
  uint64_t base = 0;
  if (table_size == 0 || exact_tiles + dense <= table_size) {
    for (const TileGroup& g : tiles_) {
      tile_bases_.push_back(static_cast<uint32_t>(base));
      base += g.coder.num_tiles();
    }
  } else {
    hash_size_ = static_cast<uint32_t>(table_size - dense);
    tile_bases_.assign(tiles_.size(), 0);
    base = hash_size_;
  }
  for (const RbfGroup& g : rbfs_) {
    rbf_bases_.push_back(static_cast<uint32_t>(base));
    base += g.num_centers();
  }
  size_t slot = 0;
  for (const RawGroup& g : raws_) {
    raw_bases_.push_back(static_cast<uint32_t>(base));
    raw_state_index_.push_back(slot);
    slot += g.inputs.size();
    base += g.inputs.size();
  }
  bias_index_ = static_cast<uint32_t>(base);
  num_features_ = static_cast<uint32_t>(base + (bias_ ? 1 : 0));
  expected_norm_sq_ = std::max(expected_norm_sq_, 1.0);
}

FeatureRecipe::NormalizerState FeatureRecipe::NewNormalizerState() const {
  NormalizerState s;
  for (const RawGroup& g : raws_) {
    for (size_t d = 0; d < g.inputs.size(); ++d) {
      // The declared range as one pseudo-observation: mean at its middle, and a sum of
      // squares giving a standard deviation of a quarter of the range.
      const double sd = (g.hi[d] - g.lo[d]) / 4.0;
      s.count.push_back(1.0);
      s.mean.push_back((g.lo[d] + g.hi[d]) / 2.0);
      s.m2.push_back(sd * sd);
    }
  }
  return s;
}

int FeatureRecipe::Encode(absl::Span<const double> extended_values, NormalizerState* state,
                          SparseFeatures* out) const {
  out->Clear();
  int gaps = 0;
  double inputs[8];
  for (size_t gi = 0; gi < tiles_.size(); ++gi) {
    const TileGroup& g = tiles_[gi];
    bool complete = true;
    for (size_t d = 0; d < g.inputs.size(); ++d) {
      inputs[d] = extended_values[g.inputs[d]];
      complete &= !std::isnan(inputs[d]);
    }
    if (!complete) {
      ++gaps;
      continue;
    }
    g.coder.Encode(absl::MakeConstSpan(inputs, g.inputs.size()), tile_bases_[gi], hash_size_,
                   out);
  }
  for (size_t gi = 0; gi < rbfs_.size(); ++gi) {
    const RbfGroup& g = rbfs_[gi];
    bool complete = true;
    for (size_t d = 0; d < g.inputs.size(); ++d) {
      const double v = extended_values[g.inputs[d]];
      complete &= !std::isnan(v);
      inputs[d] = std::clamp((v - g.lo[d]) / (g.hi[d] - g.lo[d]), 0.0, 1.0);
    }
    if (!complete) {
      ++gaps;
      continue;
    }
    // phi_c = exp(-|u - c|^2 / (2 width^2)), centers evenly spaced on [0, 1].
    const uint32_t n = g.num_centers();
    const double inv = 1.0 / (2.0 * g.width * g.width);
    const double step = 1.0 / (g.centers_per_dim - 1);
    for (uint32_t c = 0; c < n; ++c) {
      uint32_t rest = c;
      double dist2 = 0;
      for (size_t d = 0; d < g.inputs.size(); ++d) {
        const double center = (rest % g.centers_per_dim) * step;
        rest /= g.centers_per_dim;
        dist2 += (inputs[d] - center) * (inputs[d] - center);
      }
      out->Add(rbf_bases_[gi] + c, static_cast<float>(std::exp(-dist2 * inv)));
    }
  }
  for (size_t gi = 0; gi < raws_.size(); ++gi) {
    const RawGroup& g = raws_[gi];
    for (size_t d = 0; d < g.inputs.size(); ++d) {
      const double v = extended_values[g.inputs[d]];
      if (std::isnan(v)) {
        ++gaps;
        continue;
      }
      double value = v;
      if (g.normalize) {
        const size_t s = raw_state_index_[gi] + d;
        // Welford's update, then standardize with the statistics including this value.
        state->count[s] += 1.0;
        const double delta = v - state->mean[s];
        state->mean[s] += delta / state->count[s];
        state->m2[s] += delta * (v - state->mean[s]);
        const double sd = std::sqrt(state->m2[s] / state->count[s]);
        value = sd > 0 ? std::clamp((v - state->mean[s]) / sd, -kClip, kClip) : 0.0;
      }
      out->Add(raw_bases_[gi] + static_cast<uint32_t>(d), static_cast<float>(value));
    }
  }
  if (bias_) out->Add(bias_index_, 1.0f);
  return gaps;
}

}  // namespace bellwether
