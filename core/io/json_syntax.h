// A JSON syntax check (RFC 8259) that names the line and column of the first error, so a
// hand-edited spec file points its author at the right place. It checks syntax only;
// what the fields mean is the protobuf JSON parser's job.
#ifndef BELLWETHER_CORE_IO_JSON_SYNTAX_H_
#define BELLWETHER_CORE_IO_JSON_SYNTAX_H_

#include "absl/status/status.h"
#include "absl/strings/string_view.h"

namespace bellwether {

// OK for one well-formed JSON value (surrounded by optional whitespace); otherwise
// INVALID_ARGUMENT "line L, column C: reason" (both from 1; columns count bytes).
// Nesting deeper than 128 levels is refused.
absl::Status CheckJsonSyntax(absl::string_view json);

}  // namespace bellwether

#endif  // BELLWETHER_CORE_IO_JSON_SYNTAX_H_
