// The verified error of one question on one stream: every prediction is held until its
// return has been realized, then compared with it.
#ifndef BELLWETHER_CORE_PROGRESS_RETURN_VERIFIER_H_
#define BELLWETHER_CORE_PROGRESS_RETURN_VERIFIER_H_

#include <cstddef>
#include <cstdint>
#include <vector>

namespace bellwether {

struct VerifiedErrorStats {
  uint64_t count = 0;       // predictions verified so far
  uint64_t truncated = 0;   // of those, cut at the held-steps cap before the discount fell
  uint64_t unverifiable = 0;  // dropped: a restart or a missing cumulant cut their return
  double rmse = 0;          // over the window
  double bias = 0;          // mean (prediction - realized return) over the window
  uint32_t window = 0;      // verified predictions in the window
};

// For a prediction v_t of G_t = sum_k (prod_{i<=k} gamma_{t+i}) c_{t+k+1}, the realized
// return accumulates as cumulants arrive; once the remaining discount falls below
// kDiscountFloor (a termination makes it 0) the tail is negligible and the prediction is
// verified. Memory is fixed at construction: a ring of held predictions and a ring of
// recent errors.
class ReturnVerifier {
 public:
  static constexpr double kDiscountFloor = 1e-3;
  static constexpr size_t kDefaultMaxHeld = 10000;
  static constexpr size_t kDefaultWindow = 1000;

  explicit ReturnVerifier(double gamma, size_t max_held = kDefaultMaxHeld,
                          size_t window = kDefaultWindow);

  // Steps held at most: the smallest k with gamma^k below the floor (gamma the
  // question's constant continuation), capped at max_held. A return cut at the cap is
  // counted as truncated.
  size_t horizon() const { return horizon_; }

  // A transition happened with cumulant `c` (NaN when it is missing) and continuation
  // `continuation` into the new frame. Held predictions accumulate c; those whose
  // remaining discount fell below the floor are verified. A missing cumulant makes every
  // held prediction unverifiable.
  void Observe(double c, double continuation);
  // The stream restarted: held predictions can never be completed.
  void Interrupt();
  // Holds a new prediction made at the current frame.
  void Hold(double prediction);

  VerifiedErrorStats stats() const;
  // Bytes reserved by this verifier (fixed at construction).
  size_t memory_bytes() const;

 private:
  struct Held {
    double prediction;
    double realized;
    double discount;  // gamma^k after k cumulants
    uint32_t steps;
  };
  void Verify(const Held& h, bool truncated);

  size_t horizon_;
  std::vector<Held> held_;  // ring
  size_t held_start_ = 0;
  size_t held_count_ = 0;
  std::vector<double> errors_;  // ring of recent errors
  size_t error_next_ = 0;
  size_t error_count_ = 0;
  double sum_ = 0, sum_sq_ = 0;
  size_t since_resum_ = 0;
  VerifiedErrorStats totals_;
};

}  // namespace bellwether

#endif  // BELLWETHER_CORE_PROGRESS_RETURN_VERIFIER_H_
