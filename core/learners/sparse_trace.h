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

  // e <- decay * e, then entries below the pruning threshold are dropped. One pass over
  // the entries, which are packed (row, value) arrays; a dropped entry's place is taken
  // by the last one.
  void DecayAndPrune(float decay);
  // Accumulating trace: e[row(x_j)] += scale * x_j value, where row(j) = j * stride +
  // offset (stride 1, offset 0 for state values; the action's column for action values).
  // A new row is appended.
  void Accumulate(const SparseFeatures& x, float scale = 1.0f, uint32_t stride = 1,
                  uint32_t offset = 0);
  // e <- 0.
  void Clear();
  // e <- 0, then e[rows[i]] = values[i] (zeros skipped), in that order. Rows must be in
  // range and distinct.
  void Set(absl::Span<const uint32_t> rows, absl::Span<const float> values);

  // The entries: rows and their trace values, same order (the order updates visit them).
  // A value may be 0 until the next decay drops it.
  const std::vector<uint32_t>& active() const { return rows_; }
  const std::vector<float>& values() const { return values_; }
  // e[row] (0 if not listed).
  float value(uint32_t row) const {
    const uint32_t at = position_[row];
    return at == kNotListed ? 0.0f : values_[at];
  }

  // Checkpoints: the entries in their order.
  void SaveState(StateWriter& w) const;
  bool LoadState(StateReader& r);

 private:
  static constexpr uint32_t kNotListed = ~uint32_t{0};
  float prune_;
  std::vector<uint32_t> position_;  // per row: its index in rows_ / values_, or kNotListed
  std::vector<uint32_t> rows_;
  std::vector<float> values_;
};

}  // namespace bellwether

#endif  // BELLWETHER_CORE_LEARNERS_SPARSE_TRACE_H_
