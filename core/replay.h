// Offline replay: runs a pool spec over a CSV file in-process, with exactly the engine
// the daemon runs, in row order, as one stream.
#ifndef BELLWETHER_CORE_REPLAY_H_
#define BELLWETHER_CORE_REPLAY_H_

#include <functional>
#include <string>

#include "absl/status/status.h"
#include "absl/types/span.h"
#include "bellwether/v1/pool.pb.h"
#include "core/io/csv_frame_reader.h"
#include "core/pool.h"

namespace bellwether {

// Called after each row with its frame (seq = the 1-based row number) and each question's
// prediction made at that row (before learning from anything after it), in spec question
// order.
using ReplayRowCallback = std::function<absl::Status(const v1::Frame& frame,
                                                     absl::Span<const double> predictions)>;

// Applies every row of `reader` to `pool` as stream `stream`. Stops at the first bad row
// with its error (file, line, column). Returns the number of rows applied in `rows`.
absl::Status Replay(Pool& pool, CsvFrameReader& reader, const std::string& stream,
                    const ReplayRowCallback& on_row, uint64_t* rows = nullptr);

}  // namespace bellwether

#endif  // BELLWETHER_CORE_REPLAY_H_
