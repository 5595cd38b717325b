// Clock signals derived from a frame's timestamp in the pool's time zone. A building's
// load follows local time, so these are computed on the local (daylight-saving aware)
// clock.
#ifndef BELLWETHER_CORE_CLOCK_SIGNALS_H_
#define BELLWETHER_CORE_CLOCK_SIGNALS_H_

#include <array>
#include "absl/strings/string_view.h"

#include "absl/time/time.h"
#include "absl/types/span.h"
#include "core/frame_input.h"

namespace bellwether {

// Names, in the order they follow the declared signals in the extended signal vector.
//   clock.hour_of_day: [0, 24), fractional (13:30 is 13.5).
//   clock.day_of_week: [0, 7), Monday 00:00 = 0, fractional (Tuesday 12:00 is 1.5).
inline constexpr std::array<absl::string_view, 2> kClockSignalNames = {"clock.hour_of_day",
                                                                       "clock.day_of_week"};
inline constexpr size_t kNumClockSignals = kClockSignalNames.size();

// Range of clock signal `i` (for tile coding).
inline constexpr double kClockSignalMax[kNumClockSignals] = {24.0, 7.0};

// Writes the clock signals of a frame time into `out` (size kNumClockSignals); NaN when
// the frame has no time.
void ComputeClockSignals(FrameTimeKind kind, int64_t micros, const absl::TimeZone& zone,
                         absl::Span<double> out);

}  // namespace bellwether

#endif  // BELLWETHER_CORE_CLOCK_SIGNALS_H_
