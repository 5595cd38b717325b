// Files that are either wholly in place or not at all: written to a temporary name in
// the same directory, synced, renamed over the final name, and the directory synced.
//
// Large files (checkpoints of hundreds of MB) are appended in pieces of at most
// kDurableWriteChunk bytes per write(2). One long write into the page cache keeps its
// thread in the kernel for as long as the copy takes (hundreds of ms on a slow disk),
// and on a kernel without involuntary preemption the RPC threads answering Predict wait
// for that core; short writes give the scheduler a chance between pieces.
#ifndef BELLWETHER_SERVER_DURABLE_FILE_H_
#define BELLWETHER_SERVER_DURABLE_FILE_H_

#include <cstddef>
#include <cstdint>
#include <string>

#include "absl/status/status.h"
#include "absl/strings/string_view.h"

namespace bellwether::server {

inline constexpr size_t kDurableWriteChunk = size_t{64} << 10;

// An fsync that fails leaves the file's contents unknown (the kernel may have dropped the
// dirty pages), so there is no retry: the daemon exits (status 3) naming `what`, and
// recovery replays what is intact.
[[noreturn]] void FatalSync(const std::string& what, int err);

// Syncs a directory, so that a rename or a new file in it survives a crash.
absl::Status SyncDir(const std::string& dir);

// Writes `dir`/`name` durably. Not thread-safe; one writer per file. Usage:
//   DurableFileWriter w;
//   if (auto s = w.Open(dir, name); !s.ok()) ...
//   w.Append(...); ... w.WriteAt(0, header);
//   if (auto s = w.Commit(); !s.ok()) ...
// Until Commit succeeds, the final name is untouched; a writer destroyed without a
// successful Commit removes its temporary file. Errors name the file and the reason:
// RESOURCE_EXHAUSTED for a full disk, UNAVAILABLE for other I/O errors.
class DurableFileWriter {
 public:
  DurableFileWriter() = default;
  DurableFileWriter(const DurableFileWriter&) = delete;
  DurableFileWriter& operator=(const DurableFileWriter&) = delete;
  ~DurableFileWriter();

  // Creates (or truncates) the temporary file `dir`/.`name`.tmp.
  absl::Status Open(const std::string& dir, const std::string& name);

  // Appends `data` at the end, in writes of at most kDurableWriteChunk bytes.
  absl::Status Append(absl::string_view data);

  // Overwrites `data.size()` bytes at `offset`, which must lie within what was appended
  // (for a header whose checksum is known only at the end).
  absl::Status WriteAt(uint64_t offset, absl::string_view data);

  // fsync, close, rename over `dir`/`name`, fsync of `dir`.
  absl::Status Commit();

  uint64_t size() const { return size_; }

 private:
  absl::Status WriteError(const char* op, int err);
  void Abandon();

  std::string dir_;
  std::string name_;
  std::string tmp_;
  int fd_ = -1;
  uint64_t size_ = 0;
};

// Writes, syncs and renames a file into place: `dir`/`name` holds `contents` afterwards,
// or the call failed and the old file (if any) is intact. The directory is synced too.
absl::Status WriteFileDurably(const std::string& dir, const std::string& name,
                              absl::string_view contents);

}  // namespace bellwether::server

#endif  // BELLWETHER_SERVER_DURABLE_FILE_H_
