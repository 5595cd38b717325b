#include "core/frame_input.h"

#include <cmath>
#include <limits>

#include "absl/container/flat_hash_map.h"
#include "absl/strings/str_cat.h"

namespace bellwether {

absl::StatusOr<ColumnMap> ColumnMap::Create(absl::Span<const std::string> pool_signals,
                                            absl::Span<const std::string> columns) {
  ColumnMap map;
  map.num_signals_ = pool_signals.size();
  if (columns.empty()) {
    for (size_t i = 0; i < pool_signals.size(); ++i) {
      map.column_to_signal_.push_back(i);
      map.names_.push_back(pool_signals[i]);
    }
    return map;
  }
  absl::flat_hash_map<std::string, size_t> index;
  for (size_t i = 0; i < pool_signals.size(); ++i) index[pool_signals[i]] = i;
  std::vector<bool> seen(pool_signals.size(), false);
  for (size_t c = 0; c < columns.size(); ++c) {
    auto it = index.find(columns[c]);
    if (it == index.end()) {
      return absl::InvalidArgumentError(
          absl::StrCat("columns[", c, "]: '", columns[c], "' is not a signal of the pool"));
    }
    if (seen[it->second]) {
      return absl::InvalidArgumentError(
          absl::StrCat("columns[", c, "]: signal '", columns[c], "' appears twice"));
    }
    seen[it->second] = true;
    map.column_to_signal_.push_back(it->second);
    map.names_.push_back(columns[c]);
  }
  return map;
}

absl::Status FrameFromProto(const v1::Frame& frame, const ColumnMap& columns,
                            std::vector<double>* buffer, FrameInput* out) {
  const auto prefix = [&frame]() { return absl::StrCat("frame seq ", frame.seq(), ": "); };
  if (frame.seq() == 0) {
    return absl::InvalidArgumentError("frame: seq must be >= 1");
  }
  if (static_cast<size_t>(frame.values_size()) != columns.num_columns()) {
    return absl::InvalidArgumentError(
        absl::StrCat(prefix(), "values: has ", frame.values_size(), " entries, expected ",
                     columns.num_columns(), " (one per column)"));
  }
  buffer->assign(columns.num_signals(), std::numeric_limits<double>::quiet_NaN());
  for (size_t c = 0; c < columns.num_columns(); ++c) {
    (*buffer)[columns.signal_of(c)] = frame.values(static_cast<int>(c));
  }
  for (int i = 0; i < frame.missing_size(); ++i) {
    const uint32_t c = frame.missing(i);
    if (c >= columns.num_columns()) {
      return absl::InvalidArgumentError(absl::StrCat(prefix(), "missing[", i, "]: column ", c,
                                                     " is out of range (", columns.num_columns(),
                                                     " columns)"));
    }
    (*buffer)[columns.signal_of(c)] = std::numeric_limits<double>::quiet_NaN();
  }
  // Every value that is not declared missing must be finite.
  for (size_t c = 0; c < columns.num_columns(); ++c) {
    const double v = frame.values(static_cast<int>(c));
    if (!std::isfinite(v) && !std::isnan((*buffer)[columns.signal_of(c)])) {
      return absl::InvalidArgumentError(absl::StrCat(prefix(), "values[", c, "] (",
                                                     columns.column_name(c), "): ", v,
                                                     " is not a finite number"));
    }
    if (std::isnan(v)) {
      bool declared_missing = false;
      for (uint32_t m : frame.missing()) declared_missing |= (m == c);
      if (!declared_missing) {
        return absl::InvalidArgumentError(absl::StrCat(prefix(), "values[", c, "] (",
                                                       columns.column_name(c),
                                                       "): NaN is not a number; list the "
                                                       "column in `missing` instead"));
      }
    }
  }
  if (frame.has_behavior_prob()) {
    const double p = frame.behavior_prob();
    if (!(p > 0.0 && p <= 1.0)) {
      return absl::InvalidArgumentError(
          absl::StrCat(prefix(), "behavior_prob: ", p, " is outside (0, 1]"));
    }
  }
  out->seq = frame.seq();
  switch (frame.time_case()) {
    case v1::Frame::kUnixMicros:
      out->time_kind = FrameTimeKind::kUnix;
      out->time_micros = frame.unix_micros();
      break;
    case v1::Frame::kLocalMicros:
      out->time_kind = FrameTimeKind::kLocal;
      out->time_micros = frame.local_micros();
      break;
    case v1::Frame::TIME_NOT_SET:
      out->time_kind = FrameTimeKind::kNone;
      out->time_micros = 0;
      break;
  }
  out->values = absl::MakeConstSpan(*buffer);
  out->restart = frame.restart();
  out->action = frame.has_action() ? std::optional<uint32_t>(frame.action()) : std::nullopt;
  out->behavior_prob =
      frame.has_behavior_prob() ? std::optional<double>(frame.behavior_prob()) : std::nullopt;
  return absl::OkStatus();
}

}  // namespace bellwether
