#include "client/cli/campus_sim.h"

#include <algorithm>
#include <cmath>
#include <numbers>

#include "absl/strings/str_format.h"
#include "absl/time/civil_time.h"
#include "absl/time/time.h"

namespace bellwether::cli {
namespace {

// Start of the simulation: Monday 2026-01-05 00:00 on the campus clock.
const absl::CivilMinute kStart(2026, 1, 5, 0, 0);

}  // namespace

CampusSim::CampusSim(uint64_t seed) : rng_(seed) {
  names_ = {"library", "lab", "residence"};
  buildings_ = {
      {60.0, 140.0, 9.0, 6.0, false},
      {150.0, 110.0, 7.0, 12.0, false},
      {45.0, 90.0, 6.0, 3.0, true},
  };
}

v1::PoolSpec CampusSim::PoolSpec() {
  v1::PoolSpec spec;
  spec.set_name("alder-point");
  spec.set_time_zone("Europe/Amsterdam");
  spec.set_learning(v1::PoolSpec::PER_STREAM);
  auto add_signal = [&](const char* name, const char* unit, double lo, double hi) {
    v1::SignalSpec* s = spec.add_signals();
    s->set_name(name);
    s->set_unit(unit);
    s->set_min(lo);
    s->set_max(hi);
  };
  add_signal("outdoor_temp_c", "degC", -15, 35);
  add_signal("occupancy", "fraction", 0, 1);
  add_signal("power_kw", "kW", 0, 600);
  add_signal("energy_kwh", "kWh", 0, 150);
  auto add_tiles = [&](std::vector<const char*> signals, uint32_t tilings, uint32_t tiles,
                       bool periodic) {
    v1::TileCoding* t = spec.add_features()->mutable_tiles();
    for (const char* s : signals) t->add_signals(s);
    t->set_tilings(tilings);
    t->set_tiles_per_dim(tiles);
    t->set_periodic(periodic);
  };
  add_tiles({"clock.hour_of_day"}, 8, 24, true);
  add_tiles({"clock.day_of_week"}, 4, 7, true);
  add_tiles({"outdoor_temp_c"}, 4, 10, false);
  add_tiles({"power_kw"}, 4, 10, false);
  spec.add_features()->mutable_bias();
  auto add_question = [&](const char* name, double gamma, const char* unit) {
    v1::QuestionSpec* q = spec.add_questions();
    q->set_name(name);
    q->mutable_cumulant()->set_signal("energy_kwh");
    q->set_gamma(gamma);
    q->set_lambda(0.9);
    q->set_unit(unit);
  };
  // 48 quarter-hours = 12 hours; 4 = one hour.
  add_question("energy_next_12h", 1.0 - 1.0 / 48.0, "kWh");
  add_question("energy_next_hour", 1.0 - 1.0 / 4.0, "kWh");
  return spec;
}

void CampusSim::Step(std::vector<v1::Frame>* frames) {
  ++step_;
  const absl::CivilMinute now = kStart + static_cast<int64_t>(step_) * kStepMinutes;
  const double hour = now.hour() + now.minute() / 60.0;
  const int weekday = static_cast<int>(absl::GetWeekday(absl::CivilDay(now)));
  const bool weekend = weekday >= 5;
  std::normal_distribution<double> noise(0.0, 1.0);
  // Weather: a daily cycle plus a slowly wandering anomaly shared by all buildings.
  weather_anomaly_c_ = 0.995 * weather_anomaly_c_ + 0.25 * noise(rng_);
  const double temp =
      4.0 + 5.0 * std::sin(2 * std::numbers::pi * (hour - 9.0) / 24.0) + weather_anomaly_c_;
  frames->resize(buildings_.size());
  for (size_t b = 0; b < buildings_.size(); ++b) {
    const Building& bl = buildings_[b];
    double occ;
    if (bl.residential) {
      occ = (hour < 8 || hour >= 18) ? 0.85 : (weekend ? 0.6 : 0.3);
    } else {
      const bool open = hour >= 8 && hour < 18;
      occ = open ? (weekend ? 0.15 : 0.8) : 0.03;
    }
    occ = std::clamp(occ + 0.05 * noise(rng_), 0.0, 1.0);
    const double heating = std::max(0.0, 16.0 - temp) * bl.heating_kw_per_c;
    const double cooling = std::max(0.0, temp - 22.0) * bl.cooling_kw_per_c;
    const double power =
        std::max(0.0, bl.base_kw + occ * bl.occupancy_kw + heating + cooling + 6.0 * noise(rng_));
    v1::Frame& f = (*frames)[b];
    f.Clear();
    f.set_seq(step_);
    f.set_local_micros(absl::ToUnixMicros(absl::FromCivil(now, absl::UTCTimeZone())));
    f.add_values(temp);
    f.add_values(occ);
    f.add_values(power);
    f.add_values(power * kStepMinutes / 60.0);
  }
}

std::string CampusSim::ClockText() const {
  const absl::CivilMinute now = kStart + static_cast<int64_t>(step_) * kStepMinutes;
  return absl::StrFormat("%04d-%02d-%02d %02d:%02d", now.year(), now.month(), now.day(),
                         now.hour(), now.minute());
}

}  // namespace bellwether::cli
