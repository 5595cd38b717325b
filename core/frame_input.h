// The engine's view of one validated frame, and the conversion from the wire form.
#ifndef BELLWETHER_CORE_FRAME_INPUT_H_
#define BELLWETHER_CORE_FRAME_INPUT_H_

#include <cstdint>
#include <optional>
#include <string>
#include <vector>

#include "absl/status/status.h"
#include "absl/status/statusor.h"
#include "absl/types/span.h"
#include "bellwether/v1/frame.pb.h"

namespace bellwether {

// How a frame's time was given.
enum class FrameTimeKind : uint8_t {
  kNone,   // no timestamp: clock signals are missing
  kUnix,   // absolute: microseconds since the Unix epoch
  kLocal,  // wall clock in the pool's time zone: microseconds since 1970-01-01T00:00 local
};

// One frame as the engine consumes it. Values are in the pool's declared signal order,
// with a quiet NaN marking a missing value (wire NaNs are rejected before this point).
// The span must stay valid for the duration of the call it is passed to.
struct FrameInput {
  uint64_t seq = 0;
  FrameTimeKind time_kind = FrameTimeKind::kNone;
  int64_t time_micros = 0;
  absl::Span<const double> values;
  bool restart = false;
  std::optional<uint32_t> action;
  std::optional<double> behavior_prob;
};

// Maps the columns of an ingest session (or a CSV file) onto the pool's signals.
class ColumnMap {
 public:
  // `columns` empty means the pool's declared order. Fails (naming the column) on an
  // unknown or repeated signal name.
  static absl::StatusOr<ColumnMap> Create(absl::Span<const std::string> pool_signals,
                                          absl::Span<const std::string> columns);

  size_t num_columns() const { return column_to_signal_.size(); }
  size_t num_signals() const { return num_signals_; }
  // Pool signal index of column `c`.
  size_t signal_of(size_t c) const { return column_to_signal_[c]; }
  const std::string& column_name(size_t c) const { return names_[c]; }

 private:
  std::vector<size_t> column_to_signal_;
  std::vector<std::string> names_;
  size_t num_signals_ = 0;
};

// Validates `frame` and fills `out`, with `out->values` viewing `*buffer` (resized to the
// pool's signal count, no reallocation once large enough). Errors name the frame's seq,
// the field and the reason: a value count that does not match the columns, a
// non-finite value, a missing-column index out of range, seq 0, a behavior probability
// outside (0, 1].
absl::Status FrameFromProto(const v1::Frame& frame, const ColumnMap& columns,
                            std::vector<double>* buffer, FrameInput* out);

}  // namespace bellwether

#endif  // BELLWETHER_CORE_FRAME_INPUT_H_
