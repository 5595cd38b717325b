// A pool's feature recipe: how one frame's signals become one sparse feature vector,
// computed once per frame and shared by every question of the pool.
//
// Layout of the feature table: tile-coded groups first (each its own range, or all
// hashed into one shared range when the table is smaller than the recipe), then radial
// basis functions, then raw signals, then the bias.
#ifndef BELLWETHER_CORE_FEATURES_FEATURE_RECIPE_H_
#define BELLWETHER_CORE_FEATURES_FEATURE_RECIPE_H_

#include <cstdint>
#include <vector>

#include "absl/types/span.h"
#include "core/features/sparse_features.h"
#include "core/features/tile_coder.h"

namespace bellwether {

class FeatureRecipe {
 public:
  // One tile-coded group: `inputs` index the extended signal vector (declared signals,
  // then clock signals).
  struct TileGroup {
    TileCoder coder;
    std::vector<size_t> inputs;
  };
  // Gaussian RBFs on a grid of centers_per_dim^d centers over the scaled inputs.
  struct RbfGroup {
    std::vector<size_t> inputs;
    std::vector<double> lo, hi;
    uint32_t centers_per_dim = 2;
    double width = 0.5;  // in scaled [0, 1] units
    uint32_t num_centers() const;
  };
  // One feature per input signal, optionally standardized.
  struct RawGroup {
    std::vector<size_t> inputs;
    std::vector<double> lo, hi;  // declared ranges (seed the running statistics)
    bool normalize = false;
  };

  // Running mean and variance of normalized raw inputs (Welford). Owned by the caller
  // (the pool): it is learned state.
  struct NormalizerState {
    std::vector<double> count, mean, m2;
  };

  // `table_size` 0: every tile gets its own entry. Otherwise tiles are hashed into the
  // table's tile range when the recipe has more tiles than fit.
  FeatureRecipe(std::vector<TileGroup> tiles, std::vector<RbfGroup> rbfs,
                std::vector<RawGroup> raws, bool bias, uint32_t table_size);

  // Entries in the feature table (rows of every state-value weight matrix).
  uint32_t num_features() const { return num_features_; }
  // The most features one frame can activate.
  uint32_t max_active() const { return max_active_; }
  // A typical squared norm of a feature vector (the active count for binary features).
  double expected_norm_sq() const { return expected_norm_sq_; }
  bool hashed() const { return hash_size_ > 0; }

  // Fresh normalizer statistics, seeded from the declared ranges.
  NormalizerState NewNormalizerState() const;

  // Fills `out` (cleared first) from the extended signal values; NaN marks a missing
  // value. A tile or RBF group with any missing input contributes no features for this
  // frame; a missing raw signal's feature is inactive. Normalized raw inputs first update
  // `state` with the frame's value. Does not allocate once `out` has max_active() capacity.
  // Returns the number of groups (tile, RBF) and raw inputs left inactive because a value
  // was missing: 0 for a complete frame.
  int Encode(absl::Span<const double> extended_values, NormalizerState* state,
              SparseFeatures* out) const;

 private:
  std::vector<TileGroup> tiles_;
  std::vector<RbfGroup> rbfs_;
  std::vector<RawGroup> raws_;
  std::vector<uint32_t> tile_bases_, rbf_bases_, raw_bases_;
  std::vector<size_t> raw_state_index_;  // first normalizer slot of each raw group
  bool bias_;
  uint32_t bias_index_ = 0;
  uint32_t hash_size_ = 0;
  uint32_t num_features_ = 0;
  uint32_t max_active_ = 0;
  double expected_norm_sq_ = 0;
};

}  // namespace bellwether

#endif  // BELLWETHER_CORE_FEATURES_FEATURE_RECIPE_H_
