// Shared pieces of the fuzz harnesses: a small pool spec that reaches most of the engine
// (tile coding with clock signals and hashing, RBF, normalized raw features, every
// learner, every step rule, off-policy targets of every kind, a control question and a
// greedy target, a compositional cumulant, successor tables with GPI, reward centering,
// small verification windows), probes that drive a pool after a load, and the
// save/restore round trip the checkpoint contract promises (core/pool.h).
//
// A broken invariant aborts with a message: libFuzzer records that as a crash, with the
// input that caused it.
#ifndef BELLWETHER_TESTS_FUZZ_FUZZ_POOLS_H_
#define BELLWETHER_TESTS_FUZZ_FUZZ_POOLS_H_

#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <memory>
#include <string>
#include <vector>

#include "absl/status/status.h"
#include "bellwether/v1/pool.pb.h"
#include "bellwether/v1/prediction.pb.h"
#include "core/frame_input.h"
#include "core/io/spec_json.h"
#include "core/pool.h"

namespace bellwether::fuzz {

// Stops the run: an invariant of the code under test does not hold for this input.
[[noreturn]] inline void Broken(const std::string& what) {
  std::fprintf(stderr, "fuzz invariant broken: %s\n", what.c_str());
  std::fflush(stderr);
  std::abort();
}

// Signals level [0, 10), temp [-10, 30), done [0, 1); actions left, right.
inline constexpr char kKitchenSpecJson[] = R"json({
  "name": "fuzz-kitchen",
  "timeZone": "Europe/Amsterdam",
  "signals": [{"name": "level", "unit": "kW", "min": 0, "max": 10},
              {"name": "temp", "unit": "degC", "min": -10, "max": 30},
              {"name": "done", "min": 0, "max": 1}],
  "actions": ["left", "right"],
  "featureTableSize": 32,
  "features": [
    {"tiles": {"signals": ["level", "clock.hour_of_day"], "tilings": 4, "tilesPerDim": 6}},
    {"tiles": {"signals": ["clock.day_of_week"], "tilings": 2, "tilesPerDim": 7, "periodic": true}},
    {"rbf": {"signals": ["temp"], "centersPerDim": 4}},
    {"raw": {"signals": ["temp", "level"], "normalize": true}},
    {"bias": {}}],
  "progress": {"verifyWindow": 16, "verifyMaxHeld": 32, "decay": 0.9},
  "successorTables": [
    {"name": "sf",
     "phi": [{"signal": "level"}, {"indicator": {"signal": "temp", "op": "<", "threshold": 0}},
             {"constant": 1}],
     "gamma": 0.9, "lambda": 0.5, "stepRule": "FIXED", "stepSize": 0.1},
    {"name": "go_left", "phi": [{"signal": "level"}, {"constant": 1}], "gamma": 0.8,
     "lambda": 0.5, "policy": {"action": "left"}, "learner": "TREE_BACKUP",
     "stepRule": "FIXED", "stepSize": 0.1},
    {"name": "go_right", "phi": [{"signal": "level"}, {"constant": 1}], "gamma": 0.8,
     "lambda": 0.5, "policy": {"action": "right"}, "learner": "TREE_BACKUP",
     "stepRule": "FIXED", "stepSize": 0.1}],
  "questions": [
    {"name": "level_soon", "cumulant": {"signal": "level"}, "gamma": 0.9, "lambda": 0.9,
     "centered": true, "stepRule": "SETTLING", "stepSize": 0.5},
    {"name": "until_done", "cumulant": {"framePeriod": true}, "gamma": 1, "lambda": 0.9,
     "terminateWhen": [{"signal": "done", "op": ">=", "threshold": 1}]},
    {"name": "p_cold_if_left",
     "cumulant": {"indicator": {"signal": "temp", "op": "<", "threshold": 0}},
     "gamma": 1, "lambda": 0.8,
     "terminateWhen": [{"signal": "done", "op": ">=", "threshold": 1}],
     "policy": {"action": "left"}, "rhoClip": 5},
    {"name": "tdc_mix", "cumulant": {"signal": "temp"}, "gamma": 0.8, "lambda": 0.5,
     "learner": "TDC", "stepRule": "FIXED",
     "policy": {"distribution": {"probabilities": {"left": 0.3, "right": 0.7}}}},
    {"name": "emphatic", "cumulant": {"constant": 1}, "gamma": 0.7, "lambda": 0.3,
     "learner": "EMPHATIC_TD", "stepRule": "FIXED", "policy": {"action": "right"}},
    {"name": "true_online", "cumulant": {"question": "level_soon"}, "gamma": 0.5,
     "lambda": 0.7, "learner": "TRUE_ONLINE_TD", "stepRule": "FIXED"},
    {"name": "best_level", "cumulant": {"signal": "level"}, "gamma": 0.9, "lambda": 0.5,
     "control": true},
    {"name": "greedy_temp", "cumulant": {"signal": "temp"}, "gamma": 0.9, "lambda": 0.5,
     "policy": {"greedy": "best_level"}, "stepRule": "TIDBD", "stepSize": 0.5},
    {"name": "tree", "cumulant": {"signal": "level"}, "gamma": 0.9, "lambda": 0.5,
     "learner": "TREE_BACKUP", "policy": {"action": "left"}, "stepRule": "FIXED"},
    {"name": "via_sf", "cumulant": {"signal": "temp"}, "successorTable": "sf"},
    {"name": "gpi", "cumulant": {"signal": "level"}, "gpiTables": ["go_left", "go_right"]}]
})json";

// The kitchen spec, per stream with behavior probabilities from the frames, or pooled
// with the behavior estimated from action counts.
inline const v1::PoolSpec& KitchenSpec(bool pooled) {
  static const v1::PoolSpec* const specs = [] {
    auto parsed = PoolSpecFromJson(kKitchenSpecJson);
    if (!parsed.ok()) Broken("kitchen spec: " + parsed.status().ToString());
    auto* s = new v1::PoolSpec[2];
    s[0] = *parsed;
    s[1] = *parsed;
    s[1].set_name("fuzz-kitchen-pooled");
    s[1].set_learning(v1::PoolSpec::POOLED);
    s[1].mutable_behavior()->set_estimate(true);
    s[1].mutable_behavior()->add_estimate_signals("level");
    s[1].mutable_behavior()->set_estimate_tiles_per_dim(3);
    for (int i = 0; i < 2; ++i) {
      if (auto p = Pool::Create(s[i]); !p.ok()) Broken("kitchen spec: " + p.status().ToString());
    }
    return s;
  }();
  return specs[pooled ? 1 : 0];
}

// Mid-range values for every declared signal of `pool` (a frame any spec accepts).
inline std::vector<double> MidValues(const Pool& pool) {
  std::vector<double> v;
  for (const v1::SignalSpec& s : pool.spec().proto.signals()) v.push_back(s.min() / 2 + s.max() / 2);
  return v;
}

// Drives a pool that loaded without error: three more frames for each of its streams
// (and a new stream), then every stream's answers. The frames meet every precondition
// of Pool::Apply, so a sound pool accepts them all.
inline void ProbePool(Pool& pool) {
  std::vector<std::string> streams = pool.stream_names();
  streams.push_back("fuzz-probe-new-stream");
  std::vector<double> values = MidValues(pool);
  const size_t actions = pool.spec().actions.size();
  for (const std::string& stream : streams) {
    for (int k = 0; k < 3; ++k) {
      const uint64_t last = pool.last_seq(stream);
      if (last == ~uint64_t{0}) break;
      FrameInput in;
      in.seq = last + 1;
      in.time_kind = FrameTimeKind::kUnix;
      in.time_micros = int64_t{1700000000} * 1000000 + k * int64_t{900} * 1000000;
      for (size_t i = 0; i < values.size(); ++i) values[i] += 0.01 * (k + 1);
      in.values = values;
      in.restart = k == 2;
      if (actions > 0) {
        in.action = static_cast<uint32_t>(k % actions);
        in.behavior_prob = 1.0 / static_cast<double>(actions);
      }
      if (absl::Status s = pool.Apply(stream, in); !s.ok()) {
        Broken("a loaded pool refuses a valid frame: " + s.ToString());
      }
    }
  }
  for (const std::string& stream : pool.stream_names()) {
    v1::StreamPredictions out;
    if (absl::Status s = pool.GetPredictions(stream, &out); !s.ok()) {
      Broken("GetPredictions of a known stream: " + s.ToString());
    }
    if (pool.predictions(stream).size() !=
        static_cast<size_t>(pool.spec().proto.questions_size())) {
      // predictions() leaves out successor tables' components only.
      Broken("predictions(): one answer per question expected");
    }
  }
}

// The checkpoint contract: what a pool saves, a fresh pool of the same spec restores, and
// saves again to the same bytes.
inline void CheckRoundTrip(const Pool& pool) {
  std::string saved;
  pool.SaveState(&saved);
  auto fresh = Pool::Create(pool.spec().proto);
  if (!fresh.ok()) Broken("the pool's own spec does not compile again: " + fresh.status().ToString());
  if (absl::Status s = (*fresh)->RestoreState(saved); !s.ok()) {
    Broken("a fresh pool does not restore what a pool saved: " + s.ToString());
  }
  std::string again;
  (*fresh)->SaveState(&again);
  if (again != saved) Broken("restored pool saves different bytes");
  for (const std::string& stream : pool.stream_names()) {
    auto a = pool.predictions(stream);
    auto b = (*fresh)->predictions(stream);
    if (a.size() != b.size() ||
        (a.size() > 0 && std::memcmp(a.data(), b.data(), a.size() * sizeof(double)) != 0)) {
      Broken("restored pool answers differently for stream " + stream);
    }
  }
}

}  // namespace bellwether::fuzz

#endif  // BELLWETHER_TESTS_FUZZ_FUZZ_POOLS_H_
