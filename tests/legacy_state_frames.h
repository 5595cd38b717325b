// The frames behind tests/data/pool_state_v5.bin: a deterministic pair of signals, with
// the load missing now and then (so some held predictions become unverifiable).
#ifndef BELLWETHER_TESTS_LEGACY_STATE_FRAMES_H_
#define BELLWETHER_TESTS_LEGACY_STATE_FRAMES_H_

#include <cmath>
#include <cstdint>
#include <limits>
#include <vector>

namespace bellwether::testing {

// Values (x, load) of frame `t` (1-based) of stream `stream` (0 or 1).
inline std::vector<double> LegacyStateFrame(uint64_t t, int stream) {
  const double phase = 0.37 * static_cast<double>(stream);
  const double x = 0.5 + 0.45 * std::sin(0.05 * static_cast<double>(t) + phase);
  double load = 5.0 + 4.0 * std::sin(0.013 * static_cast<double>(t) + 2 * phase) + x;
  if (t % 97 == 0) load = std::numeric_limits<double>::quiet_NaN();
  return {x, load};
}

}  // namespace bellwether::testing

#endif  // BELLWETHER_TESTS_LEGACY_STATE_FRAMES_H_
