// The demo scenario: an invented small campus ("Alder Point") of three buildings whose
// electricity use follows weather, occupancy and the working week. A deterministic
// simulation (seeded), not real data; for demos only.
#ifndef BELLWETHER_CLIENT_CLI_CAMPUS_SIM_H_
#define BELLWETHER_CLIENT_CLI_CAMPUS_SIM_H_

#include <cstdint>
#include <random>
#include <string>
#include <vector>

#include "bellwether/v1/frame.pb.h"
#include "bellwether/v1/pool.pb.h"

namespace bellwether::cli {

class CampusSim {
 public:
  // Minutes between frames.
  static constexpr int kStepMinutes = 15;

  explicit CampusSim(uint64_t seed = 7);

  // The demo pool: signals, recipe and questions (energy over the next ~12 hours and
  // next hour, discounted).
  static v1::PoolSpec PoolSpec();
  // Building (stream) names.
  const std::vector<std::string>& buildings() const { return names_; }

  // Advances the simulation one step and writes each building's frame (values in the
  // pool's declared signal order, wall-clock time in the pool's zone, seq = step).
  void Step(std::vector<v1::Frame>* frames);
  // Simulated wall clock of the last step, "YYYY-MM-DD HH:MM".
  std::string ClockText() const;

 private:
  struct Building {
    double base_kw, occupancy_kw, heating_kw_per_c, cooling_kw_per_c;
    bool residential;
  };
  std::mt19937_64 rng_;
  std::vector<std::string> names_;
  std::vector<Building> buildings_;
  uint64_t step_ = 0;
  double weather_anomaly_c_ = 0;
};

}  // namespace bellwether::cli

#endif  // BELLWETHER_CLIENT_CLI_CAMPUS_SIM_H_
