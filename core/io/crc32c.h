// CRC-32C (Castagnoli polynomial 0x1EDC6F41, reflected 0x82F63B78), as used by iSCSI
// (RFC 3720, Appendix B.4) to frame checkpoint and write-ahead log records.
#ifndef BELLWETHER_CORE_IO_CRC32C_H_
#define BELLWETHER_CORE_IO_CRC32C_H_

#include <cstdint>

#include "absl/strings/string_view.h"

namespace bellwether {

// CRC-32C of `data`, continuing from `crc` (0 to start).
uint32_t Crc32c(absl::string_view data, uint32_t crc = 0);

}  // namespace bellwether

#endif  // BELLWETHER_CORE_IO_CRC32C_H_
