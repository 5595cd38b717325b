#include "core/io/csv_frame_reader.h"

#include <cerrno>
#include <cmath>
#include <cstdlib>
#include <cstring>
#include <fstream>

#include "absl/container/flat_hash_set.h"
#include "absl/strings/ascii.h"
#include "absl/strings/numbers.h"
#include "absl/strings/str_cat.h"
#include "absl/time/time.h"
#include "core/status_macros.h"

namespace bellwether {
namespace {

// Splits one CSV line into cells. Supports double-quoted cells ("" for a quote).
bool SplitCsv(const std::string& line, std::vector<std::string>* cells) {
  cells->clear();
  std::string cell;
  bool quoted = false;
  for (size_t i = 0; i < line.size(); ++i) {
    const char c = line[i];
    if (quoted) {
      if (c == '"') {
        if (i + 1 < line.size() && line[i + 1] == '"') {
          cell.push_back('"');
          ++i;
        } else {
          quoted = false;
        }
      } else {
        cell.push_back(c);
      }
    } else if (c == '"') {
      quoted = true;
    } else if (c == ',') {
      cells->push_back(std::string(absl::StripAsciiWhitespace(cell)));
      cell.clear();
    } else {
      cell.push_back(c);
    }
  }
  cells->push_back(std::string(absl::StripAsciiWhitespace(cell)));
  return !quoted;
}

// Times further than this from 1970 (about 317,000 years) are refused rather than
// saturated into the largest representable time.
constexpr double kMaxAbsUnixSeconds = 1e13;

bool InRange(absl::Time t) {
  return absl::AbsDuration(t - absl::UnixEpoch()) <= absl::Seconds(kMaxAbsUnixSeconds);
}

// Parses a timestamp cell into the frame's time.
bool ParseTimestamp(std::string text, v1::Frame* frame) {
  double seconds = 0;
  if (absl::SimpleAtod(text, &seconds)) {
    if (!std::isfinite(seconds) || std::fabs(seconds) > kMaxAbsUnixSeconds) return false;
    frame->set_unix_micros(static_cast<int64_t>(std::llround(seconds * 1e6)));
    return true;
  }
  if (text.size() > 10 && text[10] == ' ') text[10] = 'T';
  absl::Time t;
  std::string err;
  if (absl::ParseTime(absl::RFC3339_full, text, &t, &err)) {
    if (!InRange(t)) return false;
    frame->set_unix_micros(absl::ToUnixMicros(t));
    return true;
  }
  // No offset: wall-clock time, interpreted in the pool's zone by the engine.
  if (absl::ParseTime("%Y-%m-%d%ET%H:%M:%E*S", text, absl::UTCTimeZone(), &t, &err) ||
      absl::ParseTime("%Y-%m-%d%ET%H:%M", text, absl::UTCTimeZone(), &t, &err)) {
    if (!InRange(t)) return false;
    frame->set_local_micros(absl::ToUnixMicros(t));
    return true;
  }
  return false;
}

}  // namespace

absl::StatusOr<std::unique_ptr<CsvFrameReader>> CsvFrameReader::Open(const std::string& path) {
  auto in = std::make_unique<std::ifstream>(path);
  if (!*in) {
    return absl::NotFoundError(absl::StrCat(path, ": cannot open: ", std::strerror(errno)));
  }
  return FromStream(std::move(in), path);
}

absl::StatusOr<std::unique_ptr<CsvFrameReader>> CsvFrameReader::FromStream(
    std::unique_ptr<std::istream> in, std::string name) {
  std::unique_ptr<CsvFrameReader> reader(new CsvFrameReader(std::move(in), std::move(name)));
  BW_RETURN_IF_ERROR(reader->ReadHeader());
  return reader;
}

CsvFrameReader::CsvFrameReader(std::unique_ptr<std::istream> in, std::string name)
    : in_(std::move(in)), name_(std::move(name)) {}

absl::Status CsvFrameReader::ReadHeader() {
  if (!std::getline(*in_, text_)) {
    return absl::InvalidArgumentError(absl::StrCat(name_, ": empty file (expected a header)"));
  }
  line_ = 1;
  if (!text_.empty() && text_.back() == '\r') text_.pop_back();
  if (!SplitCsv(text_, &header_)) {
    return absl::InvalidArgumentError(absl::StrCat(name_, ":1: unterminated quote"));
  }
  absl::flat_hash_set<std::string> seen;
  for (size_t c = 0; c < header_.size(); ++c) {
    const std::string& h = header_[c];
    if (h.empty()) {
      return absl::InvalidArgumentError(
          absl::StrCat(name_, ":1: column ", c + 1, " has an empty name"));
    }
    if (!seen.insert(h).second) {
      return absl::InvalidArgumentError(
          absl::StrCat(name_, ":1: column '", h, "' appears twice"));
    }
    const int ci = static_cast<int>(c);
    if (h == "timestamp") {
      timestamp_col_ = ci;
    } else if (h == "action") {
      action_col_ = ci;
    } else if (h == "behavior_prob") {
      prob_col_ = ci;
    } else if (h == "restart") {
      restart_col_ = ci;
    } else {
      signal_cols_.push_back(c);
      signal_names_.push_back(h);
    }
  }
  return absl::OkStatus();
}

absl::Status CsvFrameReader::CellError(size_t column, const std::string& reason) const {
  return absl::InvalidArgumentError(
      absl::StrCat(name_, ":", line_, ": column '", header_[column], "': ", reason));
}

absl::StatusOr<bool> CsvFrameReader::Next(v1::Frame* frame) {
  frame->Clear();
  while (true) {
    if (!std::getline(*in_, text_)) return false;
    ++line_;
    if (!text_.empty() && text_.back() == '\r') text_.pop_back();
    if (!absl::StripAsciiWhitespace(text_).empty()) break;  // skip blank lines
  }
  if (!SplitCsv(text_, &cells_)) {
    return absl::InvalidArgumentError(absl::StrCat(name_, ":", line_, ": unterminated quote"));
  }
  if (cells_.size() != header_.size()) {
    return absl::InvalidArgumentError(absl::StrCat(name_, ":", line_, ": has ", cells_.size(),
                                                   " cells, the header has ", header_.size()));
  }
  frame->set_seq(++rows_);
  if (timestamp_col_ >= 0 && !cells_[timestamp_col_].empty()) {
    if (!ParseTimestamp(cells_[timestamp_col_], frame)) {
      return CellError(timestamp_col_, absl::StrCat("'", cells_[timestamp_col_],
                                                    "' is not an ISO 8601 time or Unix seconds "
                                                    "within 10^13 s of 1970"));
    }
  }
  if (action_col_ >= 0 && !cells_[action_col_].empty()) {
    uint32_t a = 0;
    if (!absl::SimpleAtoi(cells_[action_col_], &a)) {
      return CellError(action_col_,
                       absl::StrCat("'", cells_[action_col_], "' is not a non-negative integer"));
    }
    frame->set_action(a);
  }
  if (prob_col_ >= 0 && !cells_[prob_col_].empty()) {
    double p = 0;
    if (!absl::SimpleAtod(cells_[prob_col_], &p) || !(p > 0.0 && p <= 1.0)) {
      return CellError(prob_col_,
                       absl::StrCat("'", cells_[prob_col_], "' is not a probability in (0, 1]"));
    }
    frame->set_behavior_prob(p);
  }
  if (restart_col_ >= 0 && !cells_[restart_col_].empty()) {
    const std::string r = absl::AsciiStrToLower(cells_[restart_col_]);
    if (r == "1" || r == "true") {
      frame->set_restart(true);
    } else if (r != "0" && r != "false") {
      return CellError(restart_col_, absl::StrCat("'", cells_[restart_col_],
                                                  "' is not 0, 1, true or false"));
    }
  }
  for (size_t i = 0; i < signal_cols_.size(); ++i) {
    const std::string& cell = cells_[signal_cols_[i]];
    if (cell.empty()) {
      frame->add_values(0.0);
      frame->add_missing(static_cast<uint32_t>(i));
      continue;
    }
    double v = 0;
    if (!absl::SimpleAtod(cell, &v)) {
      return CellError(signal_cols_[i], absl::StrCat("'", cell, "' is not a number"));
    }
    if (!std::isfinite(v)) {
      return CellError(signal_cols_[i], absl::StrCat("'", cell, "' is not a finite number"));
    }
    frame->add_values(v);
  }
  return true;
}

}  // namespace bellwether
