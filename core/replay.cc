#include "core/replay.h"

#include "absl/strings/str_cat.h"
#include "core/status_macros.h"

namespace bellwether {

absl::Status Replay(Pool& pool, CsvFrameReader& reader, const std::string& stream,
                    const ReplayRowCallback& on_row, uint64_t* rows) {
  BW_ASSIGN_OR_RETURN(ColumnMap columns,
                      ColumnMap::Create(pool.spec().signal_names, reader.signal_columns()));
  if (columns.num_columns() != columns.num_signals()) {
    // Every declared signal must have a column; name the first that does not.
    std::vector<bool> present(columns.num_signals(), false);
    for (size_t c = 0; c < columns.num_columns(); ++c) present[columns.signal_of(c)] = true;
    for (size_t i = 0; i < present.size(); ++i) {
      if (!present[i]) {
        return absl::InvalidArgumentError(absl::StrCat("csv header: signal '",
                                                       pool.spec().signal_names[i],
                                                       "' of pool ", pool.name(),
                                                       " has no column"));
      }
    }
  }
  v1::Frame frame;
  std::vector<double> buffer;
  FrameInput input;
  uint64_t n = 0;
  while (true) {
    BW_ASSIGN_OR_RETURN(bool more, reader.Next(&frame));
    if (!more) break;
    absl::Status s = FrameFromProto(frame, columns, &buffer, &input);
    if (s.ok()) s = pool.Apply(stream, input);
    if (!s.ok()) {
      return absl::Status(s.code(), absl::StrCat("line ", reader.line(), ": ", s.message()));
    }
    ++n;
    if (on_row) BW_RETURN_IF_ERROR(on_row(frame, pool.predictions(stream)));
  }
  if (rows != nullptr) *rows = n;
  return absl::OkStatus();
}

}  // namespace bellwether
