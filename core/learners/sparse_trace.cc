#include "core/learners/sparse_trace.h"

#include "core/io/state_codec.h"

#include <cmath>

namespace bellwether {

SparseTrace::SparseTrace(uint32_t num_features, float prune)
    : prune_(prune), position_(num_features, kNotListed) {
  rows_.reserve(256);
  values_.reserve(256);
}

void SparseTrace::DecayAndPrune(float decay) {
  size_t n = rows_.size();
  for (size_t i = 0; i < n;) {
    const float v = values_[i] * decay;
    if (std::fabs(v) >= prune_) {
      values_[i++] = v;
      continue;
    }
    // Dropped: the last entry (not yet decayed) takes its place and is looked at next.
    position_[rows_[i]] = kNotListed;
    --n;
    if (i < n) {
      rows_[i] = rows_[n];
      values_[i] = values_[n];
      position_[rows_[i]] = static_cast<uint32_t>(i);
    }
  }
  rows_.resize(n);
  values_.resize(n);
}

void SparseTrace::Accumulate(const SparseFeatures& x, float scale, uint32_t stride,
                             uint32_t offset) {
  for (size_t k = 0; k < x.size(); ++k) {
    const uint32_t j = x.index[k] * stride + offset;
    uint32_t& at = position_[j];
    if (at == kNotListed) {
      at = static_cast<uint32_t>(rows_.size());
      rows_.push_back(j);
      values_.push_back(0.0f);
    }
    values_[at] += scale * x.value[k];
  }
}

void SparseTrace::Clear() {
  for (uint32_t j : rows_) position_[j] = kNotListed;
  rows_.clear();
  values_.clear();
}

void SparseTrace::Set(absl::Span<const uint32_t> rows, absl::Span<const float> values) {
  Clear();
  for (size_t i = 0; i < rows.size(); ++i) {
    if (values[i] == 0.0f) continue;
    position_[rows[i]] = static_cast<uint32_t>(rows_.size());
    rows_.push_back(rows[i]);
    values_.push_back(values[i]);
  }
}

void SparseTrace::SaveState(StateWriter& w) const {
  w.PutVector(rows_);
  w.PutVector(values_);
}

bool SparseTrace::LoadState(StateReader& r) {
  Clear();
  std::vector<uint32_t> rows;
  std::vector<float> values;
  if (!r.GetVector(&rows) || !r.GetVector(&values, rows.size())) return false;
  for (size_t i = 0; i < rows.size(); ++i) {
    const bool in_range = rows[i] < position_.size();
    if (!in_range || position_[rows[i]] != kNotListed) {
      for (size_t k = 0; k < i; ++k) position_[rows[k]] = kNotListed;
      return r.Fail(in_range ? "trace row repeated" : "trace row out of range");
    }
    position_[rows[i]] = static_cast<uint32_t>(i);
  }
  rows_ = std::move(rows);
  values_ = std::move(values);
  return true;
}

}  // namespace bellwether
