#include "core/progress/return_verifier.h"

#include "core/io/state_codec.h"

#include <algorithm>
#include <cmath>

namespace bellwether {

ReturnVerifier::ReturnVerifier(double gamma, size_t max_held, size_t window,
                               VerificationMode mode, bool probability)
    : mode_(mode), probability_(probability), window_(std::max<size_t>(window, 1)) {
  size_t k = 0;
  double d = 1.0;
  while (d >= kDiscountFloor && k < max_held) {
    d *= gamma;
    ++k;
  }
  horizon_ = std::max<size_t>(k, 1);
  held_.resize(horizon_ + 1);
}

void ReturnVerifier::Observe(double c, double continuation, double pi, double rho) {
  if (std::isnan(c) || (mode_ == VerificationMode::kOnTargetStretches && pi == 0.0)) {
    Interrupt();
    return;
  }
  if (held_count_ == 0) return;  // nothing waits for this cumulant
  if (mode_ == VerificationMode::kImportanceWeighted) wt_ *= rho;
  acc_ += disc_ * wt_ * c;
  disc_ *= continuation;
  ++step_;
  // Oldest first: it has the smallest remaining discount.
  const size_t cap = held_.size();
  while (held_count_ > 0) {
    const Held& h = held_[held_start_];
    const double discount = disc_ / h.disc0;
    const bool done = discount < kDiscountFloor || wt_ == 0.0;
    const bool capped = step_ - h.held_at >= static_cast<int64_t>(horizon_);
    if (!done && !capped) break;
    Verify(h, Realized(h), wt_ == 0.0 ? 0.0 : wt_ / h.wt0, !done);
    held_start_ = RingAt(held_start_, 1, cap);
    --held_count_;
  }
  if (held_count_ == 0) {
    acc_ = 0;
    disc_ = 1;
    wt_ = 1;
  } else if (const double scale = disc_ * wt_; scale < 1e-3 || scale > 1e3 || wt_ < 1e-3) {
    Rebase();
  }
  // The next call verifies the oldest held prediction (read just now), then reads the
  // one after it and overwrites the window's next slot: both written a horizon ago and
  // long out of cache (a pool's verifiers hold megabytes). Fetch them while the rest of
  // the frame runs.
  __builtin_prefetch(&held_[RingAt(held_start_, 1, cap)], 0, 3);
  __builtin_prefetch(&window_[window_next_], 1, 3);
}

void ReturnVerifier::Rebase() {
  const size_t cap = held_.size();
  for (size_t i = 0; i < held_count_; ++i) {
    Held& h = held_[RingAt(held_start_, i, cap)];
    h.base = Realized(h);
    h.acc0 = 0;
    h.disc0 /= disc_;
    h.wt0 /= wt_;
    h.inv_scale = 1.0 / (h.disc0 * h.wt0);
  }
  acc_ = 0;
  disc_ = 1;
  wt_ = 1;
}

void ReturnVerifier::Interrupt() {
  totals_.unverifiable += held_count_;
  held_count_ = 0;
  held_start_ = 0;
  acc_ = 0;
  disc_ = 1;
  wt_ = 1;
}

void ReturnVerifier::Hold(double prediction, uint64_t seq) {
  const size_t cap = held_.size();
  if (held_count_ == cap) {  // cannot happen: Observe releases at the horizon
    const Held& h = held_[held_start_];
    Verify(h, Realized(h), wt_ / h.wt0, true);
    held_start_ = RingAt(held_start_, 1, cap);
    --held_count_;
  }
  held_[RingAt(held_start_, held_count_, cap)] =
      Held{prediction, 0.0, acc_, disc_, wt_, 1.0 / (disc_ * wt_), seq, step_};
  ++held_count_;
}

void ReturnVerifier::Verify(const Held& h, double realized, double weight, bool truncated) {
  ++totals_.count;
  if (truncated) ++totals_.truncated;
  const Verified added{h.prediction - realized, realized, weight};
  if (window_count_ == window_.size()) AddToSums(window_[window_next_], -1.0);
  window_[window_next_] = added;
  AddToSums(added, 1.0);
  window_next_ = RingAt(window_next_, 1, window_.size());
  window_count_ = std::min(window_count_ + 1, window_.size());
  if (window_next_ == 0) RecomputeSums();
  if (probability_) {
    const double p = std::clamp(h.prediction, 0.0, 1.0);
    CalibrationBin& bin = totals_.calibration[std::min<size_t>(static_cast<size_t>(p * 10), 9)];
    ++bin.count;
    bin.sum_predicted += h.prediction;
    bin.sum_observed += realized;
  }
  if (sink_) sink_(h.seq, h.prediction, realized, truncated);
}

VerifiedErrorStats ReturnVerifier::stats() const {
  VerifiedErrorStats s = totals_;
  s.window = static_cast<uint32_t>(window_count_);
  if (window_count_ == 0) return s;
  const double sum = sums_[0], sum_sq = std::max(0.0, sums_[1]), r_sum = sums_[2],
               r_sq = std::max(0.0, sums_[3]), w_sum = sums_[4], w_sq = std::max(0.0, sums_[5]);
  const double n = static_cast<double>(window_count_);
  s.bias = sum / n;
  s.rmse = std::sqrt(sum_sq / n);
  const double var = std::max(0.0, r_sq / n - (r_sum / n) * (r_sum / n));
  s.nrmse = var > 0 ? s.rmse / std::sqrt(var) : 0.0;
  s.effective_sample_size = w_sq > 0 ? w_sum * w_sum / w_sq : 0.0;
  return s;
}

void ReturnVerifier::RecomputeSums() {
  sums_ = {};
  for (size_t i = 0; i < window_count_; ++i) AddToSums(window_[i], 1.0);
}

void ReturnVerifier::AddToSums(const Verified& v, double sign) {
  sums_[0] += sign * v.error;
  sums_[1] += sign * (v.error * v.error);
  sums_[2] += sign * v.realized;
  sums_[3] += sign * (v.realized * v.realized);
  sums_[4] += sign * v.weight;
  sums_[5] += sign * (v.weight * v.weight);
}

size_t ReturnVerifier::memory_bytes() const {
  return sizeof(*this) + held_.capacity() * sizeof(Held) + window_.capacity() * sizeof(Verified);
}

void ReturnVerifier::SaveState(StateWriter& w) const {
  w.Put<uint64_t>(held_.size());
  w.Put<uint64_t>(held_start_);
  w.Put<uint64_t>(held_count_);
  w.Put(acc_);
  w.Put(disc_);
  w.Put(wt_);
  w.Put(step_);
  const size_t cap = held_.size();
  for (size_t i = 0; i < held_count_; ++i) {
    const Held& h = held_[RingAt(held_start_, i, cap)];
    w.Put(h.prediction);
    w.Put(h.base);
    w.Put(h.acc0);
    w.Put(h.disc0);
    w.Put(h.wt0);
    w.Put(h.inv_scale);
    w.Put(h.seq);
    w.Put(h.held_at);
  }
  w.Put<uint64_t>(window_.size());
  w.Put<uint64_t>(window_next_);
  w.Put<uint64_t>(window_count_);
  for (size_t i = 0; i < window_count_; ++i) {
    w.Put(window_[i].error);
    w.Put(window_[i].realized);
    w.Put(window_[i].weight);
  }
  for (double v : sums_) w.Put(v);
  w.Put(totals_.count);
  w.Put(totals_.truncated);
  w.Put(totals_.unverifiable);
  for (const CalibrationBin& b : totals_.calibration) {
    w.Put(b.count);
    w.Put(b.sum_predicted);
    w.Put(b.sum_observed);
  }
}

bool ReturnVerifier::LoadState(StateReader& r) {
  uint64_t cap = 0, start = 0, count = 0;
  if (!r.Get(&cap) || !r.Get(&start) || !r.Get(&count)) return false;
  if (cap != held_.size()) return r.Fail("verifier horizon differs from the spec's");
  if (start >= cap || count > cap) return r.Fail("verifier ring index out of range");
  held_start_ = start;
  held_count_ = count;
  if (r.version() >= 3) {
    if (!r.Get(&acc_) || !r.Get(&disc_) || !r.Get(&wt_) || !r.Get(&step_)) return false;
    // No range checks on these values: none of them indexes memory, and the loader must
    // take whatever the verifier itself can hold, non-finite values included (hostile
    // frames make sums infinite and importance weights overflow; found by fuzzing, where
    // refusing them made a saved pool unloadable).
    for (size_t i = 0; i < count; ++i) {
      Held& h = held_[RingAt(start, i, cap)];
      if (!r.Get(&h.prediction) || !r.Get(&h.base) || !r.Get(&h.acc0) || !r.Get(&h.disc0) ||
          !r.Get(&h.wt0) || !r.Get(&h.inv_scale) || !r.Get(&h.seq) || !r.Get(&h.held_at)) {
        return false;
      }
    }
  } else {
    // Version 2 kept each prediction's return so far, discount and weight: they become
    // bases over fresh sums.
    acc_ = 0;
    disc_ = 1;
    wt_ = 1;
    step_ = 0;
    for (size_t i = 0; i < count; ++i) {
      Held& h = held_[RingAt(start, i, cap)];
      double realized = 0, discount = 0, weight = 0;
      uint32_t steps = 0;
      if (!r.Get(&h.prediction) || !r.Get(&realized) || !r.Get(&discount) || !r.Get(&weight) ||
          !r.Get(&h.seq) || !r.Get(&steps)) {
        return false;
      }
      if (!(discount > 0) || !(weight > 0)) return r.Fail("held prediction out of range");
      h.base = realized;
      h.acc0 = 0;
      h.disc0 = 1.0 / discount;
      h.wt0 = 1.0 / weight;
      h.inv_scale = discount * weight;
      h.held_at = -static_cast<int64_t>(steps);
    }
  }
  uint64_t wsize = 0, wnext = 0, wcount = 0;
  if (!r.Get(&wsize) || !r.Get(&wnext) || !r.Get(&wcount)) return false;
  if (wsize != window_.size()) return r.Fail("verifier window differs from the spec's");
  if (wnext >= wsize || wcount > wsize) return r.Fail("verifier window index out of range");
  window_next_ = wnext;
  window_count_ = wcount;
  for (size_t i = 0; i < wcount; ++i) {
    if (!r.Get(&window_[i].error) || !r.Get(&window_[i].realized) ||
        !r.Get(&window_[i].weight)) {
      return false;
    }
  }
  if (r.version() >= 4) {
    // Sums of what was verified: infinite or NaN when a stream sent huge values, as the
    // window's entries themselves may be (the next wrap recomputes them).
    for (double& v : sums_) {
      if (!r.Get(&v)) return false;
    }
  } else {
    RecomputeSums();
  }
  if (!r.Get(&totals_.count) || !r.Get(&totals_.truncated) || !r.Get(&totals_.unverifiable)) {
    return false;
  }
  for (CalibrationBin& b : totals_.calibration) {
    if (!r.Get(&b.count) || !r.Get(&b.sum_predicted) || !r.Get(&b.sum_observed)) return false;
  }
  return true;
}

}  // namespace bellwether
