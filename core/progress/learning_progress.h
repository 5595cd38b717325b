// Learning-progress measures of one question, updated once per learned transition and
// exponentially weighted with the pool's progress decay (default 0.999: a memory of about
// 1,000 updates).
//
//   TD error: mean and RMS of delta.
//   UDE, unexpected demon error (A. White 2015, "Developing a predictive approach to
//     knowledge", PhD thesis, University of Alberta; form from memory of the thesis):
//     |fast mean of delta| / (slow standard deviation of delta + 1e-8), the fast average
//     ten times quicker than the slow one. Near 0 while errors are as usual; large when
//     the errors turn unexpectedly one-sided.
//   RUPEE (same source): sqrt(|h . avg(delta e)|), with h learned like TDC's secondary
//     weights; computed by the block learner (block_learner.h), reported here.
//   Weight change per update, |Delta w| (the amount of learning; Linke, Ady, White,
//     Degris & White 2020, "Adapting Behavior via Intrinsic Reward: A Survey and Empirical
//     Study", JAIR).
//   Importance ratios: effective sample size fraction mean(rho)^2 / mean(rho^2).
//
// Labels, with explicit thresholds (W = 1 / (1 - decay) updates):
//   diverging: a divergence-guard reset within the last W updates, or a non-finite
//     TD error average.
//   settled:   at least 2 W updates, UDE below 2, and the weight change per update at
//     most 10 % of its largest average so far.
//   learning:  otherwise.
#ifndef BELLWETHER_CORE_PROGRESS_LEARNING_PROGRESS_H_
#define BELLWETHER_CORE_PROGRESS_LEARNING_PROGRESS_H_

#include <algorithm>
#include <cstdint>

namespace bellwether {

enum class ProgressLabel { kLearning, kSettled, kDiverging };
const char* ProgressLabelName(ProgressLabel label);

struct LearningProgress {
  static constexpr double kDefaultDecay = 0.999;

  double td_mean = 0;        // slow average of delta
  double td_sq = 0;          // slow average of delta^2
  double td_fast_mean = 0;   // fast average of delta (UDE numerator)
  double weight_change = 0;  // average |Delta w|
  double weight_change_peak = 0;
  double rho_mean = 0, rho_sq = 0;
  double rupee = 0;
  uint64_t observed = 0;               // transitions folded in
  uint64_t last_reset_at = 0;          // `observed` at the last divergence reset
  bool reset_ever = false;

  // Folds in one learned transition (inline: a block calls it for each question on
  // every frame).
  void Update(double delta, double weight_change_now, double rho, double decay) {
    ++observed;
    // Averages are bias-corrected for the first updates by starting the rate at 1/n.
    const double first = 1.0 / static_cast<double>(observed);
    const double slow = std::max(1.0 - decay, first);
    const double fast = std::max(std::min(1.0, 10.0 * (1.0 - decay)), first);
    td_mean += slow * (delta - td_mean);
    td_sq += slow * (delta * delta - td_sq);
    td_fast_mean += fast * (delta - td_fast_mean);
    weight_change += slow * (weight_change_now - weight_change);
    if (static_cast<double>(observed) * (1.0 - decay) >= 1.0) {
      weight_change_peak = std::max(weight_change_peak, weight_change);
    }
    rho_mean += slow * (rho - rho_mean);
    rho_sq += slow * (rho * rho - rho_sq);
  }
  // A divergence-guard reset happened now.
  void MarkReset();

  double td_rms() const;
  double ude() const;
  double effective_sample_fraction() const;
  ProgressLabel Label(double decay) const;
};

}  // namespace bellwether

#endif  // BELLWETHER_CORE_PROGRESS_LEARNING_PROGRESS_H_
