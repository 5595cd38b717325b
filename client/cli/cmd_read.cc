// Read commands of `bellwether`: watch, progress, health, and the --output json mode the
// read commands share. Predictions are advisory; Bellwether is not a safety system.
#include <unistd.h>

#include <algorithm>
#include <atomic>
#include <chrono>
#include <csignal>
#include <fstream>
#include <sstream>
#include <cstdlib>
#include <iostream>
#include <string>
#include <thread>
#include <vector>

#include "absl/strings/numbers.h"
#include "absl/strings/str_cat.h"
#include "absl/strings/str_format.h"
#include "absl/strings/str_split.h"
#include "absl/time/clock.h"
#include "absl/time/time.h"
#include "client/bellwether_client.h"
#include "client/cli/cli_common.h"
#include "client/cli/commands.h"
#include "google/protobuf/util/json_util.h"
#include "grpcpp/generic/generic_stub.h"
#include "grpcpp/grpcpp.h"

namespace bellwether::cli {

// ---------------------------------------------------------------------------------------
// --output json

int CheckOutput(const Args& args, bool* json) {
  const std::string mode = args.Flag("output", "text");
  if (mode != "text" && mode != "json") {
    return UsageError("--output: expected text or json, got '" + mode + "'");
  }
  *json = mode == "json";
  return kExitOk;
}

void PrintJsonLine(const google::protobuf::Message& message) {
  google::protobuf::util::JsonPrintOptions options;
  options.always_print_primitive_fields = true;  // zeros and empty labels are shown
  std::string text;
  const auto status = google::protobuf::util::MessageToJsonString(message, &text, options);
  if (!status.ok()) {  // only for invalid UTF-8 in a string field
    std::cerr << "bellwether: cannot print as JSON: " << status.message() << "\n";
    return;
  }
  std::cout << text << "\n" << std::flush;
}

namespace {

// ---------------------------------------------------------------------------------------
// Ctrl-C: the handler only sets a flag; a second Ctrl-C ends the process at once.

volatile std::sig_atomic_t g_interrupted = 0;

void OnInterrupt(int) {
  if (g_interrupted) _exit(130);
  g_interrupted = 1;
}

void InstallInterruptHandler() {
  struct sigaction sa = {};
  sa.sa_handler = OnInterrupt;
  sigemptyset(&sa.sa_mask);
  sigaction(SIGINT, &sa, nullptr);
  sigaction(SIGTERM, &sa, nullptr);
}

std::string LocalClock(absl::Time t) {
  return absl::FormatTime("%H:%M:%S", t, absl::LocalTimeZone());
}

std::string AnswerText(const v1::Prediction& q) {
  std::string s = absl::StrFormat("%.4f", q.value());
  if (!q.greedy_action().empty()) absl::StrAppend(&s, " (", q.greedy_action(), ")");
  return s;
}

// "± 12.3" once something was verified, "± ?" before.
std::string BandText(const v1::Prediction& q) {
  if (q.verified().count() == 0) return "+/- ?";
  return absl::StrFormat("+/- %.4f", q.error_band());
}

std::string Label(const v1::Prediction& q) {
  return q.label().empty() ? q.progress().label() : q.label();
}

// ---------------------------------------------------------------------------------------
// watch

constexpr char kWatchHelp[] =
    "usage: bellwether watch --pool P --stream S [--questions A,B] [--interval-ms N]\n"
    "                        [--count N] [--output text|json]\n"
    "\n"
    "Follows a stream's answers as frames arrive. On a terminal the table is redrawn in\n"
    "place: each question's answer with its unit, the +/- band (the verified RMSE; '?' until\n"
    "a prediction has been verified), its progress label, the seq the answer is as of and\n"
    "the local time the update arrived. Otherwise one line per update (with --output json,\n"
    "one StreamPredictions object per line, protobuf JSON mapping).\n"
    "\n"
    "  --questions A,B   only these questions, in this order (default: all)\n"
    "  --interval-ms N   at most one update per N ms, 100..3600000 (default 1000)\n"
    "  --count N         stop after N updates (default: until Ctrl-C)\n"
    "\n"
    "Ctrl-C ends the watch (exit 0). A stream with no frames yet shows up with its first.\n"
    "\n"
    "example:\n"
    "  bellwether watch --pool grid --stream uk --interval-ms 500\n";

void DrawWatchTable(const v1::StreamPredictions& p, absl::Time at, uint64_t updates) {
  std::string out = "\033[H\033[2J";  // home, clear screen
  absl::StrAppend(&out,
                  absl::StrFormat("bellwether watch   pool %s   stream %s   update %d at %s\n\n",
                                  p.pool(), p.stream(), updates, LocalClock(at)));
  absl::StrAppend(&out, absl::StrFormat("  %-28s %20s  %-20s %-10s %-10s %10s\n", "question",
                                        "answer", "band", "unit", "progress", "as of seq"));
  absl::StrAppend(&out, "  ", std::string(104, '-'), "\n");
  for (const v1::Prediction& q : p.predictions()) {
    absl::StrAppend(
        &out, absl::StrFormat("  %-28s %20s  %-20s %-10s %-10s %10d\n", q.question(), AnswerText(q),
                              BandText(q), q.unit(), Label(q), q.as_of_seq()));
  }
  absl::StrAppend(&out, "\n  Ctrl-C stops.  ", "Advisory only: not a safety system.\n");
  std::cout << out << std::flush;
}

void PrintWatchLine(const v1::StreamPredictions& p, absl::Time at) {
  std::string line =
      absl::StrCat(absl::FormatTime("%Y-%m-%dT%H:%M:%S%Ez", at, absl::LocalTimeZone()), "  ",
                   p.pool(), "/", p.stream(), "  seq ", p.as_of_seq());
  for (const v1::Prediction& q : p.predictions()) {
    absl::StrAppend(&line, "  |  ", q.question(), " ", AnswerText(q), " ", q.unit(),
                    q.unit().empty() ? "" : " ", BandText(q), " ", Label(q));
  }
  std::cout << line << "\n" << std::flush;
}

}  // namespace

int Watch(const Args& args) {
  if (args.Has("help")) {
    std::cout << kWatchHelp;
    return kExitOk;
  }
  if (!args.Has("pool") || !args.Has("stream") || !args.positional.empty()) {
    return UsageError("watch: expected --pool P --stream S");
  }
  bool json = false;
  if (int code = CheckOutput(args, &json); code != kExitOk) return code;
  v1::WatchRequest request;
  request.set_pool(args.Flag("pool"));
  request.set_stream(args.Flag("stream"));
  if (args.Has("questions")) {
    for (absl::string_view q : absl::StrSplit(args.Flag("questions"), ',', absl::SkipEmpty())) {
      request.add_questions(std::string(q));
    }
    if (request.questions_size() == 0) return UsageError("--questions: expected names A,B");
  }
  if (args.Has("interval-ms")) {
    uint32_t ms = 0;
    if (!absl::SimpleAtoi(args.Flag("interval-ms"), &ms) || ms < 100 || ms > 3'600'000) {
      return UsageError("--interval-ms: expected milliseconds in 100..3600000");
    }
    request.set_min_interval_ms(ms);
  }
  uint64_t count = 0;  // 0: until Ctrl-C
  if (args.Has("count")) {
    if (!absl::SimpleAtoi(args.Flag("count"), &count) || count < 1) {
      return UsageError("--count: expected a positive number of updates");
    }
  }
  const bool table = !json && isatty(STDOUT_FILENO) == 1;

  InstallInterruptHandler();
  auto client = ConnectClient(args);
  auto session = client->Watch(request);
  if (!session.ok()) return ServerError(session.status());
  WatchSession* watch = session->get();
  // The handler cannot cancel a call itself: this thread notices the flag and does.
  std::atomic<bool> done{false};
  std::thread canceller([&] {
    while (!done.load()) {
      if (g_interrupted) {
        watch->Cancel();
        return;
      }
      std::this_thread::sleep_for(std::chrono::milliseconds(50));
    }
  });
  uint64_t updates = 0;
  v1::StreamPredictions p;
  while ((count == 0 || updates < count) && watch->Next(&p)) {
    ++updates;
    const absl::Time now = absl::Now();
    if (json) {
      PrintJsonLine(p);
    } else if (table) {
      DrawWatchTable(p, now, updates);
    } else {
      PrintWatchLine(p, now);
    }
  }
  const bool by_count = count > 0 && updates >= count;
  if (by_count) watch->Cancel();
  done = true;
  canceller.join();
  const absl::Status status = watch->Finish();
  if (by_count || g_interrupted) return kExitOk;
  if (!status.ok()) return ServerError(status);
  // The daemon ended the watch without an error status (it should not).
  std::cerr << "bellwether: the daemon ended the watch after " << updates << " updates\n";
  return kExitServer;
}

// ---------------------------------------------------------------------------------------
// progress

namespace {

constexpr char kProgressHelp[] =
    "usage: bellwether progress --pool P --stream S [--output text|json]\n"
    "\n"
    "How each question of a stream is learning: updates, TD-error mean and RMS, RUPEE and\n"
    "UDE, weight change per update, step sizes, the progress label, and the verified error\n"
    "(count, RMSE, bias, NRMSE), with a small chart of the verified RMSE over the recent\n"
    "progress samples when the daemon keeps history for the stream (the first\n"
    "--history-streams streams of each pool). --output json prints the ProgressResponse\n"
    "(protobuf JSON mapping) on one line.\n"
    "\n"
    "example:\n"
    "  bellwether progress --pool grid --stream uk\n";

bool Utf8Terminal() {
  for (const char* name : {"LC_ALL", "LC_CTYPE", "LANG"}) {
    const char* v = std::getenv(name);
    if (v != nullptr && *v != '\0') {
      const std::string s(v);
      return s.find("UTF-8") != std::string::npos || s.find("utf8") != std::string::npos ||
             s.find("utf-8") != std::string::npos || s.find("UTF8") != std::string::npos;
    }
  }
  return false;
}

// A one-line chart of `values` (oldest first), at most `width` characters: each
// character is the mean of its share of the values, scaled between their min and max.
std::string Sparkline(const std::vector<double>& values, size_t width, bool utf8) {
  static const char* const kBlocks[] = {"\u2581", "\u2582", "\u2583", "\u2584",
                                        "\u2585", "\u2586", "\u2587", "\u2588"};
  static const char kAscii[] = "_.-~=+*#";
  if (values.empty() || width == 0) return "";
  const size_t n = std::min(width, values.size());
  std::vector<double> cells(n, 0.0);
  for (size_t c = 0; c < n; ++c) {
    const size_t begin = c * values.size() / n, end = (c + 1) * values.size() / n;
    double sum = 0;
    for (size_t i = begin; i < end; ++i) sum += values[i];
    cells[c] = sum / static_cast<double>(end - begin);
  }
  const auto [lo, hi] = std::minmax_element(cells.begin(), cells.end());
  const double span = *hi - *lo;
  std::string out;
  for (double v : cells) {
    int level = span > 0 ? static_cast<int>((v - *lo) / span * 7.0 + 0.5) : 3;
    level = std::clamp(level, 0, 7);
    if (utf8) {
      out += kBlocks[level];
    } else {
      out += kAscii[level];
    }
  }
  return out;
}

}  // namespace

int Progress(const Args& args) {
  if (args.Has("help")) {
    std::cout << kProgressHelp;
    return kExitOk;
  }
  if (!args.Has("pool") || !args.Has("stream") || !args.positional.empty()) {
    return UsageError("progress: expected --pool P --stream S");
  }
  bool json = false;
  if (int code = CheckOutput(args, &json); code != kExitOk) return code;
  auto client = ConnectClient(args);
  auto r = client->Progress(args.Flag("pool"), args.Flag("stream"));
  if (!r.ok()) return ServerError(r.status());
  if (json) {
    PrintJsonLine(*r);
    return kExitOk;
  }
  const v1::StreamPredictions& p = r->current();
  std::cout << absl::StrFormat("pool %s  stream %s  as of seq %d%s\n", p.pool(), p.stream(),
                               p.as_of_seq(),
                               r->history_kept() ? "" : "  (no history kept for this stream)");
  const bool utf8 = Utf8Terminal();
  for (int i = 0; i < p.predictions_size(); ++i) {
    const v1::Prediction& q = p.predictions(i);
    const v1::QuestionProgress& g = q.progress();
    const v1::VerifiedError& v = q.verified();
    std::cout << absl::StrFormat("\n%s  [%s]\n", q.question(), Label(q));
    std::cout << absl::StrFormat("  answer          %s %s  %s\n", AnswerText(q), q.unit(),
                                 BandText(q));
    std::cout << absl::StrFormat(
        "  updates         %d  (skipped for missing data %d, guard resets %d, frames with "
        "feature gaps %d)\n",
        g.updates(), g.skipped_missing(), g.divergence_resets(), g.feature_gap_frames());
    std::cout << absl::StrFormat("  TD error        mean %.6g  RMS %.6g\n", g.td_error_mean(),
                                 g.td_error_rms());
    std::cout << absl::StrFormat("  RUPEE %.6g   UDE %.6g   weight change %.6g per update\n",
                                 g.rupee(), g.ude(), g.weight_change());
    std::cout << absl::StrFormat("  step size       mean %.6g  min %.6g  max %.6g  scale %.6g\n",
                                 g.step_size_mean(), g.step_size_min(), g.step_size_max(),
                                 g.step_scale());
    if (g.effective_sample_fraction() > 0 && g.effective_sample_fraction() < 1) {
      std::cout << absl::StrFormat("  importance ratios: effective sample fraction %.4f%s\n",
                                   g.effective_sample_fraction(),
                                   g.behavior_estimated() ? " (behavior estimated)" : "");
    }
    std::cout << absl::StrFormat(
        "  verified        %d  RMSE %.6g  bias %.6g  NRMSE %.4f  (%s; truncated %d, "
        "unverifiable %d)\n",
        v.count(), v.rmse(), v.bias(), v.nrmse(), v.mode().empty() ? "-" : v.mode(), v.truncated(),
        v.unverifiable());
    // The history is in the order of `current`, but match by name to be safe.
    const v1::QuestionHistory* h = nullptr;
    for (const v1::QuestionHistory& candidate : r->history()) {
      if (candidate.question() == q.question()) h = &candidate;
    }
    std::vector<double> rmse;
    uint64_t first_seq = 0, last_seq = 0;
    if (h != nullptr) {
      for (const v1::ProgressPoint& pt : h->progress()) {
        if (pt.verified_rmse() <= 0) continue;  // nothing verified yet at that sample
        if (rmse.empty()) first_seq = pt.seq();
        last_seq = pt.seq();
        rmse.push_back(pt.verified_rmse());
      }
    }
    if (rmse.size() >= 2) {
      std::cout << absl::StrFormat(
          "  verified RMSE   %s  %.6g (seq %d) -> %.6g (seq %d), %d samples\n",
          Sparkline(rmse, 40, utf8), rmse.front(), first_seq, rmse.back(), last_seq, rmse.size());
    } else if (r->history_kept()) {
      std::cout << "  verified RMSE   (not enough verified samples yet for a chart)\n";
    }
  }
  std::cout << "\n(advisory; not a safety system)\n";
  return kExitOk;
}

// ---------------------------------------------------------------------------------------
// health: grpc.health.v1.Health/Check over a generic stub. The two messages are tiny, so
// they are written and read as protobuf wire bytes here:
//   HealthCheckRequest  { string service = 1; }
//   HealthCheckResponse { ServingStatus status = 1; }  UNKNOWN 0, SERVING 1, NOT_SERVING 2,
//                                                      SERVICE_UNKNOWN 3

namespace {

constexpr char kHealthHelp[] =
    "usage: bellwether health [--service NAME] [--timeout-ms N] [--output text|json]\n"
    "\n"
    "Asks the daemon's standard gRPC health service (grpc.health.v1.Health/Check) and\n"
    "prints SERVING or NOT_SERVING (the daemon is NOT_SERVING while it loads its state\n"
    "and while it shuts down). Exit 0 if SERVING, else 2 (also when the daemon cannot be\n"
    "reached within the timeout, default 5000 ms). --output json prints the\n"
    "HealthCheckResponse, e.g. {\"status\":\"SERVING\"}.\n"
    "\n"
    "examples:\n"
    "  bellwether --server 127.0.0.1:50151 health\n"
    "  until bellwether health >/dev/null 2>&1; do sleep 1; done   # wait for ready\n";

void AppendVarint(uint64_t v, std::string* out) {
  while (v >= 0x80) {
    out->push_back(static_cast<char>((v & 0x7f) | 0x80));
    v >>= 7;
  }
  out->push_back(static_cast<char>(v));
}

bool ReadVarint(const std::string& in, size_t* pos, uint64_t* v) {
  *v = 0;
  for (int shift = 0; shift < 64 && *pos < in.size(); shift += 7) {
    const auto byte = static_cast<unsigned char>(in[(*pos)++]);
    *v |= static_cast<uint64_t>(byte & 0x7f) << shift;
    if ((byte & 0x80) == 0) return true;
  }
  return false;
}

// The `status` field of a HealthCheckResponse (0 when absent); false if malformed.
bool ParseHealthStatus(const std::string& wire, uint64_t* status) {
  *status = 0;
  size_t pos = 0;
  while (pos < wire.size()) {
    uint64_t key = 0;
    if (!ReadVarint(wire, &pos, &key)) return false;
    const uint64_t field = key >> 3, type = key & 7;
    uint64_t value = 0;
    switch (type) {
      case 0:  // varint
        if (!ReadVarint(wire, &pos, &value)) return false;
        if (field == 1) *status = value;
        break;
      case 1:  // 64-bit
        pos += 8;
        break;
      case 2:  // length-delimited
        if (!ReadVarint(wire, &pos, &value) || value > wire.size() - std::min(pos, wire.size())) {
          return false;
        }
        pos += value;
        break;
      case 5:  // 32-bit
        pos += 4;
        break;
      default:
        return false;
    }
    if (pos > wire.size()) return false;
  }
  return true;
}

const char* ServingStatusName(uint64_t status) {
  switch (status) {
    case 0:
      return "UNKNOWN";
    case 1:
      return "SERVING";
    case 2:
      return "NOT_SERVING";
    case 3:
      return "SERVICE_UNKNOWN";
    default:
      return "UNRECOGNIZED";
  }
}

}  // namespace

int Health(const Args& args) {
  if (args.Has("help")) {
    std::cout << kHealthHelp;
    return kExitOk;
  }
  if (!args.positional.empty()) return UsageError("health: takes no arguments");
  bool json = false;
  if (int code = CheckOutput(args, &json); code != kExitOk) return code;
  int timeout_ms = 5000;
  if (args.Has("timeout-ms")) {
    if (!absl::SimpleAtoi(args.Flag("timeout-ms"), &timeout_ms) || timeout_ms < 1 ||
        timeout_ms > 600'000) {
      return UsageError("--timeout-ms: expected milliseconds in 1..600000");
    }
  }
  std::string request;
  if (const std::string service = args.Flag("service"); !service.empty()) {
    request.push_back(0x0a);  // field 1, length-delimited
    AppendVarint(service.size(), &request);
    request += service;
  }
  std::shared_ptr<grpc::ChannelCredentials> credentials = grpc::InsecureChannelCredentials();
  if (!args.tls_ca.empty()) {
    std::ifstream in(args.tls_ca, std::ios::binary);
    std::stringstream pem;
    pem << in.rdbuf();
    grpc::SslCredentialsOptions ssl;
    ssl.pem_root_certs = pem.str();
    credentials = grpc::SslCredentials(ssl);
  }
  grpc::ChannelArguments channel_args;
  if (!args.tls_server_name.empty()) channel_args.SetSslTargetNameOverride(args.tls_server_name);
  auto channel = grpc::CreateCustomChannel(args.server, credentials, channel_args);
  grpc::GenericStub stub(channel);
  grpc::ClientContext context;
  context.set_deadline(std::chrono::system_clock::now() + std::chrono::milliseconds(timeout_ms));
  // Fail fast: a refused connection is UNAVAILABLE at once. (A daemon that is starting
  // up has its port bound already and answers NOT_SERVING.)
  grpc::Slice slice(request);
  grpc::ByteBuffer request_buffer(&slice, 1);
  grpc::CompletionQueue cq;
  auto call = stub.PrepareUnaryCall(&context, "/grpc.health.v1.Health/Check", request_buffer, &cq);
  call->StartCall();
  grpc::ByteBuffer response_buffer;
  grpc::Status status;
  call->Finish(&response_buffer, &status, reinterpret_cast<void*>(1));
  void* tag = nullptr;
  bool ok = false;
  const bool got = cq.Next(&tag, &ok);
  cq.Shutdown();
  while (cq.Next(&tag, &ok)) {
  }
  if (!got) return ServerError(absl::InternalError("health check: completion queue closed"));
  if (!status.ok()) {
    if (status.error_code() == grpc::StatusCode::DEADLINE_EXCEEDED) {
      return ServerError(
          absl::DeadlineExceededError(absl::StrCat("no answer from ", args.server, " within ",
                                                   timeout_ms, " ms (is bellwetherd running?)")));
    }
    return ServerError(FromGrpc(status));
  }
  std::vector<grpc::Slice> slices;
  std::string wire;
  if (response_buffer.Dump(&slices).ok()) {
    for (const grpc::Slice& s : slices) {
      wire.append(reinterpret_cast<const char*>(s.begin()), s.size());
    }
  }
  uint64_t serving = 0;
  if (!ParseHealthStatus(wire, &serving)) {
    return ServerError(absl::InternalError("health check: malformed HealthCheckResponse"));
  }
  if (json) {
    std::cout << "{\"status\":\"" << ServingStatusName(serving) << "\"}\n";
  } else {
    std::cout << ServingStatusName(serving) << "\n";
  }
  return serving == 1 ? kExitOk : kExitServer;
}

}  // namespace bellwether::cli
