#include "client/cli/cli_common.h"

#include <iostream>

#include "absl/strings/str_cat.h"
#include "client/bellwether_client.h"

namespace bellwether::cli {

bool ParseArgs(int argc, char** argv, Args* args, std::string* error) {
  std::vector<std::string> rest;
  for (int i = 1; i < argc; ++i) {
    std::string a = argv[i];
    if (a.rfind("--", 0) == 0 && a.size() > 2) {
      std::string name = a.substr(2), value;
      const auto eq = name.find('=');
      if (eq != std::string::npos) {
        value = name.substr(eq + 1);
        name = name.substr(0, eq);
      } else if (name == "help" || name == "summary" || name == "dry-run" || name == "follow") {
        value = "1";
      } else if (i + 1 < argc) {
        value = argv[++i];
      } else {
        *error = absl::StrCat("--", name, " needs a value");
        return false;
      }
      if (name == "server") {
        args->server = value;
      } else {
        args->flags[name] = value;
      }
    } else if (a == "-h") {
      args->flags["help"] = "1";
    } else if (args->command.empty()) {
      args->command = a;
    } else {
      args->positional.push_back(a);
    }
  }
  return true;
}

int UsageError(const std::string& message) {
  std::cerr << "bellwether: " << message << "\n(see bellwether --help)\n";
  return kExitUsage;
}

int ServerError(const absl::Status& status) {
  std::cerr << "bellwether: server error "
            << GrpcCodeName(static_cast<grpc::StatusCode>(status.code())) << ": "
            << status.message() << "\n";
  return kExitServer;
}

bool OnlyFlags(const Args& args, std::initializer_list<const char*> allowed, std::string* bad) {
  for (const auto& [name, value] : args.flags) {
    bool ok = name == "help";
    for (const char* a : allowed) ok |= (name == a);
    if (!ok) {
      *bad = name;
      return false;
    }
  }
  return true;
}

}  // namespace bellwether::cli
