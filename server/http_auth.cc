#include "server/http_auth.h"

#include <fstream>
#include <utility>
#include <vector>

#include "absl/strings/ascii.h"
#include "absl/strings/escaping.h"
#include "absl/strings/match.h"
#include "absl/strings/str_cat.h"
#include "absl/strings/str_split.h"
#include "server/auth.h"

namespace bellwether::server {
namespace {

// Compares without an early exit, so the time taken says nothing about where a guess
// first differs.
bool ConstantTimeEquals(absl::string_view a, absl::string_view b) {
  if (a.size() != b.size()) return false;
  unsigned char diff = 0;
  for (size_t i = 0; i < a.size(); ++i) {
    diff = static_cast<unsigned char>(diff | (static_cast<unsigned char>(a[i]) ^
                                              static_cast<unsigned char>(b[i])));
  }
  return diff == 0;
}

}  // namespace

absl::StatusOr<absl::flat_hash_map<std::string, std::string>> HttpBasicAuth::Parse(
    const std::string& path) {
  std::ifstream in(path);
  if (!in) return absl::NotFoundError(absl::StrCat("--http-auth-file ", path, ": cannot open"));
  absl::flat_hash_map<std::string, std::string> out;
  std::string line;
  int n = 0;
  while (std::getline(in, line)) {
    ++n;
    const absl::string_view text = absl::StripAsciiWhitespace(line);
    if (text.empty() || text[0] == '#') continue;
    std::vector<std::string> f = absl::StrSplit(text, absl::ByAnyChar(" \t"), absl::SkipEmpty());
    auto bad = [&](absl::string_view why) {
      return absl::InvalidArgumentError(
          absl::StrCat("--http-auth-file ", path, " line ", n, ": ", why));
    };
    if (f.size() != 2) return bad("expected USER SHA256_HEX");
    if (absl::StrContains(f[0], ':')) return bad("a user name cannot contain ':'");
    if (!IsSha256Hex(f[1])) {
      return bad("the second field must be the 64 hex digits of the password's SHA-256 "
                 "(printf %s PASSWORD | sha256sum), not the password");
    }
    if (!out.emplace(f[0], absl::AsciiStrToLower(f[1])).second) {
      return bad(absl::StrCat("user '", f[0], "' appears twice"));
    }
  }
  if (out.empty()) return absl::InvalidArgumentError(absl::StrCat("--http-auth-file ", path, ": no users"));
  return out;
}

absl::StatusOr<std::unique_ptr<HttpBasicAuth>> HttpBasicAuth::Load(const std::string& path) {
  std::unique_ptr<HttpBasicAuth> auth(new HttpBasicAuth(path));
  if (absl::Status s = auth->Reload(); !s.ok()) return s;
  return auth;
}

absl::Status HttpBasicAuth::Reload() { return hash_by_user_.Reload(); }

size_t HttpBasicAuth::size() const { return hash_by_user_.size(); }

bool HttpBasicAuth::Allows(absl::string_view authorization) const {
  constexpr absl::string_view kBasic = "Basic ";
  authorization = absl::StripAsciiWhitespace(authorization);
  if (authorization.size() <= kBasic.size() ||
      !absl::EqualsIgnoreCase(authorization.substr(0, kBasic.size()), kBasic)) {
    return false;
  }
  std::string decoded;
  if (!absl::Base64Unescape(absl::StripAsciiWhitespace(authorization.substr(kBasic.size())),
                            &decoded)) {
    return false;
  }
  const size_t colon = decoded.find(':');
  if (colon == std::string::npos) return false;
  const std::string user = decoded.substr(0, colon);
  const std::string hash = Sha256Hex(absl::string_view(decoded).substr(colon + 1));
  return hash_by_user_.Read([&](const auto& hashes) {
    auto it = hashes.find(user);
    // An unknown user costs the same comparison as a known one.
    const std::string& want = it != hashes.end() ? it->second : hash;
    return ConstantTimeEquals(want, hash) && it != hashes.end();
  });
}

}  // namespace bellwether::server
