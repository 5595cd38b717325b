#include "core/progress/learning_progress.h"

#include <algorithm>
#include <cmath>

namespace bellwether {

const char* ProgressLabelName(ProgressLabel label) {
  switch (label) {
    case ProgressLabel::kLearning: return "learning";
    case ProgressLabel::kSettled: return "settled";
    case ProgressLabel::kDiverging: return "diverging";
  }
  return "learning";
}

void LearningProgress::MarkReset() {
  last_reset_at = observed;
  reset_ever = true;
}

double LearningProgress::td_rms() const { return std::sqrt(std::max(0.0, td_sq)); }

double LearningProgress::ude() const {
  const double var = std::max(0.0, td_sq - td_mean * td_mean);
  return std::fabs(td_fast_mean) / (std::sqrt(var) + 1e-8);
}

double LearningProgress::effective_sample_fraction() const {
  return rho_sq > 0 ? rho_mean * rho_mean / rho_sq : 1.0;
}

ProgressLabel LearningProgress::Label(double decay) const {
  const double window = 1.0 / (1.0 - decay);
  if (!std::isfinite(td_sq) || !std::isfinite(td_mean) ||
      (reset_ever && static_cast<double>(observed - last_reset_at) < window)) {
    return ProgressLabel::kDiverging;
  }
  if (static_cast<double>(observed) >= 2 * window && ude() < 2.0 &&
      weight_change <= 0.1 * weight_change_peak) {
    return ProgressLabel::kSettled;
  }
  return ProgressLabel::kLearning;
}

}  // namespace bellwether
