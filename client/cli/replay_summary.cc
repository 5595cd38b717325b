#include "client/cli/replay_summary.h"

#include <cmath>
#include <limits>

#include "absl/strings/str_format.h"
#include "core/frame_input.h"

namespace bellwether::cli {
namespace {

constexpr int64_t kWeekMicros = int64_t{7} * 24 * 3600 * 1000000;

ReplaySummary::Score Stats(const std::vector<double>& err, double realized_sd) {
  ReplaySummary::Score s;
  s.n = err.size();
  if (err.empty()) return s;
  double sum = 0, sq = 0;
  for (double e : err) {
    sum += e;
    sq += e * e;
  }
  s.bias = sum / static_cast<double>(err.size());
  s.rmse = std::sqrt(sq / static_cast<double>(err.size()));
  s.nrmse = realized_sd > 0 ? s.rmse / realized_sd : 0.0;
  return s;
}

}  // namespace

ReplaySummary::ReplaySummary(Pool& pool, uint64_t score_from_row)
    : pool_(pool), score_from_(score_from_row), verified_(pool.spec().questions.size()) {
  pool_.SetVerificationSink([this](const std::string&, absl::Span<const VerifiedPoint> points) {
    for (const VerifiedPoint& p : points) {
      verified_[p.question].push_back({p.seq, p.prediction, p.realized});
    }
  });
}

void ReplaySummary::OnRow(const v1::Frame& frame, absl::Span<const double> predictions) {
  if (frame.time_case() == v1::Frame::kUnixMicros) {
    row_time_.push_back(frame.unix_micros());
    ++unix_rows_;
  } else if (frame.time_case() == v1::Frame::kLocalMicros) {
    row_time_.push_back(frame.local_micros());
    ++local_rows_;
  } else {
    row_time_.push_back(std::nullopt);
  }
  std::vector<double> values(frame.values().begin(), frame.values().end());
  for (uint32_t m : frame.missing()) {
    if (m < values.size()) values[m] = std::numeric_limits<double>::quiet_NaN();
  }
  row_values_.push_back(std::move(values));
  const size_t nq = pool_.spec().num_visible_questions;
  for (size_t q = 0; q < nq; ++q) {
    row_predictions_.push_back(q < predictions.size() ? predictions[q]
                                                      : std::numeric_limits<double>::quiet_NaN());
  }
}

ReplaySummary::TimeKind ReplaySummary::time_kind() const {
  if (row_time_.empty()) return TimeKind::kNone;
  if (unix_rows_ == row_time_.size()) return TimeKind::kUnix;
  if (local_rows_ == row_time_.size()) return TimeKind::kLocal;
  return TimeKind::kNone;
}

ReplaySummary::QuestionSeries ReplaySummary::Series(size_t q) const {
  constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();
  const size_t n = row_values_.size();
  const CompiledPoolSpec& spec = pool_.spec();
  const CompiledQuestion& cq = spec.questions[q];
  const size_t nq = spec.num_visible_questions;
  QuestionSeries out;
  out.predicted.assign(n, kNaN);
  for (size_t i = 0; i < n && q < nq; ++i) out.predicted[i] = row_predictions_[i * nq + q];
  out.realized.assign(n, kNaN);
  for (const Verified& v : verified_[q]) {
    if (v.seq >= 1 && v.seq <= n) out.realized[v.seq - 1] = v.realized;
  }
  QuestionScore& score = out.score;
  // Persistence needs the cumulant's current value in pool signal order; replay feeds
  // values in the CSV's column order, which CsvFrameReader and the pool share only when
  // the CSV lists exactly the pool's signals: map by name through the pool's spec.
  score.has_persistence = cq.gamma < 1.0 && (cq.cumulant.kind == CumulantKind::kSignal ||
                                             cq.cumulant.kind == CumulantKind::kIndicator);
  out.persistence.assign(n, kNaN);
  if (score.has_persistence) {
    const size_t signal = cq.cumulant.kind == CumulantKind::kSignal ? cq.cumulant.signal
                                                                    : cq.cumulant.condition.signal;
    const size_t column = signal_column_.empty() ? signal : signal_column_[signal];
    for (size_t i = 0; i < n; ++i) {
      if (column >= row_values_[i].size()) continue;
      const double x = row_values_[i][column];
      if (std::isnan(x)) continue;
      const double c = cq.cumulant.kind == CumulantKind::kSignal
                           ? x
                           : (cq.cumulant.condition.Holds(x) ? 1.0 : 0.0);
      out.persistence[i] = c / (1.0 - cq.gamma);
    }
  }
  // Last week: the return realized at the row timed exactly one week earlier.
  out.last_week.assign(n, kNaN);
  absl::flat_hash_map<int64_t, uint64_t> seq_at_time;
  for (size_t i = 0; i < n; ++i) {
    if (row_time_[i].has_value()) seq_at_time[*row_time_[i]] = i + 1;
  }
  for (size_t i = 0; i < n; ++i) {
    if (!row_time_[i].has_value()) continue;
    auto prev = seq_at_time.find(*row_time_[i] - kWeekMicros);
    if (prev != seq_at_time.end()) out.last_week[i] = out.realized[prev->second - 1];
  }
  // The baseline counts only if some scored row has it (data shorter than a week has
  // none, and would otherwise leave no row to score).
  for (const Verified& v : verified_[q]) {
    if (v.seq >= score_from_ && v.seq <= n && !std::isnan(out.last_week[v.seq - 1])) {
      score.has_last_week = true;
      break;
    }
  }
  out.scored.assign(n, 0);
  std::vector<double> learned, persistence, last_week, realized;
  for (const Verified& v : verified_[q]) {
    if (v.seq < score_from_ || v.seq > n) continue;
    const double pers = score.has_persistence ? out.persistence[v.seq - 1] : 0.0;
    const double lw = score.has_last_week ? out.last_week[v.seq - 1] : 0.0;
    if (std::isnan(pers) || std::isnan(lw)) continue;
    out.scored[v.seq - 1] = 1;
    learned.push_back(v.prediction - v.realized);
    persistence.push_back(pers - v.realized);
    last_week.push_back(lw - v.realized);
    realized.push_back(v.realized);
  }
  double mean = 0, sq = 0;
  for (double r : realized) mean += r;
  if (!realized.empty()) mean /= static_cast<double>(realized.size());
  for (double r : realized) sq += (r - mean) * (r - mean);
  const double sd = realized.empty() ? 0.0 : std::sqrt(sq / static_cast<double>(realized.size()));
  score.learned = Stats(learned, sd);
  if (score.has_persistence) score.persistence = Stats(persistence, sd);
  if (score.has_last_week) score.last_week = Stats(last_week, sd);
  return out;
}

std::vector<ReplaySummary::QuestionScore> ReplaySummary::Compute() const {
  std::vector<QuestionScore> out;
  for (size_t q = 0; q < pool_.spec().num_visible_questions; ++q) {
    out.push_back(Series(q).score);
  }
  return out;
}

void ReplaySummary::Print(std::ostream& out) const {
  const std::vector<QuestionScore> scores = Compute();
  out << absl::StrFormat("verified error from row %d (same rows for every column):\n", score_from_);
  out << absl::StrFormat("%-24s %-12s %8s %14s %14s %8s\n", "question", "predictor", "rows", "RMSE",
                         "bias", "NRMSE");
  for (size_t q = 0; q < scores.size(); ++q) {
    const QuestionScore& s = scores[q];
    const std::string& name = pool_.spec().questions[q].name;
    auto line = [&](const char* who, const Score& sc) {
      out << absl::StrFormat("%-24s %-12s %8d %14.4g %14.4g %8.3f\n", name, who, sc.n, sc.rmse,
                             sc.bias, sc.nrmse);
    };
    line("bellwether", s.learned);
    if (s.has_persistence) line("persistence", s.persistence);
    if (s.has_last_week) line("last week", s.last_week);
  }
}

void ReplaySummary::SetColumns(absl::Span<const std::string> csv_columns) {
  const auto& names = pool_.spec().signal_names;
  signal_column_.assign(names.size(), 0);
  for (size_t i = 0; i < names.size(); ++i) {
    for (size_t c = 0; c < csv_columns.size(); ++c) {
      if (csv_columns[c] == names[i]) signal_column_[i] = c;
    }
  }
}

}  // namespace bellwether::cli
