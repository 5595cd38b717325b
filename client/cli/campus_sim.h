// The demo scenario: the invented Alder Point campus (a simulation of our own, not real
// data; for demos only). Deterministic from its seeds.
//
// Buildings (pool "alder-point-buildings", a frame every 15 simulated minutes): three
// buildings whose electricity follows the weather (a seasonal and daily cycle with a
// wandering anomaly, cloud cover), occupancy and the working week. Each has one
// conditioned zone: a first-order thermal model (envelope loss, thermal mass, gains from
// people, equipment and sun) whose heat pump heats or cools towards the setpoint the
// building's usual schedule picked (`setback`, `comfort`, `precondition`), within its
// capacity, so the zone temperature and the energy respond to the setpoint actions.
//
// Robots (pool "alder-point-robots", a frame about every 30 simulated seconds): delivery
// robots that drive between parcel lockers across the campus. The battery drains with
// the distance driven and the load carried (plus the electronics' constant draw);
// charging happens only docked at the charger and takes time (slower above 80 %). The
// usual behavior is stochastic: its action probabilities depend on the battery level and
// on being docked, and each frame carries the action taken and the probability the
// behavior gave it. A robot whose battery runs flat is carried back to the charger by
// staff: its next frame is a restart at the charger.
#ifndef BELLWETHER_CLIENT_CLI_CAMPUS_SIM_H_
#define BELLWETHER_CLIENT_CLI_CAMPUS_SIM_H_

#include <array>
#include <cstdint>
#include <random>
#include <string>
#include <vector>

#include "bellwether/v1/frame.pb.h"
#include "bellwether/v1/pool.pb.h"

namespace bellwether::cli {

class CampusBuildings {
 public:
  static constexpr int kStepMinutes = 15;
  static constexpr char kPool[] = "alder-point-buildings";
  // Setpoint actions, in the pool's action order.
  enum Action { kSetback = 0, kComfort = 1, kPrecondition = 2 };
  static constexpr int kNumActions = 3;

  explicit CampusBuildings(uint64_t seed = 7);

  // The pool: signals (outdoor_temp_c, occupancy, zone_temp_c, power_kw, energy_kwh, in
  // this order), actions, a recipe of hour-of-day, weekday-by-hour and hour-of-week tiles
  // plus the weather and the zone temperature, and the questions energy_next_12h and
  // energy_next_hour (centered, SETTLING steps: the building recipe's style).
  static v1::PoolSpec PoolSpec();
  const std::vector<std::string>& names() const { return names_; }

  // Writes each building's frame for the current state (values in the pool's signal
  // order, wall-clock time in the pool's zone, seq = step number from 1, the setpoint
  // action the schedule picked and its probability), then advances the simulation over
  // the next 15 minutes under that action.
  void Step(std::vector<v1::Frame>* frames);
  // Like Step, but every building takes `action` (for tests of the thermal response);
  // the frames' behavior_prob is still the schedule's probability of that action.
  void StepWith(Action action, std::vector<v1::Frame>* frames);

  // The schedule's action probabilities for building `b` at the current time.
  std::array<double, kNumActions> Behavior(size_t b) const;
  double zone_temp_c(size_t b) const { return state_[b].zone_c; }
  double outdoor_temp_c() const { return outdoor_c_; }
  // Simulated wall clock of the last frame written, e.g. "Mon 2026-01-05 00:00".
  std::string ClockText() const;

 private:
  struct Building {
    double base_kw;                   // always-on electric load
    double plug_kw;                   // lighting and equipment at full occupancy
    double people_kw;                 // heat from people at full occupancy
    double ua_kw_per_c;               // envelope loss
    double capacity_kwh_per_c;        // thermal mass
    double heat_max_kw, cool_max_kw;  // heat pump capacity (thermal)
    double solar_kw;                  // solar gain at noon, clear sky
    int kind;                         // 0 library, 1 lab, 2 residence
  };
  struct State {
    double zone_c;
    double occupancy;
  };
  void Advance(const std::vector<int>& actions, std::vector<v1::Frame>* frames);
  double Occupancy(size_t b) const;  // expected occupancy now (before noise)

  std::mt19937_64 rng_;
  std::vector<std::string> names_;
  std::vector<Building> buildings_;
  std::vector<State> state_;
  std::vector<double> last_power_;  // kW over the last 15 minutes, per building
  uint64_t step_ = 0;               // frames written so far
  double anomaly_c_ = 0, cloud_ = 0.4, outdoor_c_ = 0;
};

class DeliveryRobots {
 public:
  static constexpr double kFrameSeconds = 30;
  static constexpr char kPool[] = "alder-point-robots";
  enum Action { kDrive = 0, kToCharger = 1, kCharge = 2, kPark = 3 };
  static constexpr int kNumActions = 4;

  explicit DeliveryRobots(uint64_t seed = 11, size_t count = 4);

  // The pool (POOLED learning: one set of weights from every robot): signals
  // battery_pct, dist_to_charger_m, at_charger, load_kg (in this order); actions drive,
  // to_charger, charge, park; questions seconds_until_recharge (seconds until the battery
  // falls under 10 % or the robot is at its charger), p_reach_charger (the chance it
  // reaches the charger before its battery falls under 10 %, under its usual behavior) and
  // p_reach_charger_if_sent (the same if it heads straight back: off-policy, target
  // action to_charger).
  static v1::PoolSpec PoolSpec();
  const std::vector<std::string>& names() const { return names_; }

  // Writes each robot's frame (state, action the behavior picked, its probability;
  // Unix time; seq = step number from 1; restart after a flat battery), then advances
  // every robot over the frame's period under that action.
  void Step(std::vector<v1::Frame>* frames);
  // Like Step, but robot `r` takes `action` (its frame's behavior_prob is still the
  // behavior's probability of it, which may be 0 and then is left unset).
  // Behavior() and the accessors below describe the state the next frame will report,
  // except for a robot that just ran flat (carried back at the start of the next step).
  void StepWith(size_t r, Action action, std::vector<v1::Frame>* frames);

  // The usual behavior's action probabilities for robot `r` in its current state.
  std::array<double, kNumActions> Behavior(size_t r) const;
  double battery_pct(size_t r) const { return robots_[r].battery; }
  double dist_to_charger_m(size_t r) const;
  double load_kg(size_t r) const { return robots_[r].load_kg; }
  bool docked(size_t r) const { return dist_to_charger_m(r) < 1.0; }
  // Times a robot ran flat and was carried back.
  uint64_t carried_back() const { return carried_back_; }
  // Simulated time of the last frame written, e.g. "day 1 07:30" (the robots' clock
  // starts on day 1 at 07:00).
  std::string ClockText() const;

 private:
  struct Robot {
    double x = 0, y = 0;            // m, the charger at the origin
    double stop_x = 0, stop_y = 0;  // the next locker
    double battery = 90;            // %
    double load_kg = 0;
    bool flat = false;          // ran flat: to be carried back to the charger
    bool restart_next = false;  // carried back: the next frame starts an episode
    int64_t micros = 0;         // Unix time of the next frame
  };
  void CarryBackFlat();
  void Advance(const std::vector<int>& actions, std::vector<v1::Frame>* frames);
  void NewStop(Robot& robot);

  std::mt19937_64 rng_;
  std::vector<std::string> names_;
  std::vector<Robot> robots_;
  uint64_t step_ = 0;
  uint64_t carried_back_ = 0;
};

}  // namespace bellwether::cli

#endif  // BELLWETHER_CLIENT_CLI_CAMPUS_SIM_H_
