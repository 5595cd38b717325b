// A compact binary encoding of learned state (weights, traces, counters) for checkpoints.
// Little-endian fixed-width values and length-prefixed arrays, written and read in the
// same order by each type's SaveState / LoadState. The reader checks every length
// against what is left, so a truncated or corrupted payload fails with the byte offset
// instead of reading out of bounds.
#ifndef BELLWETHER_CORE_IO_STATE_CODEC_H_
#define BELLWETHER_CORE_IO_STATE_CODEC_H_

#include <cstdint>
#include <cstring>
#include <string>
#include <type_traits>
#include <vector>

#include "absl/status/status.h"
#include "absl/strings/str_cat.h"
#include "absl/strings/string_view.h"

namespace bellwether {

// Appends to `out`; or, default-constructed, only counts the bytes it would append, so
// that a caller can size its buffer before the real pass (a state of hundreds of MB
// grown by doubling copies itself several times and peaks at twice its size).
class StateWriter {
 public:
  StateWriter() = default;
  explicit StateWriter(std::string* out) : out_(out) {}

  template <typename T>
  void Put(T v) {
    static_assert(std::is_trivially_copyable_v<T>);
    char buf[sizeof(T)];
    std::memcpy(buf, &v, sizeof(T));
    Append(buf, sizeof(T));
  }
  template <typename T>
  void PutVector(const std::vector<T>& v) {
    static_assert(std::is_trivially_copyable_v<T>);
    Put<uint64_t>(v.size());
    Append(reinterpret_cast<const char*>(v.data()), v.size() * sizeof(T));
  }
  void PutVector(const std::vector<bool>& v) {
    Put<uint64_t>(v.size());
    for (bool b : v) Put<uint8_t>(b ? 1 : 0);
  }
  void PutString(absl::string_view s) {
    Put<uint64_t>(s.size());
    Append(s.data(), s.size());
  }

  // Bytes put so far (by either kind of writer).
  size_t bytes() const { return bytes_; }

 private:
  void Append(const char* p, size_t n) {
    if (out_ != nullptr) out_->append(p, n);
    bytes_ += n;
  }

  std::string* out_ = nullptr;
  size_t bytes_ = 0;
};

class StateReader {
 public:
  explicit StateReader(absl::string_view in) : in_(in) {}

  template <typename T>
  bool Get(T* v) {
    static_assert(std::is_trivially_copyable_v<T>);
    if (!Need(sizeof(T), "value")) return false;
    std::memcpy(v, in_.data() + pos_, sizeof(T));
    pos_ += sizeof(T);
    return true;
  }
  // Reads a vector, which must have exactly `expected` entries unless `expected` is
  // kAnySize (then at most kMaxEntries).
  static constexpr uint64_t kAnySize = ~uint64_t{0};
  static constexpr uint64_t kMaxEntries = uint64_t{1} << 32;
  template <typename T>
  bool GetVector(std::vector<T>* v, uint64_t expected = kAnySize) {
    static_assert(std::is_trivially_copyable_v<T>);
    uint64_t n = 0;
    if (!Get(&n)) return false;
    if (!CheckSize(n, expected)) return false;
    if (!Need(n * sizeof(T), "array")) return false;
    v->resize(n);
    if (n > 0) std::memcpy(v->data(), in_.data() + pos_, n * sizeof(T));
    pos_ += n * sizeof(T);
    return true;
  }
  bool GetVector(std::vector<bool>* v, uint64_t expected = kAnySize) {
    uint64_t n = 0;
    if (!Get(&n) || !CheckSize(n, expected) || !Need(n, "array")) return false;
    v->resize(n);
    for (uint64_t i = 0; i < n; ++i) (*v)[i] = in_[pos_ + i] != 0;
    pos_ += n;
    return true;
  }
  bool GetString(std::string* s) {
    uint64_t n = 0;
    if (!Get(&n) || !Need(n, "string")) return false;
    s->assign(in_.data() + pos_, n);
    pos_ += n;
    return true;
  }
  // Marks the payload bad at the current offset (a value out of range).
  bool Fail(absl::string_view what) {
    if (error_.empty()) error_ = absl::StrCat(what, " at byte ", pos_);
    return false;
  }

  size_t offset() const { return pos_; }
  bool done() const { return pos_ == in_.size(); }
  // The payload's format version, for loaders that read older layouts (set by whoever
  // read the header; 0 if unknown).
  void set_version(uint32_t version) { version_ = version; }
  uint32_t version() const { return version_; }
  // OK, or DATA_LOSS naming what was bad and where.
  absl::Status status() const {
    return error_.empty() ? absl::OkStatus() : absl::DataLossError(error_);
  }

 private:
  bool Need(uint64_t n, const char* what) {
    if (n > in_.size() - pos_) {
      return Fail(absl::StrCat("truncated ", what, " (", n, " bytes needed, ", in_.size() - pos_,
                               " left)"));
    }
    return true;
  }
  bool CheckSize(uint64_t n, uint64_t expected) {
    if (expected != kAnySize && n != expected) {
      return Fail(absl::StrCat("array of ", n, " entries where ", expected, " were expected"));
    }
    if (n > kMaxEntries) return Fail(absl::StrCat("array of ", n, " entries"));
    return true;
  }

  absl::string_view in_;
  size_t pos_ = 0;
  uint32_t version_ = 0;
  std::string error_;
};

}  // namespace bellwether

#endif  // BELLWETHER_CORE_IO_STATE_CODEC_H_
