// The state directory's loader against damaged files: every truncation and every
// single-bit flip of a small log and checkpoint. The loader must never crash; it loads
// (a torn log tail is cut), falls back to the previous checkpoint, or refuses with a
// message naming the file and the offset.
#include "server/state_dir.h"

#include <algorithm>
#include <filesystem>
#include <fstream>
#include <sstream>
#include <string>
#include <vector>

#include "absl/strings/str_format.h"
#include "core/pool.h"
#include "gmock/gmock.h"
#include "gtest/gtest.h"
#include "server/durable_file.h"
#include "server/wal.h"
#include "tests/chain_spec.h"
#include "tests/test_util.h"

namespace bellwether::server {
namespace {

using ::testing::AnyOf;
using ::testing::HasSubstr;

void Write(const std::string& path, const std::string& bytes) {
  std::ofstream out(path, std::ios::binary | std::ios::trunc);
  out << bytes;
}

v1::WalRecord BatchRecord(uint64_t first_seq, int n) {
  v1::WalRecord r;
  v1::WalBatch* b = r.mutable_batch();
  b->set_pool("chain");
  b->set_stream("s");
  for (int i = 0; i < n; ++i) {
    v1::Frame* f = b->mutable_batch()->add_frames();
    f->set_seq(first_seq + static_cast<uint64_t>(i));
    f->add_values(static_cast<double>(i % 4) + 0.5);
    f->add_values(i % 3 == 0 ? 1.0 : 0.0);
  }
  return r;
}

// A small state directory: a pool, 3 batches, a checkpoint, 2 more batches; returns the
// last applied seq.
uint64_t MakeState(const std::string& dir, uint64_t segment_bytes = uint64_t{64} << 20) {
  EXPECT_TRUE(PrepareStateDir(dir).ok());
  Wal::Options o;
  o.dir = dir;
  o.segment_bytes = segment_bytes;
  auto wal = Wal::Open(o, 1);
  EXPECT_TRUE(wal.ok());
  v1::WalRecord apply;
  *apply.mutable_apply() = testing::OneHotChainSpec(4, 0.9, 0.5, 0.1);
  EXPECT_TRUE((*wal)->Append(apply).ok());
  uint64_t seq = 1;
  for (int b = 0; b < 3; ++b, seq += 5) {
    v1::WalRecord r = BatchRecord(seq, 5);
    EXPECT_TRUE((*wal)->Append(r).ok());
  }
  // The checkpoint: the pool after those records, made by recovering them.
  auto recovered = Recover(dir);
  EXPECT_TRUE(recovered.ok()) << recovered.status();
  v1::Checkpoint c;
  c.set_format_version(kStateFormatVersion);
  c.set_start_lsn((*wal)->last_lsn());
  v1::PoolCheckpoint* p = c.add_pools();
  *p->mutable_spec() = apply.apply();
  p->set_generation(1);
  p->set_wal_lsn((*wal)->last_lsn());
  recovered->pools["chain"].pool->SaveState(p->mutable_state());
  EXPECT_TRUE(WriteCheckpoint(dir, c).ok());
  for (int b = 0; b < 2; ++b, seq += 5) {
    v1::WalRecord r = BatchRecord(seq, 5);
    EXPECT_TRUE((*wal)->Append(r).ok());
  }
  return seq - 1;
}

std::string OnlyFile(const std::string& dir, const std::string& prefix) {
  for (const auto& e : std::filesystem::directory_iterator(dir)) {
    if (e.path().filename().string().rfind(prefix, 0) == 0) return e.path().string();
  }
  return "";
}

TEST(StateDir, IntactStateRecoversEveryFrame) {
  const std::string dir = testing::MakeTempDir("intact");
  const uint64_t last = MakeState(dir);
  auto r = Recover(dir);
  ASSERT_TRUE(r.ok()) << r.status();
  ASSERT_EQ(r->pools.count("chain"), 1u);
  EXPECT_EQ(r->pools["chain"].pool->last_seq("s"), last);
  EXPECT_FALSE(r->checkpoint_file.empty());
  EXPECT_EQ(r->records_replayed, 2u);  // the two batches after the checkpoint
}

// Every truncation and every bit of the log: recovery keeps a prefix of whole records
// (a shorter seq, never a wrong one), or refuses naming the file and offset.
TEST(StateDir, EveryTruncationAndBitFlipOfTheLogLoadsAPrefixOrRefuses) {
  const std::string dir = testing::MakeTempDir("wal_damage");
  const uint64_t last = MakeState(dir);
  const std::string wal = OnlyFile(dir, "wal-");
  const std::string checkpoint = OnlyFile(dir, "checkpoint-");
  const std::string good_wal = testing::ReadWholeFile(wal),
                    good_checkpoint = testing::ReadWholeFile(checkpoint);
  ASSERT_GT(good_wal.size(), 100u);
  size_t cases = 0, refused = 0;
  auto check = [&](const std::string& damaged, const std::string& what) {
    Write(wal, damaged);
    Write(checkpoint, good_checkpoint);
    auto r = Recover(dir);
    ++cases;
    if (!r.ok()) {
      ++refused;
      EXPECT_THAT(r.status().message(), HasSubstr("offset")) << what;
      return;
    }
    // A prefix: the checkpoint's frames (15) at least, at most all of them.
    const uint64_t got = r->pools.count("chain") ? r->pools["chain"].pool->last_seq("s") : 0;
    EXPECT_GE(got, 15u) << what;
    EXPECT_LE(got, last) << what;
  };
  for (size_t len = 0; len < good_wal.size(); ++len) {
    check(good_wal.substr(0, len), "truncated to " + std::to_string(len));
  }
  for (size_t pos = 0; pos < good_wal.size(); ++pos) {
    for (int bit = 0; bit < 8; ++bit) {
      std::string d = good_wal;
      d[pos] = static_cast<char>(d[pos] ^ (1 << bit));
      check(d, "bit " + std::to_string(bit) + " of byte " + std::to_string(pos));
    }
  }
  std::printf("log damage: %zu cases, %zu refused, the rest loaded a prefix\n", cases, refused);
  Write(wal, good_wal);
}

// Every bit of the checkpoint: the CRC catches it and recovery falls back to replaying
// the whole log (no older checkpoint here), ending with every frame, and says so.
TEST(StateDir, EveryBitFlipOfTheCheckpointFallsBack) {
  const std::string dir = testing::MakeTempDir("checkpoint_damage");
  const uint64_t last = MakeState(dir);
  const std::string checkpoint = OnlyFile(dir, "checkpoint-");
  const std::string good = testing::ReadWholeFile(checkpoint);
  size_t cases = 0;
  for (size_t pos = 0; pos < good.size(); ++pos) {
    for (int bit = 0; bit < 8; bit += 3) {
      std::string d = good;
      d[pos] = static_cast<char>(d[pos] ^ (1 << bit));
      Write(checkpoint, d);
      auto r = Recover(dir);
      ++cases;
      if (!r.ok()) {
        // No usable checkpoint although one exists: refused, naming the file.
        EXPECT_THAT(r.status().message(), HasSubstr(checkpoint));
        EXPECT_THAT(r.status().message(), HasSubstr("offset"));
        continue;
      }
      ASSERT_FALSE(r->warnings.empty()) << "byte " << pos;
      EXPECT_THAT(r->warnings[0], AnyOf(HasSubstr("offset"), HasSubstr("byte")));
    }
  }
  std::printf("checkpoint damage: %zu single-bit cases, none loaded silently\n", cases);
  (void)last;
}

// Damage in a segment that is not the last cannot be a torn write: refused, naming the
// file and offset, for every bit of it.
TEST(StateDir, DamageBeforeTheLastSegmentIsRefusedNamingFileAndOffset) {
  const std::string dir = testing::MakeTempDir("segments");
  MakeState(dir, /*segment_bytes=*/150);
  std::vector<std::string> segments;
  for (const auto& e : std::filesystem::directory_iterator(dir)) {
    if (e.path().filename().string().rfind("wal-", 0) == 0) segments.push_back(e.path().string());
  }
  std::sort(segments.begin(), segments.end());
  ASSERT_GE(segments.size(), 3u);
  // Without the checkpoint, recovery must read the first segment.
  for (const auto& e : std::filesystem::directory_iterator(dir)) {
    if (e.path().extension() == ".bwc") std::filesystem::remove(e.path());
  }
  const std::string first = segments.front(), good = testing::ReadWholeFile(first);
  size_t refused = 0;
  for (size_t pos = 0; pos < good.size(); ++pos) {
    std::string d = good;
    d[pos] = static_cast<char>(d[pos] ^ 0x10);
    Write(first, d);
    auto r = Recover(dir);
    ASSERT_FALSE(r.ok()) << "byte " << pos;
    EXPECT_THAT(r.status().message(), HasSubstr(first));
    EXPECT_THAT(r.status().message(), HasSubstr("offset"));
    ++refused;
  }
  Write(first, good);
  EXPECT_TRUE(Recover(dir).ok());
  std::printf("damage before the last segment: %zu of %zu bytes refused\n", refused, good.size());
}

TEST(StateDir, TornTailIsCutSoTheNextStartIsClean) {
  const std::string dir = testing::MakeTempDir("torn_tail");
  MakeState(dir);
  const std::string wal = OnlyFile(dir, "wal-");
  const std::string good = testing::ReadWholeFile(wal);
  Write(wal, good + std::string("\x30\x00\x00\x00\xde\xad", 6));
  auto r = Recover(dir);
  ASSERT_TRUE(r.ok());
  ASSERT_FALSE(r->warnings.empty());
  EXPECT_THAT(r->warnings.back(), HasSubstr("torn write"));
  EXPECT_EQ(testing::ReadWholeFile(wal), good);  // cut back to the whole records
}

// Protobuf cannot hold a message over 2 GiB: such a checkpoint is refused, never written
// as an empty file that recovery would take for a valid one.
// WriteCheckpoint streams the payload through the checksum into the file a block at a
// time; the file must be byte for byte what EncodeCheckpoint builds whole in memory (the
// format that earlier builds wrote and the fuzz corpus holds), across many blocks.
TEST(StateDir, StreamedCheckpointFileEqualsTheEncodedBytes) {
  const std::string dir = testing::MakeTempDir("streamed");
  const uint64_t last = MakeState(dir);
  const std::string first = OnlyFile(dir, "checkpoint-");
  auto decoded = DecodeCheckpoint(testing::ReadWholeFile(first));
  ASSERT_TRUE(decoded.ok()) << decoded.status();
  v1::Checkpoint c = *decoded;
  // A second pool whose state spans several write blocks and ends mid-block.
  v1::PoolCheckpoint* big = c.add_pools();
  *big->mutable_spec() = c.pools(0).spec();
  big->mutable_spec()->set_name("big");
  // Over two direct-write buffers, so the header is rewritten after it went out.
  std::string state(2 * DurableFileWriter::kDirectBufferBytes + 1234, '\0');
  for (size_t i = 0; i < state.size(); ++i) state[i] = static_cast<char>((i * 2654435761u) >> 13);
  big->set_state(state);
  c.set_start_lsn(last + 100);
  auto written = WriteCheckpoint(dir, c);
  ASSERT_TRUE(written.ok()) << written.status();
  auto encoded = EncodeCheckpoint(c);
  ASSERT_TRUE(encoded.ok()) << encoded.status();
  const std::string file = absl::StrFormat("%s/checkpoint-%020d.bwc", dir, last + 100);
  const std::string bytes = testing::ReadWholeFile(file);
  EXPECT_EQ(*written, bytes.size());
  ASSERT_EQ(bytes.size(), encoded->size());
  EXPECT_TRUE(bytes == *encoded) << "streamed file differs from the encoded bytes";
  auto back = DecodeCheckpoint(bytes);
  ASSERT_TRUE(back.ok()) << back.status();
  ASSERT_EQ(back->pools_size(), 2);
  EXPECT_EQ(back->pools(1).state(), state);
}

TEST(StateDir, CheckpointOverTheFormatLimitIsRefusedNotWrittenEmpty) {
  const std::string dir = testing::MakeTempDir("too_big");
  ASSERT_TRUE(PrepareStateDir(dir).ok());
  v1::Checkpoint c;
  c.set_format_version(kStateFormatVersion);
  for (int i = 0; i < 3; ++i) {
    v1::PoolCheckpoint* p = c.add_pools();
    p->mutable_spec()->set_name("big" + std::to_string(i));
    p->mutable_state()->assign(size_t{800} << 20, '\x01');  // 3 x 800 MiB
  }
  auto written = WriteCheckpoint(dir, c);
  EXPECT_EQ(written.status().code(), absl::StatusCode::kResourceExhausted);
  EXPECT_THAT(written.status().message(), HasSubstr("2 GiB"));
  for (const auto& e : std::filesystem::directory_iterator(dir)) {
    EXPECT_NE(e.path().extension(), ".bwc") << "a checkpoint file was written";
  }
}

TEST(StateDir, ForeignFormatIsRefused) {
  const std::string dir = testing::MakeTempDir("format");
  Write(dir + "/FORMAT", "bellwether state format 7\n");
  const absl::Status s = PrepareStateDir(dir);
  EXPECT_EQ(s.code(), absl::StatusCode::kFailedPrecondition);
  EXPECT_THAT(s.message(), HasSubstr("format 7"));
}

}  // namespace
}  // namespace bellwether::server
