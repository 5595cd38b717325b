#include "core/io/crc32c.h"

#include <string>

#include "gtest/gtest.h"

namespace bellwether {
namespace {

// Check values: "123456789" -> 0xE3069283 is the standard CRC-32C check value (the
// catalogue of parametrised CRC algorithms, "CRC-32/ISCSI"); the 32-byte vectors are from
// RFC 3720 (iSCSI), Appendix B.4.
TEST(Crc32c, PublishedCheckValues) {
  EXPECT_EQ(Crc32c("123456789"), 0xE3069283u);
  EXPECT_EQ(Crc32c(std::string(32, '\0')), 0x8A9136AAu);
  EXPECT_EQ(Crc32c(std::string(32, '\xff')), 0x62A8AB43u);
  std::string ascending, descending;
  for (int i = 0; i < 32; ++i) {
    ascending.push_back(static_cast<char>(i));
    descending.push_back(static_cast<char>(31 - i));
  }
  EXPECT_EQ(Crc32c(ascending), 0x46DD794Eu);
  EXPECT_EQ(Crc32c(descending), 0x113FDB5Cu);
}

TEST(Crc32c, ContinuesAcrossPieces) {
  const std::string s = "write-ahead log record of some length, 41b";
  for (size_t cut = 0; cut <= s.size(); ++cut) {
    EXPECT_EQ(Crc32c(s.substr(cut), Crc32c(s.substr(0, cut))), Crc32c(s)) << cut;
  }
}

}  // namespace
}  // namespace bellwether
