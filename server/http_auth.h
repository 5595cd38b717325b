// HTTP basic authentication for the daemon's HTTP port (metrics and status page).
//
// The file has one entry per line (blank lines and '#' comments ignored):
//   USER SHA256_HEX
// where SHA256_HEX is the SHA-256 of the user's password, never the password itself
// (`printf %s PASSWORD | sha256sum`). The hash is unsalted, so use long random passwords
// (e.g. `openssl rand -hex 24`), as for bearer tokens. A request must carry
// `Authorization: Basic base64(USER:PASSWORD)`; anything else gets 401 with a
// `WWW-Authenticate: Basic` challenge. Basic auth sends the password in every request:
// off loopback, put TLS in front (the HTTP port itself is plain HTTP). The file is re-read
// on SIGHUP; a bad file keeps the old entries and says why.
#ifndef BELLWETHER_SERVER_HTTP_AUTH_H_
#define BELLWETHER_SERVER_HTTP_AUTH_H_

#include <memory>
#include <string>

#include "absl/container/flat_hash_map.h"
#include "absl/status/status.h"
#include "absl/status/statusor.h"
#include "absl/strings/string_view.h"
#include "server/reloadable_entries.h"

namespace bellwether::server {

class HttpBasicAuth {
 public:
  // Loads `path`; INVALID_ARGUMENT naming the line for a malformed file, NOT_FOUND if it
  // cannot be opened.
  static absl::StatusOr<std::unique_ptr<HttpBasicAuth>> Load(const std::string& path);
  // Re-reads the file (SIGHUP). On error the old entries stay.
  absl::Status Reload();

  // Whether `authorization` (the request's Authorization header value, possibly empty)
  // names a known user with the right password. Thread-safe.
  bool Allows(absl::string_view authorization) const;

  size_t size() const;

 private:
  explicit HttpBasicAuth(std::string path)
      : hash_by_user_(std::move(path), &HttpBasicAuth::Parse) {}
  static absl::StatusOr<absl::flat_hash_map<std::string, std::string>> Parse(
      const std::string& path);

  ReloadableEntries<absl::flat_hash_map<std::string, std::string>> hash_by_user_;
};

}  // namespace bellwether::server

#endif  // BELLWETHER_SERVER_HTTP_AUTH_H_
