// The synthetic buildings of the load benchmarks (tests/bench/load_gen.cc, engine_bench.cc):
// an invented campus, one week of 5-minute frames per stream (2,016 frames), in the
// declared signal order of tests/bench/load_gen_pool*.json (outdoor_temp_c, occupancy,
// power_kw, energy_kwh). Seeded; no real site or data.
#ifndef BELLWETHER_TESTS_BENCH_SYNTHETIC_BUILDINGS_H_
#define BELLWETHER_TESTS_BENCH_SYNTHETIC_BUILDINGS_H_

#include <algorithm>
#include <cmath>
#include <cstdint>
#include <numbers>
#include <random>
#include <vector>

namespace bellwether::bench {

constexpr int kFramesPerWeek = 7 * 24 * 12;
constexpr int64_t kFrameSeconds = 300;
constexpr int kSignals = 4;
// 2026-01-05 00:00 UTC, a Monday (01:00 in the pool's zone, Europe/Amsterdam).
constexpr int64_t kStartMicros = int64_t{1767571200} * 1000000;

inline std::vector<double> BuildingWeek(uint64_t seed, int index) {
  std::mt19937_64 rng(seed * 1000003u + static_cast<uint64_t>(index));
  std::uniform_real_distribution<double> u(0.0, 1.0);
  std::normal_distribution<double> noise(0.0, 1.0);
  const double base_kw = 20 + 80 * u(rng);
  const double occupied_kw = 60 + 300 * u(rng);
  const double heat_kw_per_c = 2 + 8 * u(rng);
  const double cool_kw_per_c = 2 + 10 * u(rng);
  const double open_hour = 6 + 3 * u(rng);
  const double close_hour = 16 + 5 * u(rng);
  const double weekend_share = 0.05 + 0.5 * u(rng);
  const double site_offset_c = 4 * (u(rng) - 0.5);
  double anomaly_c = 0;
  std::vector<double> values;
  values.reserve(static_cast<size_t>(kFramesPerWeek * kSignals));
  for (int k = 0; k < kFramesPerWeek; ++k) {
    const double hour = std::fmod(1.0 + static_cast<double>(k) / 12.0, 24.0);  // local
    const int weekday = static_cast<int>((1.0 + static_cast<double>(k) / 12.0) / 24.0) % 7;
    anomaly_c = 0.995 * anomaly_c + 0.15 * noise(rng);
    const double temp = std::clamp(
        4 + 5 * std::sin(2 * std::numbers::pi * (hour - 9) / 24) + anomaly_c + site_offset_c, -15.0,
        35.0);
    double occupancy = (hour >= open_hour && hour < close_hour) ? 0.8 : 0.05;
    if (weekday >= 5) occupancy *= weekend_share;
    occupancy = std::clamp(occupancy + 0.05 * noise(rng), 0.0, 1.0);
    const double power =
        std::clamp(base_kw + occupied_kw * occupancy + heat_kw_per_c * std::max(0.0, 16 - temp) +
                       cool_kw_per_c * std::max(0.0, temp - 23) + 5 * noise(rng),
                   0.0, 600.0);
    values.push_back(temp);
    values.push_back(occupancy);
    values.push_back(power);
    values.push_back(power * static_cast<double>(kFrameSeconds) / 3600.0);  // kWh
  }
  return values;
}

}  // namespace bellwether::bench

#endif  // BELLWETHER_TESTS_BENCH_SYNTHETIC_BUILDINGS_H_
