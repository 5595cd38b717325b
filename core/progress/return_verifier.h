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
  struct Held {
    double prediction;
    double realized;
    double discount;  // product of continuations so far
    double weight;    // product of importance ratios so far (importance-weighted mode)
    uint64_t seq;
    uint32_t steps;
  };
  struct Verified {
    double error;
    double realized;
    double weight;
  };
  void Verify(const Held& h, bool truncated);

  VerificationMode mode_;
  bool probability_;
  size_t horizon_;
  std::vector<Held> held_;  // ring
  size_t held_start_ = 0;
  size_t held_count_ = 0;
  std::vector<Verified> window_;  // ring of recent verified predictions
  size_t window_next_ = 0;
  size_t window_count_ = 0;
  VerifiedErrorStats totals_;
  VerificationSink sink_;
};

}  // namespace bellwether

#endif  // BELLWETHER_CORE_PROGRESS_RETURN_VERIFIER_H_
