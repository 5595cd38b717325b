#include "server/durable_file.h"

#include <cstdio>
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
  // More space reserved than will be written: the rest goes at Commit.
  DurableFileWriter::OpenOptions options;
  options.expected_size = 4 + body.size() + 5000;
  ASSERT_TRUE(w.Open(dir, "f.bin", options).ok());
  ASSERT_TRUE(w.Append("HDR0").ok());
  ASSERT_TRUE(w.Append(absl::string_view(body).substr(0, 5)).ok());
  ASSERT_TRUE(w.Append(absl::string_view(body).substr(5)).ok());
  EXPECT_EQ(w.size(), 4 + body.size());
  ASSERT_TRUE(w.WriteAt(3, "1").ok());
  // Not in place before Commit.
  EXPECT_FALSE(std::filesystem::exists(dir + "/f.bin"));
  ASSERT_TRUE(w.Commit().ok());
  EXPECT_EQ(testing::ReadWholeFile(dir + "/f.bin"), "HDR1" + body);
  EXPECT_EQ(FilesIn(dir), 1u) << "the temporary file is gone after the rename";
}

// Around the page cache (O_DIRECT where the file system takes it, else ordinary writes):
// the same bytes, with patches in what went out already (the header), across the edge of
// what went out, and in what did not; appends after those patches; a tail that is not a
// whole block; and space reserved beyond the final size given back.
TEST(DurableFile, BypassingTheCacheWritesTheSameBytes) {
  const std::string dir = testing::MakeTempDir("durable_direct");
  const std::string body = Pattern(2 * DurableFileWriter::kDirectBufferBytes + 4097 + 13);
  DurableFileWriter w;
  DurableFileWriter::OpenOptions options;
  options.bypass_cache = true;
  options.expected_size = 8 + body.size() + 5000;  // more than will be written
  ASSERT_TRUE(w.Open(dir, "f.bin", options).ok());
  std::printf("direct writes: %s\n", w.direct() ? "yes" : "no (file system refused O_DIRECT)");
  ASSERT_TRUE(w.Append("HEADER00").ok());
  for (size_t at = 0; at < body.size(); at += 70000) {
    ASSERT_TRUE(w.Append(absl::string_view(body).substr(at, 70000)).ok());
  }
  std::string expected = "HEADER00" + body + "MORE";
  auto patch = [&](uint64_t at, const std::string& bytes) {
    ASSERT_TRUE(w.WriteAt(at, bytes).ok()) << "at " << at;
    expected.replace(at, bytes.size(), bytes);
  };
  patch(6, "42");  // written out already (2 MiB went out)
  patch(2 * DurableFileWriter::kDirectBufferBytes - 2, "EDGE!");  // across what went out
  patch(5000, "x");
  ASSERT_TRUE(w.Append("MORE").ok());
  patch(w.size() - 3, "end");  // not written out yet
  ASSERT_TRUE(w.Commit().ok());
  const std::string got = testing::ReadWholeFile(dir + "/f.bin");
  EXPECT_EQ(got.size(), expected.size());
  EXPECT_TRUE(got == expected) << "the file differs from what was written";
}

TEST(DurableFile, AnAbandonedWriterLeavesTheOldFileAndNoTemporary) {
  const std::string dir = testing::MakeTempDir("durable_abandon");
  ASSERT_TRUE(WriteFileDurably(dir, "f.bin", "old contents").ok());
  {
    DurableFileWriter w;
    ASSERT_TRUE(w.Open(dir, "f.bin").ok());
    ASSERT_TRUE(w.Append(Pattern(kDurableWriteChunk + 1)).ok());
  }  // no Commit
  EXPECT_EQ(testing::ReadWholeFile(dir + "/f.bin"), "old contents");
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
  EXPECT_EQ(testing::ReadWholeFile(dir + "/f.bin"), "abcd");

  DurableFileWriter missing;
  absl::Status open = missing.Open(dir + "/no/such/dir", "f.bin");
  EXPECT_EQ(open.code(), absl::StatusCode::kUnavailable);
  EXPECT_THAT(open.message(), HasSubstr("no/such/dir/.f.bin.tmp"));
  EXPECT_EQ(missing.Append("x").code(), absl::StatusCode::kFailedPrecondition);
}

}  // namespace
}  // namespace bellwether::server
