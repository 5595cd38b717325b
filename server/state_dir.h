// The state directory's files besides the log: the FORMAT marker and checkpoints.
//
//   FORMAT                         "bellwether state format 1"
//   checkpoint-<start LSN>.bwc     "BWCK", uint32 version, uint64 length, uint32 CRC-32C,
//                                  then a bellwether.v1.Checkpoint of that length
//   wal-<first LSN>.log            the write-ahead log (wal.h)
//
// The newest two checkpoints are kept: if the newest is damaged, recovery falls back to
// the previous one (and says so loudly); the log is only trimmed up to a checkpoint once
// that checkpoint is durable.
#ifndef BELLWETHER_SERVER_STATE_DIR_H_
#define BELLWETHER_SERVER_STATE_DIR_H_

#include <cstdint>
#include <map>
#include <memory>
#include <string>
#include <vector>

#include "absl/status/status.h"
#include "absl/status/statusor.h"
#include "bellwether/v1/state.pb.h"
#include "core/pool.h"

namespace bellwether::server {

inline constexpr uint32_t kStateFormatVersion = 1;

// Creates `dir` with a FORMAT file, or checks an existing one: FAILED_PRECONDITION with
// a clear message for another format version or a directory with unknown contents.
absl::Status PrepareStateDir(const std::string& dir);

// Encodes and decodes a checkpoint file's bytes. Encode fails with RESOURCE_EXHAUSTED
// when the checkpoint exceeds protobuf's 2 GiB message limit (this format's cap on the
// total learned state of all pools). Decode never reads out of bounds; it fails with
// DATA_LOSS naming the offset.
absl::StatusOr<std::string> EncodeCheckpoint(const v1::Checkpoint& checkpoint);
absl::StatusOr<v1::Checkpoint> DecodeCheckpoint(absl::string_view bytes);

// Writes a checkpoint durably (temp file, fsync, rename, fsync of the directory) and
// deletes all but the newest two. The payload is serialized and checksummed into the file
// a block at a time, never whole in memory; the bytes equal EncodeCheckpoint's. Returns the file's size. Nothing is written (and the
// caller must not trim the log) on error.
absl::StatusOr<uint64_t> WriteCheckpoint(const std::string& dir, const v1::Checkpoint& checkpoint);

struct RecoveredPool {
  std::unique_ptr<Pool> pool;
  uint64_t generation = 1;
  uint64_t last_lsn = 0;
};

struct Recovery {
  std::map<std::string, RecoveredPool> pools;
  uint64_t next_lsn = 1;
  uint64_t records_replayed = 0;
  uint64_t frames_replayed = 0;
  std::string checkpoint_file;  // empty if none
  uint64_t checkpoint_start_lsn = 0;
  std::vector<std::string> warnings;
};

// Loads the newest valid checkpoint (falling back to the previous one with a warning)
// and replays the log after it, repairing a torn tail. DATA_LOSS when no checkpoint is
// usable although some exist, or the log is damaged before its last segment.
absl::StatusOr<Recovery> Recover(const std::string& dir);

}  // namespace bellwether::server

#endif  // BELLWETHER_SERVER_STATE_DIR_H_
