#include "core/io/crc32c.h"

#include <array>
#include <cstring>

#if defined(__SSE4_2__)
#include <nmmintrin.h>
#endif

namespace bellwether {
namespace {

constexpr std::array<uint32_t, 256> MakeTable() {
  std::array<uint32_t, 256> t{};
  for (uint32_t i = 0; i < 256; ++i) {
    uint32_t c = i;
    for (int k = 0; k < 8; ++k) c = (c & 1) ? (c >> 1) ^ 0x82F63B78u : c >> 1;
    t[i] = c;
  }
  return t;
}

constexpr std::array<uint32_t, 256> kTable = MakeTable();

}  // namespace

uint32_t Crc32c(absl::string_view data, uint32_t crc) {
  crc = ~crc;
  const char* p = data.data();
  size_t n = data.size();
#if defined(__SSE4_2__)
  // The SSE4.2 CRC32 instruction computes exactly this polynomial (x86-64-v2 and up).
  uint64_t c64 = crc;
  while (n >= 8) {
    uint64_t v;
    std::memcpy(&v, p, 8);
    c64 = _mm_crc32_u64(c64, v);
    p += 8;
    n -= 8;
  }
  crc = static_cast<uint32_t>(c64);
#endif
  for (; n > 0; --n, ++p) {
    crc = kTable[(crc ^ static_cast<unsigned char>(*p)) & 0xFF] ^ (crc >> 8);
  }
  return ~crc;
}

}  // namespace bellwether
