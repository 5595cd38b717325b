// The verified error of one question on one stream: every prediction is held until its
// return has been realized, then compared with it.
#ifndef BELLWETHER_CORE_PROGRESS_RETURN_VERIFIER_H_
#define BELLWETHER_CORE_PROGRESS_RETURN_VERIFIER_H_

#include <array>
#include <cstddef>
#include <cstdint>
#include <functional>
#include <vector>

namespace bellwether {

class StateWriter;
class StateReader;

// One calibration bin of a probability question: predictions in [lo, lo + 0.1).
struct CalibrationBin {
  uint64_t count = 0;
  double sum_predicted = 0;
  double sum_observed = 0;
};

struct VerifiedErrorStats {
  uint64_t count = 0;         // predictions verified so far
  uint64_t truncated = 0;     // of those, cut at the held-steps cap before the discount fell
  uint64_t unverifiable = 0;  // dropped: a restart, a missing cumulant, or the behavior left
                              // the target policy (on-target verification)
  double rmse = 0;            // over the window
  double bias = 0;            // mean (prediction - realized return) over the window
  double nrmse = 0;           // rmse / standard deviation of the window's realized returns
  uint32_t window = 0;        // verified predictions in the window
  // Importance-weighted verification: effective sample size of the window's return
  // weights, (sum w)^2 / sum w^2 (equal to `window` when every weight is 1).
  double effective_sample_size = 0;
  std::array<CalibrationBin, 10> calibration{};  // probability questions only
};

// How off-policy predictions are verified.
enum class VerificationMode {
  kOnPolicy,           // every step counts
  kOnTargetStretches,  // deterministic targets: a step the target would not take drops
                       // what is held (the return under the target was not observed)
  kImportanceWeighted, // stochastic targets: per-decision importance weighting of the
                       // realized return, G = sum_k gamma^k (prod rho) c
};

// Called for each verified prediction: the seq of the frame it was made at, the
// prediction, the realized return, and whether the return was cut at the cap.
using VerificationSink =
    std::function<void(uint64_t seq, double prediction, double realized, bool truncated)>;

// For a prediction v_t of G_t = sum_k (prod_{i<=k} gamma_{t+i}) c_{t+k+1}, the realized
// return accumulates as cumulants arrive; once the remaining discount falls below
// kDiscountFloor (a termination makes it 0) the tail is negligible and the prediction is
// verified. Memory is fixed at construction: a ring of held predictions, a ring of
// recent errors, and ten calibration bins.
//
// A step costs O(1) however many predictions are held (about 2,000 at gamma 0.9965):
// with running products P (continuations) and W (importance ratios, 1 on-policy) and
// the running sum A += P W c, a prediction held when they were (A0, P0, W0) has realized
// (A - A0) / (P0 W0), remaining discount P / P0 and weight W / W0. Nothing underflows:
// when P W leaves [1e-3, 1e3] (or W falls below 1e-3) every held prediction is rebased,
// its return so far folded into a base R, and the sums restart at (0, 1, 1), so a
// difference A - A0 never spans more than about three decades of scale (12 or more
// significant digits kept).
class ReturnVerifier {
 public:
  static constexpr double kDiscountFloor = 1e-3;
  static constexpr size_t kDefaultMaxHeld = 10000;
  static constexpr size_t kDefaultWindow = 1000;

  explicit ReturnVerifier(double gamma, size_t max_held = kDefaultMaxHeld,
                          size_t window = kDefaultWindow,
                          VerificationMode mode = VerificationMode::kOnPolicy,
                          bool probability = false);

  // Steps held at most: the smallest k with gamma^k below the floor (gamma the
  // question's constant continuation), capped at max_held. A return cut at the cap is
  // counted as truncated.
  size_t horizon() const { return horizon_; }
  VerificationMode mode() const { return mode_; }

  // A transition happened with cumulant `c` (NaN when it is missing), continuation
  // `continuation` into the new frame, and (off-policy) the target's probability of the
  // action taken `pi` and its importance ratio `rho`. Held predictions accumulate c;
  // those whose remaining discount fell below the floor are verified.
  void Observe(double c, double continuation, double pi = 1.0, double rho = 1.0);
  // The stream restarted: held predictions can never be completed.
  void Interrupt();
  // Holds a new prediction made at the frame with `seq`.
  void Hold(double prediction, uint64_t seq = 0);

  // Receives every verified prediction (for offline summaries); may be empty.
  void set_sink(VerificationSink sink) { sink_ = std::move(sink); }

  VerifiedErrorStats stats() const;
  // Bytes reserved by this verifier (fixed at construction).
  size_t memory_bytes() const;

  // Checkpoints: held predictions, the verified window and totals, exactly as laid out.
  void SaveState(StateWriter& w) const;
  bool LoadState(StateReader& r);

 private:
  struct alignas(64) Held {  // one cache line
    double prediction;
    double base;       // realized return folded in at the last rebase
    double acc0;       // acc_ when held (or at the last rebase)
    double disc0;      // disc_ then
    double wt0;        // wt_ then
    double inv_scale;  // 1 / (disc0 wt0)
    uint64_t seq;
    int64_t held_at;   // step_ when held
  };
  // Padded to 32 bytes so an entry never straddles two cache lines (Observe prefetches
  // the one it overwrites next).
  struct alignas(32) Verified {
    double error;
    double realized;
    double weight;
  };
  double Realized(const Held& h) const { return h.base + h.inv_scale * (acc_ - h.acc0); }
  // Index `i` places after `start` in a ring of `cap` (start, i < cap), without a
  // division: the rings are stepped once per question per frame.
  static size_t RingAt(size_t start, size_t i, size_t cap) {
    const size_t at = start + i;
    return at >= cap ? at - cap : at;
  }
  // Folds every held prediction's return so far into its base; the sums restart.
  void Rebase();
  void Verify(const Held& h, double realized, double weight, bool truncated);

  VerificationMode mode_;
  bool probability_;
  size_t horizon_;
  // Running sums shared by every held prediction (see the class comment).
  double acc_ = 0;
  double disc_ = 1;
  double wt_ = 1;
  int64_t step_ = 0;  // Observe calls that reached the held predictions
  std::vector<Held> held_;  // ring
  size_t held_start_ = 0;
  size_t held_count_ = 0;
  std::vector<Verified> window_;  // ring of recent verified predictions
  size_t window_next_ = 0;
  size_t window_count_ = 0;
  // Sums over the window (error, error^2, realized, realized^2, weight, weight^2), kept
  // as entries come and go so stats() is O(1) (it runs on the frame path, with every
  // published answer), and recomputed exactly each time the ring wraps, so rounding
  // never builds up over more than one window.
  std::array<double, 6> sums_{};
  void RecomputeSums();
  void AddToSums(const Verified& v, double sign);  // sign +1 adds, -1 removes
  VerifiedErrorStats totals_;
  VerificationSink sink_;
};

}  // namespace bellwether

#endif  // BELLWETHER_CORE_PROGRESS_RETURN_VERIFIER_H_
