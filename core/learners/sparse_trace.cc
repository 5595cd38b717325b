#include "core/learners/sparse_trace.h"

#include "core/io/state_codec.h"

#include <cmath>
#include <limits>

namespace bellwether {

SparseTrace::SparseTrace(uint32_t num_features, float prune)
    : prune_(prune), e_(num_features, 0.0f) {
  active_.reserve(256);
}

void SparseTrace::DecayAndPrune(float decay) {
  size_t kept = 0;
  for (uint32_t j : active_) {
    float v = e_[j] * decay;
    if (std::fabs(v) < prune_) {
      e_[j] = 0.0f;
    } else {
      e_[j] = v;
      active_[kept++] = j;
    }
  }
  active_.resize(kept);
}

void SparseTrace::Accumulate(const SparseFeatures& x, float scale, uint32_t stride,
                             uint32_t offset) {
  for (size_t k = 0; k < x.size(); ++k) {
    const uint32_t j = x.index[k] * stride + offset;
    if (e_[j] == 0.0f) active_.push_back(j);
    e_[j] += scale * x.value[k];
    // A listed entry must stay non-zero until the next decay prunes it, or a later
    // Accumulate would list it twice; an exact cancellation keeps the smallest normal
    // float instead (far below the pruning threshold, so it is dropped at the next decay).
    if (e_[j] == 0.0f) e_[j] = std::numeric_limits<float>::min();
  }
}

void SparseTrace::Clear() {
  for (uint32_t j : active_) e_[j] = 0.0f;
  active_.clear();
}

void SparseTrace::Set(absl::Span<const uint32_t> rows, absl::Span<const float> values) {
  Clear();
  for (size_t i = 0; i < rows.size(); ++i) {
    if (values[i] == 0.0f) continue;
    e_[rows[i]] = values[i];
    active_.push_back(rows[i]);
  }
}

void SparseTrace::SaveState(StateWriter& w) const {
  w.PutVector(active_);
  std::vector<float> values;
  values.reserve(active_.size());
  for (uint32_t f : active_) values.push_back(e_[f]);
  w.PutVector(values);
}

bool SparseTrace::LoadState(StateReader& r) {
  Clear();
  std::vector<uint32_t> active;
  std::vector<float> values;
  if (!r.GetVector(&active) || !r.GetVector(&values, active.size())) return false;
  for (size_t i = 0; i < active.size(); ++i) {
    if (active[i] >= e_.size()) return r.Fail("trace row out of range");
    e_[active[i]] = values[i];
  }
  active_ = std::move(active);
  return true;
}

}  // namespace bellwether
