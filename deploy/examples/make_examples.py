#!/usr/bin/python3
"""Writes the invented example data sets used by the README's question recipes.

Both are simulations of our own (no real site, fleet or organisation), deterministic
from fixed seeds, for demos and recipes only:
  campus-library.csv  one building of the invented Alder Point campus: 15-minute frames
                      for six weeks of local time (outdoor temperature, occupancy, power,
                      energy per frame).
  robot-fleet.csv     one delivery robot: frames about 10 s apart (irregular), battery
                      level, distance to its charger, whether it is at the charger, the
                      action taken (patrol, to_charger, charge, park) and the probability
                      the robot's behavior gave that action.
Run: /usr/bin/python3 deploy/examples/make_examples.py deploy/examples
"""
import math
import os
import random
import sys
from datetime import datetime, timedelta


def campus(path):
    rng = random.Random(11)
    start = datetime(2026, 1, 5, 0, 0)  # a Monday, campus local time
    anomaly = 0.0
    with open(path, "w") as f:
        f.write("timestamp,outdoor_temp_c,occupancy,power_kw,energy_kwh\n")
        for k in range(6 * 7 * 96):
            t = start + timedelta(minutes=15 * k)
            hour = t.hour + t.minute / 60
            weekend = t.weekday() >= 5
            anomaly = 0.995 * anomaly + 0.25 * rng.gauss(0, 1)
            temp = 4 + 5 * math.sin(2 * math.pi * (hour - 9) / 24) + anomaly
            open_hours = 8 <= hour < 18
            occ = (0.15 if weekend else 0.8) if open_hours else 0.03
            occ = min(1.0, max(0.0, occ + 0.05 * rng.gauss(0, 1)))
            power = max(0.0, 60 + 140 * occ + 9 * max(0.0, 16 - temp) + 6 * rng.gauss(0, 1))
            f.write(f"{t.isoformat()},{temp:.2f},{occ:.3f},{power:.1f},{power / 4:.2f}\n")


ACTIONS = ["patrol", "to_charger", "charge", "park"]


def behavior(battery, dist):
    """The robot's usual behavior: action probabilities (patrol, to_charger, charge, park)."""
    if dist == 0 and battery < 95:
        return [0.05, 0.0, 0.9, 0.05]
    if battery < 18:
        return [0.25, 0.7, 0.0, 0.05]
    if dist == 0:
        return [0.8, 0.0, 0.0, 0.2]
    return [0.65, 0.1, 0.0, 0.25]


def robots(path):
    rng = random.Random(23)
    t = 1767600000.0  # 2026-01-05T08:00:00Z
    battery, dist = 90.0, 40.0
    with open(path, "w") as f:
        f.write("timestamp,battery_pct,dist_to_charger_m,at_charger,action,behavior_prob\n")
        for _ in range(15000):
            probs = behavior(battery, dist)
            a = rng.choices(range(4), weights=probs)[0]
            f.write(f"{t:.1f},{battery:.2f},{dist:.1f},{1 if dist == 0 else 0},{a},{probs[a]:.2f}\n")
            # Effects of the action over the next ~10 seconds.
            if ACTIONS[a] == "patrol":
                dist = min(300.0, max(5.0, dist + rng.uniform(-8, 22)))
                battery -= 0.35 + 0.1 * abs(rng.gauss(0, 1))
            elif ACTIONS[a] == "to_charger":
                dist = max(0.0, dist - 20.0)
                battery -= 0.25
            elif ACTIONS[a] == "charge":
                battery += 1.5
            else:
                battery -= 0.02
            battery = min(100.0, max(0.0, battery))
            t += 10.0 + rng.uniform(0, 2)


def main():
    out = sys.argv[1] if len(sys.argv) > 1 else "."
    campus(os.path.join(out, "campus-library.csv"))
    robots(os.path.join(out, "robot-fleet.csv"))


if __name__ == "__main__":
    main()
