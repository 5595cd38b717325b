// The offline backtest's summary: each question's verified error over the scored rows,
// beside two baselines computed on exactly the same rows:
//   persistence: the cumulant's current value held forever, c_t / (1 - gamma)
//     (signal and indicator cumulants with gamma < 1);
//   last week: the return realized one week earlier at the same clock time (rows with
//     timestamps; wall-clock time for local timestamps).
#ifndef BELLWETHER_CLIENT_CLI_REPLAY_SUMMARY_H_
#define BELLWETHER_CLIENT_CLI_REPLAY_SUMMARY_H_

#include <cstdint>
#include <optional>
#include <ostream>
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
  // Feed every replayed row, in order.
  void OnRow(const v1::Frame& frame);

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

 private:
  struct Verified {
    uint64_t seq;
    double prediction;
    double realized;
  };
  Pool& pool_;
  uint64_t score_from_;
  std::vector<std::vector<Verified>> verified_;           // per question
  std::vector<std::optional<int64_t>> row_time_;          // by seq - 1
  std::vector<std::vector<double>> row_values_;           // by seq - 1: the frame's values
  std::vector<size_t> signal_column_;                     // pool signal -> CSV column
};

}  // namespace bellwether::cli

#endif  // BELLWETHER_CLIENT_CLI_REPLAY_SUMMARY_H_
