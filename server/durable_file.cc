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

void DurableFileWriter::Abandon() {
  if (fd_ < 0) return;
  close(fd_);
  fd_ = -1;
  unlink(tmp_.c_str());
}

absl::Status DurableFileWriter::Open(const std::string& dir, const std::string& name) {
  Abandon();
  dir_ = dir;
  name_ = name;
  tmp_ = absl::StrCat(dir, "/.", name, ".tmp");
  size_ = 0;
  fd_ = open(tmp_.c_str(), O_WRONLY | O_CREAT | O_TRUNC | O_CLOEXEC, 0644);
  if (fd_ < 0)
    return absl::UnavailableError(absl::StrCat("open ", tmp_, ": ", std::strerror(errno)));
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
  size_t written = 0;
  while (written < data.size()) {
    const size_t piece = std::min(data.size() - written, kDurableWriteChunk);
    const ssize_t n = write(fd_, data.data() + written, piece);
    if (n < 0) {
      if (errno == EINTR) continue;
      return WriteError("write", errno);
    }
    written += static_cast<size_t>(n);
  }
  size_ += data.size();
  return absl::OkStatus();
}

absl::Status DurableFileWriter::WriteAt(uint64_t offset, absl::string_view data) {
  if (fd_ < 0) return absl::FailedPreconditionError(absl::StrCat("write ", tmp_, ": not open"));
  if (offset > size_ || data.size() > size_ - offset) {
    return absl::OutOfRangeError(absl::StrCat("write ", tmp_, ": ", data.size(),
                                              " bytes at offset ", offset, " lie beyond the ",
                                              size_, " bytes written"));
  }
  size_t written = 0;
  while (written < data.size()) {
    const ssize_t n = pwrite(fd_, data.data() + written, data.size() - written,
                             static_cast<off_t>(offset + written));
    if (n < 0) {
      if (errno == EINTR) continue;
      return WriteError("pwrite", errno);
    }
    written += static_cast<size_t>(n);
  }
  return absl::OkStatus();
}

absl::Status DurableFileWriter::Commit() {
  if (fd_ < 0) return absl::FailedPreconditionError(absl::StrCat("commit ", tmp_, ": not open"));
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
