#include "core/frame_input.h"

#include <cmath>
#include <limits>

#include "gmock/gmock.h"
#include "gtest/gtest.h"

namespace bellwether {
namespace {

using ::testing::HasSubstr;

const std::vector<std::string> kSignals = {"power_kw", "temp_c"};

v1::Frame MakeFrame(uint64_t seq, std::vector<double> values) {
  v1::Frame f;
  f.set_seq(seq);
  for (double v : values) f.add_values(v);
  return f;
}

TEST(ColumnMap, MapsColumnsByNameAndRejectsUnknownOrRepeated) {
  auto map = ColumnMap::Create(kSignals, {"temp_c", "power_kw"});
  ASSERT_TRUE(map.ok());
  EXPECT_EQ(map->signal_of(0), 1u);
  EXPECT_EQ(map->signal_of(1), 0u);
  auto unknown = ColumnMap::Create(kSignals, {"humidity"});
  EXPECT_THAT(unknown.status().message(), HasSubstr("columns[0]: 'humidity'"));
  auto twice = ColumnMap::Create(kSignals, {"temp_c", "temp_c"});
  EXPECT_THAT(twice.status().message(), HasSubstr("appears twice"));
}

TEST(FrameFromProto, ReordersColumnsAndMarksMissingAsNaN) {
  auto map = ColumnMap::Create(kSignals, {"temp_c"});
  ASSERT_TRUE(map.ok());
  std::vector<double> buf;
  FrameInput in;
  ASSERT_TRUE(FrameFromProto(MakeFrame(3, {21.5}), *map, &buf, &in).ok());
  EXPECT_EQ(in.seq, 3u);
  EXPECT_TRUE(std::isnan(in.values[0])) << "signal without a column is missing";
  EXPECT_EQ(in.values[1], 21.5);

  v1::Frame f = MakeFrame(4, {0.0});
  f.add_missing(0);
  ASSERT_TRUE(FrameFromProto(f, *map, &buf, &in).ok());
  EXPECT_TRUE(std::isnan(in.values[1]));
}

TEST(FrameFromProto, RejectsBadFramesNamingSeqAndField) {
  auto map = ColumnMap::Create(kSignals, {});
  ASSERT_TRUE(map.ok());
  std::vector<double> buf;
  FrameInput in;
  const double inf = std::numeric_limits<double>::infinity();
  const double nan = std::numeric_limits<double>::quiet_NaN();
  EXPECT_THAT(FrameFromProto(MakeFrame(0, {1, 2}), *map, &buf, &in).message(),
              HasSubstr("seq must be >= 1"));
  EXPECT_THAT(FrameFromProto(MakeFrame(5, {1}), *map, &buf, &in).message(),
              HasSubstr("frame seq 5: values: has 1 entries, expected 2"));
  EXPECT_THAT(FrameFromProto(MakeFrame(6, {1, inf}), *map, &buf, &in).message(),
              HasSubstr("frame seq 6: values[1] (temp_c)"));
  EXPECT_THAT(FrameFromProto(MakeFrame(7, {nan, 1}), *map, &buf, &in).message(),
              HasSubstr("frame seq 7: values[0] (power_kw): NaN"));
  v1::Frame bad_missing = MakeFrame(8, {1, 2});
  bad_missing.add_missing(9);
  EXPECT_THAT(FrameFromProto(bad_missing, *map, &buf, &in).message(),
              HasSubstr("missing[0]: column 9 is out of range"));
  v1::Frame bad_prob = MakeFrame(9, {1, 2});
  bad_prob.set_behavior_prob(1.5);
  EXPECT_THAT(FrameFromProto(bad_prob, *map, &buf, &in).message(),
              HasSubstr("behavior_prob: 1.5 is outside (0, 1]"));
}

}  // namespace
}  // namespace bellwether
