// Small helpers for propagating absl::Status values.
#ifndef BELLWETHER_CORE_STATUS_MACROS_H_
#define BELLWETHER_CORE_STATUS_MACROS_H_

#include "absl/status/status.h"
#include "absl/status/statusor.h"

#define BW_CONCAT_INNER_(a, b) a##b
#define BW_CONCAT_(a, b) BW_CONCAT_INNER_(a, b)

// Returns from the enclosing function if `expr` (an absl::Status) is not OK.
#define BW_RETURN_IF_ERROR(expr)                 \
  do {                                           \
    ::absl::Status bw_status_ = (expr);          \
    if (!bw_status_.ok()) return bw_status_;     \
  } while (false)

// `lhs = value` of the absl::StatusOr `rexpr`, or returns its error.
#define BW_ASSIGN_OR_RETURN(lhs, rexpr) \
  BW_ASSIGN_OR_RETURN_IMPL_(BW_CONCAT_(bw_statusor_, __LINE__), lhs, rexpr)
#define BW_ASSIGN_OR_RETURN_IMPL_(statusor, lhs, rexpr) \
  auto statusor = (rexpr);                              \
  if (!statusor.ok()) return statusor.status();         \
  lhs = std::move(statusor).value()

#endif  // BELLWETHER_CORE_STATUS_MACROS_H_
