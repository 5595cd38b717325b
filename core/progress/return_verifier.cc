#include "core/progress/return_verifier.h"

#include "core/io/state_codec.h"

#include <algorithm>
#include <cmath>

namespace bellwether {

ReturnVerifier::ReturnVerifier(double gamma, size_t max_held, size_t window, VerificationMode mode,
                               std::vector<bool> probability)
    : nq_(std::max<size_t>(probability.size(), 1)),
      mode_(mode),
      window_(std::max<size_t>(window, 1)) {
  size_t k = 0;
  double d = 1.0;
  while (d >= kDiscountFloor && k < max_held) {
    d *= gamma;
    ++k;
  }
  horizon_ = std::max<size_t>(k, 1);
  acc_.assign(nq_, 0.0);
  timing_.resize(horizon_ + 1);
  held_values_.resize(timing_.size() * 3 * nq_);
  valid_from_.assign(nq_, 0);
  window_error_.resize(window_ * nq_);
  window_realized_.resize(window_ * nq_);
  window_weight_.resize(window_ * nq_);
  window_valid_.resize(window_ * nq_);
  window_count_.assign(nq_, 0);
  sums_.assign(kSums * nq_, 0.0);
  lap_.assign(kSums * nq_, 0.0);
  verified_.assign(nq_, 0);
  truncated_.assign(nq_, 0);
  unverifiable_.assign(nq_, 0);
  calibration_.resize(nq_);
  for (size_t q = 0; q < probability.size(); ++q) {
    if (probability[q]) probability_questions_.push_back(static_cast<uint32_t>(q));
  }
  points_.reserve(nq_);
}

uint64_t ReturnVerifier::ValidHeld(size_t q) const {
  return holds_ - std::max(oldest_index(), valid_from_[q]);
}

void ReturnVerifier::InterruptQuestion(size_t q) {
  unverifiable_[q] += ValidHeld(q);
  valid_from_[q] = holds_;
}

void ReturnVerifier::Interrupt() {
  for (size_t q = 0; q < nq_; ++q) InterruptQuestion(q);
  held_count_ = 0;
  held_start_ = 0;
  ResetSums();
}

void ReturnVerifier::ResetSums() {
  std::fill(acc_.begin(), acc_.end(), 0.0);
  disc_ = 1;
  wt_ = 1;
}

void ReturnVerifier::Observe(absl::Span<const double> cumulants, double continuation, double pi,
                             double rho) {
  if (mode_ == VerificationMode::kOnTargetStretches && pi == 0.0) {
    Interrupt();
    return;
  }
  if (held_count_ == 0) return;  // nothing waits for these cumulants
  if (mode_ == VerificationMode::kImportanceWeighted) wt_ *= rho;
  const double scale_now = disc_ * wt_;
  const size_t n = std::min(cumulants.size(), nq_);
  bool missing = cumulants.size() < nq_;
  double* acc = acc_.data();
  for (size_t q = 0; q < n; ++q) {
    const double c = cumulants[q];
    const bool nan = std::isnan(c);
    missing |= nan;
    acc[q] = nan ? acc[q] : acc[q] + scale_now * c;
  }
  if (missing) {
    for (size_t q = 0; q < nq_; ++q) {
      if (q >= n || std::isnan(cumulants[q])) InterruptQuestion(q);
    }
  }
  disc_ *= continuation;
  ++step_;
  // Oldest first: it has the smallest remaining discount.
  while (held_count_ > 0) {
    const Timing& t = timing_[held_start_];
    const double discount = disc_ / t.disc0;
    const bool done = discount < kDiscountFloor || wt_ == 0.0;
    const bool capped = step_ - t.held_at >= static_cast<int64_t>(horizon_);
    if (!done && !capped) break;
    VerifyOldest(wt_ == 0.0 ? 0.0 : wt_ / t.wt0, !done);
  }
  if (held_count_ == 0) {
    ResetSums();
  } else if (const double scale = disc_ * wt_; scale < 1e-3 || scale > 1e3 || wt_ < 1e-3) {
    Rebase();
  }
  // The next call verifies the oldest held predictions (their timing read just now) and
  // writes the window's next step: written a horizon and a window ago and long out of
  // cache (a pool's verifiers hold megabytes). Fetch them while the rest of the frame
  // runs.
  if (held_count_ > 0) {
    const char* row = reinterpret_cast<const char*>(Values(held_start_));
    for (size_t b = 0; b < 3 * nq_ * sizeof(double); b += 64) __builtin_prefetch(row + b, 0, 3);
    __builtin_prefetch(&timing_[RingAt(held_start_, 1, timing_.size())], 0, 3);
  }
  const size_t at = window_next_ * nq_;
  for (size_t b = 0; b < nq_ * sizeof(double); b += 64) {
    __builtin_prefetch(reinterpret_cast<const char*>(&window_error_[at]) + b, 1, 3);
    __builtin_prefetch(reinterpret_cast<const char*>(&window_realized_[at]) + b, 1, 3);
    __builtin_prefetch(reinterpret_cast<const char*>(&window_weight_[at]) + b, 1, 3);
  }
  __builtin_prefetch(&window_valid_[at], 1, 3);
}

namespace {

// Adds `sign` times one window step's entries (error, realized, weight; nq each) to
// window sums laid out as six rows of nq: error, error^2, realized, realized^2, weight,
// weight^2. Free of the class, so the compiler sees the arrays cannot alias.
void AddRows(size_t nq, double* __restrict e, double* __restrict e2, double* __restrict g,
             double* __restrict g2, double* __restrict w, double* __restrict w2,
             const double* __restrict error, const double* __restrict realized,
             const double* __restrict weight, double sign) {
  for (size_t q = 0; q < nq; ++q) {
    e[q] += sign * error[q];
    e2[q] += sign * (error[q] * error[q]);
    g[q] += sign * realized[q];
    g2[q] += sign * (realized[q] * realized[q]);
    w[q] += sign * weight[q];
    w2[q] += sign * (weight[q] * weight[q]);
  }
}
void AddStep(double* sums, size_t nq, const double* error, const double* realized,
             const double* weight, double sign) {
  AddRows(nq, sums, sums + nq, sums + 2 * nq, sums + 3 * nq, sums + 4 * nq, sums + 5 * nq, error,
          realized, weight, sign);
}

// One step's entries of the held predictions due: error, realized return and weight of
// each question, zero for those whose prediction was dropped (index below valid_from).
void RealizeStep(size_t nq, uint64_t index, const uint64_t* __restrict valid_from,
                 const double* __restrict prediction, const double* __restrict base,
                 const double* __restrict acc0, const double* __restrict acc, double inv_scale,
                 double weight, double* __restrict error, double* __restrict realized,
                 double* __restrict w) {
  for (size_t q = 0; q < nq; ++q) {
    const bool ok = index >= valid_from[q];
    const double r = base[q] + inv_scale * (acc[q] - acc0[q]);
    error[q] = ok ? prediction[q] - r : 0.0;
    realized[q] = ok ? r : 0.0;
    w[q] = ok ? weight : 0.0;
  }
}

}  // namespace

void ReturnVerifier::VerifyOldest(double weight, bool truncated) {
  const Timing& t = timing_[held_start_];
  const size_t nq = nq_;
  const double* prediction = Values(held_start_);
  const uint64_t index = oldest_index();
  const uint64_t* __restrict valid_from = valid_from_.data();
  const size_t at = window_next_ * nq;
  double* error = &window_error_[at];
  double* realized = &window_realized_[at];
  double* w = &window_weight_[at];
  uint8_t* __restrict valid = &window_valid_[at];
  uint32_t* __restrict count = window_count_.data();
  if (window_filled_ == window_) {
    // The step leaving the window. A question's entry is zero where it was not valid.
    AddStep(sums_.data(), nq, error, realized, w, -1.0);
    for (size_t q = 0; q < nq; ++q) count[q] -= valid[q];
  }
  RealizeStep(nq, index, valid_from, prediction, prediction + nq, prediction + 2 * nq, acc_.data(),
              t.inv_scale, weight, error, realized, w);
  AddStep(sums_.data(), nq, error, realized, w, 1.0);
  AddStep(lap_.data(), nq, error, realized, w, 1.0);
  uint64_t* __restrict verified = verified_.data();
  uint64_t* __restrict truncated_count = truncated_.data();
  const uint64_t cut = truncated ? 1 : 0;
  for (size_t q = 0; q < nq; ++q) {
    const uint64_t ok = index >= valid_from[q] ? 1 : 0;
    valid[q] = static_cast<uint8_t>(ok);
    count[q] += static_cast<uint32_t>(ok);
    verified[q] += ok;
    truncated_count[q] += ok & cut;
  }
  for (uint32_t q : probability_questions_) {
    if (!valid[q]) continue;
    const double p = std::clamp(prediction[q], 0.0, 1.0);
    CalibrationBin& bin = calibration_[q][std::min<size_t>(static_cast<size_t>(p * 10), 9)];
    ++bin.count;
    bin.sum_predicted += prediction[q];
    bin.sum_observed += realized[q];
  }
  if (sink_) {
    points_.clear();
    for (size_t q = 0; q < nq_; ++q) {
      if (valid[q]) {
        points_.push_back({static_cast<uint32_t>(q), t.seq, prediction[q], realized[q], truncated});
      }
    }
    if (!points_.empty()) sink_(points_);
  }
  window_next_ = RingAt(window_next_, 1, window_);
  window_filled_ = std::min(window_filled_ + 1, window_);
  if (window_next_ == 0) {
    sums_.swap(lap_);
    std::fill(lap_.begin(), lap_.end(), 0.0);
  }
  held_start_ = RingAt(held_start_, 1, timing_.size());
  --held_count_;
}

void ReturnVerifier::Rebase() {
  const size_t cap = timing_.size();
  for (size_t i = 0; i < held_count_; ++i) {
    const size_t slot = RingAt(held_start_, i, cap);
    Timing& t = timing_[slot];
    double* base = Values(slot) + nq_;
    double* acc0 = base + nq_;
    for (size_t q = 0; q < nq_; ++q) {
      base[q] = base[q] + t.inv_scale * (acc_[q] - acc0[q]);
      acc0[q] = 0;
    }
    t.disc0 /= disc_;
    t.wt0 /= wt_;
    t.inv_scale = 1.0 / (t.disc0 * t.wt0);
  }
  ResetSums();
}

void ReturnVerifier::Hold(absl::Span<const double> predictions, uint64_t seq) {
  const size_t cap = timing_.size();
  if (held_count_ == cap) {  // cannot happen: Observe releases at the horizon
    VerifyOldest(wt_ / timing_[held_start_].wt0, true);
  }
  const size_t slot = RingAt(held_start_, held_count_, cap);
  timing_[slot] = Timing{disc_, wt_, 1.0 / (disc_ * wt_), seq, step_};
  double* prediction = Values(slot);
  const size_t n = std::min(predictions.size(), nq_);
  std::copy_n(predictions.data(), n, prediction);
  std::fill(prediction + n, prediction + nq_, 0.0);
  std::fill(prediction + nq_, prediction + 2 * nq_, 0.0);
  std::copy(acc_.begin(), acc_.end(), prediction + 2 * nq_);
  ++held_count_;
  ++holds_;
}

VerifiedErrorStats ReturnVerifier::stats(size_t question) const {
  const size_t q = std::min(question, nq_ - 1);
  VerifiedErrorStats s;
  s.count = verified_[q];
  s.truncated = truncated_[q];
  s.unverifiable = unverifiable_[q];
  s.calibration = calibration_[q];
  s.window = window_count_[q];
  if (s.window == 0) return s;
  const auto sum = [this, q](size_t k) { return sums_[k * nq_ + q]; };
  const double n = static_cast<double>(s.window);
  s.bias = sum(0) / n;
  s.rmse = std::sqrt(std::max(0.0, sum(1)) / n);
  const double r_mean = sum(2) / n;
  const double var = std::max(0.0, std::max(0.0, sum(3)) / n - r_mean * r_mean);
  s.nrmse = var > 0 ? s.rmse / std::sqrt(var) : 0.0;
  const double w_sq = std::max(0.0, sum(5));
  s.effective_sample_size = w_sq > 0 ? sum(4) * sum(4) / w_sq : 0.0;
  return s;
}

double ReturnVerifier::window_rmse(size_t question) const {
  const uint32_t n = window_count_[question];
  return n == 0 ? 0.0 : std::sqrt(std::max(0.0, sums_[nq_ + question]) / static_cast<double>(n));
}

void ReturnVerifier::AddEntry(std::vector<double>& sums, size_t q, size_t at) const {
  const double e = window_error_[at], g = window_realized_[at], v = window_weight_[at];
  sums[q] += e;
  sums[nq_ + q] += e * e;
  sums[2 * nq_ + q] += g;
  sums[3 * nq_ + q] += g * g;
  sums[4 * nq_ + q] += v;
  sums[5 * nq_ + q] += v * v;
}

void ReturnVerifier::RecomputeSums(size_t q) {
  uint32_t count = 0;
  for (size_t k = 0; k < kSums; ++k) sums_[k * nq_ + q] = 0;
  for (size_t i = window_filled_; i-- > 0;) {  // oldest first
    const size_t at = WindowSlotBack(i) * nq_ + q;
    AddEntry(sums_, q, at);
    count += window_valid_[at];
  }
  window_count_[q] = count;
}

void ReturnVerifier::RecomputeLap(size_t q) {
  for (size_t k = 0; k < kSums; ++k) lap_[k * nq_ + q] = 0;
  for (size_t slot = 0; slot < window_next_; ++slot) AddEntry(lap_, q, slot * nq_ + q);
}

size_t ReturnVerifier::memory_bytes() const {
  const size_t doubles = acc_.capacity() + held_values_.capacity() + window_error_.capacity() +
                         window_realized_.capacity() + window_weight_.capacity() +
                         sums_.capacity() + lap_.capacity();
  const size_t words = valid_from_.capacity() + verified_.capacity() + truncated_.capacity() +
                       unverifiable_.capacity();
  return sizeof(*this) + doubles * sizeof(double) + words * sizeof(uint64_t) +
         timing_.capacity() * sizeof(Timing) + window_valid_.capacity() +
         window_count_.capacity() * sizeof(uint32_t) +
         calibration_.capacity() * sizeof(calibration_[0]) +
         probability_questions_.capacity() * sizeof(uint32_t) +
         points_.capacity() * sizeof(VerifiedPoint);
}

QuestionVerification ReturnVerifier::Export(size_t q) const {
  QuestionVerification out;
  const size_t cap = timing_.size();
  for (size_t i = 0; i < held_count_; ++i) {
    if (oldest_index() + i < valid_from_[q]) continue;
    const size_t slot = RingAt(held_start_, i, cap);
    const Timing& t = timing_[slot];
    const double* v = Values(slot);
    out.held.push_back(HeldReturn{v[q], v[nq_ + q] + t.inv_scale * (acc_[q] - v[2 * nq_ + q]),
                                  disc_ / t.disc0, wt_ / t.wt0, t.seq, step_ - t.held_at});
  }
  for (size_t i = window_filled_; i-- > 0;) {  // oldest first
    const size_t at = WindowSlotBack(i) * nq_ + q;
    if (window_valid_[at] == 0) continue;
    out.window.push_back({window_error_[at], window_realized_[at], window_weight_[at]});
  }
  out.totals = stats(q);
  return out;
}

void ReturnVerifier::Adopt(size_t q, const QuestionVerification& from) {
  if (q >= nq_) return;
  const size_t cap = timing_.size();
  if (held_count_ == 0 && !from.held.empty()) {
    // The group's timing: `from`'s newest held predictions, over fresh sums.
    const size_t n = std::min(from.held.size(), cap);
    held_start_ = 0;
    held_count_ = n;
    holds_ = n;
    step_ = 0;
    ResetSums();
    std::fill(held_values_.begin(), held_values_.end(), 0.0);
    for (size_t k = 0; k < n; ++k) {
      const HeldReturn& h = from.held[from.held.size() - n + k];
      timing_[k] = Timing{1.0 / h.discount, 1.0 / h.weight, h.discount * h.weight, h.seq, -h.steps};
    }
    std::fill(valid_from_.begin(), valid_from_.end(), holds_);  // nothing held for the rest
  }
  const size_t m = std::min<size_t>(from.held.size(), held_count_);
  valid_from_[q] = holds_ - m;
  for (size_t k = 0; k < m; ++k) {
    // Newest first: the k-th newest of `from` is the k-th newest here.
    const HeldReturn& h = from.held[from.held.size() - 1 - k];
    double* v = Values(RingAt(held_start_, held_count_ - 1 - k, cap));
    v[q] = h.prediction;
    v[nq_ + q] = h.realized;  // acc_ and acc0 are 0: the base is the return so far
    v[2 * nq_ + q] = 0;
  }
  verified_[q] = from.totals.count;
  truncated_[q] = from.totals.truncated;
  unverifiable_[q] = from.totals.unverifiable + (from.held.size() - m);  // beyond this ring
  calibration_[q] = from.totals.calibration;
  // The window: `from`'s newest entries, newest in the slot before the next one (a fresh
  // group's window is empty: its next slot is 0, the newest go to the ring's end).
  const size_t keep = std::min(from.window.size(), window_);
  for (size_t k = 0; k < keep; ++k) {
    const std::array<double, 3>& e = from.window[from.window.size() - 1 - k];
    const size_t at = WindowSlotBack(k) * nq_ + q;
    window_error_[at] = e[0];
    window_realized_[at] = e[1];
    window_weight_[at] = e[2];
    window_valid_[at] = 1;
  }
  window_filled_ = std::max(window_filled_, keep);
  RecomputeSums(q);
  RecomputeLap(q);
}

void ReturnVerifier::SaveState(StateWriter& w) const {
  w.Put<uint64_t>(nq_);
  w.Put<uint64_t>(timing_.size());
  w.Put<uint64_t>(window_);
  w.Put<uint64_t>(held_start_);
  w.Put<uint64_t>(held_count_);
  w.Put(disc_);
  w.Put(wt_);
  w.Put(step_);
  w.Put(holds_);
  for (double a : acc_) w.Put(a);
  const size_t cap = timing_.size();
  for (size_t i = 0; i < held_count_; ++i) {
    const size_t slot = RingAt(held_start_, i, cap);
    const Timing& t = timing_[slot];
    w.Put(t.disc0);
    w.Put(t.wt0);
    w.Put(t.inv_scale);
    w.Put(t.seq);
    w.Put(t.held_at);
    const double* v = Values(slot);
    for (size_t j = 0; j < 3 * nq_; ++j) w.Put(v[j]);
  }
  // The window's steps in the ring, oldest first.
  w.Put<uint64_t>(window_next_);
  w.Put<uint64_t>(window_filled_);
  for (size_t i = window_filled_; i-- > 0;) {
    const size_t at = WindowSlotBack(i) * nq_;
    for (size_t q = 0; q < nq_; ++q) {
      w.Put(window_error_[at + q]);
      w.Put(window_realized_[at + q]);
      w.Put(window_weight_[at + q]);
      w.Put(window_valid_[at + q]);
    }
  }
  for (double v : sums_) w.Put(v);
  for (size_t q = 0; q < nq_; ++q) {
    w.Put(valid_from_[q]);
    w.Put(verified_[q]);
    w.Put(truncated_[q]);
    w.Put(unverifiable_[q]);
    for (const CalibrationBin& b : calibration_[q]) {
      w.Put(b.count);
      w.Put(b.sum_predicted);
      w.Put(b.sum_observed);
    }
  }
}

bool ReturnVerifier::LoadState(StateReader& r) {
  if (r.version() < 6) {
    if (nq_ != 1) return r.Fail("a per-question verifier record for a group of questions");
    QuestionVerification from;
    if (!ReadLegacy(r, timing_.size(), window_, &from)) return false;
    Adopt(0, from);
    return true;
  }
  uint64_t nq = 0, cap = 0, wsize = 0, start = 0, count = 0;
  if (!r.Get(&nq) || !r.Get(&cap) || !r.Get(&wsize) || !r.Get(&start) || !r.Get(&count)) {
    return false;
  }
  if (nq != nq_) return r.Fail("verifier group size differs from the spec's");
  if (cap != timing_.size()) return r.Fail("verifier horizon differs from the spec's");
  if (wsize != window_) return r.Fail("verifier window differs from the spec's");
  if (start >= cap || count > cap) return r.Fail("verifier ring index out of range");
  // No range checks on the sums: none of them indexes memory, and the loader must take
  // whatever the verifier itself can hold, non-finite values included (hostile frames
  // make sums infinite and importance weights overflow; found by fuzzing, where refusing
  // them made a saved pool unloadable).
  if (!r.Get(&disc_) || !r.Get(&wt_) || !r.Get(&step_) || !r.Get(&holds_)) return false;
  if (holds_ < count) return r.Fail("verifier hold count below the held predictions");
  for (double& a : acc_) {
    if (!r.Get(&a)) return false;
  }
  held_start_ = start;
  held_count_ = count;
  for (size_t i = 0; i < count; ++i) {
    const size_t slot = RingAt(start, i, cap);
    Timing& t = timing_[slot];
    if (!r.Get(&t.disc0) || !r.Get(&t.wt0) || !r.Get(&t.inv_scale) || !r.Get(&t.seq) ||
        !r.Get(&t.held_at)) {
      return false;
    }
    double* v = Values(slot);
    for (size_t j = 0; j < 3 * nq_; ++j) {
      if (!r.Get(&v[j])) return false;
    }
  }
  uint64_t next = 0, filled = 0;
  if (!r.Get(&next) || !r.Get(&filled)) return false;
  if (next >= window_ || filled > window_) return r.Fail("verifier window index out of range");
  window_next_ = next;
  window_filled_ = filled;
  std::fill(window_count_.begin(), window_count_.end(), 0);
  for (size_t i = filled; i-- > 0;) {
    const size_t at = WindowSlotBack(i) * nq_;
    for (size_t q = 0; q < nq_; ++q) {
      uint8_t valid = 0;
      if (!r.Get(&window_error_[at + q]) || !r.Get(&window_realized_[at + q]) ||
          !r.Get(&window_weight_[at + q]) || !r.Get(&valid)) {
        return false;
      }
      if (valid > 1) return r.Fail("verifier window entry's flag out of range");
      window_valid_[at + q] = valid;
      window_count_[q] += valid;
    }
  }
  for (double& v : sums_) {
    if (!r.Get(&v)) return false;
  }
  for (size_t q = 0; q < nq_; ++q) {
    if (!r.Get(&valid_from_[q]) || !r.Get(&verified_[q]) || !r.Get(&truncated_[q]) ||
        !r.Get(&unverifiable_[q])) {
      return false;
    }
    if (valid_from_[q] > holds_) {
      return r.Fail("verifier question's first held index out of range");
    }
    for (CalibrationBin& b : calibration_[q]) {
      if (!r.Get(&b.count) || !r.Get(&b.sum_predicted) || !r.Get(&b.sum_observed)) {
        return false;
      }
    }
    RecomputeLap(q);
  }
  return true;
}

bool ReturnVerifier::ReadLegacy(StateReader& r, size_t ring, size_t window,
                                QuestionVerification* out) {
  uint64_t cap = 0, start = 0, count = 0;
  if (!r.Get(&cap) || !r.Get(&start) || !r.Get(&count)) return false;
  if (cap != ring) return r.Fail("verifier horizon differs from the spec's");
  if (start >= cap || count > cap) return r.Fail("verifier ring index out of range");
  out->held.assign(count, HeldReturn{});
  if (r.version() >= 3) {
    // Version 3 to 5: each held prediction as a difference of the verifier's running sums.
    double acc = 0, disc = 0, wt = 0;
    int64_t step = 0;
    if (!r.Get(&acc) || !r.Get(&disc) || !r.Get(&wt) || !r.Get(&step)) return false;
    for (HeldReturn& h : out->held) {
      double base = 0, acc0 = 0, disc0 = 0, wt0 = 0, inv_scale = 0;
      int64_t held_at = 0;
      if (!r.Get(&h.prediction) || !r.Get(&base) || !r.Get(&acc0) || !r.Get(&disc0) ||
          !r.Get(&wt0) || !r.Get(&inv_scale) || !r.Get(&h.seq) || !r.Get(&held_at)) {
        return false;
      }
      h.realized = base + inv_scale * (acc - acc0);
      h.discount = disc / disc0;
      h.weight = wt / wt0;
      h.steps = step - held_at;
    }
  } else {
    // Version 2: each held prediction's return so far, discount and weight.
    for (HeldReturn& h : out->held) {
      uint32_t steps = 0;
      if (!r.Get(&h.prediction) || !r.Get(&h.realized) || !r.Get(&h.discount) ||
          !r.Get(&h.weight) || !r.Get(&h.seq) || !r.Get(&steps)) {
        return false;
      }
      if (!(h.discount > 0) || !(h.weight > 0)) return r.Fail("held prediction out of range");
      h.steps = steps;
    }
  }
  uint64_t wsize = 0, wnext = 0, wcount = 0;
  if (!r.Get(&wsize) || !r.Get(&wnext) || !r.Get(&wcount)) return false;
  if (wsize != window) return r.Fail("verifier window differs from the spec's");
  if (wnext >= wsize || wcount > wsize) return r.Fail("verifier window index out of range");
  // The ring's entries in slot order; oldest first, they start at the next slot when
  // the ring is full.
  std::vector<std::array<double, 3>> entries(wcount);
  for (std::array<double, 3>& e : entries) {
    if (!r.Get(&e[0]) || !r.Get(&e[1]) || !r.Get(&e[2])) return false;
  }
  const size_t first = wcount == wsize ? wnext : 0;
  out->window.clear();
  for (size_t i = 0; i < wcount; ++i) out->window.push_back(entries[(first + i) % wcount]);
  if (r.version() >= 4) {
    // Version 4 on kept the window's running sums; they are recomputed on adoption.
    for (int k = 0; k < 6; ++k) {
      double unused = 0;
      if (!r.Get(&unused)) return false;
    }
  }
  VerifiedErrorStats& t = out->totals;
  if (!r.Get(&t.count) || !r.Get(&t.truncated) || !r.Get(&t.unverifiable)) return false;
  for (CalibrationBin& b : t.calibration) {
    if (!r.Get(&b.count) || !r.Get(&b.sum_predicted) || !r.Get(&b.sum_observed)) return false;
  }
  return true;
}

}  // namespace bellwether
