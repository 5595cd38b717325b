// An eligibility trace over the feature table, kept sparse: entries that decay below a
// pruning threshold are dropped, so an update touches only recently active features.
#ifndef BELLWETHER_CORE_LEARNERS_SPARSE_TRACE_H_
#define BELLWETHER_CORE_LEARNERS_SPARSE_TRACE_H_

#include <cstdint>
#include <vector>

#include "absl/types/span.h"
#include "core/features/sparse_features.h"

namespace bellwether {

class StateWriter;
class StateReader;

class SparseTrace {
 public:
  // Entries whose magnitude falls below this after decay are set to zero.
  static constexpr float kDefaultPrune = 1e-4f;

  explicit SparseTrace(uint32_t num_features, float prune = kDefaultPrune);

  // e <- decay * e, then entries below the pruning threshold are dropped.
  void DecayAndPrune(float decay);
  // Accumulating trace: e[row(x_j)] += scale * x_j value, where row(j) = j * stride +
  // offset (stride 1, offset 0 for state values; the action's column for action values).
  void Accumulate(const SparseFeatures& x, float scale = 1.0f, uint32_t stride = 1,
                  uint32_t offset = 0);
  // e <- 0.
  void Clear();
  // e <- 0, then e[rows[i]] = values[i] (zeros skipped), in that order. Rows must be in
  // range and distinct.
  void Set(absl::Span<const uint32_t> rows, absl::Span<const float> values);

  // Non-zero entries: feature indices and their trace values, same order.
  const std::vector<uint32_t>& active() const { return active_; }
  float value(uint32_t feature) const { return e_[feature]; }

 // Checkpoints: the active entries in their order (the order updates visit them).
  void SaveState(StateWriter& w) const;
  bool LoadState(StateReader& r);

 private:
  float prune_;
  std::vector<float> e_;           // dense, one entry per feature
  std::vector<uint32_t> active_;   // features with e_ != 0
};

}  // namespace bellwether

#endif  // BELLWETHER_CORE_LEARNERS_SPARSE_TRACE_H_
