// `bellwether replay --plot FILE.svg`: one self-contained SVG (no scripts, no external
// fonts or links) showing, for each question, the prediction made at every row against
// the return later realized there, so a user can judge whether a question is good enough
// to deploy.
//
// Per question, a panel:
//   - a time-series chart: x is the rows' timestamps when every row has one of the same
//     kind (absolute times shown in the pool's time zone, wall-clock times as they are),
//     else the row number; y is the question's unit (a discounted sum of its cumulant,
//     e.g. "MW (discounted sum, gamma 0.9583)"). Series: predicted, realized return and,
//     where they exist, the persistence and last-week baselines as thin lines. Long
//     series are reduced to the minimum and maximum in each pixel column (in row order),
//     so spikes stay visible while the file stays small.
//   - the scored rows shaded (the rows ReplaySummary scores: from --score-from-row, with
//     a realized return and every baseline), and the verified NRMSE over them, with the
//     baselines' NRMSE on the same rows, in the panel title;
//   - for probability questions (an indicator cumulant, gamma 1 and a termination: the
//     engine's own test, core/pool.cc), a calibration chart of the scored rows: ten bins
//     of predicted probability [0.1 k, 0.1 (k + 1)), each bin's mean prediction against
//     its observed frequency, with the diagonal.
//
// The document is also machine-checkable: every chart carries its axis mapping and every
// series its raw point count and range as data-* attributes (see replay_plot.cc).
#ifndef BELLWETHER_CLIENT_CLI_REPLAY_PLOT_H_
#define BELLWETHER_CLIENT_CLI_REPLAY_PLOT_H_

#include <string>

#include "client/cli/replay_summary.h"

namespace bellwether::cli {

struct ReplayPlotSource {
  std::string spec_path;  // shown in the header
  std::string csv_path;
};

// The SVG document for a finished replay fed to `summary` (rows with their predictions).
std::string RenderReplayPlot(const ReplaySummary& summary, const ReplayPlotSource& source);

}  // namespace bellwether::cli

#endif  // BELLWETHER_CLIENT_CLI_REPLAY_PLOT_H_
