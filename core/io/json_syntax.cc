#include "core/io/json_syntax.h"

#include <cctype>
#include <string>

#include "absl/strings/str_cat.h"

namespace bellwether {
namespace {

constexpr int kMaxDepth = 128;

class Scanner {
 public:
  explicit Scanner(absl::string_view s) : s_(s) {}

  absl::Status Run() {
    SkipSpace();
    if (!Value(0)) return Error();
    SkipSpace();
    if (pos_ != s_.size()) return Fail("unexpected text after the JSON value"), Error();
    return absl::OkStatus();
  }

 private:
  bool Fail(const std::string& why) {
    if (why_.empty()) {
      why_ = why;
      err_pos_ = pos_;
    }
    return false;
  }
  absl::Status Error() const {
    size_t line = 1, col = 1;
    for (size_t i = 0; i < err_pos_ && i < s_.size(); ++i) {
      if (s_[i] == '\n') {
        ++line;
        col = 1;
      } else {
        ++col;
      }
    }
    return absl::InvalidArgumentError(absl::StrCat("line ", line, ", column ", col, ": ", why_));
  }
  bool AtEnd() const { return pos_ >= s_.size(); }
  char Peek() const { return AtEnd() ? '\0' : s_[pos_]; }
  void SkipSpace() {
    while (!AtEnd() && (s_[pos_] == ' ' || s_[pos_] == '\t' || s_[pos_] == '\n' ||
                        s_[pos_] == '\r')) {
      ++pos_;
    }
  }
  std::string Found() const {
    if (AtEnd()) return "the end of the text";
    const char c = s_[pos_];
    if (c < 0x20) return "a control character";
    return absl::StrCat("'", std::string(1, c), "'");
  }

  bool Value(int depth) {
    if (depth > kMaxDepth) return Fail("nested more than 128 levels deep");
    switch (Peek()) {
      case '{': return Object(depth + 1);
      case '[': return Array(depth + 1);
      case '"': return String();
      case 't': return Word("true");
      case 'f': return Word("false");
      case 'n': return Word("null");
      default:
        if (Peek() == '-' || (Peek() >= '0' && Peek() <= '9')) return Number();
        return Fail(absl::StrCat("expected a value, found ", Found()));
    }
  }

  bool Object(int depth) {
    ++pos_;  // {
    SkipSpace();
    if (Peek() == '}') return ++pos_, true;
    while (true) {
      if (Peek() != '"') return Fail(absl::StrCat("expected a \"key\", found ", Found()));
      if (!String()) return false;
      SkipSpace();
      if (Peek() != ':') return Fail(absl::StrCat("expected ':' after the key, found ", Found()));
      ++pos_;
      SkipSpace();
      if (!Value(depth)) return false;
      SkipSpace();
      if (Peek() == ',') {
        ++pos_;
        SkipSpace();
        if (Peek() == '}') return Fail("a trailing ',' before '}'");
        continue;
      }
      if (Peek() == '}') return ++pos_, true;
      return Fail(absl::StrCat("expected ',' or '}' after a value, found ", Found()));
    }
  }

  bool Array(int depth) {
    ++pos_;  // [
    SkipSpace();
    if (Peek() == ']') return ++pos_, true;
    while (true) {
      if (!Value(depth)) return false;
      SkipSpace();
      if (Peek() == ',') {
        ++pos_;
        SkipSpace();
        if (Peek() == ']') return Fail("a trailing ',' before ']'");
        continue;
      }
      if (Peek() == ']') return ++pos_, true;
      return Fail(absl::StrCat("expected ',' or ']' after a value, found ", Found()));
    }
  }

  bool String() {
    ++pos_;  // opening quote
    while (!AtEnd()) {
      const unsigned char c = static_cast<unsigned char>(s_[pos_]);
      if (c == '"') return ++pos_, true;
      if (c < 0x20) return Fail("a control character (such as a line break) inside a string");
      if (c == '\\') {
        ++pos_;
        const char e = Peek();
        if (e == 'u') {
          for (int i = 1; i <= 4; ++i) {
            const size_t p = pos_ + static_cast<size_t>(i);
            if (p >= s_.size() || !std::isxdigit(static_cast<unsigned char>(s_[p]))) {
              pos_ = p;
              return Fail("\\u must be followed by four hex digits");
            }
          }
          pos_ += 4;
        } else if (std::string("\"\\/bfnrt").find(e) == std::string::npos || AtEnd()) {
          return Fail(absl::StrCat("unknown escape \\", std::string(1, e)));
        }
      }
      ++pos_;
    }
    return Fail("a string is not closed (missing '\"')");
  }

  bool Digits() {
    if (!(Peek() >= '0' && Peek() <= '9')) return Fail(absl::StrCat("expected a digit, found ", Found()));
    while (Peek() >= '0' && Peek() <= '9') ++pos_;
    return true;
  }

  bool Number() {
    if (Peek() == '-') ++pos_;
    if (Peek() == '0') {
      ++pos_;
      if (Peek() >= '0' && Peek() <= '9') return Fail("a number may not have leading zeros");
    } else if (!Digits()) {
      return false;
    }
    if (Peek() == '.') {
      ++pos_;
      if (!Digits()) return false;
    }
    if (Peek() == 'e' || Peek() == 'E') {
      ++pos_;
      if (Peek() == '+' || Peek() == '-') ++pos_;
      if (!Digits()) return false;
    }
    return true;
  }

  bool Word(absl::string_view w) {
    if (s_.substr(pos_, w.size()) != w) {
      return Fail(absl::StrCat("expected a value, found ", Found()));
    }
    pos_ += w.size();
    return true;
  }

  absl::string_view s_;
  size_t pos_ = 0;
  size_t err_pos_ = 0;
  std::string why_;
};

}  // namespace

absl::Status CheckJsonSyntax(absl::string_view json) { return Scanner(json).Run(); }

}  // namespace bellwether
