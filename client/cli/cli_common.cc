#include "client/cli/cli_common.h"

#include <cstdlib>
#include <fstream>
#include <iostream>
#include <sstream>

#include "absl/strings/strip.h"

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
      } else if (name == "tls-ca") {
        args->tls_ca = value;
      } else if (name == "tls-cert") {
        args->tls_cert = value;
      } else if (name == "tls-key") {
        args->tls_key = value;
      } else if (name == "tls-server-name") {
        args->tls_server_name = value;
      } else if (name == "token-file") {
        args->token_file = value;
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

namespace {

std::string ReadFileOrWarn(const std::string& path, const char* what) {
  std::ifstream in(path, std::ios::binary);
  if (!in) {
    std::cerr << "bellwether: " << what << " " << path << ": cannot open\n";
    return "";
  }
  std::stringstream b;
  b << in.rdbuf();
  return b.str();
}

}  // namespace

std::unique_ptr<Client> ConnectClient(const Args& args) {
  ClientOptions o;
  if (!args.tls_ca.empty() || !args.tls_cert.empty()) {
    o.tls = true;
    if (!args.tls_ca.empty()) o.tls_root_certs_pem = ReadFileOrWarn(args.tls_ca, "--tls-ca");
    if (!args.tls_cert.empty()) {
      o.tls_client_cert_pem = ReadFileOrWarn(args.tls_cert, "--tls-cert");
      o.tls_client_key_pem = ReadFileOrWarn(args.tls_key, "--tls-key");
    }
    o.tls_server_name = args.tls_server_name;
  }
  if (!args.token_file.empty()) {
    o.bearer_token = std::string(absl::StripAsciiWhitespace(ReadFileOrWarn(args.token_file,
                                                                           "--token-file")));
  } else if (const char* t = std::getenv("BELLWETHER_TOKEN"); t != nullptr) {
    o.bearer_token = t;
  }
  return Client::Connect(args.server, o);
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
