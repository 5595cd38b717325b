#include "core/features/tile_coder.h"

#include <cmath>
#include <utility>

namespace bellwether {
namespace {

// SplitMix64 finalizer: a fixed, platform-independent mixing of 64 bits.
uint64_t Mix(uint64_t x) {
  x += 0x9e3779b97f4a7c15ULL;
  x = (x ^ (x >> 30)) * 0xbf58476d1ce4e5b9ULL;
  x = (x ^ (x >> 27)) * 0x94d049bb133111ebULL;
  return x ^ (x >> 31);
}

}  // namespace

TileCoder::TileCoder(Options options) : options_(std::move(options)) {
  cells_per_dim_ = options_.tiles_per_dim + (options_.periodic ? 0 : 1);
  tiles_per_tiling_ = 1;
  for (size_t i = 0; i < options_.lo.size(); ++i) tiles_per_tiling_ *= cells_per_dim_;
  // Asymmetric displacement: tiling k moves dimension d by k * (2d + 1) / n tiles.
  const size_t dims = options_.lo.size();
  const double n = options_.tilings;
  shifts_.resize(static_cast<size_t>(options_.tilings) * dims);
  for (uint32_t k = 0; k < options_.tilings; ++k) {
    for (size_t d = 0; d < dims; ++d) {
      shifts_[k * dims + d] =
          std::fmod(static_cast<double>(k) * static_cast<double>(2 * d + 1), n) / n;
    }
  }
}

void TileCoder::Encode(absl::Span<const double> inputs, uint32_t base, uint32_t hash_size,
                       SparseFeatures* out) const {
  const size_t dims = options_.lo.size();
  const double tiles = options_.tiles_per_dim;
  // Scaled inputs in tile units, [0, tiles).
  double scaled[8];
  for (size_t d = 0; d < dims; ++d) {
    double u = (inputs[d] - options_.lo[d]) / (options_.hi[d] - options_.lo[d]) * tiles;
    if (options_.periodic) {
      u = std::fmod(u, tiles);
      if (u < 0) u += tiles;
    } else {
      u = std::fmin(std::fmax(u, 0.0), std::nextafter(tiles, 0.0));
    }
    scaled[d] = u;
  }
  // h % hash_size without a division when the table size is a power of two (the same
  // index either way).
  const bool pow2 = hash_size > 0 && (hash_size & (hash_size - 1)) == 0;
  for (uint32_t k = 0; k < options_.tilings; ++k) {
    uint64_t tile = 0;
    uint64_t h = Mix(options_.group_id * 0x100000001b3ULL + k);
    const double* shift = shifts_.data() + k * dims;  // no dimensions: never read
    for (size_t d = 0; d < dims; ++d) {
      auto cell = static_cast<uint64_t>(std::floor(scaled[d] + shift[d]));
      if (options_.periodic) cell %= options_.tiles_per_dim;
      tile = tile * cells_per_dim_ + cell;
      h = Mix(h ^ (cell + 0x632be59bd9b4e019ULL * (d + 1)));
    }
    if (hash_size > 0) {
      const uint64_t index = pow2 ? (h & (hash_size - 1)) : h % hash_size;
      out->Add(base + static_cast<uint32_t>(index), 1.0f);
    } else {
      out->Add(base + static_cast<uint32_t>(k * tiles_per_tiling_ + tile), 1.0f);
    }
  }
}

}  // namespace bellwether
