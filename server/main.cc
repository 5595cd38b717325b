// bellwetherd: learns general value functions online from streamed frames and serves
// the answers over gRPC. Predictions are advisory; Bellwether is not a safety system.
#include <signal.h>

#include <algorithm>
#include <cstdint>
#include <cstdio>
#include <utility>
#include <filesystem>
#include <iostream>
#include <memory>
#include <string>
#include <thread>
#include <vector>

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
#include "server/status_http.h"
#include "server/http_server.h"
#include "server/daemon_metrics.h"

ABSL_FLAG(std::string, listen, "127.0.0.1:50151",
          "gRPC address HOST:PORT; port 0 picks a free port (the bound address is printed as "
          "'listening on HOST:PORT')");
ABSL_FLAG(std::string, state_dir, "",
          "Directory for the daemon's state (created if absent). Pools are held in memory in "
          "this version; the directory is reserved for the write-ahead log and checkpoints.");
ABSL_FLAG(double, shutdown_grace_seconds, 5.0,
          "On SIGTERM/SIGINT, seconds in-flight calls get to finish before they are cancelled");
ABSL_FLAG(std::string, http, "",
          "HTTP address HOST:PORT for /metrics (Prometheus) and the status page at /; port 0 "
          "picks a free port (printed as 'http on HOST:PORT'); empty = no HTTP");
ABSL_FLAG(int32_t, queue_batches, 64,
          "Frame batches each pool's writer queue holds; a full queue answers ingest with "
          "RESOURCE_EXHAUSTED");
ABSL_FLAG(int32_t, history_streams, 16,
          "Streams per pool that keep a history (recent verified predictions and progress "
          "samples) for the status page and the Progress RPC: the first ones to send frames");
ABSL_FLAG(int32_t, history_points, 360, "Points per question in each history ring");
ABSL_FLAG(int32_t, metrics_max_questions, 200,
          "Per-question metric series for at most this many (pool, question) pairs; beyond "
          "it, pool-level aggregates only (bounds label cardinality)");

namespace {
constexpr char kVersion[] = "0.5.0";
}  // namespace

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

  for (const auto& [name, value] :
       {std::pair{"--queue-batches", absl::GetFlag(FLAGS_queue_batches)},
        std::pair{"--history-streams", absl::GetFlag(FLAGS_history_streams)},
        std::pair{"--history-points", absl::GetFlag(FLAGS_history_points)},
        std::pair{"--metrics-max-questions", absl::GetFlag(FLAGS_metrics_max_questions)}}) {
    if (value < 0 || (value == 0 && std::string(name) == "--queue-batches")) {
      std::cerr << "bellwetherd: " << name << " " << value << ": must be "
                << (std::string(name) == "--queue-batches" ? "positive" : "non-negative")
                << "\n";
      return 1;
    }
  }
  namespace bws = bellwether::server;
  bws::DaemonMetrics metrics(kVersion,
                             static_cast<size_t>(absl::GetFlag(FLAGS_metrics_max_questions)));
  bws::PoolWorker::Options worker_options;
  worker_options.queue_capacity = static_cast<size_t>(absl::GetFlag(FLAGS_queue_batches));
  worker_options.history_streams = static_cast<size_t>(absl::GetFlag(FLAGS_history_streams));
  worker_options.history_points = static_cast<size_t>(absl::GetFlag(FLAGS_history_points));
  bws::PoolRegistry registry(&metrics, worker_options);
  metrics.SetPoolSource(&registry);
  bws::BellwetherService service(&registry, &metrics, bws::BellwetherService::Options());
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
  std::cout << "listening on " << host << ":" << port << std::endl;
  std::unique_ptr<bws::HttpServer> http;
  if (const std::string http_addr = absl::GetFlag(FLAGS_http); !http_addr.empty()) {
    auto started = bws::HttpServer::Start(
        http_addr, bws::StatusRoutes(&registry, &service, &metrics, kVersion));
    if (!started.ok()) {
      std::cerr << "bellwetherd: " << started.status().message() << "\n";
      server->Shutdown();
      return 1;
    }
    http = *std::move(started);
    std::cout << "http on " << http_addr.substr(0, http_addr.rfind(':')) << ":" << http->port()
              << std::endl;
  }
  // Loaded and ready (pools are in memory; nothing to load yet).
  server->GetHealthCheckService()->SetServingStatus(true);
  std::cerr << "bellwetherd: serving; predictions are advisory, not a safety system\n";

  std::thread waiter([&] {
    int sig = 0;
    sigwait(&stop_signals, &sig);
    std::cerr << "bellwetherd: signal " << sig << ", shutting down\n";
    // Drain: health NOT_SERVING, new calls UNAVAILABLE, open ingest calls end once their
    // queued batches are applied; then stop with the rest of the grace period.
    const absl::Time deadline =
        absl::Now() + absl::Seconds(absl::GetFlag(FLAGS_shutdown_grace_seconds));
    server->GetHealthCheckService()->SetServingStatus(false);
    service.StartDraining();
    if (!service.WaitForStreamsToEnd(deadline)) {
      std::cerr << "bellwetherd: streams still open at the grace deadline; cancelling them\n";
    }
    server->Shutdown(absl::ToChronoTime(deadline));
  });
  server->Wait();
  waiter.join();
  http.reset();
  std::cerr << "bellwetherd: stopped\n";
  return 0;
}

}  // namespace

int main(int argc, char** argv) { return Main(argc, argv); }
