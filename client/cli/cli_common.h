// Shared pieces of the `bellwether` command: arguments, exit codes, error reporting.
// Each command is `int Name(const Args&)` returning an exit code (commands.h).
#ifndef BELLWETHER_CLIENT_CLI_CLI_COMMON_H_
#define BELLWETHER_CLIENT_CLI_CLI_COMMON_H_

#include <initializer_list>
#include <map>
#include <memory>
#include <string>
#include <vector>

#include "absl/status/status.h"
#include "client/bellwether_client.h"

namespace bellwether::cli {

// Exit codes (documented in --help and the README).
inline constexpr int kExitOk = 0;
inline constexpr int kExitUsage = 1;
inline constexpr int kExitServer = 2;
inline constexpr int kExitPartial = 3;

inline constexpr char kCaution[] =
    "Predictions are advisory. Bellwether is not a safety system: building-control and\n"
    "vehicle-charging decisions follow local codes and licensed practice.\n";

struct Args {
  std::string server = "127.0.0.1:50151";
  // Global connection options: --tls-ca, --tls-cert, --tls-key, --tls-server-name, and
  // --token-file (a file holding the bearer token; or the BELLWETHER_TOKEN variable).
  std::string tls_ca, tls_cert, tls_key, tls_server_name, token_file;
  std::string command;
  std::map<std::string, std::string> flags;
  std::vector<std::string> positional;

  // The flag's value, or `fallback` when absent.
  std::string Flag(const std::string& name, const std::string& fallback = "") const {
    auto it = flags.find(name);
    return it == flags.end() ? fallback : it->second;
  }
  bool Has(const std::string& name) const { return flags.count(name) > 0; }
};

// Parses "--name value" and "--name=value" pairs; everything else is positional.
// Valueless flags: --help, --summary, --dry-run, --follow.
bool ParseArgs(int argc, char** argv, Args* args, std::string* error);

// A client for `args.server` with the global TLS and token options. A token or TLS file
// that cannot be read is reported on stderr and `*error` is set (exit kExitUsage).
std::unique_ptr<Client> ConnectClient(const Args& args);

// Prints "bellwether: MESSAGE (see bellwether --help)" and returns kExitUsage.
int UsageError(const std::string& message);
// Prints "bellwether: server error CODE_NAME: message" and returns kExitServer.
int ServerError(const absl::Status& status);
// Checks that only the flags in `allowed` (and --help) were given; `bad` names another.
bool OnlyFlags(const Args& args, std::initializer_list<const char*> allowed, std::string* bad);

}  // namespace bellwether::cli

#endif  // BELLWETHER_CLIENT_CLI_CLI_COMMON_H_
