#include "server/durable_file.h"

#include <filesystem>
#include <fstream>
#include <sstream>
#include <string>

#include "gmock/gmock.h"
#include "gtest/gtest.h"
#include "tests/test_util.h"

namespace bellwether::server {
namespace {

using ::testing::HasSubstr;

std::string Read(const std::string& path) {
  std::ifstream in(path, std::ios::binary);
  std::stringstream s;
  s << in.rdbuf();
  return s.str();
}

size_t FilesIn(const std::string& dir) {
  size_t n = 0;
  for ([[maybe_unused]] const auto& e : std::filesystem::directory_iterator(dir)) ++n;
  return n;
}

// Bytes that differ from position to position, so a piece written at the wrong offset
// or twice shows.
std::string Pattern(size_t n) {
  std::string s(n, '\0');
  for (size_t i = 0; i < n; ++i) s[i] = static_cast<char>((i * 131 + i / 251) & 0xff);
  return s;
}

TEST(DurableFile, PiecesLargerThanAChunkLandInOrderAndAHeaderIsPatched) {
  const std::string dir = testing::MakeTempDir("durable_pieces");
  const std::string body = Pattern(3 * kDurableWriteChunk + 17);
  DurableFileWriter w;
  ASSERT_TRUE(w.Open(dir, "f.bin").ok());
  ASSERT_TRUE(w.Append("HDR0").ok());
  ASSERT_TRUE(w.Append(absl::string_view(body).substr(0, 5)).ok());
  ASSERT_TRUE(w.Append(absl::string_view(body).substr(5)).ok());
  EXPECT_EQ(w.size(), 4 + body.size());
  ASSERT_TRUE(w.WriteAt(3, "1").ok());
  // Not in place before Commit.
  EXPECT_FALSE(std::filesystem::exists(dir + "/f.bin"));
  ASSERT_TRUE(w.Commit().ok());
  EXPECT_EQ(Read(dir + "/f.bin"), "HDR1" + body);
  EXPECT_EQ(FilesIn(dir), 1u) << "the temporary file is gone after the rename";
}

TEST(DurableFile, AnAbandonedWriterLeavesTheOldFileAndNoTemporary) {
  const std::string dir = testing::MakeTempDir("durable_abandon");
  ASSERT_TRUE(WriteFileDurably(dir, "f.bin", "old contents").ok());
  {
    DurableFileWriter w;
    ASSERT_TRUE(w.Open(dir, "f.bin").ok());
    ASSERT_TRUE(w.Append(Pattern(kDurableWriteChunk + 1)).ok());
  }  // no Commit
  EXPECT_EQ(Read(dir + "/f.bin"), "old contents");
  EXPECT_EQ(FilesIn(dir), 1u);
}

TEST(DurableFile, WritingPastTheEndOrIntoAMissingDirectoryIsAnErrorNamingTheFile) {
  const std::string dir = testing::MakeTempDir("durable_errors");
  DurableFileWriter w;
  ASSERT_TRUE(w.Open(dir, "f.bin").ok());
  ASSERT_TRUE(w.Append("abcd").ok());
  absl::Status past = w.WriteAt(2, "xyz");
  EXPECT_EQ(past.code(), absl::StatusCode::kOutOfRange);
  EXPECT_THAT(past.message(), HasSubstr(".f.bin.tmp"));
  EXPECT_THAT(past.message(), HasSubstr("offset 2"));
  ASSERT_TRUE(w.Commit().ok());
  EXPECT_EQ(Read(dir + "/f.bin"), "abcd");

  DurableFileWriter missing;
  absl::Status open = missing.Open(dir + "/no/such/dir", "f.bin");
  EXPECT_EQ(open.code(), absl::StatusCode::kUnavailable);
  EXPECT_THAT(open.message(), HasSubstr("no/such/dir/.f.bin.tmp"));
  EXPECT_EQ(missing.Append("x").code(), absl::StatusCode::kFailedPrecondition);
}

}  // namespace
}  // namespace bellwether::server
