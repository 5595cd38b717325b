// Reads frames from a CSV file: a header of column names, then one frame per row.
//
// Reserved columns (all optional): `timestamp` (ISO 8601 with or without an offset,
// 'T' or ' ' between date and time, or a number of Unix seconds), `action` (a
// non-negative integer), `behavior_prob` (in (0, 1]), `restart` (0/1/true/false).
// Every other column is a signal, by name. An empty cell is a missing value.
// A timestamp without an offset is wall-clock time in the pool's time zone.
#ifndef BELLWETHER_CORE_IO_CSV_FRAME_READER_H_
#define BELLWETHER_CORE_IO_CSV_FRAME_READER_H_

#include <istream>
#include <memory>
#include <string>
#include <vector>

#include "absl/status/statusor.h"
#include "bellwether/v1/frame.pb.h"

namespace bellwether {

class CsvFrameReader {
 public:
  // Opens `path` and reads its header. Errors name the path.
  static absl::StatusOr<std::unique_ptr<CsvFrameReader>> Open(const std::string& path);
  // Reads from `in` (which must outlive the reader); `name` is used in messages.
  static absl::StatusOr<std::unique_ptr<CsvFrameReader>> FromStream(std::unique_ptr<std::istream> in,
                                                                    std::string name);

  // Signal column names, in the order their values appear in Frame.values.
  const std::vector<std::string>& signal_columns() const { return signal_names_; }

  // Reads the next data row into `frame` (cleared first) with seq = its 1-based data row
  // number. Returns false at the end of the file. Errors name the file, the line, the
  // column and the reason: too few or too many cells, a cell that is not a number, a
  // non-finite value, a bad timestamp.
  absl::StatusOr<bool> Next(v1::Frame* frame);

  // Line number (1-based, counting the header) of the row last read.
  size_t line() const { return line_; }

 private:
  CsvFrameReader(std::unique_ptr<std::istream> in, std::string name);
  absl::Status ReadHeader();
  absl::Status CellError(size_t column, const std::string& reason) const;

  std::unique_ptr<std::istream> in_;
  std::string name_;
  size_t line_ = 0;
  uint64_t rows_ = 0;
  std::string text_;
  std::vector<std::string> header_;
  std::vector<std::string> cells_;
  int timestamp_col_ = -1, action_col_ = -1, prob_col_ = -1, restart_col_ = -1;
  std::vector<size_t> signal_cols_;
  std::vector<std::string> signal_names_;
};

}  // namespace bellwether

#endif  // BELLWETHER_CORE_IO_CSV_FRAME_READER_H_
