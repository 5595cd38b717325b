#include "core/features/tile_coder.h"

#include <algorithm>
#include <set>

#include "gtest/gtest.h"

namespace bellwether {
namespace {

TileCoder MakeCoder(uint32_t tilings, uint32_t tiles, bool periodic, size_t dims = 1) {
  TileCoder::Options o;
  o.lo.assign(dims, 0.0);
  o.hi.assign(dims, 24.0);
  o.tilings = tilings;
  o.tiles_per_dim = tiles;
  o.periodic = periodic;
  return TileCoder(o);
}

size_t SharedTiles(const TileCoder& c, double a, double b) {
  SparseFeatures fa, fb;
  c.Encode({a}, 0, 0, &fa);
  c.Encode({b}, 0, 0, &fb);
  std::set<uint32_t> sa(fa.index.begin(), fa.index.end());
  size_t shared = 0;
  for (uint32_t i : fb.index) shared += sa.count(i);
  return shared;
}

TEST(TileCoder, OneActiveTilePerTilingWithinRange) {
  const TileCoder c = MakeCoder(8, 12, false);
  EXPECT_EQ(c.num_tiles(), 8u * 13u);
  for (double x : {-5.0, 0.0, 3.3, 11.99, 23.999, 24.0, 100.0}) {
    SparseFeatures f;
    c.Encode({x}, 10, 0, &f);
    ASSERT_EQ(f.size(), 8u) << x;
    std::set<uint32_t> distinct(f.index.begin(), f.index.end());
    EXPECT_EQ(distinct.size(), 8u) << "each tiling has its own tiles";
    for (uint32_t i : f.index) {
      EXPECT_GE(i, 10u);
      EXPECT_LT(i, 10u + c.num_tiles());
    }
  }
}

TEST(TileCoder, NearbyInputsShareMoreTilesThanDistantOnes) {
  const TileCoder c = MakeCoder(8, 12, false);
  EXPECT_EQ(SharedTiles(c, 6.0, 6.0), 8u);
  EXPECT_GT(SharedTiles(c, 6.0, 6.5), SharedTiles(c, 6.0, 7.5));
  EXPECT_EQ(SharedTiles(c, 2.0, 20.0), 0u);
}

TEST(TileCoder, PeriodicWrapsMidnightNextToEleventhHour) {
  const TileCoder periodic = MakeCoder(8, 12, true);
  const TileCoder flat = MakeCoder(8, 12, false);
  EXPECT_GT(SharedTiles(periodic, 23.9, 0.1), 4u);
  EXPECT_EQ(SharedTiles(flat, 23.9, 0.1), 0u);
  EXPECT_EQ(periodic.num_tiles(), 8u * 12u);
}

TEST(TileCoder, WidthOneTilesAreOneHot) {
  // One tiling of unit-width tiles: every integer state its own feature (tabular).
  TileCoder::Options o;
  o.lo = {0.0};
  o.hi = {7.0};
  o.tilings = 1;
  o.tiles_per_dim = 7;
  const TileCoder c(o);
  std::set<uint32_t> seen;
  for (int s = 0; s < 7; ++s) {
    SparseFeatures f;
    c.Encode({static_cast<double>(s)}, 0, 0, &f);
    ASSERT_EQ(f.size(), 1u);
    EXPECT_EQ(f.index[0], static_cast<uint32_t>(s));
    seen.insert(f.index[0]);
  }
  EXPECT_EQ(seen.size(), 7u);
}

TEST(TileCoder, HashedIndicesStayInTable) {
  const TileCoder c = MakeCoder(16, 64, false, 2);
  for (int i = 0; i < 500; ++i) {
    SparseFeatures f;
    c.Encode({i * 0.05, 24.0 - i * 0.03}, 3, 101, &f);
    ASSERT_EQ(f.size(), 16u);
    for (uint32_t idx : f.index) {
      EXPECT_GE(idx, 3u);
      EXPECT_LT(idx, 104u);
    }
  }
}

}  // namespace
}  // namespace bellwether
