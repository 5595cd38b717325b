#include "core/clock_signals.h"

#include <cmath>

#include "gtest/gtest.h"

namespace bellwether {
namespace {

int64_t UnixMicros(absl::CivilSecond civil, const absl::TimeZone& zone) {
  return absl::ToUnixMicros(absl::FromCivil(civil, zone));
}

TEST(ClockSignals, LocalTimeGivesHourAndWeekday) {
  double out[2];
  // 2000-06-05 was a Monday (check: any calendar).
  const int64_t local = UnixMicros(absl::CivilSecond(2000, 6, 5, 13, 30, 0), absl::UTCTimeZone());
  ComputeClockSignals(FrameTimeKind::kLocal, local, absl::UTCTimeZone(), absl::MakeSpan(out));
  EXPECT_DOUBLE_EQ(out[0], 13.5);
  EXPECT_DOUBLE_EQ(out[1], 0.0 + 13.5 / 24.0);
}

TEST(ClockSignals, UnixTimeFollowsDaylightSaving) {
  absl::TimeZone london;
  ASSERT_TRUE(absl::LoadTimeZone("Europe/London", &london));
  double out[2];
  // 12:00 UTC is 12:00 in London in January (GMT) and 13:00 in July (BST, UTC+1).
  ComputeClockSignals(FrameTimeKind::kUnix,
                      UnixMicros(absl::CivilSecond(2026, 1, 14, 12, 0, 0), absl::UTCTimeZone()),
                      london, absl::MakeSpan(out));
  EXPECT_DOUBLE_EQ(out[0], 12.0);
  ComputeClockSignals(FrameTimeKind::kUnix,
                      UnixMicros(absl::CivilSecond(2026, 7, 14, 12, 0, 0), absl::UTCTimeZone()),
                      london, absl::MakeSpan(out));
  EXPECT_DOUBLE_EQ(out[0], 13.0);
  // 2026-07-14 is a Tuesday.
  EXPECT_DOUBLE_EQ(std::floor(out[1]), 1.0);
}

TEST(ClockSignals, NoTimeMeansMissing) {
  double out[2] = {1, 1};
  ComputeClockSignals(FrameTimeKind::kNone, 0, absl::UTCTimeZone(), absl::MakeSpan(out));
  EXPECT_TRUE(std::isnan(out[0]));
  EXPECT_TRUE(std::isnan(out[1]));
}

}  // namespace
}  // namespace bellwether
