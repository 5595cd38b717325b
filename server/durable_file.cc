#include "server/durable_file.h"

#include <errno.h>
#include <fcntl.h>
#include <unistd.h>

#include <algorithm>
#include <cstdlib>
#include <cstring>
#include <iostream>

#include "absl/strings/str_cat.h"

namespace bellwether::server {

void FatalSync(const std::string& what, int err) {
  std::cerr << "bellwetherd: FATAL: " << what << ": " << std::strerror(err)
            << "; exiting without acknowledging more (data on disk may be incomplete; "
               "recovery replays what is intact)"
            << std::endl;
  std::_Exit(3);
}

absl::Status SyncDir(const std::string& dir) {
  const int fd = open(dir.c_str(), O_RDONLY | O_DIRECTORY | O_CLOEXEC);
  if (fd < 0) return absl::InternalError(absl::StrCat("open ", dir, ": ", std::strerror(errno)));
  if (fsync(fd) != 0) FatalSync(absl::StrCat("fsync of directory ", dir), errno);
  close(fd);
  return absl::OkStatus();
}

DurableFileWriter::~DurableFileWriter() { Abandon(); }

void DurableFileWriter::FreeDeleter::operator()(char* p) const { std::free(p); }

void DurableFileWriter::Abandon() {
  direct_buffer_.reset();
  if (fd_ < 0) return;
  close(fd_);
  fd_ = -1;
  unlink(tmp_.c_str());
}

absl::Status DurableFileWriter::Open(const std::string& dir, const std::string& name,
                                     const OpenOptions& options) {
  Abandon();
  dir_ = dir;
  name_ = name;
  tmp_ = absl::StrCat(dir, "/.", name, ".tmp");
  size_ = 0;
  buffered_ = 0;
  flushed_ = 0;
  constexpr int kFlags = O_WRONLY | O_CREAT | O_TRUNC | O_CLOEXEC;
  if (options.bypass_cache) {
    fd_ = open(tmp_.c_str(), kFlags | O_DIRECT, 0644);
    if (fd_ >= 0) {
      direct_buffer_.reset(
          static_cast<char*>(std::aligned_alloc(kDirectBlock, kDirectBufferBytes)));
      if (direct_buffer_ == nullptr) return WriteError("allocate a write buffer for", ENOMEM);
    } else if (errno != EINVAL) {
      return absl::UnavailableError(absl::StrCat("open ", tmp_, ": ", std::strerror(errno)));
    }
  }
  if (fd_ < 0) fd_ = open(tmp_.c_str(), kFlags, 0644);
  if (fd_ < 0) {
    return absl::UnavailableError(absl::StrCat("open ", tmp_, ": ", std::strerror(errno)));
  }
  if (options.expected_size > 0) {
    const int err = posix_fallocate(fd_, 0, static_cast<off_t>(options.expected_size));
    if (err == ENOSPC || err == EDQUOT) return WriteError("reserve space for", err);
    // Other errors (a file system without fallocate): the writes allocate as they go.
  }
  return absl::OkStatus();
}

absl::Status DurableFileWriter::PwriteAll(const char* data, size_t n, uint64_t offset) {
  size_t written = 0;
  while (written < n) {
    const ssize_t w =
        pwrite(fd_, data + written, n - written, static_cast<off_t>(offset + written));
    if (w < 0) {
      if (errno == EINTR) continue;
      return WriteError("write", errno);
    }
    written += static_cast<size_t>(w);
  }
  return absl::OkStatus();
}

absl::Status DurableFileWriter::FlushDirect(size_t n) {
  if (absl::Status s = PwriteAll(direct_buffer_.get(), n, flushed_); !s.ok()) return s;
  flushed_ += n;
  buffered_ -= std::min(buffered_, n);
  return absl::OkStatus();
}

absl::Status DurableFileWriter::WriteError(const char* op, int err) {
  Abandon();
  if (err == ENOSPC || err == EDQUOT) {
    return absl::ResourceExhaustedError(absl::StrCat(op, " ", tmp_, ": disk full"));
  }
  return absl::UnavailableError(absl::StrCat(op, " ", tmp_, ": ", std::strerror(err)));
}

absl::Status DurableFileWriter::Append(absl::string_view data) {
  if (fd_ < 0) return absl::FailedPreconditionError(absl::StrCat("write ", tmp_, ": not open"));
  if (direct()) {
    while (!data.empty()) {
      const size_t piece = std::min(data.size(), kDirectBufferBytes - buffered_);
      std::memcpy(direct_buffer_.get() + buffered_, data.data(), piece);
      buffered_ += piece;
      size_ += piece;
      data.remove_prefix(piece);
      if (buffered_ == kDirectBufferBytes) {
        if (absl::Status s = FlushDirect(kDirectBufferBytes); !s.ok()) return s;
      }
    }
    return absl::OkStatus();
  }
  for (size_t at = 0; at < data.size(); at += kDurableWriteChunk) {
    const absl::string_view piece = data.substr(at, kDurableWriteChunk);
    if (absl::Status s = PwriteAll(piece.data(), piece.size(), size_); !s.ok()) return s;
    size_ += piece.size();
  }
  return absl::OkStatus();
}

absl::Status DurableFileWriter::WriteAt(uint64_t offset, absl::string_view data) {
  if (fd_ < 0) return absl::FailedPreconditionError(absl::StrCat("write ", tmp_, ": not open"));
  if (offset > size_ || data.size() > size_ - offset) {
    return absl::OutOfRangeError(absl::StrCat("write ", tmp_, ": ", data.size(),
                                              " bytes at offset ", offset, " lie beyond the ",
                                              size_, " bytes written"));
  }
  if (!direct()) return PwriteAll(data.data(), data.size(), offset);
  // The part not written out yet is patched in the buffer; the part already out is
  // written through the page cache (an O_DIRECT write would need whole aligned blocks),
  // which from then on the descriptor uses; the buffer's own writes stay aligned.
  const size_t out = offset < flushed_ ? std::min<uint64_t>(data.size(), flushed_ - offset) : 0;
  if (out > 0) {
    const int flags = fcntl(fd_, F_GETFL);
    if (flags < 0 || ((flags & O_DIRECT) != 0 && fcntl(fd_, F_SETFL, flags & ~O_DIRECT) != 0)) {
      return WriteError("buffered write to", errno);
    }
    if (absl::Status s = PwriteAll(data.data(), out, offset); !s.ok()) return s;
  }
  if (out < data.size()) {
    std::memcpy(direct_buffer_.get() + (offset + out - flushed_), data.data() + out,
                data.size() - out);
  }
  return absl::OkStatus();
}

absl::Status DurableFileWriter::Commit() {
  if (fd_ < 0) return absl::FailedPreconditionError(absl::StrCat("commit ", tmp_, ": not open"));
  if (direct()) {
    // The tail as whole blocks (zero padded); the truncate below cuts the padding.
    const size_t padded = (buffered_ + kDirectBlock - 1) / kDirectBlock * kDirectBlock;
    std::memset(direct_buffer_.get() + buffered_, 0, padded - buffered_);
    if (absl::Status s = FlushDirect(padded); !s.ok()) return s;
    direct_buffer_.reset();
  }
  if (ftruncate(fd_, static_cast<off_t>(size_)) != 0) return WriteError("truncate", errno);
  if (fsync(fd_) != 0) FatalSync(absl::StrCat("fsync of ", tmp_), errno);
  close(fd_);
  fd_ = -1;
  if (rename(tmp_.c_str(), absl::StrCat(dir_, "/", name_).c_str()) != 0) {
    const int err = errno;
    unlink(tmp_.c_str());
    return absl::UnavailableError(absl::StrCat("rename ", tmp_, ": ", std::strerror(err)));
  }
  return SyncDir(dir_);
}

absl::Status WriteFileDurably(const std::string& dir, const std::string& name,
                              absl::string_view contents) {
  DurableFileWriter w;
  if (absl::Status s = w.Open(dir, name); !s.ok()) return s;
  if (absl::Status s = w.Append(contents); !s.ok()) return s;
  return w.Commit();
}

}  // namespace bellwether::server
