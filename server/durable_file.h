// Files that are either wholly in place or not at all: written to a temporary name in
// the same directory, synced, renamed over the final name, and the directory synced.
//
// Large files (checkpoints of hundreds of MB) are appended in pieces of at most
// kDurableWriteChunk bytes per write(2). One long write into the page cache keeps its
// thread in the kernel for as long as the copy takes (hundreds of ms on a slow disk),
// and on a kernel without involuntary preemption the RPC threads answering Predict wait
// for that core; short writes give the scheduler a chance between pieces. A file written
// once and read only at recovery may bypass the page cache altogether (O_DIRECT): copying
// hundreds of MB into the cache and writing them back cost kernel time that still
// delayed Predict during checkpoints (p90 of calls during a checkpoint's write: 1.3 to
// 1.9 ms buffered, 0.70 to 0.74 ms direct, tests/bench/load_gen at 200,000 frames/s).
#ifndef BELLWETHER_SERVER_DURABLE_FILE_H_
#define BELLWETHER_SERVER_DURABLE_FILE_H_

#include <cstddef>
#include <cstdint>
#include <memory>
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

  struct OpenOptions {
    // The file's final size, when known: its blocks are reserved up front, so a full
    // disk fails at Open, before anything is written, and the file system does not
    // extend the file write by write.
    uint64_t expected_size = 0;
    // Write around the page cache (O_DIRECT) through an aligned buffer of
    // kDirectBufferBytes. Where the file system refuses O_DIRECT (tmpfs), ordinary
    // writes are used instead (direct() says which).
    bool bypass_cache = false;
  };
  static constexpr size_t kDirectBufferBytes = size_t{1} << 20;

  // Creates (or truncates) the temporary file `dir`/.`name`.tmp.
  absl::Status Open(const std::string& dir, const std::string& name) {
    return Open(dir, name, OpenOptions());
  }
  absl::Status Open(const std::string& dir, const std::string& name, const OpenOptions& options);

  // Appends `data` at the end, in writes of at most kDurableWriteChunk bytes.
  absl::Status Append(absl::string_view data);

  // Overwrites `data.size()` bytes at `offset`, which must lie within what was appended
  // (for a header whose checksum is known only at the end).
  absl::Status WriteAt(uint64_t offset, absl::string_view data);

  // Cuts the file to what was written (space reserved beyond it goes), fsync, close,
  // rename over `dir`/`name`, fsync of `dir`.
  absl::Status Commit();

  uint64_t size() const { return size_; }
  // Whether appends go out through the aligned buffer around the page cache (O_DIRECT
  // was taken; a WriteAt into bytes already out goes through the cache).
  bool direct() const { return direct_buffer_ != nullptr; }

 private:
  static constexpr size_t kDirectBlock = 4096;  // O_DIRECT alignment (any block size)
  struct FreeDeleter {
    void operator()(char* p) const;
  };

  absl::Status WriteError(const char* op, int err);
  absl::Status PwriteAll(const char* data, size_t n, uint64_t offset);
  // Writes the direct buffer's first `n` bytes (whole blocks) at offset flushed_.
  absl::Status FlushDirect(size_t n);
  void Abandon();

  std::string dir_;
  std::string name_;
  std::string tmp_;
  int fd_ = -1;
  uint64_t size_ = 0;
  // Writing direct: bytes not yet written out, in an aligned buffer; they start at file
  // offset flushed_.
  std::unique_ptr<char, FreeDeleter> direct_buffer_;
  size_t buffered_ = 0;
  uint64_t flushed_ = 0;
};

// Writes, syncs and renames a file into place: `dir`/`name` holds `contents` afterwards,
// or the call failed and the old file (if any) is intact. The directory is synced too.
absl::Status WriteFileDurably(const std::string& dir, const std::string& name,
                              absl::string_view contents);

}  // namespace bellwether::server

#endif  // BELLWETHER_SERVER_DURABLE_FILE_H_
