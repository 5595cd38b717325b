#!/usr/bin/python3
"""Writes the status page's development fixtures (an invented scenario of our own).

The scenario: a simulated university campus whose buildings report energy every 15
minutes (pool "campus-energy"), and a small simulated fleet of electric site shuttles
(pool "site-shuttles"). Nothing here is real data; the numbers come from a seeded
simulation below. The JSON follows the protobuf JSON mapping the daemon answers with:
lowerCamelCase names, 64-bit integers as strings, fields at their default values
omitted.

Run from anywhere: it writes api/overview.json and api/progress/POOL/STREAM.json beside
this file. The fixtures are committed; rerun only to change the scenario.
"""
import json
import math
import os
import random

HERE = os.path.dirname(os.path.abspath(__file__))
HISTORY_POINTS = 360  # the daemon's default ring size per question
SAMPLE_EVERY = 8      # the daemon takes a progress sample every 8 frames

CAUTION = ("Predictions are advisory. Bellwether is not a safety system: "
           "building-control and vehicle-charging decisions follow local codes and "
           "licensed practice.")


def strip_defaults(v):
    """Drops fields at their proto3 default values, as the JSON mapping does: zero numbers
    (and "0" for 64-bit integers), false, "", empty lists and unset (None) messages. A set
    message stays even when empty ({"bias": {}}), and list elements always stay."""
    if isinstance(v, dict):
        out = {}
        for k, x in v.items():
            if x is None or x is False or x == "" or x == "0" or x == []:
                continue
            if isinstance(x, (int, float)) and not isinstance(x, bool) and x == 0:
                continue
            out[k] = strip_defaults(x)
        return out
    if isinstance(v, list):
        return [strip_defaults(x) for x in v]
    return v


def u64(n):
    return str(int(n))


def building_energy(seq, base, peak, rng):
    """kWh drawn in one 15-minute frame by a simulated building."""
    hour = (seq % 96) / 4.0
    day = (seq // 96) % 7
    occupied = 1.0 if (day < 5 and 7 <= hour < 21) else 0.25
    shape = 0.5 - 0.5 * math.cos(2 * math.pi * (hour - 3) / 24)
    return base + peak * occupied * shape + rng.gauss(0, 0.04 * peak)


def discounted_returns(c, gamma):
    """Realized return at t: sum_k gamma^k c[t+1+k], truncated at the series end."""
    g = [0.0] * len(c)
    acc = 0.0
    for t in range(len(c) - 2, -1, -1):
        acc = c[t + 1] + gamma * acc
        g[t] = acc
    return g


def question_history(name, frames, seqs, realized, lag, err_start, err_end, bias, rng,
                     label_at):
    """Verified points whose error shrinks as learning goes on (a prediction made at seq s
    is verified `lag` frames later), and a progress sample every SAMPLE_EVERY frames."""
    def sd(s):
        return err_end + (err_start - err_end) * math.exp(-3.0 * s / frames)

    verified = []
    for s, r in zip(seqs, realized):
        p = r + bias * math.exp(-3.0 * s / frames) + rng.gauss(0, sd(s))
        verified.append({"seq": u64(s), "predicted": round(p, 3), "realized": round(r, 3)})
    progress = []
    for s in range(SAMPLE_EVERY, frames + 1, SAMPLE_EVERY):
        frac = s / frames
        rmse = sd(s - lag) * (1 + rng.gauss(0, 0.03)) if s > lag else 0.0
        td = err_start * 0.05 * math.exp(-3.0 * frac) + err_end * 0.03 * (1 + rng.gauss(0, 0.1))
        wc = 0.8 * math.exp(-4.0 * frac) + 0.01 + abs(rng.gauss(0, 0.005))
        progress.append({"seq": u64(s), "verifiedRmse": round(rmse, 3),
                         "tdErrorRms": round(td, 4), "weightChange": round(wc, 5),
                         "label": label_at(frac)})
    return {"question": name, "verified": verified, "progress": progress[-HISTORY_POINTS:]}


def prediction(name, value, unit, hist, as_of, label, window=1000, extra=None):
    pts = hist["verified"] if hist else []
    tail = pts[-100:]
    if tail:
        errs = [p["predicted"] - p["realized"] for p in tail]
        rmse = math.sqrt(sum(e * e for e in errs) / len(errs))
        bias = sum(errs) / len(errs)
        rs = [p["realized"] for p in tail]
        mean = sum(rs) / len(rs)
        sd = math.sqrt(sum((r - mean) ** 2 for r in rs) / len(rs)) or 1.0
        nrmse = rmse / sd
    else:
        rmse = bias = nrmse = 0.0
    count = len(pts) + (900 if len(pts) >= HISTORY_POINTS else 0)
    p = {
        "question": name, "value": round(value, 3), "unit": unit,
        "verified": {"count": u64(count), "rmse": round(rmse, 3), "bias": round(bias, 3),
                     "window": min(window, count), "nrmse": round(nrmse, 4),
                     "truncated": u64(0), "unverifiable": u64(3 if count else 0),
                     "mode": "on-policy" if count else "", "memoryBytes": u64(24576)},
        "progress": {"updates": u64(as_of - 1), "stepSizeMean": 0.0041, "stepSizeMin": 0.0007,
                     "stepSizeMax": 0.0123, "stepScale": 1.0, "tdErrorMean": 0.12,
                     "tdErrorRms": hist["progress"][-1]["tdErrorRms"] if hist and hist["progress"] else 2.1,
                     "rupee": 0.8, "ude": 1.4,
                     "weightChange": hist["progress"][-1]["weightChange"] if hist and hist["progress"] else 0.3,
                     "effectiveSampleFraction": 1.0, "label": label},
        "asOfSeq": u64(as_of), "errorBand": round(rmse, 3), "label": label,
    }
    if extra:
        p.update(extra)
    return p


def building(rng, stream, base, peak, frames, err_end, label):
    # Simulate past `frames` so the current answer can be set near its true return.
    energy = [building_energy(s, base, peak, rng) for s in range(frames + 400)]
    g12 = discounted_returns(energy, 0.9792)
    g1 = discounted_returns(energy, 0.75)
    # Returns are verified once the remaining discount falls below 1e-3: ~330 frames for
    # gamma 0.9792, ~24 for 0.75. Keep the latest HISTORY_POINTS verified ones.
    last12 = frames - 330
    last1 = frames - 24
    s12 = list(range(max(1, last12 - HISTORY_POINTS + 1), last12 + 1))
    s1 = list(range(max(1, last1 - HISTORY_POINTS + 1), last1 + 1))
    if label == "diverging":
        lab = lambda f: "diverging" if f > 0.9 else "learning"
    else:
        lab = lambda f: "learning" if f < 0.7 else label
    h12 = question_history("energy_next_12h", frames, s12, [g12[s] for s in s12], 330,
                           err_start=420, err_end=err_end, bias=160, rng=rng, label_at=lab)
    h1 = question_history("energy_next_1h", frames, s1, [g1[s] for s in s1], 24,
                          err_start=40, err_end=err_end / 12, bias=-12, rng=rng, label_at=lab)
    value12 = g12[frames] + rng.gauss(0, err_end)
    value1 = g1[frames] + rng.gauss(0, err_end / 12)
    cur = {"pool": "campus-energy", "stream": stream, "asOfSeq": u64(frames),
           "predictions": [prediction("energy_next_12h", value12, "kWh", h12, frames, label),
                           prediction("energy_next_1h", value1, "kWh", h1, frames, label)]}
    return {"current": cur, "history": [h12, h1], "historyKept": True}


def new_building(stream, frames):
    """A stream that joined recently: answers, but nothing verified yet."""
    cur = {"pool": "campus-energy", "stream": stream, "asOfSeq": u64(frames),
           "predictions": [prediction("energy_next_12h", 812.4, "kWh", None, frames, "learning"),
                           prediction("energy_next_1h", 61.7, "kWh", None, frames, "learning")]}
    hist = [{"question": "energy_next_12h",
             "progress": [{"seq": u64(s), "tdErrorRms": round(9.0 / math.sqrt(s), 4),
                           "weightChange": 0.9, "label": "learning"}
                          for s in range(SAMPLE_EVERY, frames + 1, SAMPLE_EVERY)]},
            {"question": "energy_next_1h"}]
    return {"current": cur, "history": hist, "historyKept": True}


def shuttle(rng, stream, frames, label):
    # Seconds until the shuttle docks at its charger (30-second frames): a saw-tooth over
    # duty cycles of `cycle` frames. The return ends at docking, so it is verified then.
    cycle = 240
    realized = [float((cycle - (s % cycle)) * 30) for s in range(frames + 1)]
    last = frames - (frames % cycle)
    seqs = list(range(last - HISTORY_POINTS + 1, last + 1))
    if label == "diverging":
        lab = lambda f: "diverging" if f > 0.85 else "learning"
    else:
        lab = lambda f: "learning" if f < 0.5 else label
    h = question_history("seconds_to_charger", frames, seqs, [realized[s] for s in seqs],
                         cycle // 2, err_start=1500,
                         err_end=350 if label != "diverging" else 1900,
                         bias=600, rng=rng, label_at=lab)
    low = [1.0 if (s % cycle) > 200 and rng.random() < 0.3 else 0.0 for s in seqs]
    hp = question_history("p_low_before_charger", frames, seqs, low, cycle // 2,
                          err_start=0.4, err_end=0.2, bias=0.05, rng=rng, label_at=lab)
    for pt in hp["verified"]:
        pt["predicted"] = round(min(1, max(0, pt["predicted"])), 3)
    # A few returns cut at the held-steps cap.
    for pt in h["verified"][::97]:
        pt["truncated"] = True
    p0 = prediction("seconds_to_charger", realized[frames] + 240, "s", h, frames, label)
    p0["verified"]["truncated"] = u64(sum(1 for pt in h["verified"] if pt.get("truncated")))
    if label == "diverging":
        p0["progress"]["divergenceResets"] = u64(2)
        p0["progress"]["stepScale"] = 0.25
    cur = {"pool": "site-shuttles", "stream": stream, "asOfSeq": u64(frames),
           "predictions": [
               p0,
               prediction("p_low_before_charger", 0.07, "probability", hp, frames, label),
               prediction("best_next_move", 0.93, "", None, frames, "learning",
                          extra={"greedyAction": "to_charger"})]}
    return {"current": cur,
            "history": [h, hp, {"question": "best_next_move"}], "historyKept": True}


def main():
    rng = random.Random(20240611)
    progress = {
        ("campus-energy", "library"): building(rng, "library", 18, 46, 2880, 95, "settled"),
        ("campus-energy", "lab-west"): building(rng, "lab-west", 30, 70, 1600, 160, "learning"),
        ("campus-energy", "dorm-north"): building(rng, "dorm-north", 22, 25, 2200, 80, "settled"),
        ("campus-energy", "annex"): new_building("annex", 96),
        ("site-shuttles", "shuttle-a"): shuttle(rng, "shuttle-a", 1900, "settled"),
        ("site-shuttles", "shuttle-b"): shuttle(rng, "shuttle-b", 1400, "diverging"),
    }
    # A stream beyond the daemon's --history-streams: current answers only.
    cold = json.loads(json.dumps(progress[("campus-energy", "dorm-north")]["current"]))
    cold["stream"] = "boiler-house"
    progress[("campus-energy", "boiler-house")] = {"current": cold, "history": [],
                                                   "historyKept": False}

    def streams(pool):
        out = []
        for (p, s), v in progress.items():
            if p != pool:
                continue
            last = int(v["current"]["asOfSeq"])
            out.append({"name": s, "lastSeq": u64(last), "framesApplied": u64(last),
                        "framesRejected": u64(4 if s == "lab-west" else 0)})
        return sorted(out, key=lambda x: x["name"])

    def questions(pool, names_units):
        out = []
        for name, unit in names_units:
            counts = {"learning": 0, "settled": 0, "diverging": 0}
            for (p, _), v in progress.items():
                if p != pool:
                    continue
                for pr in v["current"]["predictions"]:
                    if pr["question"] == name:
                        counts[pr["label"]] += 1
            out.append({"name": name, "unit": unit, "streamsLearning": counts["learning"],
                        "streamsSettled": counts["settled"],
                        "streamsDiverging": counts["diverging"]})
        return out

    campus_spec = {
        "name": "campus-energy", "timeZone": "Europe/Amsterdam",
        "signals": [{"name": "outdoor_temp_c", "unit": "degC", "min": -15, "max": 35},
                    {"name": "occupancy", "unit": "fraction", "min": 0, "max": 1},
                    {"name": "energy_kwh", "unit": "kWh", "min": 0, "max": 150}],
        "features": [{"tiles": {"signals": ["clock.hour_of_day"], "tilings": 8,
                                "tilesPerDim": 24, "periodic": True}},
                     {"bias": {}}],
        "questions": [{"name": "energy_next_12h", "cumulant": {"signal": "energy_kwh"},
                       "gamma": 0.9792, "lambda": 0.97, "stepRule": "SETTLING",
                       "centered": True},
                      {"name": "energy_next_1h", "cumulant": {"signal": "energy_kwh"},
                       "gamma": 0.75, "lambda": 0.9}]}
    shuttle_spec = {
        "name": "site-shuttles",
        "signals": [{"name": "battery_pct", "unit": "%", "min": 0, "max": 100},
                    {"name": "dist_to_charger_m", "unit": "m", "min": 0, "max": 900},
                    {"name": "at_charger", "min": 0, "max": 1}],
        "actions": ["drive", "to_charger", "charge", "wait"],
        "features": [{"tiles": {"signals": ["battery_pct", "dist_to_charger_m"],
                                "tilings": 8, "tilesPerDim": 10}}, {"bias": {}}],
        "questions": [{"name": "seconds_to_charger", "cumulant": {"framePeriod": True},
                       "gamma": 1.0, "lambda": 0.9,
                       "terminateWhen": [{"signal": "at_charger", "op": ">=", "threshold": 1}]},
                      {"name": "p_low_before_charger",
                       "cumulant": {"indicator": {"signal": "battery_pct", "op": "<",
                                                  "threshold": 10}},
                       "gamma": 1.0, "lambda": 0.9,
                       "terminateWhen": [{"signal": "battery_pct", "op": "<", "threshold": 10}]},
                      {"name": "best_next_move", "control": True,
                       "cumulant": {"signal": "battery_pct"}, "gamma": 0.9}]}
    overview = {
        "version": "0.4.0-dev",
        "caution": CAUTION,
        "pools": [
            {"spec": campus_spec, "generation": u64(3), "streams": streams("campus-energy"),
             "questions": questions("campus-energy", [("energy_next_12h", "kWh"),
                                                      ("energy_next_1h", "kWh")]),
             "queueDepth": 1},
            {"spec": shuttle_spec, "generation": u64(1), "streams": streams("site-shuttles"),
             "questions": questions("site-shuttles", [("seconds_to_charger", "s"),
                                                      ("p_low_before_charger", "probability"),
                                                      ("best_next_move", "")])},
        ],
    }

    os.makedirs(os.path.join(HERE, "api"), exist_ok=True)
    with open(os.path.join(HERE, "api", "overview.json"), "w") as f:
        json.dump(strip_defaults(overview), f, indent=1)
        f.write("\n")
    for (pool, stream), v in progress.items():
        d = os.path.join(HERE, "api", "progress", pool)
        os.makedirs(d, exist_ok=True)
        with open(os.path.join(d, stream + ".json"), "w") as f:
            json.dump(strip_defaults(v), f, separators=(",", ":"))
            f.write("\n")


if __name__ == "__main__":
    main()
