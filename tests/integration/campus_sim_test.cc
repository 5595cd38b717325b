// The demo's simulation keeps the promises the demo's questions rest on: frames carry
// the behavior's probability of the action taken, batteries drain with distance and
// load and charge only docked (and slowly), some excursions end under 10 % (so the
// questions are not trivial), and the zone temperature and the energy follow the
// setpoint actions. Deterministic (seeded), no daemon.
#include "client/cli/campus_sim.h"

#include <algorithm>
#include <cmath>
#include <vector>

#include "gtest/gtest.h"

namespace bellwether::cli {
namespace {

TEST(DemoRobots, FramesCarryTheBehaviorProbabilityOfTheActionTaken) {
  DeliveryRobots sim(3);
  std::vector<v1::Frame> frames;
  for (int step = 0; step < 5000; ++step) {
    std::vector<std::array<double, DeliveryRobots::kNumActions>> behavior;
    for (size_t r = 0; r < sim.names().size(); ++r) behavior.push_back(sim.Behavior(r));
    sim.Step(&frames);
    for (size_t r = 0; r < frames.size(); ++r) {
      double sum = 0;
      for (double p : behavior[r]) sum += p;
      ASSERT_NEAR(sum, 1.0, 1e-12);
      ASSERT_TRUE(frames[r].has_action());
      if (frames[r].restart()) continue;  // carried back flat: the robot did not choose
      ASSERT_TRUE(frames[r].has_behavior_prob());
      EXPECT_EQ(frames[r].behavior_prob(), behavior[r][frames[r].action()]);
      EXPECT_GT(frames[r].behavior_prob(), 0);
    }
  }
}

TEST(DemoRobots, BatteriesDrainWithDistanceAndLoadAndChargeOnlyDockedAndSlowly) {
  DeliveryRobots sim(5, 1);
  std::vector<v1::Frame> frames;
  double empty_per_m = 0, loaded_per_m = 0;
  int empty_n = 0, loaded_n = 0;
  // Docked stays that began under 20 %: frames until the battery reached 80 %.
  int stay_frames = -1, full_charges = 0, fastest_charge = 1 << 30;
  for (int step = 0; step < 60000; ++step) {
    const double battery = sim.battery_pct(0), dist = sim.dist_to_charger_m(0);
    const double load = sim.load_kg(0);
    const bool docked = sim.docked(0);
    sim.Step(&frames);
    if (frames[0].restart()) {
      stay_frames = -1;
      continue;
    }
    const uint32_t action = frames[0].action();
    const double gained = sim.battery_pct(0) - battery;
    if (gained > 0) {
      // Only at the charger, and at most 0.9 % per nominal 30 s (frames last 28..32 s).
      ASSERT_TRUE(docked) << "step " << step;
      ASSERT_TRUE(action == DeliveryRobots::kCharge || action == DeliveryRobots::kToCharger);
      EXPECT_LE(gained, 0.9 * 32 / 30);
    }
    if (!docked) {
      stay_frames = -1;
    } else if (stay_frames < 0 && battery < 20) {
      stay_frames = 0;
    }
    if (stay_frames >= 0) {
      if (battery >= 80) {
        fastest_charge = std::min(fastest_charge, stay_frames);
        ++full_charges;
        stay_frames = -1;
      } else {
        ++stay_frames;
      }
    }
    if (action == DeliveryRobots::kToCharger && !docked && dist > 60) {
      const double moved = dist - sim.dist_to_charger_m(0);
      if (moved > 10) {
        // Electronics (0.02 % per ~30 s) aside, the drain per metre.
        const double per_m = (-gained - 0.02) / moved;
        if (load < 5) {
          empty_per_m += per_m;
          ++empty_n;
        } else if (load > 20) {
          loaded_per_m += per_m;
          ++loaded_n;
        }
      }
    }
  }
  ASSERT_GT(empty_n, 50);
  ASSERT_GT(loaded_n, 50);
  empty_per_m /= empty_n;
  loaded_per_m /= loaded_n;
  EXPECT_GT(empty_per_m, 0.004);
  EXPECT_GT(loaded_per_m, 1.5 * empty_per_m);
  // Charging takes time: 20 -> 80 % at most 0.96 % per frame is at least 63 frames
  // (about half an hour).
  ASSERT_GT(full_charges, 5);
  EXPECT_GE(fastest_charge, 63);
}

TEST(DemoRobots, SomeExcursionsEndUnderTenPercent) {
  DeliveryRobots sim(7, 1);
  std::vector<v1::Frame> frames;
  int excursions = 0, low = 0;
  bool away = false;
  for (int step = 0; step < 100000; ++step) {
    sim.Step(&frames);
    const v1::Frame& f = frames[0];
    const bool at_charger = f.values(2) >= 1, under_10 = f.values(0) < 10;
    if (f.restart()) {
      away = false;
      continue;
    }
    if (away && (at_charger || under_10)) {
      ++excursions;
      low += under_10 && !at_charger;
      away = false;
    } else if (!at_charger && !under_10) {
      away = true;
    }
  }
  ASSERT_GT(excursions, 200);
  const double share = static_cast<double>(low) / excursions;
  EXPECT_GT(share, 0.03);
  EXPECT_LT(share, 0.5);
}

TEST(DemoBuildings, ZoneTemperatureAndEnergyFollowTheSetpoint) {
  // Two identical campuses (same seed), one held at setback and one at comfort for the
  // first winter day and night.
  CampusBuildings setback(9), comfort(9);
  std::vector<v1::Frame> a, b;
  double energy_setback = 0, energy_comfort = 0;
  for (int step = 0; step < 96; ++step) {
    setback.StepWith(CampusBuildings::kSetback, &a);
    comfort.StepWith(CampusBuildings::kComfort, &b);
    if (step > 0) {
      for (size_t i = 0; i < a.size(); ++i) {
        energy_setback += a[i].values(4);
        energy_comfort += b[i].values(4);
      }
    }
  }
  for (size_t i = 0; i < setback.names().size(); ++i) {
    // Comfort heats to 21 C; setback lets the zone drift down towards 16 C.
    EXPECT_NEAR(comfort.zone_temp_c(i), 21.0, 1.5) << setback.names()[i];
    EXPECT_LT(setback.zone_temp_c(i), comfort.zone_temp_c(i) - 2.0) << setback.names()[i];
    EXPECT_GT(setback.zone_temp_c(i), 14.0) << setback.names()[i];
  }
  EXPECT_LT(setback.outdoor_temp_c(), 12.0);  // it is winter: heating matters
  EXPECT_GT(energy_comfort, 1.1 * energy_setback);
}

TEST(DemoBuildings, TheScheduleSetsBackAtNightAndConditionsWhenOccupied) {
  CampusBuildings sim(1);
  std::vector<v1::Frame> frames;
  // Monday 2026-01-05: at 03:00 (step 12) and at 12:00 (step 48).
  for (int step = 0; step < 48; ++step) {
    if (step == 12) {
      for (size_t b = 0; b < sim.names().size(); ++b) {
        EXPECT_GT(sim.Behavior(b)[CampusBuildings::kSetback], 0.5) << sim.names()[b];
      }
    }
    sim.Step(&frames);
  }
  for (size_t b = 0; b < sim.names().size(); ++b) {
    EXPECT_GT(sim.Behavior(b)[CampusBuildings::kComfort], 0.5) << sim.names()[b];
  }
  EXPECT_EQ(sim.ClockText(), "Mon 2026-01-05 11:45");  // the 48th frame
}

}  // namespace
}  // namespace bellwether::cli
