#include "core/progress/return_verifier.h"

#include <algorithm>
#include <cmath>

namespace bellwether {

ReturnVerifier::ReturnVerifier(double gamma, size_t max_held, size_t window)
    : errors_(std::max<size_t>(window, 1), 0.0) {
  size_t k = 0;
  double d = 1.0;
  while (d >= kDiscountFloor && k < max_held) {
    d *= gamma;
    ++k;
  }
  horizon_ = std::max<size_t>(k, 1);
  held_.resize(horizon_ + 1);
}

void ReturnVerifier::Observe(double c, double continuation) {
  if (std::isnan(c)) {
    totals_.unverifiable += held_count_;
    held_count_ = 0;
    held_start_ = 0;
    return;
  }
  const size_t cap = held_.size();
  for (size_t i = 0; i < held_count_; ++i) {
    Held& h = held_[(held_start_ + i) % cap];
    h.realized += h.discount * c;
    h.discount *= continuation;
    ++h.steps;
  }
  // Oldest first: it has the smallest remaining discount.
  while (held_count_ > 0) {
    const Held& h = held_[held_start_];
    const bool done = h.discount < kDiscountFloor;
    const bool capped = h.steps >= horizon_;
    if (!done && !capped) break;
    Verify(h, !done);
    held_start_ = (held_start_ + 1) % cap;
    --held_count_;
  }
}

void ReturnVerifier::Interrupt() {
  totals_.unverifiable += held_count_;
  held_count_ = 0;
  held_start_ = 0;
}

void ReturnVerifier::Hold(double prediction) {
  const size_t cap = held_.size();
  if (held_count_ == cap) {  // cannot happen: Observe releases at the horizon
    Verify(held_[held_start_], true);
    held_start_ = (held_start_ + 1) % cap;
    --held_count_;
  }
  held_[(held_start_ + held_count_) % cap] = Held{prediction, 0.0, 1.0, 0};
  ++held_count_;
}

void ReturnVerifier::Verify(const Held& h, bool truncated) {
  const double err = h.prediction - h.realized;
  ++totals_.count;
  if (truncated) ++totals_.truncated;
  const size_t w = errors_.size();
  if (error_count_ == w) {
    const double old = errors_[error_next_];
    sum_ -= old;
    sum_sq_ -= old * old;
  } else {
    ++error_count_;
  }
  errors_[error_next_] = err;
  error_next_ = (error_next_ + 1) % w;
  sum_ += err;
  sum_sq_ += err * err;
  // Recompute the sums now and then so rounding from add/subtract does not drift.
  if (++since_resum_ >= w) {
    since_resum_ = 0;
    sum_ = 0;
    sum_sq_ = 0;
    for (size_t i = 0; i < error_count_; ++i) {
      sum_ += errors_[i];
      sum_sq_ += errors_[i] * errors_[i];
    }
  }
}

VerifiedErrorStats ReturnVerifier::stats() const {
  VerifiedErrorStats s = totals_;
  s.window = static_cast<uint32_t>(error_count_);
  if (error_count_ > 0) {
    const double n = static_cast<double>(error_count_);
    s.bias = sum_ / n;
    s.rmse = std::sqrt(std::max(0.0, sum_sq_ / n));
  }
  return s;
}

size_t ReturnVerifier::memory_bytes() const {
  return held_.capacity() * sizeof(Held) + errors_.capacity() * sizeof(double);
}

}  // namespace bellwether
