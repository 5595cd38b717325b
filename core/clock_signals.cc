#include "core/clock_signals.h"

#include <limits>

#include "absl/time/civil_time.h"

namespace bellwether {

void ComputeClockSignals(FrameTimeKind kind, int64_t micros, const absl::TimeZone& zone,
                         absl::Span<double> out) {
  absl::CivilSecond civil;
  int64_t sub_micros = 0;
  switch (kind) {
    case FrameTimeKind::kNone:
      for (double& v : out) v = std::numeric_limits<double>::quiet_NaN();
      return;
    case FrameTimeKind::kUnix: {
      const absl::Time t = absl::FromUnixMicros(micros);
      civil = absl::ToCivilSecond(t, zone);
      sub_micros = ((micros % 1000000) + 1000000) % 1000000;
      break;
    }
    case FrameTimeKind::kLocal: {
      int64_t secs = micros / 1000000;
      sub_micros = micros % 1000000;
      if (sub_micros < 0) {
        sub_micros += 1000000;
        secs -= 1;
      }
      civil = absl::CivilSecond(1970, 1, 1, 0, 0, 0) + secs;
      break;
    }
  }
  const double hour = civil.hour() + civil.minute() / 60.0 +
                      (civil.second() + static_cast<double>(sub_micros) * 1e-6) / 3600.0;
  // absl::Weekday: monday = 0 ... sunday = 6.
  const int weekday = static_cast<int>(absl::GetWeekday(absl::CivilDay(civil)));
  out[0] = hour;
  out[1] = weekday + hour / 24.0;
}

}  // namespace bellwether
