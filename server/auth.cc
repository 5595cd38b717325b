#include "server/auth.h"

#include <openssl/sha.h>

#include <fstream>
#include <utility>

#include "absl/strings/ascii.h"
#include "absl/strings/str_cat.h"
#include "absl/strings/str_split.h"

namespace bellwether::server {
namespace {

const char* ScopeName(Scope s) {
  switch (s) {
    case Scope::kRead: return "read";
    case Scope::kIngest: return "ingest";
    case Scope::kAdmin: return "admin";
  }
  return "?";
}

}  // namespace

bool IsSha256Hex(absl::string_view s) {
  if (s.size() != 64) return false;
  for (char c : s) {
    if (!absl::ascii_isxdigit(static_cast<unsigned char>(c))) return false;
  }
  return true;
}

std::string Sha256Hex(absl::string_view data) {
  unsigned char digest[SHA256_DIGEST_LENGTH];
  SHA256(reinterpret_cast<const unsigned char*>(data.data()), data.size(), digest);
  static constexpr char kHex[] = "0123456789abcdef";
  std::string out;
  for (unsigned char b : digest) {
    out.push_back(kHex[b >> 4]);
    out.push_back(kHex[b & 15]);
  }
  return out;
}

absl::StatusOr<absl::flat_hash_map<std::string, TokenAuth::Entry>> TokenAuth::Parse(
    const std::string& path) {
  std::ifstream in(path);
  if (!in) return absl::NotFoundError(absl::StrCat("--token-file ", path, ": cannot open"));
  absl::flat_hash_map<std::string, Entry> out;
  std::string line;
  int n = 0;
  while (std::getline(in, line)) {
    ++n;
    const absl::string_view text = absl::StripAsciiWhitespace(line);
    if (text.empty() || text[0] == '#') continue;
    std::vector<std::string> f = absl::StrSplit(text, absl::ByAnyChar(" \t"), absl::SkipEmpty());
    auto bad = [&](absl::string_view why) {
      return absl::InvalidArgumentError(absl::StrCat("--token-file ", path, " line ", n, ": ", why));
    };
    if (f.size() < 3 || f.size() > 4) return bad("expected NAME SHA256_HEX SCOPES [POOLS]");
    if (!IsSha256Hex(f[1])) return bad("the second field must be a 64-digit hex SHA-256 of the token");
    Entry e;
    e.name = f[0];
    for (absl::string_view s : absl::StrSplit(f[2], ',')) {
      if (s == "read") e.read = true;
      else if (s == "ingest") e.ingest = true;
      else if (s == "admin") e.admin = true;
      else return bad(absl::StrCat("unknown scope '", s, "' (read, ingest, admin)"));
    }
    if (f.size() == 4) {
      for (absl::string_view p : absl::StrSplit(f[3], ',', absl::SkipEmpty())) {
        e.pools.insert(std::string(p));
      }
    }
    const std::string hash = absl::AsciiStrToLower(f[1]);
    if (out.contains(hash)) return bad("the same token hash appears twice");
    out[hash] = std::move(e);
  }
  return out;
}

absl::StatusOr<std::unique_ptr<TokenAuth>> TokenAuth::Load(const std::string& path) {
  std::unique_ptr<TokenAuth> auth(new TokenAuth(path));
  if (absl::Status s = auth->Reload(); !s.ok()) return s;
  return auth;
}

absl::Status TokenAuth::Reload() { return entries_.Reload(); }

size_t TokenAuth::size() const { return entries_.size(); }

absl::StatusOr<TokenAuth::Entry> TokenAuth::Find(const grpc::ServerContextBase& context) const {
  const auto& md = context.client_metadata();
  auto it = md.find("authorization");
  if (it == md.end()) {
    return absl::UnauthenticatedError(
        "no credentials: send the metadata 'authorization: Bearer TOKEN'");
  }
  const absl::string_view value(it->second.data(), it->second.size());
  constexpr absl::string_view kBearer = "Bearer ";
  if (value.substr(0, kBearer.size()) != kBearer) {
    return absl::UnauthenticatedError("authorization: expected 'Bearer TOKEN'");
  }
  const std::string hash = Sha256Hex(value.substr(kBearer.size()));
  return entries_.Read([&](const auto& by_hash) -> absl::StatusOr<Entry> {
    auto e = by_hash.find(hash);
    if (e == by_hash.end()) return absl::UnauthenticatedError("unknown token");
    return e->second;
  });
}

absl::Status TokenAuth::Check(const grpc::ServerContextBase& context, Scope scope,
                              const std::string& pool) const {
  auto e = Find(context);
  if (!e.ok()) return e.status();
  if (e->admin) return absl::OkStatus();
  const bool has = scope == Scope::kRead ? e->read : scope == Scope::kIngest && e->ingest;
  if (!has) {
    return absl::PermissionDeniedError(
        absl::StrCat("token '", e->name, "' lacks the ", ScopeName(scope), " scope"));
  }
  if (!pool.empty() && !e->pools.empty() && !e->pools.contains(pool)) {
    return absl::PermissionDeniedError(
        absl::StrCat("token '", e->name, "' is not allowed pool '", pool, "'"));
  }
  return absl::OkStatus();
}

bool TokenAuth::Allows(const grpc::ServerContextBase& context, Scope scope,
                       const std::string& pool) const {
  return Check(context, scope, pool).ok();
}

}  // namespace bellwether::server
