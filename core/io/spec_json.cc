#include "core/io/spec_json.h"

#include <cerrno>
#include <cctype>
#include <cstring>
#include <fstream>
#include <sstream>

#include "absl/strings/str_cat.h"
#include "core/io/json_syntax.h"
#include "core/status_macros.h"
#include "google/protobuf/util/json_util.h"

namespace bellwether {

absl::StatusOr<v1::PoolSpec> PoolSpecFromJson(absl::string_view json) {
  // Syntax first, so an error names its line and column.
  if (absl::Status s = CheckJsonSyntax(json); !s.ok()) {
    return absl::InvalidArgumentError(absl::StrCat("pool spec JSON: ", s.message()));
  }
  v1::PoolSpec spec;
  google::protobuf::util::JsonParseOptions options;
  options.ignore_unknown_fields = false;
  const auto status = google::protobuf::util::JsonStringToMessage(
      google::protobuf::StringPiece(json.data(), json.size()), &spec, options);
  if (!status.ok()) {
    return absl::InvalidArgumentError(
        absl::StrCat("pool spec JSON: ", std::string(status.message())));
  }
  return spec;
}

absl::StatusOr<std::string> ReadFileToString(const std::string& path) {
  std::ifstream in(path, std::ios::binary);
  if (!in) {
    return absl::NotFoundError(absl::StrCat(path, ": cannot open: ", std::strerror(errno)));
  }
  std::ostringstream buf;
  buf << in.rdbuf();
  if (in.bad()) return absl::DataLossError(absl::StrCat(path, ": read failed"));
  return buf.str();
}

absl::StatusOr<v1::PoolSpec> ReadPoolSpecFile(const std::string& path) {
  BW_ASSIGN_OR_RETURN(std::string json, ReadFileToString(path));
  auto spec = PoolSpecFromJson(json);
  if (!spec.ok()) {
    return absl::InvalidArgumentError(absl::StrCat(path, ": ", spec.status().message()));
  }
  return spec;
}

}  // namespace bellwether
