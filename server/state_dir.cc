#include "server/state_dir.h"

#include <algorithm>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <sstream>
#include <utility>

#include "absl/strings/numbers.h"
#include "absl/strings/str_cat.h"
#include "absl/strings/str_format.h"
#include "absl/strings/strip.h"
#include "absl/time/clock.h"
#include "core/frame_input.h"
#include "core/io/crc32c.h"
#include "google/protobuf/io/coded_stream.h"
#include "google/protobuf/io/zero_copy_stream_impl_lite.h"
#include "server/durable_file.h"
#include "server/wal.h"

namespace bellwether::server {
namespace {

constexpr char kFormatFile[] = "FORMAT";
constexpr char kCheckpointMagic[4] = {'B', 'W', 'C', 'K'};
constexpr size_t kCheckpointHeader = 4 + 4 + 8 + 4;
constexpr size_t kCheckpointCrcAt = 4 + 4 + 8;
constexpr size_t kKeepCheckpoints = 2;

std::string FormatLine() { return absl::StrCat("bellwether state format ", kStateFormatVersion); }

absl::StatusOr<std::string> ReadFile(const std::string& path) {
  std::ifstream in(path, std::ios::binary);
  if (!in) return absl::NotFoundError(absl::StrCat(path, ": cannot open"));
  std::stringstream buf;
  buf << in.rdbuf();
  return buf.str();
}

bool ParseCheckpointName(const std::string& name, uint64_t* lsn) {
  if (name.size() != 35 || name.rfind("checkpoint-", 0) != 0 || name.substr(31) != ".bwc") {
    return false;
  }
  return absl::SimpleAtoi(name.substr(11, 20), lsn);
}

// Checkpoint files, newest first.
std::vector<std::pair<uint64_t, std::string>> ListCheckpoints(const std::string& dir) {
  std::vector<std::pair<uint64_t, std::string>> out;
  std::error_code ec;
  for (const auto& e : std::filesystem::directory_iterator(dir, ec)) {
    uint64_t lsn = 0;
    if (ParseCheckpointName(e.path().filename().string(), &lsn)) {
      out.emplace_back(lsn, e.path().string());
    }
  }
  std::sort(out.rbegin(), out.rend());
  return out;
}

void Put(std::string* out, const void* p, size_t n) { out->append(static_cast<const char*>(p), n); }

// The payload's size, or RESOURCE_EXHAUSTED past protobuf's 2 GiB message limit.
absl::StatusOr<size_t> CheckpointPayloadSize(const v1::Checkpoint& checkpoint) {
  const size_t size = checkpoint.ByteSizeLong();
  constexpr size_t kProtobufLimit = (size_t{1} << 31) - 1;
  if (size > kProtobufLimit) {
    return absl::ResourceExhaustedError(absl::StrCat(
        "checkpoint of ", size,
        " bytes exceeds the 2 GiB limit of this checkpoint format; "
        "not written (the log keeps everything; use fewer questions or featureTableSize per "
        "pool, or POOLED learning)"));
  }
  return size;
}

// "BWCK", version, payload length, CRC-32C of the payload.
std::string CheckpointHeader(uint64_t payload_size, uint32_t crc) {
  std::string out;
  out.reserve(kCheckpointHeader);
  Put(&out, kCheckpointMagic, 4);
  const uint32_t version = kStateFormatVersion;
  Put(&out, &version, 4);
  Put(&out, &payload_size, 8);
  Put(&out, &crc, 4);
  return out;
}

// Protobuf's serializer writes into this a block at a time; each block goes into the
// checksum and the file. The payload is never whole in memory: a checkpoint is most of
// the daemon's state, and a second copy of it doubled the daemon's peak memory while
// checkpointing (and took a long write into the page cache, see durable_file.h).
class ChecksummedFileOutput : public google::protobuf::io::CopyingOutputStream {
 public:
  explicit ChecksummedFileOutput(DurableFileWriter* file) : file_(file) {}

  bool Write(const void* buffer, int size) override {
    const absl::string_view piece(static_cast<const char*>(buffer), static_cast<size_t>(size));
    crc_ = Crc32c(piece, crc_);
    status_ = file_->Append(piece);
    return status_.ok();
  }

  uint32_t crc() const { return crc_; }
  const absl::Status& status() const { return status_; }

 private:
  DurableFileWriter* const file_;
  uint32_t crc_ = 0;
  absl::Status status_;
};

}  // namespace

absl::Status PrepareStateDir(const std::string& dir) {
  std::error_code ec;
  std::filesystem::create_directories(dir, ec);
  if (ec) return absl::UnavailableError(absl::StrCat("--state-dir ", dir, ": ", ec.message()));
  const std::string path = dir + "/" + kFormatFile;
  auto existing = ReadFile(path);
  if (existing.ok()) {
    const std::string line(absl::StripAsciiWhitespace(*existing));
    if (line == FormatLine()) return absl::OkStatus();
    return absl::FailedPreconditionError(absl::StrCat(
        "--state-dir ", dir, ": written in '", line, "'; this bellwetherd reads '", FormatLine(),
        "' and cannot migrate it. Run the bellwetherd version that wrote it, or start with an "
        "empty directory."));
  }
  // No FORMAT file: only an empty directory (or one with foreign files but none of ours)
  // is taken over.
  for (const auto& e : std::filesystem::directory_iterator(dir, ec)) {
    const std::string name = e.path().filename().string();
    uint64_t n = 0;
    if (ParseCheckpointName(name, &n) || name.rfind("wal-", 0) == 0) {
      return absl::FailedPreconditionError(absl::StrCat(
          "--state-dir ", dir, ": has state files (", name, ") but no FORMAT file; refusing to "
          "guess their format"));
    }
  }
  return WriteFileDurably(dir, kFormatFile, FormatLine() + "\n");
}

absl::StatusOr<std::string> EncodeCheckpoint(const v1::Checkpoint& checkpoint) {
  absl::StatusOr<size_t> size = CheckpointPayloadSize(checkpoint);
  if (!size.ok()) return size.status();
  // Serialized straight after the header, not into a string of its own and copied.
  std::string out = CheckpointHeader(*size, 0);
  out.resize(kCheckpointHeader + *size);
  char* payload = out.data() + kCheckpointHeader;
  // The sizes CheckpointPayloadSize just computed are cached in the message: no second
  // pass over it.
  auto* end = checkpoint.SerializeWithCachedSizesToArray(reinterpret_cast<uint8_t*>(payload));
  if (reinterpret_cast<char*>(end) != payload + *size) {
    return absl::InternalError("checkpoint: protobuf serialization failed");
  }
  const uint32_t crc = Crc32c(absl::string_view(payload, *size));
  std::memcpy(out.data() + kCheckpointCrcAt, &crc, 4);
  return out;
}

absl::StatusOr<v1::Checkpoint> DecodeCheckpoint(absl::string_view bytes) {
  if (bytes.size() < kCheckpointHeader) {
    return absl::DataLossError(absl::StrCat("truncated header (", bytes.size(), " bytes)"));
  }
  if (std::memcmp(bytes.data(), kCheckpointMagic, 4) != 0) {
    return absl::DataLossError("bad magic at offset 0 (not a checkpoint)");
  }
  uint32_t version;
  uint64_t len;
  uint32_t crc;
  std::memcpy(&version, bytes.data() + 4, 4);
  std::memcpy(&len, bytes.data() + 8, 8);
  std::memcpy(&crc, bytes.data() + 16, 4);
  if (version != kStateFormatVersion) {
    return absl::FailedPreconditionError(
        absl::StrCat("checkpoint format version ", version, " at offset 4; this build reads ",
                     kStateFormatVersion));
  }
  if (len != bytes.size() - kCheckpointHeader) {
    return absl::DataLossError(absl::StrCat("length ", len, " at offset 8 does not match the ",
                                            bytes.size() - kCheckpointHeader,
                                            " payload bytes present"));
  }
  const absl::string_view payload = bytes.substr(kCheckpointHeader);
  if (Crc32c(payload) != crc) {
    return absl::DataLossError(absl::StrCat("CRC mismatch over the payload at offset ",
                                            kCheckpointHeader));
  }
  v1::Checkpoint c;
  if (!c.ParseFromArray(payload.data(), static_cast<int>(payload.size()))) {
    return absl::DataLossError(absl::StrCat("unparsable payload at offset ", kCheckpointHeader));
  }
  return c;
}

absl::StatusOr<uint64_t> WriteCheckpoint(const std::string& dir,
                                         const v1::Checkpoint& checkpoint) {
  absl::StatusOr<size_t> size = CheckpointPayloadSize(checkpoint);
  if (!size.ok()) return size.status();
  DurableFileWriter file;
  DurableFileWriter::OpenOptions options;
  options.expected_size = kCheckpointHeader + *size;
  options.bypass_cache = true;  // written once, read only at recovery
  if (absl::Status s =
          file.Open(dir, absl::StrFormat("checkpoint-%020d.bwc", checkpoint.start_lsn()), options);
      !s.ok()) {
    return s;
  }
  if (absl::Status s = file.Append(CheckpointHeader(*size, 0)); !s.ok()) return s;
  ChecksummedFileOutput payload(&file);
  {
    google::protobuf::io::CopyingOutputStreamAdaptor adaptor(&payload,
                                                             static_cast<int>(kDurableWriteChunk));
    bool serialized;
    {
      // With the sizes CheckpointPayloadSize cached: no second pass over the message.
      google::protobuf::io::CodedOutputStream coded(&adaptor);
      checkpoint.SerializeWithCachedSizes(&coded);
      serialized = !coded.HadError();
    }
    serialized = adaptor.Flush() && serialized;
    if (!payload.status().ok()) return payload.status();
    if (!serialized) return absl::InternalError("checkpoint: protobuf serialization failed");
  }
  if (file.size() != kCheckpointHeader + *size) {
    return absl::InternalError(absl::StrCat("checkpoint: serialized ",
                                            file.size() - kCheckpointHeader, " bytes, expected ",
                                            *size, " (state changed while writing?)"));
  }
  if (absl::Status s = file.WriteAt(0, CheckpointHeader(*size, payload.crc())); !s.ok()) return s;
  if (absl::Status s = file.Commit(); !s.ok()) return s;
  const auto all = ListCheckpoints(dir);
  for (size_t i = kKeepCheckpoints; i < all.size(); ++i) {
    std::error_code ec;
    std::filesystem::remove(all[i].second, ec);
  }
  return file.size();
}

absl::StatusOr<Recovery> Recover(const std::string& dir) {
  Recovery out;
  v1::Checkpoint checkpoint;
  const auto files = ListCheckpoints(dir);
  std::string failures;
  bool loaded = files.empty();
  for (const auto& [lsn, path] : files) {
    auto bytes = ReadFile(path);
    absl::StatusOr<v1::Checkpoint> c =
        bytes.ok() ? DecodeCheckpoint(*bytes) : absl::StatusOr<v1::Checkpoint>(bytes.status());
    // Every pool in it must load too, or the checkpoint is not usable.
    std::map<std::string, RecoveredPool> pools;
    if (c.ok()) {
      for (const v1::PoolCheckpoint& pc : c->pools()) {
        auto pool = Pool::Create(pc.spec());
        absl::Status s = pool.ok() ? (*pool)->RestoreState(pc.state()) : pool.status();
        if (!s.ok()) {
          c = absl::DataLossError(absl::StrCat("pool ", pc.spec().name(), ": ", s.message()));
          break;
        }
        pools[pc.spec().name()] = RecoveredPool{*std::move(pool), pc.generation(), pc.wal_lsn()};
      }
    }
    if (!c.ok()) {
      absl::StrAppend(&failures, failures.empty() ? "" : "; ", path, ": ", c.status().message());
      out.warnings.push_back(absl::StrCat("checkpoint ", path, " is not usable (",
                                          c.status().message(), ")",
                                          &path == &files.back().second
                                              ? ""
                                              : "; falling back to the previous checkpoint"));
      continue;
    }
    checkpoint = *std::move(c);
    out.pools = std::move(pools);
    out.checkpoint_file = path;
    out.checkpoint_start_lsn = checkpoint.start_lsn();
    loaded = true;
    break;
  }
  if (!loaded) {
    return absl::DataLossError(absl::StrCat("no usable checkpoint in ", dir, ": ", failures,
                                            ". Refusing to start with partial state; move the "
                                            "directory aside to start empty."));
  }

  // Replay the log after the checkpoint, pool by pool.
  std::map<std::string, uint64_t> skip_through;
  for (const auto& [name, p] : out.pools) skip_through[name] = p.last_lsn;
  const uint64_t start_lsn = checkpoint.start_lsn();
  std::vector<double> buffer;
  FrameInput input;
  auto apply = [&](const v1::WalRecord& rec) -> absl::Status {
    std::string name;
    switch (rec.kind_case()) {
      case v1::WalRecord::kApply: name = rec.apply().name(); break;
      case v1::WalRecord::kDeletePool: name = rec.delete_pool(); break;
      case v1::WalRecord::kBatch: name = rec.batch().pool(); break;
      default: return absl::OkStatus();
    }
    auto skip = skip_through.find(name);
    const uint64_t through = skip != skip_through.end() ? skip->second : start_lsn;
    if (rec.lsn() <= through) return absl::OkStatus();
    ++out.records_replayed;
    auto it = out.pools.find(name);
    switch (rec.kind_case()) {
      case v1::WalRecord::kApply: {
        if (it == out.pools.end()) {
          auto pool = Pool::Create(rec.apply());
          if (!pool.ok()) return pool.status();
          out.pools[name] = RecoveredPool{*std::move(pool), 1, rec.lsn()};
        } else {
          auto next = Pool::CreateFrom(*it->second.pool, rec.apply());
          if (!next.ok()) return next.status();
          it->second.pool = *std::move(next);
          ++it->second.generation;
          it->second.last_lsn = rec.lsn();
        }
        break;
      }
      case v1::WalRecord::kDeletePool:
        if (it != out.pools.end()) out.pools.erase(it);
        skip_through.erase(name);
        break;
      case v1::WalRecord::kBatch: {
        if (it == out.pools.end()) break;  // the pool went before the log starts
        Pool& pool = *it->second.pool;
        it->second.last_lsn = rec.lsn();
        const v1::WalBatch& b = rec.batch();
        std::vector<std::string> columns(b.columns().begin(), b.columns().end());
        auto map = ColumnMap::Create(pool.spec().signal_names, columns);
        if (!map.ok()) break;  // refused live the same way
        for (const v1::Frame& f : b.batch().frames()) {
          if (f.seq() <= pool.last_seq(b.stream())) continue;  // a duplicate, as live
          if (FrameFromProto(f, *map, &buffer, &input).ok() && pool.Apply(b.stream(), input).ok()) {
            ++out.frames_replayed;
          }
        }
        break;
      }
      default:
        break;
    }
    return absl::OkStatus();
  };
  // The log must reach back to the checkpoint: a gap would silently lose frames.
  uint64_t first_lsn = 0, unused_next = 0;
  std::string ignored;
  if (absl::Status s = ReadWal(
          dir, ~uint64_t{0}, [](const v1::WalRecord&) { return absl::OkStatus(); }, &unused_next,
          &ignored, /*repair=*/false, &first_lsn);
      !s.ok()) {
    return s;
  }
  if (first_lsn > start_lsn + 1) {
    return absl::DataLossError(absl::StrCat(
        "the write-ahead log in ", dir, " starts at LSN ", first_lsn, " but checkpoint ",
        out.checkpoint_file, " needs it from LSN ", start_lsn + 1,
        "; refusing to start with frames missing"));
  }
  std::string warning;
  if (absl::Status s = ReadWal(dir, 0, apply, &out.next_lsn, &warning, /*repair=*/true); !s.ok()) {
    return s;
  }
  if (!warning.empty()) out.warnings.push_back(warning);
  out.next_lsn = std::max(out.next_lsn, start_lsn + 1);
  for (const auto& [name, p] : out.pools) out.next_lsn = std::max(out.next_lsn, p.last_lsn + 1);
  return out;
}

}  // namespace bellwether::server
