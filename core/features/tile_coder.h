// Tile coding over a group of real inputs (Sutton & Barto, Reinforcement Learning: An
// Introduction, 2nd ed., 2018, Section 9.5.4): `tilings` grids over the input space, each
// displaced from the previous by an asymmetric offset (1, 3, 5, ... times 1/tilings of a
// tile in dimensions 1, 2, 3, ...), so exactly one tile per tiling is active.
#ifndef BELLWETHER_CORE_FEATURES_TILE_CODER_H_
#define BELLWETHER_CORE_FEATURES_TILE_CODER_H_

#include <cstdint>
#include <vector>

#include "absl/types/span.h"
#include "core/features/sparse_features.h"

namespace bellwether {

class TileCoder {
 public:
  struct Options {
    // Per-dimension input range; values outside are clamped to the edge tile (or wrapped
    // when periodic). lo[i] < hi[i].
    std::vector<double> lo, hi;
    uint32_t tilings = 1;
    uint32_t tiles_per_dim = 1;
    bool periodic = false;
    // Distinguishes groups when hashing.
    uint64_t group_id = 0;
  };

  explicit TileCoder(Options options);

  // Distinct tiles of this coder if stored without hashing.
  uint64_t num_tiles() const { return tiles_per_tiling_ * options_.tilings; }
  uint32_t num_active() const { return options_.tilings; }
  size_t num_inputs() const { return options_.lo.size(); }

  // Adds one active feature per tiling (value 1) for `inputs` (size num_inputs(), all
  // finite). Without hashing, indices are `base + tile` with tile < num_tiles(). With
  // `hash_size` > 0, indices are `base + hash(tile) % hash_size`.
  void Encode(absl::Span<const double> inputs, uint32_t base, uint32_t hash_size,
              SparseFeatures* out) const;

 private:
  Options options_;
  uint32_t cells_per_dim_;  // tiles_per_dim (+1 when not periodic: offsets shift a row in)
  uint64_t tiles_per_tiling_;
  // Tiling k's displacement of dimension d, in tiles, at [k * dims + d] (Encode runs on
  // every frame; these never change).
  std::vector<double> shifts_;
};

}  // namespace bellwether

#endif  // BELLWETHER_CORE_FEATURES_TILE_CODER_H_
