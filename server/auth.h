// Bearer-token authentication and scope checks for every RPC.
//
// The token file has one entry per line (blank lines and '#' comments ignored):
//   NAME SHA256_HEX SCOPES [POOLS]
// e.g.
//   campus-meters 5e884898da28047151d0e56f8dc6292773603d0d6aabbdd62a11ef721d1542d8 ingest,read campus,annex
//   sre-dashboard 2bb80d537b1da3e38bd30361aa855686bde0eacd7162fef6a25fe97bf527a25b read
// SHA256_HEX is the SHA-256 of the token (never the token itself: `printf %s TOKEN |
// sha256sum`); SCOPES is a comma-separated subset of read, ingest, admin; POOLS, if given,
// limits the token to those pools (admin tokens apply to all). Clients send
// `authorization: Bearer TOKEN`. The file is re-read on SIGHUP; a bad file keeps the old
// entries and says why.
#ifndef BELLWETHER_SERVER_AUTH_H_
#define BELLWETHER_SERVER_AUTH_H_

#include <memory>
#include <string>
#include <vector>

#include "absl/base/thread_annotations.h"
#include "absl/container/flat_hash_map.h"
#include "absl/container/flat_hash_set.h"
#include "absl/status/status.h"
#include "absl/status/statusor.h"
#include "absl/synchronization/mutex.h"
#include "grpcpp/grpcpp.h"
#include "server/reloadable_entries.h"

namespace bellwether::server {

enum class Scope { kRead, kIngest, kAdmin };

class TokenAuth {
 public:
  struct Entry {
    std::string name;
    bool read = false, ingest = false, admin = false;
    absl::flat_hash_set<std::string> pools;  // empty: every pool
  };

  // Loads `path`; INVALID_ARGUMENT naming the line for a malformed file.
  static absl::StatusOr<std::unique_ptr<TokenAuth>> Load(const std::string& path);
  // Re-reads the file (SIGHUP). On error the old entries stay.
  absl::Status Reload();

  // OK if the call's bearer token has `scope` for `pool` (empty: any pool). Otherwise
  // UNAUTHENTICATED (no or unknown token) or PERMISSION_DENIED (naming what is missing).
  absl::Status Check(const grpc::ServerContextBase& context, Scope scope,
                     const std::string& pool) const;
  // Whether the call's token may see `pool` with `scope` (for filtering lists).
  bool Allows(const grpc::ServerContextBase& context, Scope scope, const std::string& pool) const;

  size_t size() const;

 private:
  explicit TokenAuth(std::string path) : entries_(std::move(path), &TokenAuth::Parse) {}
  static absl::StatusOr<absl::flat_hash_map<std::string, Entry>> Parse(const std::string& path);
  // The entry for the call's token, or an error.
  absl::StatusOr<Entry> Find(const grpc::ServerContextBase& context) const;

  ReloadableEntries<absl::flat_hash_map<std::string, Entry>> entries_;  // by token hash
};

// Lower-case hex SHA-256 of `data`.
std::string Sha256Hex(absl::string_view data);
// Whether `s` is 64 hex digits (a SHA-256 as Sha256Hex or sha256sum print it, any case).
bool IsSha256Hex(absl::string_view s);

}  // namespace bellwether::server

#endif  // BELLWETHER_SERVER_AUTH_H_
