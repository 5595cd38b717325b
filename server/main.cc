// bellwetherd: learns general value functions online from streamed frames and serves
// the answers over gRPC. Predictions are advisory; Bellwether is not a safety system.
#include <signal.h>

#include <cstdio>
#include <filesystem>
#include <iostream>
#include <memory>
#include <string>
#include <thread>
#include <vector>
#include <algorithm>

#include "absl/flags/flag.h"
#include "absl/flags/parse.h"
#include "absl/flags/usage.h"
#include "absl/strings/str_cat.h"
#include "absl/time/clock.h"
#include "grpcpp/ext/proto_server_reflection_plugin.h"
#include "grpcpp/health_check_service_interface.h"
#include "grpcpp/grpcpp.h"
#include "server/bellwether_service.h"
#include "server/pool_registry.h"

ABSL_FLAG(std::string, listen, "127.0.0.1:50151",
          "gRPC address HOST:PORT; port 0 picks a free port (the bound address is printed as "
          "'listening on HOST:PORT')");
ABSL_FLAG(std::string, state_dir, "",
          "Directory for the daemon's state (created if absent). Pools are held in memory in "
          "this version; the directory is reserved for the write-ahead log and checkpoints.");
ABSL_FLAG(double, shutdown_grace_seconds, 5.0,
          "On SIGTERM/SIGINT, seconds in-flight calls get to finish before they are cancelled");

namespace {

// Flags are documented with dashes (--state-dir); Abseil flag names use underscores.
// Rewrites "--a-b[=v]" to "--a_b[=v]" in place, before parsing.
std::vector<std::string> NormalizeFlagNames(int argc, char** argv) {
  std::vector<std::string> args(argv, argv + argc);
  for (size_t i = 1; i < args.size(); ++i) {
    std::string& a = args[i];
    if (a == "--") break;
    if (a.rfind("--", 0) != 0) continue;
    const size_t end = std::min(a.find('='), a.size());
    for (size_t c = 2; c < end; ++c) {
      if (a[c] == '-') a[c] = '_';
    }
  }
  return args;
}

int Main(int argc, char** argv) {
  absl::SetProgramUsageMessage(
      "bellwetherd --listen HOST:PORT --state-dir DIR\n"
      "Learns forward-looking predictions (general value functions) from streamed frames.\n"
      "Predictions are advisory: Bellwether is not a safety system.");
  std::vector<std::string> args = NormalizeFlagNames(argc, argv);
  std::vector<char*> arg_ptrs;
  for (std::string& a : args) arg_ptrs.push_back(a.data());
  absl::ParseCommandLine(static_cast<int>(arg_ptrs.size()), arg_ptrs.data());

  // Block the stop signals in every thread; one thread waits for them.
  sigset_t stop_signals;
  sigemptyset(&stop_signals);
  sigaddset(&stop_signals, SIGINT);
  sigaddset(&stop_signals, SIGTERM);
  pthread_sigmask(SIG_BLOCK, &stop_signals, nullptr);

  const std::string state_dir = absl::GetFlag(FLAGS_state_dir);
  if (!state_dir.empty()) {
    std::error_code ec;
    std::filesystem::create_directories(state_dir, ec);
    if (ec) {
      std::cerr << "bellwetherd: --state-dir " << state_dir << ": " << ec.message() << "\n";
      return 1;
    }
  }

  const std::string listen = absl::GetFlag(FLAGS_listen);
  const auto colon = listen.rfind(':');
  if (colon == std::string::npos) {
    std::cerr << "bellwetherd: --listen " << listen << ": expected HOST:PORT\n";
    return 1;
  }
  const std::string host = listen.substr(0, colon);

  bellwether::server::PoolRegistry registry;
  bellwether::server::BellwetherService service(&registry);
  grpc::EnableDefaultHealthCheckService(true);
  grpc::reflection::InitProtoReflectionServerBuilderPlugin();
  grpc::ServerBuilder builder;
  int port = 0;
  builder.AddListeningPort(listen, grpc::InsecureServerCredentials(), &port);
  builder.RegisterService(&service);
  std::unique_ptr<grpc::Server> server = builder.BuildAndStart();
  if (server == nullptr || port == 0) {
    std::cerr << "bellwetherd: cannot listen on " << listen << "\n";
    return 1;
  }
  server->GetHealthCheckService()->SetServingStatus(true);
  std::cout << "listening on " << host << ":" << port << std::endl;
  std::cerr << "bellwetherd: serving; predictions are advisory, not a safety system\n";

  std::thread waiter([&] {
    int sig = 0;
    sigwait(&stop_signals, &sig);
    std::cerr << "bellwetherd: signal " << sig << ", shutting down\n";
    server->GetHealthCheckService()->SetServingStatus(false);
    server->Shutdown(std::chrono::system_clock::now() +
                     std::chrono::milliseconds(static_cast<int64_t>(
                         absl::GetFlag(FLAGS_shutdown_grace_seconds) * 1000)));
  });
  server->Wait();
  waiter.join();
  std::cerr << "bellwetherd: stopped\n";
  return 0;
}

}  // namespace

int main(int argc, char** argv) { return Main(argc, argv); }
