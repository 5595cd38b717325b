// The verified error of a group of questions on one stream: every prediction is held until
// its return has been realized, then compared with it.
#ifndef BELLWETHER_CORE_PROGRESS_RETURN_VERIFIER_H_
#define BELLWETHER_CORE_PROGRESS_RETURN_VERIFIER_H_

#include <array>
#include <cstddef>
#include <cstdint>
#include <functional>
#include <vector>

#include "absl/types/span.h"

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

// One verified prediction: the question (its place in the group), the seq of the frame
// it was made at, the prediction, the realized return, and whether the return was cut at
// the cap.
struct VerifiedPoint {
  uint32_t question;
  uint64_t seq;
  double prediction;
  double realized;
  bool truncated;
};

// Called once per step that verified anything, with the points verified (the questions
// whose held prediction was due); may be empty.
using VerificationSink = std::function<void(absl::Span<const VerifiedPoint> points)>;

// One held prediction's state, independent of any group's running sums: what a question
// carries from one verifier to another (a spec change regroups questions; a checkpoint of
// an older format kept one verifier per question).
struct HeldReturn {
  double prediction = 0;
  double realized = 0;  // return so far
  double discount = 1;  // remaining discount, prod of continuations since it was held
  double weight = 1;    // importance weight so far
  uint64_t seq = 0;
  int64_t steps = 0;  // steps observed since it was held
};
struct QuestionVerification {
  std::vector<HeldReturn> held;               // oldest first
  std::vector<std::array<double, 3>> window;  // error, realized, weight; oldest first
  VerifiedErrorStats totals;                  // count, truncated, unverifiable, bins
};

// The questions of a group share their discount, target policy and verification mode (a
// block's questions do): each step brings one continuation, one target probability and
// one importance ratio for all of them and one cumulant for each. So the held
// predictions share their timing, their predictions are verified in the same step, and a
// step costs O(questions) over contiguous memory, with one ring check for the group.
//
// For a prediction v_t of G_t = sum_k (prod_{i<=k} gamma_{t+i}) c_{t+k+1}, the realized
// return accumulates as cumulants arrive; once the remaining discount falls below
// kDiscountFloor (a termination makes it 0) the tail is negligible and the prediction is
// verified. Memory is fixed at construction: a ring of held predictions, a ring of the
// last `window` verification steps' errors, and ten calibration bins per question.
//
// A step costs O(questions) however many predictions are held (about 2,000 at gamma
// 0.9965): with running products P (continuations) and W (importance ratios, 1
// on-policy) and per question the running sum A += P W c, a prediction held when they
// were (A0, P0, W0) has realized (A - A0) / (P0 W0), remaining discount P / P0 and
// weight W / W0. Nothing underflows: when P W leaves [1e-3, 1e3] (or W falls below 1e-3)
// every held prediction is rebased, its return so far folded into a base R, and the sums
// restart at (0, 1, 1), so a difference A - A0 never spans more than about three decades
// of scale (12 or more significant digits kept).
//
// A missing cumulant (NaN) of one question drops that question's held predictions (they
// count as unverifiable) and no other's; Interrupt() drops every question's. A question's
// window is its predictions verified in the group's last `window` verification steps:
// all of them unless some of its cumulants went missing.
class ReturnVerifier {
 public:
  static constexpr double kDiscountFloor = 1e-3;
  static constexpr size_t kDefaultMaxHeld = 10000;
  static constexpr size_t kDefaultWindow = 1000;

  // A group of probability.size() questions (at least one); probability[q] says whether
  // question q is a probability (its calibration bins are kept).
  ReturnVerifier(double gamma, size_t max_held, size_t window, VerificationMode mode,
                 std::vector<bool> probability);
  // One question.
  explicit ReturnVerifier(double gamma, size_t max_held = kDefaultMaxHeld,
                          size_t window = kDefaultWindow,
                          VerificationMode mode = VerificationMode::kOnPolicy,
                          bool probability = false)
      : ReturnVerifier(gamma, max_held, window, mode, std::vector<bool>{probability}) {}

  size_t num_questions() const { return nq_; }
  // Steps held at most: the smallest k with gamma^k below the floor (gamma the group's
  // constant continuation), capped at max_held. A return cut at the cap is counted as
  // truncated.
  size_t horizon() const { return horizon_; }
  VerificationMode mode() const { return mode_; }

  // A transition happened with one cumulant per question (NaN when it is missing),
  // continuation `continuation` into the new frame, and (off-policy) the target's
  // probability of the action taken `pi` and its importance ratio `rho`. Held
  // predictions accumulate their question's cumulant; those whose remaining discount
  // fell below the floor are verified.
  void Observe(absl::Span<const double> cumulants, double continuation, double pi = 1.0,
               double rho = 1.0);
  // The stream restarted: held predictions can never be completed.
  void Interrupt();
  // Holds the group's predictions (one per question) made at the frame with `seq`.
  void Hold(absl::Span<const double> predictions, uint64_t seq = 0);

  // The one-question forms.
  void Observe(double c, double continuation, double pi = 1.0, double rho = 1.0) {
    Observe(absl::MakeConstSpan(&c, 1), continuation, pi, rho);
  }
  void Hold(double prediction, uint64_t seq = 0) { Hold(absl::MakeConstSpan(&prediction, 1), seq); }

  // Receives every verified prediction (for offline summaries and history); may be empty.
  void set_sink(VerificationSink sink) { sink_ = std::move(sink); }

  VerifiedErrorStats stats(size_t question = 0) const;
  // Of stats(): the predictions verified so far, and the window's RMSE (0 when empty),
  // without the rest (sampled every few frames).
  uint64_t verified_count(size_t question) const { return verified_[question]; }
  double window_rmse(size_t question) const;
  // Bytes reserved by this verifier for all its questions (fixed at construction).
  size_t memory_bytes() const;

  // Question `q`'s held predictions, window and totals, in a form any group can adopt.
  QuestionVerification Export(size_t q) const;
  // Makes question `q` continue from `from`. Call on a verifier that has observed and
  // held nothing since it was made, for its questions in any order: the first adopted
  // question's held predictions set the group's timing, and the others' are aligned to
  // it newest first (in one stream a group's questions were always held together). A
  // question never adopted starts with nothing held.
  void Adopt(size_t q, const QuestionVerification& from);

  // Checkpoints: held predictions, the verified windows and totals, exactly as laid out.
  void SaveState(StateWriter& w) const;
  // Reads what SaveState wrote (pool-state version 6 on). For older versions, which kept
  // one verifier per question, this reads one question's record into question 0 (the
  // group must have one question; pools read older records with ReadLegacy and Adopt).
  bool LoadState(StateReader& r);
  // One question's record in pool-state versions 2 to 5, for a verifier whose ring holds
  // `ring` entries and window `window` entries.
  static bool ReadLegacy(StateReader& r, size_t ring, size_t window, QuestionVerification* out);
  size_t ring_capacity() const { return timing_.size(); }
  size_t window_size() const { return window_; }

 private:
  // The group's part of a held prediction.
  struct Timing {
    double disc0;      // disc_ when held (or at the last rebase)
    double wt0;        // wt_ then
    double inv_scale;  // 1 / (disc0 wt0)
    uint64_t seq;
    int64_t held_at;   // step_ when held
  };
  // Sums over a question's window: error, error^2, realized, realized^2, weight, weight^2.
  static constexpr size_t kSums = 6;
  // Index `i` places after `start` in a ring of `cap` (start, i < cap), without a
  // division: the rings are stepped every frame.
  static size_t RingAt(size_t start, size_t i, size_t cap) {
    const size_t at = start + i;
    return at >= cap ? at - cap : at;
  }
  // The held values of ring slot `slot`: predictions, bases (realized return folded in
  // at the last rebase), and acc_ when held (or at the last rebase), nq_ each.
  double* Values(size_t slot) { return &held_values_[slot * 3 * nq_]; }
  const double* Values(size_t slot) const { return &held_values_[slot * 3 * nq_]; }
  uint64_t oldest_index() const { return holds_ - held_count_; }
  // Held predictions of question `q` still to verify.
  uint64_t ValidHeld(size_t q) const;
  void InterruptQuestion(size_t q);
  // Verifies the oldest held prediction of every question and drops it from the ring.
  void VerifyOldest(double weight, bool truncated);
  // Folds every held prediction's return so far into its base; the sums restart.
  void Rebase();
  void ResetSums();
  // Window slot `i` places back from the newest (0: the newest).
  size_t WindowSlotBack(size_t i) const { return (window_next_ + 2 * window_ - 1 - i) % window_; }
  // Question q's window sums and count from its entries; `lap` from the slots written
  // since the ring last wrapped (slots [0, window_next_), in slot order).
  void RecomputeSums(size_t q);
  void RecomputeLap(size_t q);
  // Adds the window entry at `at` to column q of `sums` (kSums rows of nq_).
  void AddEntry(std::vector<double>& sums, size_t q, size_t at) const;

  size_t nq_;
  VerificationMode mode_;
  size_t horizon_;
  size_t window_;
  // Running products shared by every held prediction and running sums per question (see
  // the class comment).
  double disc_ = 1;
  double wt_ = 1;
  int64_t step_ = 0;                 // Observe calls that reached held predictions
  uint64_t holds_ = 0;               // Hold calls so far: a held prediction's index
  std::vector<double> acc_;          // per question
  std::vector<Timing> timing_;       // ring
  std::vector<double> held_values_;  // ring, 3 nq_ per slot (see Values())
  size_t held_start_ = 0;
  size_t held_count_ = 0;
  // Per question: held predictions with a lower index were dropped.
  std::vector<uint64_t> valid_from_;
  // The window: a ring of verification steps, nq_ entries each (question-minor, so a
  // step writes contiguous memory). A question's entry in a step it verified nothing in
  // is zero and not valid.
  std::vector<double> window_error_, window_realized_, window_weight_;
  std::vector<uint8_t> window_valid_;
  size_t window_next_ = 0;
  size_t window_filled_ = 0;  // steps in the ring
  // Per question: valid entries in the window, and the window's sums, kSums x nq_
  // (sum k of question q at [k * nq_ + q]), kept as entries come and go so stats() is
  // O(1) (it runs on the frame path, with every published answer). `lap_` sums the
  // entries written since the ring last wrapped: at each wrap it is exactly the window's
  // sum in slot order, and replaces `sums_`, so rounding never builds up over more than
  // one window.
  std::vector<uint32_t> window_count_;
  std::vector<double> sums_, lap_;
  // Per question: totals (count, truncated, unverifiable) and calibration bins.
  std::vector<uint64_t> verified_, truncated_, unverifiable_;
  std::vector<std::array<CalibrationBin, 10>> calibration_;
  std::vector<uint32_t> probability_questions_;
  std::vector<VerifiedPoint> points_;  // the sink's, per step
  VerificationSink sink_;
};

}  // namespace bellwether

#endif  // BELLWETHER_CORE_PROGRESS_RETURN_VERIFIER_H_
