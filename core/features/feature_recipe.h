// A pool's feature recipe: how one frame's signals become one sparse feature vector,
// computed once per frame and shared by every question of the pool.
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

  // `table_size` 0: every tile gets its own entry. Otherwise tiles are hashed into the
  // table when the recipe has more tiles than fit (the bias keeps a reserved entry).
  FeatureRecipe(std::vector<TileGroup> groups, bool bias, uint32_t table_size);

  // Entries in the feature table (rows of every weight matrix).
  uint32_t num_features() const { return num_features_; }
  // The most features one frame can activate.
  uint32_t max_active() const { return max_active_; }
  bool hashed() const { return hash_size_ > 0; }

  // Fills `out` (cleared first) from the extended signal values; NaN marks a missing
  // value, and a group with any missing input contributes no features for this frame.
  // Does not allocate once `out` has max_active() capacity.
  void Encode(absl::Span<const double> extended_values, SparseFeatures* out) const;

 private:
  std::vector<TileGroup> groups_;
  std::vector<uint32_t> bases_;
  bool bias_;
  uint32_t bias_index_ = 0;
  uint32_t hash_size_ = 0;
  uint32_t num_features_ = 0;
  uint32_t max_active_ = 0;
};

}  // namespace bellwether

#endif  // BELLWETHER_CORE_FEATURES_FEATURE_RECIPE_H_
