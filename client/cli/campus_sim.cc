#include "client/cli/campus_sim.h"

#include <algorithm>
#include <cmath>
#include <numbers>

#include "absl/strings/str_format.h"
#include "absl/time/civil_time.h"
#include "absl/time/time.h"

namespace bellwether::cli {
namespace {

constexpr double kPi = std::numbers::pi;

// Start of the buildings' clock: Monday 2026-01-05 00:00, campus local time.
const absl::CivilMinute kBuildingStart(2026, 1, 5, 0, 0);
// Start of the robots' clock: 2026-01-05 07:00:00 UTC.
constexpr int64_t kRobotStartMicros = 1767596400LL * 1000000;

void AddSignal(v1::PoolSpec& spec, const char* name, const char* unit, double lo, double hi) {
  v1::SignalSpec* s = spec.add_signals();
  s->set_name(name);
  s->set_unit(unit);
  s->set_min(lo);
  s->set_max(hi);
}

void AddTiles(v1::PoolSpec& spec, std::vector<const char*> signals, uint32_t tilings,
              uint32_t tiles, bool periodic) {
  v1::TileCoding* t = spec.add_features()->mutable_tiles();
  for (const char* s : signals) t->add_signals(s);
  t->set_tilings(tilings);
  t->set_tiles_per_dim(tiles);
  t->set_periodic(periodic);
}

void AddCondition(google::protobuf::RepeatedPtrField<v1::Condition>* to, const char* signal,
                  const char* op, double threshold) {
  v1::Condition* c = to->Add();
  c->set_signal(signal);
  c->set_op(op);
  c->set_threshold(threshold);
}

template <size_t N>
int Sample(const std::array<double, N>& probs, std::mt19937_64& rng) {
  const double u = std::uniform_real_distribution<double>(0.0, 1.0)(rng);
  double acc = 0;
  int last = 0;
  for (size_t a = 0; a < N; ++a) {
    if (probs[a] <= 0) continue;
    last = static_cast<int>(a);
    acc += probs[a];
    if (u < acc) return last;
  }
  return last;
}

}  // namespace

// ---------------------------------------------------------------------------------------
// Buildings

CampusBuildings::CampusBuildings(uint64_t seed) : rng_(seed) {
  names_ = {"library", "lab", "residence"};
  //           base  plug people  UA     C   heat  cool solar kind
  buildings_ = {{50.0, 60.0, 25.0, 8.0, 80.0, 300.0, 200.0, 40.0, 0},
                {140.0, 80.0, 20.0, 10.0, 120.0, 350.0, 300.0, 30.0, 1},
                {30.0, 70.0, 30.0, 7.0, 90.0, 220.0, 80.0, 30.0, 2}};
  state_.resize(buildings_.size());
  last_power_.assign(buildings_.size(), 0.0);
  for (size_t b = 0; b < buildings_.size(); ++b) state_[b] = {19.0, Occupancy(b)};
  // Weather at the first frame.
  outdoor_c_ = 3.0;
}

v1::PoolSpec CampusBuildings::PoolSpec() {
  v1::PoolSpec spec;
  spec.set_name(kPool);
  spec.set_time_zone("Europe/Amsterdam");
  spec.set_learning(v1::PoolSpec::PER_STREAM);
  AddSignal(spec, "outdoor_temp_c", "degC", -15, 35);
  AddSignal(spec, "occupancy", "fraction", 0, 1);
  AddSignal(spec, "zone_temp_c", "degC", 10, 30);
  AddSignal(spec, "power_kw", "kW", 0, 600);
  AddSignal(spec, "energy_kwh", "kWh", 0, 150);
  for (const char* a : {"setback", "comfort", "precondition"}) spec.add_actions(a);
  // The building recipe (deploy/examples/recipes/building-energy.json) plus the zone
  // temperature: hour of day, weekday by hour, hour of week, the weather.
  AddTiles(spec, {"clock.hour_of_day"}, 8, 24, true);
  AddTiles(spec, {"clock.day_of_week", "clock.hour_of_day"}, 4, 7, true);
  AddTiles(spec, {"clock.day_of_week"}, 4, 168, true);
  AddTiles(spec, {"outdoor_temp_c"}, 4, 10, false);
  AddTiles(spec, {"zone_temp_c"}, 4, 10, false);
  spec.add_features()->mutable_bias();
  auto add_question = [&](const char* name, double gamma, double lambda) {
    v1::QuestionSpec* q = spec.add_questions();
    q->set_name(name);
    q->mutable_cumulant()->set_signal("energy_kwh");
    q->set_gamma(gamma);
    q->set_lambda(lambda);
    q->set_step_rule(v1::SETTLING);
    q->set_centered(true);
  };
  // 48 quarter-hours = 12 hours; 4 = one hour (discounted sums of the energy per frame).
  add_question("energy_next_12h", 0.9792, 0.97);
  add_question("energy_next_hour", 0.75, 0.9);
  return spec;
}

double CampusBuildings::Occupancy(size_t b) const {
  const absl::CivilMinute now = kBuildingStart + static_cast<int64_t>(step_) * kStepMinutes;
  const double h = now.hour() + now.minute() / 60.0;
  const bool weekend = absl::GetWeekday(absl::CivilDay(now)) >= absl::Weekday::saturday;
  switch (buildings_[b].kind) {
    case 0:  // library: long weekday hours, a shorter weekend, busiest mid-afternoon
      if (!weekend && h >= 8 && h < 22) return 0.55 + 0.3 * std::sin(kPi * (h - 8) / 14);
      if (weekend && h >= 10 && h < 18) return 0.35;
      return 0.02;
    case 1:  // lab: working days, a few late workers
      if (!weekend && h >= 7 && h < 19) return 0.8;
      if (!weekend && h >= 19 && h < 23) return 0.2;
      if (weekend && h >= 9 && h < 17) return 0.15;
      return 0.05;
    default:  // residence: home at night, most out by day on weekdays
      if (h >= 22 || h < 8) return 0.9;
      return weekend ? 0.6 : 0.3;
  }
}

std::array<double, CampusBuildings::kNumActions> CampusBuildings::Behavior(size_t b) const {
  const absl::CivilMinute now = kBuildingStart + static_cast<int64_t>(step_) * kStepMinutes;
  const double h = now.hour() + now.minute() / 60.0;
  const bool weekend = absl::GetWeekday(absl::CivilDay(now)) >= absl::Weekday::saturday;
  // The schedule's occupied window [open, close) today.
  double open = 0, close = 0;
  switch (buildings_[b].kind) {
    case 0:
      open = weekend ? 10 : 8;
      close = weekend ? 18 : 22;
      break;
    case 1:
      if (!weekend) open = 7, close = 19;
      break;
    default:
      open = 6, close = 23;
  }
  // Usually the schedule; now and then an occupant's or operator's override.
  if (h >= open && h < close) return {0.07, 0.88, 0.05};
  if (close > open && h >= open - 2 && h < open) return {0.15, 0.25, 0.60};
  return {0.85, 0.10, 0.05};
}

void CampusBuildings::Step(std::vector<v1::Frame>* frames) {
  std::vector<int> actions(buildings_.size());
  for (size_t b = 0; b < buildings_.size(); ++b) actions[b] = Sample(Behavior(b), rng_);
  Advance(actions, frames);
}

void CampusBuildings::StepWith(Action action, std::vector<v1::Frame>* frames) {
  Advance(std::vector<int>(buildings_.size(), action), frames);
}

void CampusBuildings::Advance(const std::vector<int>& actions, std::vector<v1::Frame>* frames) {
  std::normal_distribution<double> noise(0.0, 1.0);
  const absl::CivilMinute now = kBuildingStart + static_cast<int64_t>(step_) * kStepMinutes;
  const double hour = now.hour() + now.minute() / 60.0;
  const double day_of_year = static_cast<double>(absl::GetYearDay(absl::CivilDay(now)));
  // Weather over the next 15 minutes: a seasonal cycle (coldest mid-January), a daily
  // cycle damped by cloud, and a slowly wandering anomaly shared by all buildings.
  const double season = 0.5 - 0.5 * std::cos(2 * kPi * (day_of_year - 15) / 365);  // 0..1
  anomaly_c_ = 0.995 * anomaly_c_ + 0.25 * noise(rng_);
  cloud_ = std::clamp(0.97 * cloud_ + 0.03 * 0.5 + 0.08 * noise(rng_), 0.0, 1.0);
  outdoor_c_ = 3.0 + 15.0 * season +
               5.0 * (1 - 0.5 * cloud_) * std::sin(2 * kPi * (hour - 9.0) / 24.0) + anomaly_c_;
  const double sun = std::max(0.0, std::sin(kPi * (hour - 7.0) / 10.0)) * (0.6 + 0.4 * season) *
                     (1.0 - 0.75 * cloud_);
  // Heat pump efficiency depends on the outdoor temperature.
  const double cop_heat = std::clamp(2.6 + 0.07 * outdoor_c_, 1.8, 4.2);
  const double cop_cool = std::clamp(4.5 - 0.06 * outdoor_c_, 2.2, 4.5);
  constexpr double kHours = kStepMinutes / 60.0;
  constexpr double kHeatSet[kNumActions] = {16.0, 21.0, 22.5};
  constexpr double kCoolSet[kNumActions] = {28.0, 24.0, 23.0};

  frames->resize(buildings_.size());
  for (size_t b = 0; b < buildings_.size(); ++b) {
    const Building& bl = buildings_[b];
    State& st = state_[b];
    const int a = actions[b];
    st.occupancy = std::clamp(Occupancy(b) + 0.05 * noise(rng_), 0.0, 1.0);
    // The frame describes the building now, and the action taken for the next 15 minutes.
    v1::Frame& f = (*frames)[b];
    f.Clear();
    f.set_seq(step_ + 1);
    f.set_local_micros(absl::ToUnixMicros(absl::FromCivil(now, absl::UTCTimeZone())));
    f.set_action(static_cast<uint32_t>(a));
    const double prob = Behavior(b)[static_cast<size_t>(a)];
    if (prob > 0) f.set_behavior_prob(prob);

    // Thermal step: the zone's free-running temperature, then the heat pump towards the
    // setpoint band, within its capacity.
    const double gains = bl.people_kw * st.occupancy + 0.9 * bl.plug_kw * st.occupancy +
                         0.3 * bl.base_kw + bl.solar_kw * sun;
    const double free_c = st.zone_c + kHours / bl.capacity_kwh_per_c *
                                          (bl.ua_kw_per_c * (outdoor_c_ - st.zone_c) + gains);
    double heat = 0, cool = 0, zone = free_c;
    if (free_c < kHeatSet[a]) {
      heat = std::min(bl.heat_max_kw, bl.capacity_kwh_per_c * (kHeatSet[a] - free_c) / kHours);
      zone = free_c + kHours / bl.capacity_kwh_per_c * heat;
    } else if (free_c > kCoolSet[a]) {
      cool = std::min(bl.cool_max_kw, bl.capacity_kwh_per_c * (free_c - kCoolSet[a]) / kHours);
      zone = free_c - kHours / bl.capacity_kwh_per_c * cool;
    }
    // Ventilation fans run harder outside setback.
    const double fans = (a == kSetback ? 0.01 : 0.04) * bl.heat_max_kw;
    const double power =
        std::max(0.0, bl.base_kw + bl.plug_kw * st.occupancy + heat / cop_heat + cool / cop_cool +
                          fans + 0.02 * bl.base_kw * noise(rng_));
    // Values as measured at the frame: the zone before this step's conditioning, the
    // meter's average power and energy over the previous 15 minutes.
    f.add_values(outdoor_c_);
    f.add_values(st.occupancy);
    f.add_values(st.zone_c);
    const double last_power = step_ == 0 ? power : last_power_[b];
    f.add_values(last_power);
    f.add_values(last_power * kHours);
    last_power_[b] = power;
    st.zone_c = zone + 0.05 * noise(rng_);
  }
  ++step_;
}

std::string CampusBuildings::ClockText() const {
  const absl::CivilMinute now =
      kBuildingStart + static_cast<int64_t>(step_ > 0 ? step_ - 1 : 0) * kStepMinutes;
  static constexpr const char* kDays[] = {"Mon", "Tue", "Wed", "Thu", "Fri", "Sat", "Sun"};
  return absl::StrFormat("%s %04d-%02d-%02d %02d:%02d",
                         kDays[static_cast<int>(absl::GetWeekday(absl::CivilDay(now)))], now.year(),
                         now.month(), now.day(), now.hour(), now.minute());
}

// ---------------------------------------------------------------------------------------
// Robots

DeliveryRobots::DeliveryRobots(uint64_t seed, size_t count) : rng_(seed) {
  static constexpr const char* kNames[] = {"bot-ash", "bot-birch", "bot-cedar", "bot-elm",
                                           "bot-fir", "bot-hazel", "bot-larch", "bot-oak"};
  count = std::clamp<size_t>(count, 1, std::size(kNames));
  std::uniform_real_distribution<double> u(0.0, 1.0);
  for (size_t r = 0; r < count; ++r) {
    names_.push_back(kNames[r]);
    Robot robot;
    robot.battery = 40 + 55 * u(rng_);
    NewStop(robot);
    // Start somewhere on the way to the first locker.
    const double f = u(rng_);
    robot.x = f * robot.stop_x;
    robot.y = f * robot.stop_y;
    robot.micros = kRobotStartMicros;
    robots_.push_back(robot);
  }
}

v1::PoolSpec DeliveryRobots::PoolSpec() {
  v1::PoolSpec spec;
  spec.set_name(kPool);
  spec.set_learning(v1::PoolSpec::POOLED);
  // Predictions made within one excursion share its outcome, so the verified error is
  // taken over the latest 4,000 (dozens of excursions) rather than 1,000.
  spec.mutable_progress()->set_verify_window(4000);
  AddSignal(spec, "battery_pct", "%", 0, 100);
  AddSignal(spec, "dist_to_charger_m", "m", 0, 800);
  AddSignal(spec, "at_charger", "", 0, 1);
  AddSignal(spec, "load_kg", "kg", 0, 30);
  for (const char* a : {"drive", "to_charger", "charge", "park"}) spec.add_actions(a);
  // The robot recipe (deploy/examples/recipes/robot-charging.json) plus the load and
  // whether the robot is docked.
  AddTiles(spec, {"battery_pct", "dist_to_charger_m"}, 8, 10, false);
  AddTiles(spec, {"battery_pct"}, 4, 20, false);
  AddTiles(spec, {"battery_pct", "load_kg"}, 4, 6, false);
  AddTiles(spec, {"at_charger", "battery_pct"}, 4, 10, false);
  spec.add_features()->mutable_bias();
  auto add_question = [&](const char* name) {
    v1::QuestionSpec* q = spec.add_questions();
    q->set_name(name);
    q->set_gamma(1.0);
    q->set_lambda(0.9);
    AddCondition(q->mutable_terminate_when(), "battery_pct", "<", 10);
    AddCondition(q->mutable_terminate_when(), "at_charger", ">=", 1);
    return q;
  };
  add_question("seconds_until_recharge")->mutable_cumulant()->set_frame_period(true);
  for (const char* name : {"p_reach_charger", "p_reach_charger_if_sent"}) {
    v1::QuestionSpec* q = add_question(name);
    v1::Condition* c = q->mutable_cumulant()->mutable_indicator();
    c->set_signal("at_charger");
    c->set_op(">=");
    c->set_threshold(1);
    q->set_unit("probability");
    if (std::string(name) == "p_reach_charger_if_sent") {
      // Off-policy: importance ratios up to 1 / 0.08 (clipped at 5) ride on the traces,
      // so a shorter trace than the on-policy questions' keeps the updates' variance
      // down (with lambda 0.9 the answers wandered; 0.5 learned steadily in a replay of
      // this simulation).
      q->mutable_policy()->set_action("to_charger");
      q->set_rho_clip(5);
      q->set_lambda(0.5);
    }
  }
  return spec;
}

double DeliveryRobots::dist_to_charger_m(size_t r) const {
  return std::hypot(robots_[r].x, robots_[r].y);
}

void DeliveryRobots::NewStop(Robot& robot) {
  // Lockers anywhere within 600 m of the charger; a new parcel of up to 25 kg.
  std::uniform_real_distribution<double> u(0.0, 1.0);
  const double angle = 2 * kPi * u(rng_);
  const double radius = 600 * std::sqrt(u(rng_));
  robot.stop_x = radius * std::cos(angle);
  robot.stop_y = radius * std::sin(angle);
  robot.load_kg = 25 * u(rng_);
}

std::array<double, DeliveryRobots::kNumActions> DeliveryRobots::Behavior(size_t r) const {
  const double b = robots_[r].battery;
  //                 drive to_charger charge park
  if (docked(r)) {
    if (b < 50) return {0.008, 0.0, 0.99, 0.002};
    if (b < 90) return {0.04, 0.0, 0.95, 0.01};
    return {0.8, 0.0, 0.15, 0.05};
  }
  if (b < 20) return {0.3, 0.6, 0.0, 0.1};
  if (b < 35) return {0.6, 0.3, 0.0, 0.1};
  return {0.8, 0.08, 0.0, 0.12};
}

void DeliveryRobots::CarryBackFlat() {
  for (Robot& robot : robots_) {
    if (!robot.flat) continue;
    // Staff carry it to the charger (it took a while): its next frame starts a new
    // episode there.
    robot.flat = false;
    robot.restart_next = true;
    robot.x = robot.y = 0;
    robot.micros += 20LL * 60 * 1000000;
    ++carried_back_;
  }
}

void DeliveryRobots::Step(std::vector<v1::Frame>* frames) {
  CarryBackFlat();
  std::vector<int> actions(robots_.size());
  for (size_t r = 0; r < robots_.size(); ++r) actions[r] = Sample(Behavior(r), rng_);
  Advance(actions, frames);
}

void DeliveryRobots::StepWith(size_t r, Action action, std::vector<v1::Frame>* frames) {
  CarryBackFlat();
  std::vector<int> actions(robots_.size());
  for (size_t i = 0; i < robots_.size(); ++i) actions[i] = Sample(Behavior(i), rng_);
  actions[r] = action;
  Advance(actions, frames);
}

void DeliveryRobots::Advance(const std::vector<int>& actions, std::vector<v1::Frame>* frames) {
  std::uniform_real_distribution<double> u(0.0, 1.0);
  frames->resize(robots_.size());
  for (size_t r = 0; r < robots_.size(); ++r) {
    Robot& robot = robots_[r];
    v1::Frame& f = (*frames)[r];
    f.Clear();
    f.set_seq(step_ + 1);
    if (robot.restart_next) {
      robot.restart_next = false;
      f.set_restart(true);
    }
    const int a = actions[r];
    const bool at_charger = docked(r);
    const double prob = Behavior(r)[static_cast<size_t>(a)];
    f.set_unix_micros(robot.micros);
    f.add_values(robot.battery);
    f.add_values(dist_to_charger_m(r));
    f.add_values(at_charger ? 1.0 : 0.0);
    f.add_values(robot.load_kg);
    f.set_action(static_cast<uint32_t>(a));
    if (prob > 0) f.set_behavior_prob(prob);

    // The next ~30 seconds under action a (with the parcel on board now).
    const double load = robot.load_kg;
    const double dt = kFrameSeconds + 4.0 * (u(rng_) - 0.5);
    const double reach = 1.2 * dt * (0.6 + 0.4 * u(rng_));  // m; pedestrians, doors
    double moved = 0;
    if (a == kDrive) {
      const double dx = robot.stop_x - robot.x, dy = robot.stop_y - robot.y;
      const double d = std::hypot(dx, dy);
      if (d <= reach) {  // at the locker: hand over the parcel, take the next one
        robot.x = robot.stop_x;
        robot.y = robot.stop_y;
        moved = d;
        NewStop(robot);
      } else {
        robot.x += dx / d * reach;
        robot.y += dy / d * reach;
        moved = reach;
      }
    } else if ((a == kToCharger || a == kCharge) && at_charger) {
      // Docked: charging, fast up to 80 %, then tapering off.
      const double rate = robot.battery < 80 ? 0.9 : 0.9 * (100 - robot.battery) / 20;
      robot.battery = std::min(100.0, robot.battery + rate * dt / kFrameSeconds);
    } else if (a == kToCharger) {
      const double d = dist_to_charger_m(r);
      if (d <= reach) {
        robot.x = robot.y = 0;
        moved = d;
      } else {
        robot.x -= robot.x / d * reach;
        robot.y -= robot.y / d * reach;
        moved = reach;
      }
    }
    // kPark, or kCharge away from the charger: waits where it is.
    if (!((a == kToCharger || a == kCharge) && at_charger)) {
      // Electronics, and the drive: more energy per metre with a heavier load, and
      // slopes and surfaces vary.
      const double drain =
          0.02 * dt / kFrameSeconds + moved * 0.006 * (1.0 + load / 25.0) * (0.85 + 0.4 * u(rng_));
      robot.battery -= drain;
    }
    if (robot.battery <= 0) {
      robot.battery = 0;
      robot.flat = true;
    }
    robot.micros += static_cast<int64_t>(dt * 1e6);
  }
  ++step_;
}

std::string DeliveryRobots::ClockText() const {
  // Nominal time of the last frame (the frames' own timestamps jitter around it).
  const int64_t secs =
      static_cast<int64_t>(step_ > 0 ? step_ - 1 : 0) * static_cast<int64_t>(kFrameSeconds);
  const absl::CivilSecond t = absl::CivilSecond(2026, 1, 5, 7, 0, 0) + secs;
  return absl::StrFormat("day %d %02d:%02d", absl::CivilDay(t) - absl::CivilDay(2026, 1, 5) + 1,
                         t.hour(), t.minute());
}

}  // namespace bellwether::cli
