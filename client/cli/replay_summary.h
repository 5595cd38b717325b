// The offline backtest's summary: each question's verified error over the scored rows,
// beside two baselines computed on exactly the same rows:
//   persistence: the cumulant's current value held forever, c_t / (1 - gamma)
//     (signal and indicator cumulants with gamma < 1);
//   last week: the return realized one week earlier at the same clock time (rows with
//     timestamps; wall-clock time for local timestamps; only when some scored row has
//     one).
// It also keeps each question's replay row by row (Series) for `replay --plot`.
#ifndef BELLWETHER_CLIENT_CLI_REPLAY_SUMMARY_H_
#define BELLWETHER_CLIENT_CLI_REPLAY_SUMMARY_H_

#include <cstdint>
#include <optional>
#include <ostream>
#include <string>
#include <vector>

#include "absl/container/flat_hash_map.h"
#include "absl/types/span.h"
#include "bellwether/v1/frame.pb.h"
#include "core/pool.h"

namespace bellwether::cli {

class ReplaySummary {
 public:
  // Scores predictions made at rows >= `score_from_row`. Installs a verification sink on
  // `pool` (which must outlive this object).
  ReplaySummary(Pool& pool, uint64_t score_from_row);

  // The CSV's signal columns, in the order of Frame.values (call before OnRow).
  void SetColumns(absl::Span<const std::string> csv_columns);
  // Feed every replayed row, in order, with the predictions made at it (spec question
  // order, as replay's row callback gives them; may be empty when only scores are needed).
  void OnRow(const v1::Frame& frame, absl::Span<const double> predictions = {});

  // Writes a table: question, rows scored, RMSE, bias, NRMSE for the question and for
  // each baseline.
  void Print(std::ostream& out) const;

  struct Score {
    size_t n = 0;
    double rmse = 0, bias = 0, nrmse = 0;
  };
  struct QuestionScore {
    Score learned, persistence, last_week;
    bool has_persistence = false, has_last_week = false;
  };
  // Scores on the rows where every available baseline exists.
  std::vector<QuestionScore> Compute() const;

  // One question's replay, indexed by row - 1 (row = Frame.seq); NaN where a value does
  // not exist. Every vector has rows() entries.
  struct QuestionSeries {
    std::vector<double> predicted;    // the prediction made at the row (NaN if not fed)
    std::vector<double> realized;     // its realized (verified) return
    std::vector<double> persistence;  // the persistence baseline (all NaN without one)
    std::vector<double> last_week;    // the last-week baseline (all NaN without one)
    std::vector<uint8_t> scored;      // 1 where the row counts in `score`
    QuestionScore score;              // what Compute() reports for the question
  };
  QuestionSeries Series(size_t question) const;

  // How rows were timed: every row's timestamp absolute (Unix), every one wall-clock
  // (local), or neither (some rows lack one, or the kinds are mixed).
  enum class TimeKind { kNone, kUnix, kLocal };
  TimeKind time_kind() const;
  // Rows fed so far, and each one's timestamp in microseconds (Frame.unix_micros or
  // Frame.local_micros), if it had one.
  size_t rows() const { return row_time_.size(); }
  const std::vector<std::optional<int64_t>>& row_times() const { return row_time_; }
  uint64_t score_from_row() const { return score_from_; }
  const Pool& pool() const { return pool_; }

 private:
  struct Verified {
    uint64_t seq;
    double prediction;
    double realized;
  };
  Pool& pool_;
  uint64_t score_from_;
  std::vector<std::vector<Verified>> verified_;   // per question
  std::vector<std::optional<int64_t>> row_time_;  // by seq - 1
  size_t unix_rows_ = 0, local_rows_ = 0;         // rows timed each way
  std::vector<std::vector<double>> row_values_;   // by seq - 1: the frame's values
  std::vector<double> row_predictions_;           // by (seq - 1) * questions + q
  std::vector<size_t> signal_column_;             // pool signal -> CSV column
};

}  // namespace bellwether::cli

#endif  // BELLWETHER_CLIENT_CLI_REPLAY_SUMMARY_H_
