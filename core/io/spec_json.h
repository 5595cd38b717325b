// Pool specs as JSON (the protobuf JSON mapping).
#ifndef BELLWETHER_CORE_IO_SPEC_JSON_H_
#define BELLWETHER_CORE_IO_SPEC_JSON_H_

#include <string>
#include "absl/strings/string_view.h"

#include "absl/status/statusor.h"
#include "bellwether/v1/pool.pb.h"

namespace bellwether {

// Parses a spec; unknown fields are an error. The message names what the JSON parser
// reported. (Field-level validation is CompilePoolSpec's job.)
absl::StatusOr<v1::PoolSpec> PoolSpecFromJson(absl::string_view json);

// Reads and parses a spec file; errors name the path.
absl::StatusOr<v1::PoolSpec> ReadPoolSpecFile(const std::string& path);

// Reads a whole file into a string; errors name the path and the reason.
absl::StatusOr<std::string> ReadFileToString(const std::string& path);

}  // namespace bellwether

#endif  // BELLWETHER_CORE_IO_SPEC_JSON_H_
