#include "server/wal.h"

#include <errno.h>
#include <fcntl.h>
#include <sys/stat.h>
#include <unistd.h>

#include <algorithm>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <iostream>
#include <sstream>

#include "absl/strings/numbers.h"
#include "absl/strings/str_cat.h"
#include "absl/strings/str_format.h"
#include "core/io/crc32c.h"
#include "server/durable_file.h"

namespace bellwether::server {
namespace {

constexpr size_t kHeaderBytes = 8;
constexpr uint32_t kMaxRecordBytes = 1u << 30;

std::string SegmentName(uint64_t first_lsn) {
  return absl::StrFormat("wal-%020d.log", first_lsn);
}

// Parses "wal-<digits>.log".
bool ParseSegmentName(const std::string& name, uint64_t* first_lsn) {
  if (name.size() != 28 || name.rfind("wal-", 0) != 0 || name.substr(24) != ".log") return false;
  return absl::SimpleAtoi(name.substr(4, 20), first_lsn);
}

uint32_t GetU32(const char* p) {
  uint32_t v;
  std::memcpy(&v, p, 4);
  return v;
}

}  // namespace

absl::StatusOr<std::unique_ptr<Wal>> Wal::Open(Options options, uint64_t next_lsn) {
  std::unique_ptr<Wal> wal(new Wal(std::move(options)));
  {
    absl::MutexLock lock(&wal->mu_);
    wal->next_lsn_ = next_lsn;
    wal->appended_lsn_ = next_lsn - 1;
    wal->durable_lsn_ = next_lsn - 1;
    // Existing segments (from before a restart) can be trimmed later too.
    std::error_code ec;
    for (const auto& e : std::filesystem::directory_iterator(wal->options_.dir, ec)) {
      uint64_t first = 0;
      if (ParseSegmentName(e.path().filename().string(), &first)) {
        wal->segments_.emplace_back(first, e.path().string());
      }
    }
    std::sort(wal->segments_.begin(), wal->segments_.end());
    if (absl::Status s = wal->OpenSegment(next_lsn); !s.ok()) return s;
  }
  wal->flusher_ = std::thread([w = wal.get()] { w->FlushLoop(); });
  return wal;
}

Wal::~Wal() {
  {
    absl::MutexLock lock(&mu_);
    stop_ = true;
  }
  flusher_.join();
  absl::MutexLock lock(&mu_);
  if (fd_ >= 0) close(fd_);
}

absl::Status Wal::OpenSegment(uint64_t first_lsn) {
  const std::string name = SegmentName(first_lsn);
  const std::string path = options_.dir + "/" + name;
  // A segment with this name can only hold a torn tail that recovery dropped: replace it.
  const int fd = open(path.c_str(), O_WRONLY | O_CREAT | O_TRUNC | O_CLOEXEC, 0644);
  if (fd < 0) {
    return absl::UnavailableError(absl::StrCat("open ", path, ": ", std::strerror(errno)));
  }
  if (fd_ >= 0) to_sync_and_close_.push_back(fd_);
  fd_ = fd;
  segment_size_ = 0;
  segments_.erase(std::remove_if(segments_.begin(), segments_.end(),
                                 [&](const auto& s) { return s.first == first_lsn; }),
                  segments_.end());
  segments_.emplace_back(first_lsn, path);
  if (absl::Status s = SyncDir(options_.dir); !s.ok()) return s;
  return absl::OkStatus();
}

absl::StatusOr<uint64_t> Wal::Append(v1::WalRecord& record) {
  absl::MutexLock lock(&mu_);
  if (segment_size_ >= options_.segment_bytes) {
    if (absl::Status s = OpenSegment(next_lsn_); !s.ok()) return s;
  }
  record.set_lsn(next_lsn_);
  const size_t size = record.ByteSizeLong();
  if (size > kMaxRecordBytes) {
    return absl::InvalidArgumentError(
        absl::StrCat("batch: ", size, " bytes is too large for one log record"));
  }
  // Header and payload in one buffer kept across calls: no allocation once it has grown
  // to the largest record, and the payload is serialized in place.
  std::string& framed = framed_;
  framed.resize(kHeaderBytes + size);
  char* header = framed.data();
  record.SerializeWithCachedSizesToArray(reinterpret_cast<uint8_t*>(header + kHeaderBytes));
  const uint32_t length = static_cast<uint32_t>(size);
  const uint32_t crc = Crc32c(absl::string_view(header + kHeaderBytes, size));
  std::memcpy(header, &length, 4);  // host order, as GetU32 reads them
  std::memcpy(header + 4, &crc, 4);
  const bool injected =
      options_.fail_after_bytes > 0 && bytes_written_ + framed.size() > options_.fail_after_bytes;
  size_t written = 0;
  int err = 0;
  while (!injected && written < framed.size()) {
    const ssize_t n = write(fd_, framed.data() + written, framed.size() - written);
    if (n < 0) {
      if (errno == EINTR) continue;
      err = errno;
      break;
    }
    written += static_cast<size_t>(n);
  }
  if (injected || written < framed.size()) {
    // Take back any partial record so the log stays a sequence of whole records.
    if (written > 0 && ftruncate(fd_, static_cast<off_t>(segment_size_)) != 0) {
      FatalSync("truncating a partial log record", errno);
    }
    if (written > 0) lseek(fd_, static_cast<off_t>(segment_size_), SEEK_SET);
    if (injected || err == ENOSPC || err == EDQUOT) {
      return absl::ResourceExhaustedError(
          "state directory is full: the write-ahead log cannot take this batch (predictions "
          "are still served; free space and resend)");
    }
    return absl::UnavailableError(absl::StrCat("write-ahead log: ", std::strerror(err)));
  }
  segment_size_ += framed.size();
  bytes_written_ += framed.size();
  appended_lsn_ = next_lsn_;
  return next_lsn_++;
}

void Wal::WhenDurable(uint64_t lsn, std::function<void()> done) {
  {
    absl::MutexLock lock(&mu_);
    if (options_.sync == Sync::kBatch && lsn > durable_lsn_) {
      waiters_.emplace_back(lsn, std::move(done));
      return;
    }
  }
  done();
}

uint64_t Wal::last_lsn() const {
  absl::MutexLock lock(&mu_);
  return appended_lsn_;
}

uint64_t Wal::bytes_written() const {
  absl::MutexLock lock(&mu_);
  return bytes_written_;
}

void Wal::TrimThrough(uint64_t lsn) {
  absl::MutexLock lock(&mu_);
  // Segment i holds LSNs [first_i, first_{i+1}); it can go when first_{i+1} - 1 <= lsn.
  while (segments_.size() > 1 && segments_[1].first - 1 <= lsn) {
    std::error_code ec;
    std::filesystem::remove(segments_.front().second, ec);
    segments_.erase(segments_.begin());
  }
}

void Wal::FlushLoop() {
  while (true) {
    int fd;
    uint64_t target;
    std::vector<int> closing;
    {
      absl::MutexLock lock(&mu_);
      mu_.Await(absl::Condition(
          +[](Wal* w) ABSL_EXCLUSIVE_LOCKS_REQUIRED(w->mu_) {
            return w->stop_ || w->appended_lsn_ > w->durable_lsn_ ||
                   !w->to_sync_and_close_.empty();
          },
          this));
      if (stop_ && appended_lsn_ == durable_lsn_ && to_sync_and_close_.empty()) break;
      fd = fd_;
      target = appended_lsn_;
      closing.swap(to_sync_and_close_);
    }
    // Older segments first (they hold lower LSNs), then the open one.
    for (int c : closing) {
      if (options_.sync == Sync::kBatch && fdatasync(c) != 0) FatalSync("fdatasync of a log segment", errno);
      close(c);
    }
    if (options_.sync == Sync::kBatch && fdatasync(fd) != 0) {
      FatalSync("fdatasync of the write-ahead log", errno);
    }
    std::vector<std::function<void()>> ready;
    {
      absl::MutexLock lock(&mu_);
      durable_lsn_ = std::max(durable_lsn_, target);
      while (!waiters_.empty() && waiters_.front().first <= durable_lsn_) {
        ready.push_back(std::move(waiters_.front().second));
        waiters_.pop_front();
      }
    }
    for (auto& f : ready) f();
  }
  // Stopping: anyone still waiting was covered by the last sync.
  std::vector<std::function<void()>> rest;
  {
    absl::MutexLock lock(&mu_);
    for (auto& w : waiters_) rest.push_back(std::move(w.second));
    waiters_.clear();
  }
  for (auto& f : rest) f();
}

absl::Status ReadWal(const std::string& dir, uint64_t after_lsn,
                     const std::function<absl::Status(const v1::WalRecord&)>& fn,
                     uint64_t* next_lsn, std::string* warning, bool repair,
                     uint64_t* first_lsn) {
  std::vector<std::pair<uint64_t, std::string>> segments;
  std::error_code ec;
  for (const auto& e : std::filesystem::directory_iterator(dir, ec)) {
    uint64_t first = 0;
    if (ParseSegmentName(e.path().filename().string(), &first)) {
      segments.emplace_back(first, e.path().string());
    }
  }
  if (ec) return absl::UnavailableError(absl::StrCat("list ", dir, ": ", ec.message()));
  std::sort(segments.begin(), segments.end());
  if (first_lsn != nullptr) *first_lsn = segments.empty() ? 0 : segments.front().first;
  uint64_t expected = segments.empty() ? after_lsn + 1 : segments.front().first;
  for (size_t si = 0; si < segments.size(); ++si) {
    const bool last = si + 1 == segments.size();
    const std::string& path = segments[si].second;
    std::ifstream in(path, std::ios::binary);
    std::stringstream buf;
    buf << in.rdbuf();
    const std::string data = buf.str();
    if (segments[si].first != expected && !(si == 0)) {
      return absl::DataLossError(absl::StrCat(path, ": starts at LSN ", segments[si].first,
                                              ", expected ", expected, " (a segment is missing)"));
    }
    expected = segments[si].first;
    size_t off = 0;
    while (off < data.size()) {
      std::string problem;
      v1::WalRecord rec;
      if (data.size() - off < kHeaderBytes) {
        problem = "short record header";
      } else {
        const uint32_t len = GetU32(data.data() + off);
        const uint32_t crc = GetU32(data.data() + off + 4);
        if (len > kMaxRecordBytes || data.size() - off - kHeaderBytes < len) {
          problem = "record length beyond the end of the file";
        } else {
          const absl::string_view payload(data.data() + off + kHeaderBytes, len);
          if (Crc32c(payload) != crc) {
            problem = "CRC mismatch";
          } else if (!rec.ParseFromArray(payload.data(), static_cast<int>(payload.size()))) {
            problem = "unparsable record";
          } else if (rec.lsn() != expected) {
            problem = absl::StrCat("LSN ", rec.lsn(), " where ", expected, " was expected");
          } else {
            off += kHeaderBytes + len;
          }
        }
      }
      if (!problem.empty()) {
        const std::string where = absl::StrCat(path, " at offset ", off, ": ", problem);
        if (!last) return absl::DataLossError(absl::StrCat("write-ahead log damaged: ", where));
        *warning = absl::StrCat("write-ahead log ends early (a torn write at a crash): ", where,
                                "; ", data.size() - off, " bytes after it dropped");
        if (repair) {
          if (truncate(path.c_str(), static_cast<off_t>(off)) != 0) {
            return absl::UnavailableError(
                absl::StrCat("truncate ", path, ": ", std::strerror(errno)));
          }
          const int fd = open(path.c_str(), O_WRONLY | O_CLOEXEC);
          if (fd >= 0) {
            if (fsync(fd) != 0) FatalSync(absl::StrCat("fsync of ", path), errno);
            close(fd);
          }
        }
        break;
      }
      if (rec.lsn() > after_lsn) {
        if (absl::Status s = fn(rec); !s.ok()) return s;
      }
      ++expected;
    }
  }
  *next_lsn = std::max(expected, after_lsn + 1);
  return absl::OkStatus();
}

}  // namespace bellwether::server
