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
#include "server/auth.h"
#include "grpcpp/security/server_credentials.h"
#include "grpcpp/security/tls_certificate_provider.h"
#include "grpcpp/security/tls_credentials_options.h"
#include <fstream>
#include <sstream>
#include "server/checkpointer.h"
#include "server/http_auth.h"
#include "server/state_dir.h"
#include "server/thread_priority.h"
#include "server/wal.h"
#include <atomic>

ABSL_FLAG(std::string, listen, "127.0.0.1:50151",
          "gRPC address HOST:PORT; port 0 picks a free port (the bound address is printed as "
          "'listening on HOST:PORT')");
ABSL_FLAG(std::string, state_dir, "",
          "Directory for the write-ahead log and checkpoints (created if absent). Empty: pools "
          "live in memory only and are lost at exit.");
ABSL_FLAG(std::string, sync, "batch",
          "batch: acknowledge a frame batch once its log record is fdatasync'ed (a crash of the "
          "process or machine loses nothing acknowledged); none: once written to the kernel (a "
          "process crash loses nothing, a power loss can lose the last seconds)");
ABSL_FLAG(double, checkpoint_seconds, 300, "Checkpoint every this many seconds (with --state-dir)");
ABSL_FLAG(int64_t, checkpoint_frames, 1000000,
          "Checkpoint sooner once this many frames were applied since the last one");
ABSL_FLAG(int64_t, testing_wal_fail_after_bytes, 0,
          "Testing only: the log refuses appends (as on a full disk) after this many bytes");
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
ABSL_FLAG(int32_t, writer_threads, 0,
          "Threads per pool applying batches of different streams at once (pools whose streams "
          "learn independently: per-stream, no raw inputs); 0: one per hardware thread, at "
          "least 1, at most 8 (they run at --background-priority, below the RPC threads); 1: a "
          "single writer");
ABSL_FLAG(bellwether::server::BackgroundPriority, background_priority,
          bellwether::server::BackgroundPriority::kIdle,
          "Scheduling of the learning and checkpoint threads: idle (SCHED_IDLE: they use only "
          "CPU time no RPC thread of this daemon's cgroup wants, so Predict is answered at once "
          "on busy cores), low (nice +10: for hosts where other busy processes share the "
          "daemon's cgroup, which would starve idle threads) or normal");
ABSL_FLAG(int32_t, metrics_max_questions, 200,
          "Per-question metric series for at most this many (pool, question) pairs; beyond "
          "it, pool-level aggregates only (bounds label cardinality)");

ABSL_FLAG(std::string, tls_cert, "", "PEM certificate chain: serve gRPC over TLS (with --tls-key)");
ABSL_FLAG(std::string, tls_key, "", "PEM private key for --tls-cert");
ABSL_FLAG(std::string, tls_client_ca, "",
          "PEM CA bundle: require client certificates signed by it (mutual TLS)");
ABSL_FLAG(int32_t, tls_reload_seconds, 60,
          "How often the TLS files are re-read (renewed certificates apply to new "
          "connections; open streams are not dropped)");
ABSL_FLAG(std::string, token_file, "",
          "Bearer tokens (NAME SHA256_HEX SCOPES [POOLS] per line; see README Security); "
          "re-read on SIGHUP. Without it every RPC is allowed, so the daemon only listens on "
          "loopback unless --insecure-open is given");
ABSL_FLAG(int32_t, max_pools, 1000, "Pools the daemon holds at most");
ABSL_FLAG(int32_t, max_streams_per_pool, 100000, "Streams one pool holds at most");
ABSL_FLAG(int32_t, max_pool_mib, 2047,
          "Learned state one pool may hold, MiB (estimated from the spec at apply time and "
          "checked when a stream starts; a checkpoint holds at most 2 GiB)");
ABSL_FLAG(int32_t, max_batch_frames, 10000, "Frames one ingest message may carry");
ABSL_FLAG(int32_t, max_questions_per_pool, 4096, "Questions one pool spec may declare");
ABSL_FLAG(int32_t, max_signals_per_pool, 1024, "Signals one pool spec may declare");
ABSL_FLAG(int32_t, max_feature_table, 1 << 24,
          "Entries a pool's feature table may have (featureTableSize, or the recipe's tiles "
          "when it is 0)");
ABSL_FLAG(int32_t, max_ingest_calls, 4096,
          "Ingest calls open at once across the daemon; past it a new call gets "
          "RESOURCE_EXHAUSTED");
ABSL_FLAG(int32_t, max_stream_frames_per_second, 100000,
          "Frames per second one stream may send, averaged (a token bucket holding one "
          "second's worth); a batch past it is refused with RESOURCE_EXHAUSTED and the "
          "client backs off");
ABSL_FLAG(int32_t, max_message_mib, 64, "Largest gRPC message accepted, MiB");
ABSL_FLAG(std::string, http_auth_file, "",
          "HTTP basic auth for --http (USER SHA256_HEX of the password per line; see README "
          "Security); re-read on SIGHUP. Without it the HTTP port only binds loopback unless "
          "--insecure-open is given");
ABSL_FLAG(bool, insecure_open, false,
          "Allow a non-loopback --listen/--http without a token file (no authentication)");

namespace {
constexpr char kVersion[] = "0.5.0";

bool IsLoopback(const std::string& host) {
  return host == "127.0.0.1" || host == "localhost" || host == "[::1]" || host == "::1" ||
         host.rfind("127.", 0) == 0;
}

std::string ReadAll(const std::string& path) {
  std::ifstream in(path, std::ios::binary);
  std::stringstream b;
  b << in.rdbuf();
  return b.str();
}
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
  sigaddset(&stop_signals, SIGHUP);
  pthread_sigmask(SIG_BLOCK, &stop_signals, nullptr);

  const std::string state_dir = absl::GetFlag(FLAGS_state_dir);
  const std::string sync = absl::GetFlag(FLAGS_sync);
  if (sync != "batch" && sync != "none") {
    std::cerr << "bellwetherd: --sync " << sync << ": expected batch or none\n";
    return 1;
  }
  if (!state_dir.empty()) {
    if (absl::Status s = bellwether::server::PrepareStateDir(state_dir); !s.ok()) {
      std::cerr << "bellwetherd: " << s.message() << "\n";
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
  const std::string http_flag = absl::GetFlag(FLAGS_http);
  const std::string http_host = http_flag.substr(0, http_flag.rfind(':'));
  const bool open = absl::GetFlag(FLAGS_insecure_open);
  const std::string token_file = absl::GetFlag(FLAGS_token_file);
  if (!IsLoopback(host) && token_file.empty() && !open) {
    std::cerr << "bellwetherd: --listen " << listen << " is not loopback and there is no "
              << "--token-file: anyone who can reach it could write and read every pool. Give "
              << "--token-file (and TLS), or --insecure-open to accept that.\n";
    return 1;
  }
  const std::string http_auth_file = absl::GetFlag(FLAGS_http_auth_file);
  if (!http_flag.empty() && !IsLoopback(http_host) && http_auth_file.empty() && !open) {
    std::cerr << "bellwetherd: --http " << http_flag << " is not loopback and there is no "
              << "--http-auth-file: anyone who can reach it could read every pool's "
              << "predictions on the status page. Give --http-auth-file, or --insecure-open "
              << "to accept that.\n";
    return 1;
  }
  std::unique_ptr<bellwether::server::HttpBasicAuth> http_auth;
  if (!http_auth_file.empty()) {
    if (http_flag.empty()) {
      std::cerr << "bellwetherd: --http-auth-file needs --http\n";
      return 1;
    }
    auto loaded = bellwether::server::HttpBasicAuth::Load(http_auth_file);
    if (!loaded.ok()) {
      std::cerr << "bellwetherd: " << loaded.status().message() << "\n";
      return 1;
    }
    http_auth = *std::move(loaded);
    std::cerr << "bellwetherd: " << http_auth->size() << " HTTP users from " << http_auth_file
              << "\n";
  }
  std::unique_ptr<bellwether::server::TokenAuth> auth;
  if (!token_file.empty()) {
    auto loaded = bellwether::server::TokenAuth::Load(token_file);
    if (!loaded.ok()) {
      std::cerr << "bellwetherd: " << loaded.status().message() << "\n";
      return 1;
    }
    auth = *std::move(loaded);
    std::cerr << "bellwetherd: " << auth->size() << " bearer tokens from " << token_file << "\n";
  } else {
    std::cerr << "bellwetherd: no --token-file: every RPC is allowed"
              << (IsLoopback(host) ? " (loopback only)" : " (--insecure-open)") << "\n";
  }
  std::shared_ptr<grpc::ServerCredentials> credentials = grpc::InsecureServerCredentials();
  const std::string tls_cert = absl::GetFlag(FLAGS_tls_cert), tls_key = absl::GetFlag(FLAGS_tls_key);
  const std::string client_ca = absl::GetFlag(FLAGS_tls_client_ca);
  if (tls_cert.empty() != tls_key.empty() || (!client_ca.empty() && tls_cert.empty())) {
    std::cerr << "bellwetherd: TLS needs both --tls-cert and --tls-key (and --tls-client-ca "
                 "needs them too)\n";
    return 1;
  }
  if (!tls_cert.empty()) {
    for (const std::string& f : {tls_cert, tls_key, client_ca}) {
      if (!f.empty() && ReadAll(f).find("-----BEGIN") == std::string::npos) {
        std::cerr << "bellwetherd: " << f << ": not a readable PEM file\n";
        return 1;
      }
    }
    const unsigned reload = static_cast<unsigned>(std::max(1, absl::GetFlag(FLAGS_tls_reload_seconds)));
    auto provider =
        client_ca.empty()
            ? std::make_shared<grpc::experimental::FileWatcherCertificateProvider>(tls_key, tls_cert,
                                                                                  reload)
            : std::make_shared<grpc::experimental::FileWatcherCertificateProvider>(
                  tls_key, tls_cert, client_ca, reload);
    grpc::experimental::TlsServerCredentialsOptions tls(provider);
    tls.watch_identity_key_cert_pairs();
    if (!client_ca.empty()) {
      tls.watch_root_certs();
      tls.set_cert_request_type(GRPC_SSL_REQUEST_AND_REQUIRE_CLIENT_CERTIFICATE_AND_VERIFY);
    } else {
      tls.set_cert_request_type(GRPC_SSL_DONT_REQUEST_CLIENT_CERTIFICATE);
    }
    credentials = grpc::experimental::TlsServerCredentials(tls);
    std::cerr << "bellwetherd: TLS on (" << (client_ca.empty() ? "server certificate" : "mutual")
              << "), files re-read every " << reload << " s\n";
  }

  for (const auto& [name, value] :
       {std::pair{"--queue-batches", absl::GetFlag(FLAGS_queue_batches)},
        std::pair{"--history-streams", absl::GetFlag(FLAGS_history_streams)},
        std::pair{"--history-points", absl::GetFlag(FLAGS_history_points)},
        std::pair{"--writer-threads", absl::GetFlag(FLAGS_writer_threads)},
        std::pair{"--metrics-max-questions", absl::GetFlag(FLAGS_metrics_max_questions)}}) {
    if (value < 0 || (value == 0 && std::string(name) == "--queue-batches")) {
      std::cerr << "bellwetherd: " << name << " " << value << ": must be "
                << (std::string(name) == "--queue-batches" ? "positive" : "non-negative")
                << "\n";
      return 1;
    }
  }
  for (const auto& [name, value] :
       {std::pair{"--max-pools", absl::GetFlag(FLAGS_max_pools)},
        std::pair{"--max-streams-per-pool", absl::GetFlag(FLAGS_max_streams_per_pool)},
        std::pair{"--max-pool-mib", absl::GetFlag(FLAGS_max_pool_mib)},
        std::pair{"--max-batch-frames", absl::GetFlag(FLAGS_max_batch_frames)},
        std::pair{"--max-questions-per-pool", absl::GetFlag(FLAGS_max_questions_per_pool)},
        std::pair{"--max-signals-per-pool", absl::GetFlag(FLAGS_max_signals_per_pool)},
        std::pair{"--max-feature-table", absl::GetFlag(FLAGS_max_feature_table)},
        std::pair{"--max-ingest-calls", absl::GetFlag(FLAGS_max_ingest_calls)},
        std::pair{"--max-stream-frames-per-second",
                  absl::GetFlag(FLAGS_max_stream_frames_per_second)},
        std::pair{"--max-message-mib", absl::GetFlag(FLAGS_max_message_mib)}}) {
    if (value < 1) {
      std::cerr << "bellwetherd: " << name << " " << value << ": must be positive\n";
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
  worker_options.writer_threads =
      absl::GetFlag(FLAGS_writer_threads) > 0
          ? static_cast<size_t>(std::min(absl::GetFlag(FLAGS_writer_threads), 64))
          // The RPC threads need no core of their own: the appliers yield to them.
          : std::clamp<size_t>(std::thread::hardware_concurrency(), 1, 8);
  worker_options.applier_priority = absl::GetFlag(FLAGS_background_priority);
  std::atomic<uint64_t> frames_applied{0};
  worker_options.frames_applied_total = &frames_applied;
  std::unique_ptr<bws::Wal> wal;  // outlives the registry: workers' acks wait on it
  worker_options.max_streams = static_cast<size_t>(absl::GetFlag(FLAGS_max_streams_per_pool));
  worker_options.max_pool_bytes = static_cast<uint64_t>(absl::GetFlag(FLAGS_max_pool_mib)) << 20;
  worker_options.max_stream_frames_per_second =
      static_cast<double>(absl::GetFlag(FLAGS_max_stream_frames_per_second));
  bws::PoolRegistry::Limits limits;
  limits.max_pools = static_cast<size_t>(absl::GetFlag(FLAGS_max_pools));
  limits.max_questions_per_pool = static_cast<size_t>(absl::GetFlag(FLAGS_max_questions_per_pool));
  limits.max_signals_per_pool = static_cast<size_t>(absl::GetFlag(FLAGS_max_signals_per_pool));
  limits.max_feature_table = static_cast<uint64_t>(absl::GetFlag(FLAGS_max_feature_table));
  bws::PoolRegistry registry(&metrics, worker_options, limits);
  metrics.SetPoolSource(&registry);
  bws::BellwetherService::Options service_options;
  service_options.max_batch_frames = absl::GetFlag(FLAGS_max_batch_frames);
  service_options.max_ingest_calls = absl::GetFlag(FLAGS_max_ingest_calls);
  bws::BellwetherService service(&registry, &metrics, service_options);
  service.SetAuth(auth.get());
  grpc::EnableDefaultHealthCheckService(true);
  grpc::reflection::InitProtoReflectionServerBuilderPlugin();
  grpc::ServerBuilder builder;
  int port = 0;
  builder.AddListeningPort(listen, credentials, &port);
  builder.RegisterService(&service);
  builder.SetMaxReceiveMessageSize(absl::GetFlag(FLAGS_max_message_mib) << 20);
  std::unique_ptr<grpc::Server> server = builder.BuildAndStart();
  if (server == nullptr || port == 0) {
    std::cerr << "bellwetherd: cannot listen on " << listen << "\n";
    return 1;
  }
  std::cout << "listening on " << host << ":" << port << std::endl;
  std::unique_ptr<bws::HttpServer> http;
  if (const std::string http_addr = absl::GetFlag(FLAGS_http); !http_addr.empty()) {
    bws::HttpServer::Authorizer authorize;
    if (http_auth != nullptr) {
      authorize = [&http_auth, &metrics](const std::string& authorization) {
        const bool ok = http_auth->Allows(authorization);
        if (!ok) metrics.AuthFailed("http_unauthorized");
        return ok;
      };
    }
    auto started = bws::HttpServer::Start(
        http_addr, bws::StatusRoutes(&registry, &service, &metrics, kVersion),
        std::move(authorize));
    if (!started.ok()) {
      std::cerr << "bellwetherd: " << started.status().message() << "\n";
      server->Shutdown();
      return 1;
    }
    http = *std::move(started);
    std::cout << "http on " << http_addr.substr(0, http_addr.rfind(':')) << ":" << http->port()
              << std::endl;
  }
  // Load the state (health NOT_SERVING and every call UNAVAILABLE meanwhile).
  std::unique_ptr<bws::Checkpointer> checkpointer;
  if (!state_dir.empty()) {
    server->GetHealthCheckService()->SetServingStatus(false);
    service.SetLoading(true);
    const auto start = absl::Now();
    auto recovered = bws::Recover(state_dir);
    if (!recovered.ok()) {
      std::cerr << "bellwetherd: cannot load --state-dir " << state_dir << ": "
                << recovered.status().message() << "\n";
      server->Shutdown();
      return 1;
    }
    for (const std::string& w : recovered->warnings) {
      std::cerr << "bellwetherd: WARNING: " << w << "\n";
    }
    bws::Wal::Options wal_options;
    wal_options.dir = state_dir;
    wal_options.sync = sync == "none" ? bws::Wal::Sync::kNone : bws::Wal::Sync::kBatch;
    wal_options.fail_after_bytes =
        static_cast<uint64_t>(std::max<int64_t>(0, absl::GetFlag(FLAGS_testing_wal_fail_after_bytes)));
    auto opened = bws::Wal::Open(wal_options, recovered->next_lsn);
    if (!opened.ok()) {
      std::cerr << "bellwetherd: " << opened.status().message() << "\n";
      server->Shutdown();
      return 1;
    }
    wal = *std::move(opened);
    registry.SetWal(wal.get());
    const size_t pools = recovered->pools.size();
    registry.Adopt(std::move(recovered->pools));
    const double seconds = absl::ToDoubleSeconds(absl::Now() - start);
    metrics.SetRecovery(seconds, static_cast<double>(recovered->records_replayed),
                        static_cast<double>(recovered->frames_replayed));
    std::cerr << "bellwetherd: loaded " << pools << " pools ("
              << (recovered->checkpoint_file.empty() ? std::string("no checkpoint")
                                                     : recovered->checkpoint_file)
              << ", " << recovered->records_replayed << " log records replayed) in " << seconds
              << " s\n";
    bws::Checkpointer::Options copt;
    copt.dir = state_dir;
    copt.interval = absl::Seconds(absl::GetFlag(FLAGS_checkpoint_seconds));
    copt.frames = static_cast<uint64_t>(std::max<int64_t>(1, absl::GetFlag(FLAGS_checkpoint_frames)));
    copt.priority = absl::GetFlag(FLAGS_background_priority);
    checkpointer = std::make_unique<bws::Checkpointer>(&registry, wal.get(), &frames_applied, copt,
                                                       recovered->checkpoint_start_lsn);
    service.SetCheckpointer(checkpointer.get());
    service.SetLoading(false);
  }
  server->GetHealthCheckService()->SetServingStatus(true);
  std::cout << "ready" << std::endl;
  std::cerr << "bellwetherd: serving; predictions are advisory, not a safety system\n";

  std::thread waiter([&] {
    int sig = 0;
    while (true) {
      sigwait(&stop_signals, &sig);
      if (sig != SIGHUP) break;
      // SIGHUP: re-read the token and HTTP user files (TLS files are re-read on their own
      // schedule).
      if (http_auth != nullptr) {
        const absl::Status s = http_auth->Reload();
        std::cerr << "bellwetherd: SIGHUP: "
                  << (s.ok() ? absl::StrCat("reloaded ", http_auth->size(), " HTTP users")
                             : absl::StrCat("kept the old HTTP users: ", s.message()))
                  << "\n";
      }
      if (auth != nullptr) {
        const absl::Status s = auth->Reload();
        std::cerr << "bellwetherd: SIGHUP: "
                  << (s.ok() ? absl::StrCat("reloaded ", auth->size(), " tokens")
                             : absl::StrCat("kept the old tokens: ", s.message()))
                  << "\n";
      } else {
        std::cerr << "bellwetherd: SIGHUP: no --token-file to reload\n";
      }
    }
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
  if (checkpointer != nullptr) {
    // Clean shutdown: a final checkpoint, so the next start replays nothing.
    auto done = checkpointer->CheckpointNow();
    if (!done.ok()) {
      std::cerr << "bellwetherd: final checkpoint failed (the log still has everything): "
                << done.status().message() << "\n";
    }
    checkpointer.reset();
  }
  std::cerr << "bellwetherd: stopped\n";
  return 0;
}

}  // namespace

int main(int argc, char** argv) { return Main(argc, argv); }
