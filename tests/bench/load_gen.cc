// End-to-end load generator: N producer streams over real gRPC into one bellwetherd, a
// concurrent Predict reader, and the daemon's resident memory. Run by hand
// (tests/bench/load_gen.sh runs the standard set); nothing here asserts on time.
//
// The pool is tests/bench/load_gen_pool.json: an invented campus of metered buildings
// (5-minute frames of outdoor temperature, occupancy, power and energy), a tile-coding
// recipe hashed into a 65,536-entry table (25 active features a frame) and 64 questions
// (8 cumulants x 4 horizons x 2 step rules, 16 blocks of 4). The frames are synthetic
// (seeded; no real site or data): each stream is one building, whose week of frames is
// computed once and then cycled with increasing seq and timestamps, so that producing a
// frame costs the client almost nothing but its serialization.
//
// What it measures (every run is bounded by --warmup-seconds + --seconds, plus a 120 s
// watchdog that kills the daemon and exits):
//   - frames/s applied, from the acknowledgements' applied_seq over the measured window,
//     cross-checked with the daemon's /metrics counter bellwether_frames_applied_total
//     (scraped at the window's start and end);
//   - ingest-to-acknowledge latency: from the start of IngestSession::Send (the batch is
//     handed to gRPC) to its acknowledgement, p50/p99/p99.9; with --rate also from the
//     batch's scheduled send time (includes waiting behind the stream's previous batch);
//   - Predict latency p50/p99/p99.9 from a reader in a forked child process with its own
//     gRPC connection (as a separate back end would be), paced at --predict-rate calls/s
//     round-robin over the streams;
//   - the daemon's CPU time (utime + stime from /proc/PID/stat) over the window and its
//     resident memory (VmRSS from /proc/PID/status) sampled every --sample-seconds;
//   - --soak: the RSS samples after --soak-ignore-seconds of the window (the warm-up of
//     allocator arenas and of the verifier rings, which fill within ~2,000 frames a
//     stream) give first, last, min, max and the drift (last - first) / first in percent;
//     a checkpoint (every 300 s or 1,000,000 frames by default) shows as a transient in
//     max, and can land on the first or last sample, so the drift of the per-minute floor
//     (the lowest sample of the first and of the last minute) is printed too;
//   - --memory: RSS with no pool, a 64-question pool with 0 and S streams, and a
//     128-question pool (the 64 twice) with 0 and S streams, divided out per stream and
//     per question (see MemoryRun), beside the engine's own estimate (EstimateState).
//
// Usage:
//   load_gen [--target HOST:PORT [--daemon-pid PID] [--http HOST:PORT]]
//            [--daemon PATH] [--sync none|batch] [--no-state-dir] [--work-dir DIR]
//            [--daemon-args "ARGS"] [--spec FILE] [--learning per_stream|pooled]
//            [--streams 8] [--threads 0] [--batch 256] [--rate 0] [--seconds 30]
//            [--warmup-seconds 5] [--predict-rate 200] [--sample-seconds 10]
//            [--soak] [--soak-ignore-seconds 60] [--memory] [--memory-streams 4]
//            [--memory-frames 4096] [--seed 7] [--keep-work-dir]
// Prints readable lines and machine-readable "@ key value" lines (for load_gen.sh).
// Client and daemon share the machine's cores: read the figures with the load average
// printed beside them.
#include <arpa/inet.h>
#include <fcntl.h>
#include <netinet/in.h>
#include <signal.h>
#include <sys/prctl.h>
#include <sys/resource.h>
#include <sys/socket.h>
#include <sys/wait.h>
#include <unistd.h>

#include <algorithm>
#include <atomic>
#include <cerrno>
#include <chrono>
#include <cmath>
#include <condition_variable>
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <iostream>
#include <map>
#include <memory>
#include <mutex>
#include <numbers>
#include <random>
#include <sstream>
#include <string>
#include <thread>
#include <vector>

#include "absl/strings/numbers.h"
#include "absl/strings/str_cat.h"
#include "absl/strings/str_format.h"
#include "absl/strings/str_join.h"
#include "absl/strings/str_replace.h"
#include "absl/strings/str_split.h"
#include "absl/time/clock.h"
#include "absl/time/time.h"
#include "client/bellwether_client.h"
#include "core/io/spec_json.h"
#include "core/pool_spec.h"
#include "tests/bench/synthetic_buildings.h"

#ifndef BELLWETHER_SOURCE_DIR
#define BELLWETHER_SOURCE_DIR "."
#endif
#ifndef BELLWETHERD_PATH
#define BELLWETHERD_PATH "bellwetherd"
#endif

namespace bellwether::bench {
namespace {

using SteadyClock = std::chrono::steady_clock;

double SecondsSince(SteadyClock::time_point start) {
  return std::chrono::duration<double>(SteadyClock::now() - start).count();
}

// ---------------------------------------------------------------------------------------
// Options.

struct Options {
  std::string target;  // empty: start a daemon
  int daemon_pid = 0;
  std::string http;  // with --target: the daemon's --http address
  std::string daemon = BELLWETHERD_PATH;
  std::string sync = "none";
  bool state_dir = true;
  std::string work_dir = "/tmp";
  std::string daemon_args;
  std::string spec = BELLWETHER_SOURCE_DIR "/tests/bench/load_gen_pool.json";
  std::string learning;  // empty: as the spec says
  int streams = 8;
  int threads = 0;  // 0: one per stream
  int batch = 256;
  double rate = 0;  // frames/s over all streams; 0: as fast as acknowledged
  int seconds = 30;
  int warmup_seconds = 5;
  double predict_rate = 200;  // Predict calls/s; 0: back to back; < 0: no reader
  int sample_seconds = 10;
  bool soak = false;
  int soak_ignore_seconds = 60;
  bool memory = false;
  int memory_streams = 4;
  int memory_frames = 4096;
  uint64_t seed = 7;
  bool keep_work_dir = false;
};

constexpr char kUsage[] =
    "usage: load_gen [--target HOST:PORT [--daemon-pid PID] [--http HOST:PORT]]\n"
    "                [--daemon PATH] [--sync none|batch] [--no-state-dir] [--work-dir DIR]\n"
    "                [--daemon-args \"ARGS\"] [--spec FILE] [--learning per_stream|pooled]\n"
    "                [--streams 8] [--threads 0] [--batch 256] [--rate 0] [--seconds 30]\n"
    "                [--warmup-seconds 5] [--predict-rate 200] [--sample-seconds 10]\n"
    "                [--soak] [--soak-ignore-seconds 60] [--memory] [--memory-streams 4]\n"
    "                [--memory-frames 4096] [--seed 7] [--keep-work-dir]\n"
    "End-to-end load on bellwetherd over loopback gRPC (invented campus meters, synthetic\n"
    "frames; predictions are advisory, not a safety system). Without --target it starts\n"
    "its own daemon (--listen/--http 127.0.0.1:0, --state-dir under --work-dir) and stops it.\n"
    "  --rate R            frames/s over all streams, paced (0: as fast as acknowledged)\n"
    "  --threads T         producer threads (0: one per stream; each stream has one batch\n"
    "                      in flight, so fewer threads than streams means fewer in flight)\n"
    "  --predict-rate P    Predict calls/s from a reader process (0: back to back; -1: none)\n"
    "  --soak              report RSS drift over the window (needs --rate)\n"
    "  --memory            only measure memory per stream and per question, then exit\n"
    "See tests/bench/load_gen.sh for the standard set.\n";

bool ParseInt(const std::string& name, const std::string& value, int lo, int hi, int* out,
              std::string* error) {
  if (!absl::SimpleAtoi(value, out) || *out < lo || *out > hi) {
    *error =
        absl::StrCat("--", name, ": expected an integer in ", lo, "..", hi, ", got '", value, "'");
    return false;
  }
  return true;
}

bool ParseDouble(const std::string& name, const std::string& value, double lo, double hi,
                 double* out, std::string* error) {
  if (!absl::SimpleAtod(value, out) || !(*out >= lo && *out <= hi)) {
    *error =
        absl::StrCat("--", name, ": expected a number in ", lo, "..", hi, ", got '", value, "'");
    return false;
  }
  return true;
}

bool ParseArgs(int argc, char** argv, Options* o, std::string* error) {
  for (int i = 1; i < argc; ++i) {
    std::string a = argv[i];
    if (a == "-h" || a == "--help") {
      *error = "";
      return false;
    }
    if (a.rfind("--", 0) != 0) {
      *error = absl::StrCat("unexpected argument '", a, "'");
      return false;
    }
    std::string name = a.substr(2), value;
    if (name == "soak") {
      o->soak = true;
      continue;
    }
    if (name == "memory") {
      o->memory = true;
      continue;
    }
    if (name == "no-state-dir") {
      o->state_dir = false;
      continue;
    }
    if (name == "keep-work-dir") {
      o->keep_work_dir = true;
      continue;
    }
    if (const auto eq = name.find('='); eq != std::string::npos) {
      value = name.substr(eq + 1);
      name = name.substr(0, eq);
    } else if (i + 1 < argc) {
      value = argv[++i];
    } else {
      *error = absl::StrCat("--", name, " needs a value");
      return false;
    }
    bool ok = true;
    if (name == "target") {
      o->target = value;
    } else if (name == "daemon-pid") {
      ok = ParseInt(name, value, 1, 1 << 30, &o->daemon_pid, error);
    } else if (name == "http") {
      o->http = value;
    } else if (name == "daemon") {
      o->daemon = value;
    } else if (name == "sync") {
      if (value != "none" && value != "batch") {
        *error = "--sync: expected none or batch";
        return false;
      }
      o->sync = value;
    } else if (name == "work-dir") {
      o->work_dir = value;
    } else if (name == "daemon-args") {
      o->daemon_args = value;
    } else if (name == "spec") {
      o->spec = value;
    } else if (name == "learning") {
      if (value != "per_stream" && value != "pooled") {
        *error = "--learning: expected per_stream or pooled";
        return false;
      }
      o->learning = value;
    } else if (name == "streams") {
      ok = ParseInt(name, value, 1, 1000, &o->streams, error);
    } else if (name == "threads") {
      ok = ParseInt(name, value, 0, 1000, &o->threads, error);
    } else if (name == "batch") {
      ok = ParseInt(name, value, 1, 10000, &o->batch, error);
    } else if (name == "rate") {
      ok = ParseDouble(name, value, 0, 1e8, &o->rate, error);
    } else if (name == "seconds") {
      ok = ParseInt(name, value, 1, 3600, &o->seconds, error);
    } else if (name == "warmup-seconds") {
      ok = ParseInt(name, value, 0, 600, &o->warmup_seconds, error);
    } else if (name == "predict-rate") {
      ok = ParseDouble(name, value, -1, 100000, &o->predict_rate, error);
    } else if (name == "sample-seconds") {
      ok = ParseInt(name, value, 1, 600, &o->sample_seconds, error);
    } else if (name == "soak-ignore-seconds") {
      ok = ParseInt(name, value, 0, 3600, &o->soak_ignore_seconds, error);
    } else if (name == "memory-streams") {
      ok = ParseInt(name, value, 1, 64, &o->memory_streams, error);
    } else if (name == "memory-frames") {
      ok = ParseInt(name, value, 1, 1000000, &o->memory_frames, error);
    } else if (name == "seed") {
      int seed = 0;
      ok = ParseInt(name, value, 0, 1 << 30, &seed, error);
      o->seed = static_cast<uint64_t>(seed);
    } else {
      *error = absl::StrCat("unknown flag --", name);
      return false;
    }
    if (!ok) return false;
  }
  if (o->soak && o->rate <= 0) {
    *error = "--soak needs a steady --rate";
    return false;
  }
  if (o->threads == 0 || o->threads > o->streams) o->threads = o->streams;
  return true;
}

void Result(const std::string& key, double value) {
  std::cout << absl::StrFormat("@ %s %.6g\n", key, value);
}
void ResultText(const std::string& key, const std::string& value) {
  std::cout << "@ " << key << " " << value << "\n";
}

std::string LoadAverage() {
  std::ifstream f("/proc/loadavg");
  std::string one, five, fifteen;
  if (!(f >> one >> five >> fifteen)) return "?";
  return absl::StrCat(one, " ", five, " ", fifteen);
}

// ---------------------------------------------------------------------------------------
// /proc readings.

// VmRSS of `pid` in MiB, or -1.
double RssMib(int pid) {
  std::ifstream in(absl::StrCat("/proc/", pid, "/status"));
  std::string line;
  while (std::getline(in, line)) {
    if (line.rfind("VmRSS:", 0) == 0) {
      std::istringstream s(line.substr(6));
      int64_t kb = 0;
      s >> kb;
      return static_cast<double>(kb) / 1024.0;
    }
  }
  return -1;
}

// utime + stime of `pid` in seconds, or -1.
double CpuSeconds(int pid) {
  std::ifstream in(absl::StrCat("/proc/", pid, "/stat"));
  std::string all((std::istreambuf_iterator<char>(in)), std::istreambuf_iterator<char>());
  const size_t paren = all.rfind(')');
  if (paren == std::string::npos) return -1;
  std::istringstream s(all.substr(paren + 2));
  std::string field;
  // After ")": state(3) ppid(4) ... utime is field 14, stime 15 (1-based over the line).
  for (int k = 3; k <= 13; ++k) s >> field;
  uint64_t utime = 0, stime = 0;
  if (!(s >> utime >> stime)) return -1;
  return static_cast<double>(utime + stime) / static_cast<double>(sysconf(_SC_CLK_TCK));
}

double SelfCpuSeconds() {
  rusage u{};
  getrusage(RUSAGE_SELF, &u);
  return static_cast<double>(u.ru_utime.tv_sec + u.ru_stime.tv_sec) +
         static_cast<double>(u.ru_utime.tv_usec + u.ru_stime.tv_usec) / 1e6;
}

// ---------------------------------------------------------------------------------------
// /metrics: a plain HTTP/1.0 GET over loopback, and the applied-frames counter of a pool.

absl::StatusOr<std::string> HttpGet(const std::string& host_port, const std::string& path) {
  const size_t colon = host_port.rfind(':');
  int port = 0;
  if (colon == std::string::npos || !absl::SimpleAtoi(host_port.substr(colon + 1), &port)) {
    return absl::InvalidArgumentError(absl::StrCat("bad HTTP address '", host_port, "'"));
  }
  sockaddr_in addr{};
  addr.sin_family = AF_INET;
  addr.sin_port = htons(static_cast<uint16_t>(port));
  if (inet_pton(AF_INET, host_port.substr(0, colon).c_str(), &addr.sin_addr) != 1) {
    return absl::InvalidArgumentError(absl::StrCat("bad HTTP host '", host_port, "'"));
  }
  const int fd = socket(AF_INET, SOCK_STREAM | SOCK_CLOEXEC, 0);
  if (fd < 0) return absl::InternalError("socket failed");
  timeval tv{5, 0};
  setsockopt(fd, SOL_SOCKET, SO_RCVTIMEO, &tv, sizeof(tv));
  setsockopt(fd, SOL_SOCKET, SO_SNDTIMEO, &tv, sizeof(tv));
  if (connect(fd, reinterpret_cast<sockaddr*>(&addr), sizeof(addr)) != 0) {
    close(fd);
    return absl::UnavailableError(absl::StrCat("connect ", host_port, ": ", strerror(errno)));
  }
  const std::string request =
      absl::StrCat("GET ", path, " HTTP/1.0\r\nHost: ", host_port, "\r\nConnection: close\r\n\r\n");
  size_t off = 0;
  while (off < request.size()) {
    const ssize_t w = write(fd, request.data() + off, request.size() - off);
    if (w <= 0) {
      close(fd);
      return absl::UnavailableError("write to the HTTP port failed");
    }
    off += static_cast<size_t>(w);
  }
  std::string response;
  char buf[16384];
  while (true) {
    const ssize_t r = read(fd, buf, sizeof(buf));
    if (r < 0 && errno == EINTR) continue;
    if (r <= 0) break;
    response.append(buf, static_cast<size_t>(r));
  }
  close(fd);
  const size_t body = response.find("\r\n\r\n");
  if (response.rfind("HTTP/1.", 0) != 0 || body == std::string::npos ||
      response.find(" 200 ") > response.find("\r\n")) {
    return absl::UnavailableError(
        absl::StrCat("GET ", path, ": unexpected reply '", response.substr(0, 60), "'"));
  }
  return response.substr(body + 4);
}

// The value of `metric{...pool="POOL"...}`, or -1 if absent.
double ScrapeCounter(const std::string& http, const std::string& metric, const std::string& pool) {
  auto text = HttpGet(http, "/metrics");
  if (!text.ok()) return -1;
  const std::string want_pool = absl::StrCat("pool=\"", pool, "\"");
  for (absl::string_view line : absl::StrSplit(*text, '\n')) {
    if (line.substr(0, metric.size() + 1) != absl::StrCat(metric, "{")) continue;
    if (line.find(want_pool) == absl::string_view::npos) continue;
    const size_t space = line.rfind(' ');
    double v = 0;
    if (space != absl::string_view::npos && absl::SimpleAtod(line.substr(space + 1), &v)) return v;
  }
  return -1;
}

// ---------------------------------------------------------------------------------------
// The daemon, when this program starts it: bellwetherd on 127.0.0.1:0 with its stdout and
// stderr in files of the work directory, killed with this process (PR_SET_PDEATHSIG).

class Daemon {
 public:
  static absl::StatusOr<std::unique_ptr<Daemon>> Start(const Options& o, const std::string& dir) {
    std::unique_ptr<Daemon> d(new Daemon());
    d->out_path_ = dir + "/daemon.out";
    d->err_path_ = dir + "/daemon.err";
    std::vector<std::string> args = {o.daemon, "--listen", "127.0.0.1:0", "--http", "127.0.0.1:0"};
    if (o.state_dir) {
      args.insert(args.end(), {"--state-dir", dir + "/state", "--sync", o.sync});
    }
    for (absl::string_view a : absl::StrSplit(o.daemon_args, ' ', absl::SkipEmpty())) {
      args.emplace_back(a);
    }
    d->command_ = absl::StrJoin(args, " ");
    std::cout.flush();
    const pid_t parent = getpid();
    const pid_t pid = fork();
    if (pid < 0) return absl::InternalError("fork failed");
    if (pid == 0) {
      prctl(PR_SET_PDEATHSIG, SIGKILL);
      if (getppid() != parent) _exit(127);
      const int out = open(d->out_path_.c_str(), O_WRONLY | O_CREAT | O_TRUNC, 0644);
      const int err = open(d->err_path_.c_str(), O_WRONLY | O_CREAT | O_TRUNC, 0644);
      if (out < 0 || err < 0) _exit(127);
      dup2(out, 1);
      dup2(err, 2);
      std::vector<char*> argv;
      for (std::string& a : args) argv.push_back(a.data());
      argv.push_back(nullptr);
      execv(argv[0], argv.data());
      _exit(127);
    }
    d->pid_ = pid;
    // Wait for 'ready' (after 'listening on' and 'http on'), up to 60 s.
    const auto deadline = SteadyClock::now() + std::chrono::seconds(60);
    while (SteadyClock::now() < deadline) {
      std::ifstream in(d->out_path_);
      std::string line;
      bool ready = false;
      while (std::getline(in, line)) {
        if (line.rfind("listening on ", 0) == 0) d->address_ = line.substr(13);
        if (line.rfind("http on ", 0) == 0) d->http_ = line.substr(8);
        if (line == "ready") ready = true;
      }
      if (ready && !d->address_.empty() && !d->http_.empty()) return d;
      int status = 0;
      if (waitpid(pid, &status, WNOHANG) == pid) {
        d->pid_ = 0;
        return absl::InternalError(absl::StrCat("bellwetherd exited early (status ", status,
                                                "): ", d->Tail(d->err_path_, 10)));
      }
      std::this_thread::sleep_for(std::chrono::milliseconds(20));
    }
    return absl::DeadlineExceededError("bellwetherd was not ready within 60 s");
  }

  ~Daemon() { Stop(); }

  // SIGTERM (a clean stop with its final checkpoint), SIGKILL after 60 s. Returns the exit
  // status text.
  std::string Stop() {
    if (pid_ <= 0) return "";
    kill(pid_, SIGTERM);
    const auto deadline = SteadyClock::now() + std::chrono::seconds(60);
    int status = 0;
    std::string how;
    while (true) {
      const pid_t r = waitpid(pid_, &status, WNOHANG);
      if (r == pid_) {
        how = WIFEXITED(status) ? absl::StrCat("exit ", WEXITSTATUS(status))
                                : absl::StrCat("signal ", WTERMSIG(status));
        break;
      }
      if (SteadyClock::now() > deadline) {
        kill(pid_, SIGKILL);
        waitpid(pid_, &status, 0);
        how = "killed after 60 s";
        break;
      }
      std::this_thread::sleep_for(std::chrono::milliseconds(20));
    }
    pid_ = 0;
    return how;
  }

  void Kill() {
    if (pid_ > 0) kill(pid_, SIGKILL);
  }

  int pid() const { return pid_; }
  const std::string& address() const { return address_; }
  const std::string& http() const { return http_; }
  const std::string& command() const { return command_; }
  std::string StderrTail(int lines) const { return Tail(err_path_, lines); }

 private:
  Daemon() = default;
  static std::string Tail(const std::string& path, int lines) {
    std::ifstream in(path);
    std::vector<std::string> all;
    std::string line;
    while (std::getline(in, line)) all.push_back(line);
    const size_t from =
        all.size() > static_cast<size_t>(lines) ? all.size() - static_cast<size_t>(lines) : 0;
    std::string out;
    for (size_t i = from; i < all.size(); ++i) absl::StrAppend(&out, "  ", all[i], "\n");
    return out;
  }
  pid_t pid_ = 0;
  std::string out_path_, err_path_, address_, http_, command_;
};

// ---------------------------------------------------------------------------------------
// Latency statistics (microseconds), nearest-rank percentiles.

struct Summary {
  size_t n = 0;
  double p50 = 0, p90 = 0, p99 = 0, p999 = 0, max = 0, mean = 0;
};

double Percentile(const std::vector<float>& sorted, double p) {
  if (sorted.empty()) return 0;
  const double rank = std::ceil(p * static_cast<double>(sorted.size()));
  const size_t index = static_cast<size_t>(std::max(1.0, rank)) - 1;
  return static_cast<double>(sorted[std::min(index, sorted.size() - 1)]);
}

Summary Summarize(std::vector<float> us) {
  Summary s;
  s.n = us.size();
  if (us.empty()) return s;
  std::sort(us.begin(), us.end());
  s.p50 = Percentile(us, 0.50);
  s.p90 = Percentile(us, 0.90);
  s.p99 = Percentile(us, 0.99);
  s.p999 = Percentile(us, 0.999);
  s.max = static_cast<double>(us.back());
  double sum = 0;
  for (float v : us) sum += static_cast<double>(v);
  s.mean = sum / static_cast<double>(us.size());
  return s;
}

std::string FormatSummary(const Summary& s) {
  return absl::StrFormat("n %d  p50 %.0f  p90 %.0f  p99 %.0f  p99.9 %.0f  max %.0f  mean %.0f us",
                         s.n, s.p50, s.p90, s.p99, s.p999, s.max, s.mean);
}

void ResultSummary(const std::string& prefix, const Summary& s) {
  Result(prefix + ".n", static_cast<double>(s.n));
  Result(prefix + ".p50_us", s.p50);
  Result(prefix + ".p99_us", s.p99);
  Result(prefix + ".p999_us", s.p999);
  Result(prefix + ".max_us", s.max);
}

std::string StreamName(int i) { return absl::StrFormat("building-%04d", i); }

std::string CodeName(const absl::Status& s) {
  return GrpcCodeName(static_cast<grpc::StatusCode>(s.code()));
}

// ---------------------------------------------------------------------------------------
// Producers. Stream i belongs to thread i % threads; each stream has one IngestSession
// with one batch in flight (IngestSession::Send waits for the acknowledgement).

class Producers {
 public:
  Producers(Client& client, std::string pool, const Options& o, int streams, int batch)
      : client_(client), pool_(std::move(pool)), o_(o), batch_(batch) {
    streams_.resize(static_cast<size_t>(streams));
    for (int i = 0; i < streams; ++i) {
      Stream& s = streams_[static_cast<size_t>(i)];
      s.name = StreamName(i);
      s.week = BuildingWeek(o.seed, i);
      for (int k = 0; k < batch; ++k) {
        v1::Frame* f = s.batch.add_frames();
        for (int j = 0; j < kSignals; ++j) f->add_values(0);
      }
    }
  }
  ~Producers() { Stop(); }

  // Opens every session and sends `frames` frames per stream (at least one batch), so
  // that every stream exists with answers. On this thread.
  absl::Status Warm(int frames) {
    for (Stream& s : streams_) {
      int sent = 0;
      do {
        if (!SendOne(s, nullptr)) {
          return absl::UnavailableError(
              absl::StrCat("warm-up ingest into ", s.name, ": ", FirstError()));
        }
        sent += batch_;
      } while (sent < frames);
    }
    return absl::OkStatus();
  }

  // Starts the producer threads: paced at `rate` frames/s over all streams, or (0) as fast
  // as acknowledgements come back.
  void Start(double rate) {
    rate_ = rate;
    for (int t = 0; t < o_.threads; ++t) {
      threads_.emplace_back([this, t] { Loop(static_cast<size_t>(t)); });
    }
  }

  // Starts (true) or ends (false) the measured window: latencies are kept only inside.
  void SetMeasuring(bool on) { measuring_.store(on); }

  // Frames acknowledged as applied so far (sum over streams of applied_seq advances).
  uint64_t AppliedFrames() const { return applied_.load(); }

  void Stop() {
    if (stopped_) return;
    stopped_ = true;
    stop_.store(true);
    for (std::thread& t : threads_) t.join();
    threads_.clear();
    for (Stream& s : streams_) {
      if (s.session != nullptr) {
        if (absl::Status st = s.session->Finish(); !st.ok()) NoteError(st);
        s.session.reset();
      }
    }
  }

  // After Stop(): the measured window's latencies of every stream.
  std::vector<float> AckLatencies() const {
    std::vector<float> all;
    for (const Stream& s : streams_) all.insert(all.end(), s.ack_us.begin(), s.ack_us.end());
    return all;
  }
  std::vector<float> ScheduledLatencies() const {
    std::vector<float> all;
    for (const Stream& s : streams_) {
      all.insert(all.end(), s.sched_us.begin(), s.sched_us.end());
    }
    return all;
  }

  uint64_t batches() const { return batches_.load(); }
  uint64_t rejected() const { return rejected_.load(); }
  uint64_t reopens() const { return reopens_.load(); }
  uint64_t exhausted() const { return exhausted_.load(); }
  uint64_t skipped_batches() const { return skipped_.load(); }
  std::map<std::string, uint64_t> errors() const {
    std::lock_guard<std::mutex> lock(mu_);
    return errors_;
  }
  std::string FirstError() const {
    std::lock_guard<std::mutex> lock(mu_);
    return errors_.empty() ? "" : errors_.begin()->first;
  }

 private:
  struct Stream {
    std::string name;
    std::vector<double> week;  // kFramesPerWeek x kSignals
    v1::FrameBatch batch;      // reused: only seq, time and values are rewritten
    std::unique_ptr<IngestSession> session;
    uint64_t next_seq = 1;  // first seq of the next batch
    uint64_t applied_seq = 0;
    std::vector<float> ack_us, sched_us;
  };

  void Loop(size_t t) {
    std::vector<Stream*> mine;
    for (size_t i = t; i < streams_.size(); i += static_cast<size_t>(o_.threads)) {
      mine.push_back(&streams_[i]);
    }
    if (rate_ <= 0) {
      while (!stop_.load(std::memory_order_relaxed)) {
        for (Stream* s : mine) {
          if (stop_.load(std::memory_order_relaxed)) break;
          if (!SendOne(*s, nullptr)) std::this_thread::sleep_for(std::chrono::milliseconds(10));
        }
      }
      return;
    }
    // Paced: each stream sends a batch every batch * streams / rate seconds, the streams'
    // schedules staggered evenly. A stream more than 2 s behind its schedule skips ahead
    // (counted), so that a stall is not followed by an unbounded burst.
    const auto interval =
        std::chrono::duration_cast<SteadyClock::duration>(std::chrono::duration<double>(
            static_cast<double>(batch_) * static_cast<double>(streams_.size()) / rate_));
    const auto start = SteadyClock::now();
    std::vector<SteadyClock::time_point> due(mine.size());
    for (size_t k = 0; k < mine.size(); ++k) {
      const size_t global = t + k * static_cast<size_t>(o_.threads);
      due[k] =
          start + interval * static_cast<int64_t>(global) / static_cast<int64_t>(streams_.size());
    }
    while (!stop_.load(std::memory_order_relaxed)) {
      const size_t k = static_cast<size_t>(std::min_element(due.begin(), due.end()) - due.begin());
      auto now = SteadyClock::now();
      while (now < due[k] && !stop_.load(std::memory_order_relaxed)) {
        std::this_thread::sleep_for(
            std::min<SteadyClock::duration>(due[k] - now, std::chrono::milliseconds(100)));
        now = SteadyClock::now();
      }
      if (stop_.load(std::memory_order_relaxed)) break;
      if (now - due[k] > std::chrono::seconds(2)) {
        const auto behind = (now - due[k]) / interval;
        skipped_.fetch_add(static_cast<uint64_t>(behind));
        due[k] += interval * behind;
      }
      if (!SendOne(*mine[k], &due[k])) std::this_thread::sleep_for(std::chrono::milliseconds(10));
      due[k] += interval;
    }
  }

  void NoteError(const absl::Status& s) {
    std::string key = absl::StrCat(CodeName(s), ": ", s.message());
    if (key.size() > 200) key.resize(200);
    std::lock_guard<std::mutex> lock(mu_);
    if (errors_.size() < 8 || errors_.count(key)) ++errors_[key];
  }

  // Sends the stream's next batch (opening its session with `resume` first if needed;
  // after an error the stream continues from the daemon's applied seq). `scheduled`: when
  // the batch was due (paced mode). Returns false on an error.
  bool SendOne(Stream& s, const SteadyClock::time_point* scheduled) {
    if (s.session == nullptr) {
      IngestOptions io;
      io.resume = true;
      auto opened = client_.OpenIngest(pool_, s.name, {}, io);
      if (!opened.ok()) {
        NoteError(opened.status());
        if (opened.status().code() == absl::StatusCode::kResourceExhausted) exhausted_.fetch_add(1);
        return false;
      }
      s.session = *std::move(opened);
      s.next_seq = s.session->resumed_seq() + 1;
      if (s.session->resumed_seq() > s.applied_seq) {
        applied_.fetch_add(s.session->resumed_seq() - s.applied_seq);
        s.applied_seq = s.session->resumed_seq();
      }
    }
    for (int k = 0; k < batch_; ++k) {
      const uint64_t seq = s.next_seq + static_cast<uint64_t>(k);
      v1::Frame* f = s.batch.mutable_frames(k);
      f->set_seq(seq);
      f->set_unix_micros(kStartMicros + static_cast<int64_t>(seq - 1) * kFrameSeconds * 1000000);
      const double* v = &s.week[((seq - 1) % kFramesPerWeek) * kSignals];
      for (int j = 0; j < kSignals; ++j) f->set_values(j, v[j]);
    }
    const auto t0 = SteadyClock::now();
    auto ack = s.session->Send(s.batch);
    const auto t1 = SteadyClock::now();
    if (!ack.ok()) {
      NoteError(ack.status());
      if (ack.status().code() == absl::StatusCode::kResourceExhausted) exhausted_.fetch_add(1);
      s.session.reset();
      reopens_.fetch_add(1);
      return false;
    }
    s.next_seq += static_cast<uint64_t>(batch_);
    if (ack->applied_seq() > s.applied_seq) {
      applied_.fetch_add(ack->applied_seq() - s.applied_seq);
      s.applied_seq = ack->applied_seq();
    }
    rejected_.fetch_add(static_cast<uint64_t>(ack->rejected_size()));
    batches_.fetch_add(1);
    if (measuring_.load(std::memory_order_relaxed)) {
      s.ack_us.push_back(std::chrono::duration<float, std::micro>(t1 - t0).count());
      if (scheduled != nullptr) {
        s.sched_us.push_back(std::chrono::duration<float, std::micro>(t1 - *scheduled).count());
      }
    }
    return true;
  }

  Client& client_;
  const std::string pool_;
  const Options& o_;
  const int batch_;
  double rate_ = 0;
  std::vector<Stream> streams_;
  std::vector<std::thread> threads_;
  std::atomic<bool> stop_{false}, measuring_{false};
  bool stopped_ = false;
  std::atomic<uint64_t> applied_{0}, batches_{0}, rejected_{0}, reopens_{0}, exhausted_{0},
      skipped_{0};
  mutable std::mutex mu_;
  std::map<std::string, uint64_t> errors_;
};

// ---------------------------------------------------------------------------------------
// The Predict reader: a forked child process with its own gRPC connection. Commands come
// down a pipe as single bytes: G (start calling), T (the measured window starts), S (stop
// and report one line: "reader N P50 P90 P99 P999 MAX MEAN ERRORS BAD CALLS SECONDS", then
// error lines, then "end").

bool WriteAll(int fd, const std::string& text) {
  size_t off = 0;
  while (off < text.size()) {
    const ssize_t w = write(fd, text.data() + off, text.size() - off);
    if (w < 0 && errno == EINTR) continue;
    if (w <= 0) return false;
    off += static_cast<size_t>(w);
  }
  return true;
}

bool ReadLine(int fd, std::string* line) {
  line->clear();
  char c;
  while (true) {
    const ssize_t r = read(fd, &c, 1);
    if (r < 0 && errno == EINTR) continue;
    if (r <= 0) return false;
    if (c == '\n') return true;
    line->push_back(c);
  }
}

[[noreturn]] void ReaderMain(int in, int out, const Options& o, const std::string& address,
                             const std::string& pool, size_t questions) {
  std::atomic<int> phase{0};  // 0 waiting, 1 calling, 2 measuring, 3 stop
  std::thread control([&] {
    char c;
    while (true) {
      const ssize_t r = read(in, &c, 1);
      if (r < 0 && errno == EINTR) continue;
      if (r <= 0 || c == 'S') {
        phase.store(3);
        return;
      }
      if (c == 'G') phase.store(std::max(phase.load(), 1));
      if (c == 'T') phase.store(2);
    }
  });
  while (phase.load() == 0) std::this_thread::sleep_for(std::chrono::milliseconds(5));
  auto client = Client::Connect(address);
  std::vector<float> us;
  us.reserve(1 << 20);
  uint64_t errors = 0, bad = 0, calls = 0;
  std::map<std::string, uint64_t> examples;
  const auto interval = o.predict_rate > 0
                            ? std::chrono::duration_cast<SteadyClock::duration>(
                                  std::chrono::duration<double>(1.0 / o.predict_rate))
                            : SteadyClock::duration::zero();
  auto due = SteadyClock::now();
  SteadyClock::time_point measure_start{};
  double measured_seconds = 0;
  size_t k = 0;
  while (phase.load() != 3) {
    if (interval > SteadyClock::duration::zero()) {
      auto now = SteadyClock::now();
      if (now - due > std::chrono::seconds(1)) due = now;  // no burst after a stall
      while (now < due && phase.load() != 3) {
        std::this_thread::sleep_for(
            std::min<SteadyClock::duration>(due - now, std::chrono::milliseconds(50)));
        now = SteadyClock::now();
      }
      due += interval;
      if (phase.load() == 3) break;
    }
    const bool measuring = phase.load() == 2;
    if (measuring && measure_start == SteadyClock::time_point{}) {
      measure_start = SteadyClock::now();
    }
    const std::string stream = StreamName(static_cast<int>(k % static_cast<size_t>(o.streams)));
    ++k;
    const auto t0 = SteadyClock::now();
    auto p = client->Predict(pool, stream, absl::Seconds(10));
    const auto t1 = SteadyClock::now();
    if (!measuring) continue;
    ++calls;
    if (!p.ok()) {
      ++errors;
      std::string key = absl::StrCat(CodeName(p.status()), ": ", p.status().message());
      if (examples.size() < 5 || examples.count(key)) ++examples[key];
      continue;
    }
    if (static_cast<size_t>(p->predictions_size()) != questions) ++bad;
    us.push_back(std::chrono::duration<float, std::micro>(t1 - t0).count());
  }
  if (measure_start != SteadyClock::time_point{}) measured_seconds = SecondsSince(measure_start);
  const Summary s = Summarize(us);
  std::string reply =
      absl::StrFormat("reader %d %.1f %.1f %.1f %.1f %.1f %.1f %d %d %d %.3f\n", s.n, s.p50, s.p90,
                      s.p99, s.p999, s.max, s.mean, errors, bad, calls, measured_seconds);
  for (const auto& [what, n] : examples) {
    std::string clean = what;
    std::replace(clean.begin(), clean.end(), '\n', ' ');
    absl::StrAppend(&reply, "error ", n, " ", clean, "\n");
  }
  absl::StrAppend(&reply, "end\n");
  (void)WriteAll(out, reply);
  control.join();
  client.reset();
  std::fflush(nullptr);
  _exit(0);
}

struct ReaderReport {
  Summary latency;
  uint64_t errors = 0, bad = 0, calls = 0;
  double seconds = 0;
  std::vector<std::string> error_lines;
};

class Reader {
 public:
  // Forks the reader: call before this process touches gRPC.
  static std::unique_ptr<Reader> Fork(const Options& o, const std::string& address,
                                      const std::string& pool, size_t questions) {
    int down[2], up[2];
    if (pipe(down) != 0 || pipe(up) != 0) return nullptr;
    std::cout.flush();
    const pid_t parent = getpid();
    const pid_t pid = fork();
    if (pid < 0) return nullptr;
    if (pid == 0) {
      prctl(PR_SET_PDEATHSIG, SIGKILL);
      if (getppid() != parent) _exit(1);
      close(down[1]);
      close(up[0]);
      ReaderMain(down[0], up[1], o, address, pool, questions);
    }
    close(down[0]);
    close(up[1]);
    std::unique_ptr<Reader> r(new Reader());
    r->pid_ = pid;
    r->to_ = down[1];
    r->from_ = up[0];
    return r;
  }
  ~Reader() {
    if (pid_ > 0) {
      close(to_);
      close(from_);
      int status = 0;
      waitpid(pid_, &status, 0);
    }
  }
  void Go() { (void)WriteAll(to_, "G"); }
  void Measure() { (void)WriteAll(to_, "T"); }
  bool StopAndReport(ReaderReport* r) {
    if (!WriteAll(to_, "S")) return false;
    std::string line;
    if (!ReadLine(from_, &line)) return false;
    unsigned long long n = 0, errors = 0, bad = 0, calls = 0;
    Summary& s = r->latency;
    if (std::sscanf(line.c_str(), "reader %llu %lf %lf %lf %lf %lf %lf %llu %llu %llu %lf", &n,
                    &s.p50, &s.p90, &s.p99, &s.p999, &s.max, &s.mean, &errors, &bad, &calls,
                    &r->seconds) != 11) {
      return false;
    }
    s.n = n;
    r->errors = errors;
    r->bad = bad;
    r->calls = calls;
    while (ReadLine(from_, &line) && line != "end") r->error_lines.push_back(line);
    return true;
  }
  int pid() const { return pid_; }
  void Kill() {
    if (pid_ > 0) kill(pid_, SIGKILL);
  }

 private:
  Reader() = default;
  pid_t pid_ = 0;
  int to_ = -1, from_ = -1;
};

// ---------------------------------------------------------------------------------------
// Resident-memory sampler: VmRSS of the daemon every `period`, from the window's start.

class RssSampler {
 public:
  RssSampler(int pid, std::chrono::seconds period) : pid_(pid), period_(period) {}
  ~RssSampler() { Stop(); }
  void Start() {
    start_ = SteadyClock::now();
    thread_ = std::thread([this] {
      auto next = start_;
      while (true) {
        {
          std::unique_lock<std::mutex> lock(mu_);
          if (cv_.wait_until(lock, next, [this] { return stop_; })) return;
          samples_.push_back({SecondsSince(start_), RssMib(pid_)});
          if (print_) {
            std::cout << absl::StrFormat("  rss t=%6.0f s  %8.1f MiB\n", samples_.back().first,
                                         samples_.back().second)
                      << std::flush;
          }
        }
        next += period_;
      }
    });
  }
  // Stops sampling, with a last sample at the window's end (if the last one is older than
  // a second).
  void Stop() {
    {
      std::lock_guard<std::mutex> lock(mu_);
      if (stop_) return;
      stop_ = true;
    }
    cv_.notify_all();
    if (!thread_.joinable()) return;
    thread_.join();
    const double now = SecondsSince(start_);
    if (samples_.empty() || now - samples_.back().first > 1.0) {
      samples_.push_back({now, RssMib(pid_)});
    }
  }
  void set_print(bool p) { print_ = p; }
  std::vector<std::pair<double, double>> samples() {
    std::lock_guard<std::mutex> lock(mu_);
    return samples_;
  }

 private:
  const int pid_;
  const std::chrono::seconds period_;
  SteadyClock::time_point start_;
  std::thread thread_;
  std::mutex mu_;
  std::condition_variable cv_;
  bool stop_ = false;
  bool print_ = false;
  std::vector<std::pair<double, double>> samples_;  // (seconds since start, MiB)
};

// ---------------------------------------------------------------------------------------
// Interruption: SIGINT / SIGTERM end the window early (the report says so).

std::atomic<bool> g_interrupted{false};
extern "C" void OnSignal(int) { g_interrupted.store(true); }

// Sleeps until `until` or an interruption; false if interrupted.
bool SleepUntil(SteadyClock::time_point until) {
  while (SteadyClock::now() < until) {
    if (g_interrupted.load()) return false;
    std::this_thread::sleep_for(std::min<SteadyClock::duration>(until - SteadyClock::now(),
                                                                std::chrono::milliseconds(100)));
  }
  return !g_interrupted.load();
}

// ---------------------------------------------------------------------------------------
// Spec handling.

absl::StatusOr<v1::PoolSpec> LoadSpec(const Options& o) {
  auto spec = ReadPoolSpecFile(o.spec);
  if (!spec.ok()) return spec.status();
  if (o.learning == "per_stream") spec->set_learning(v1::PoolSpec::PER_STREAM);
  if (o.learning == "pooled") spec->set_learning(v1::PoolSpec::POOLED);
  return spec;
}

// The spec's questions twice (the copies named NAME_b): the same blocks, twice as wide.
v1::PoolSpec Doubled(const v1::PoolSpec& spec) {
  v1::PoolSpec d = spec;
  for (const v1::QuestionSpec& q : spec.questions()) {
    v1::QuestionSpec* c = d.add_questions();
    *c = q;
    c->set_name(q.name() + "_b");
  }
  return d;
}

struct Estimate {
  double per_stream_mib = 0, shared_mib = 0;
  size_t blocks = 0, features = 0;
};

absl::StatusOr<Estimate> EstimateOf(const v1::PoolSpec& spec) {
  auto compiled = CompilePoolSpec(spec);
  if (!compiled.ok()) return compiled.status();
  const StateEstimate e = EstimateState(*compiled);
  Estimate out;
  out.per_stream_mib = static_cast<double>(e.per_stream_bytes) / 1048576.0;
  out.shared_mib = static_cast<double>(e.shared_bytes) / 1048576.0;
  out.blocks = compiled->blocks.size();
  out.features = compiled->recipe->num_features();
  return out;
}

// ---------------------------------------------------------------------------------------
// --memory: RSS of the daemon at each step (after a 2 s settle), divided out.
//   R0  no pool
//   R1  64-question pool applied, no stream      -> pool overhead R1 - R0
//   R2  S streams, each fed F frames             -> per stream (64 q) (R2 - R1) / S
//   R3  128-question pool applied, no stream
//   R4  the same S streams fed F frames into it  -> per stream (128 q) (R4 - R3) / S
//   per question and stream = (per stream (128 q) - per stream (64 q)) / 64
// F defaults to 4,096 frames: past the longest horizon (~2,000 steps at gamma 0.9965),
// so every verifier ring has filled and the verified windows have started to fill.

double SettledRss(int pid) {
  std::this_thread::sleep_for(std::chrono::seconds(2));
  return RssMib(pid);
}

int MemoryRun(const Options& o, Client& client, int pid, const v1::PoolSpec& spec64) {
  const std::string name = spec64.name();
  v1::PoolSpec spec128 = Doubled(spec64);
  v1::PoolSpec a = spec64, b = spec128;
  a.set_name(name + "-mem64");
  b.set_name(name + "-mem128");
  auto est64 = EstimateOf(a);
  auto est128 = EstimateOf(b);
  if (!est64.ok() || !est128.ok()) {
    std::cerr << "load_gen: spec: " << (est64.ok() ? est128.status() : est64.status()) << "\n";
    return 2;
  }
  const int S = o.memory_streams;
  const double r0 = SettledRss(pid);
  double r[5] = {r0, 0, 0, 0, 0};
  int step = 1;
  for (const v1::PoolSpec* spec : {&a, &b}) {
    if (auto applied = client.ApplyPool(*spec); !applied.ok()) {
      std::cerr << "load_gen: ApplyPool " << spec->name() << ": " << applied.status() << "\n";
      return 2;
    }
    r[step++] = SettledRss(pid);
    Producers p(client, spec->name(), o, S, o.batch);
    if (absl::Status s = p.Warm(o.memory_frames); !s.ok()) {
      std::cerr << "load_gen: " << s.message() << "\n";
      return 2;
    }
    p.Stop();
    r[step++] = SettledRss(pid);
  }
  const double per_stream64 = (r[2] - r[1]) / S;
  const double per_stream128 = (r[4] - r[3]) / S;
  const double per_question_stream = (per_stream128 - per_stream64) / 64.0;
  const double pool64 = r[1] - r[0], pool128 = r[3] - r[2];
  std::cout << absl::StrFormat(
      "memory (VmRSS of pid %d after 2 s settling; %d streams fed %d frames each in batches of "
      "%d; %s learning):\n",
      pid, S, o.memory_frames, o.batch,
      spec64.learning() == v1::PoolSpec::POOLED ? "POOLED" : "PER_STREAM");
  std::cout << absl::StrFormat("  R0 no pool                           %8.1f MiB\n", r[0]);
  std::cout << absl::StrFormat("  R1 + 64-question pool, no stream     %8.1f MiB  (+%.1f)\n", r[1],
                               pool64);
  std::cout << absl::StrFormat("  R2 + %d streams into it               %8.1f MiB  (+%.1f)\n", S,
                               r[2], r[2] - r[1]);
  std::cout << absl::StrFormat("  R3 + 128-question pool, no stream    %8.1f MiB  (+%.1f)\n", r[3],
                               pool128);
  std::cout << absl::StrFormat("  R4 + %d streams into it               %8.1f MiB  (+%.1f)\n", S,
                               r[4], r[4] - r[3]);
  std::cout << absl::StrFormat(
      "  per stream, 64 questions: (R2-R1)/%d = %.2f MiB (engine estimate %.2f MiB)\n", S,
      per_stream64, est64->per_stream_mib);
  std::cout << absl::StrFormat(
      "  per stream, 128 questions: (R4-R3)/%d = %.2f MiB (engine estimate %.2f MiB)\n", S,
      per_stream128, est128->per_stream_mib);
  std::cout << absl::StrFormat(
      "  per question and stream: (per stream 128 q - per stream 64 q) / 64 = %.1f KiB "
      "(estimate %.1f KiB)\n",
      per_question_stream * 1024, (est128->per_stream_mib - est64->per_stream_mib) / 64 * 1024);
  std::cout << absl::StrFormat(
      "  pool without streams: %.1f MiB (64 q), %.1f MiB (128 q); engine shared estimate %.1f / "
      "%.1f MiB\n",
      pool64, pool128, est64->shared_mib, est128->shared_mib);
  Result("mem.r0_mib", r[0]);
  Result("mem.pool64_mib", pool64);
  Result("mem.pool128_mib", pool128);
  Result("mem.per_stream64_mib", per_stream64);
  Result("mem.per_stream128_mib", per_stream128);
  Result("mem.per_question_stream_kib", per_question_stream * 1024);
  Result("mem.est_per_stream64_mib", est64->per_stream_mib);
  Result("mem.est_per_stream128_mib", est128->per_stream_mib);
  Result("mem.streams", S);
  (void)client.DeletePool(a.name());
  (void)client.DeletePool(b.name());
  return 0;
}

// ---------------------------------------------------------------------------------------

int Run(const Options& o, const std::string& command_line) {
  const auto run_start = SteadyClock::now();
  const std::string load_at_start = LoadAverage();
  auto spec = LoadSpec(o);
  if (!spec.ok()) {
    std::cerr << "load_gen: " << spec.status().message() << "\n";
    return 1;
  }
  if (!o.target.empty()) {
    // A daemon that may hold other pools: a name of our own.
    spec->set_name(
        absl::StrFormat("%s-lg-%d-%d", spec->name(), absl::ToUnixSeconds(absl::Now()), getpid()));
  }
  auto estimate = EstimateOf(*spec);
  if (!estimate.ok()) {
    std::cerr << "load_gen: " << o.spec << ": " << estimate.status().message() << "\n";
    return 1;
  }
  const std::string pool = spec->name();
  const size_t questions = static_cast<size_t>(spec->questions_size());

  // The daemon (fork + exec) and the reader (fork) come before any gRPC use here.
  std::string work;
  std::unique_ptr<Daemon> daemon;
  std::string address = o.target, http = o.http;
  int pid = o.daemon_pid;
  if (o.target.empty()) {
    std::string templ = o.work_dir + "/bw-load-gen.XXXXXX";
    if (mkdtemp(templ.data()) == nullptr) {
      std::cerr << "load_gen: mkdtemp under " << o.work_dir << ": " << strerror(errno) << "\n";
      return 1;
    }
    work = templ;
    auto started = Daemon::Start(o, work);
    if (!started.ok()) {
      std::cerr << "load_gen: " << started.status().message() << "\n";
      if (!o.keep_work_dir) std::filesystem::remove_all(work);
      return 2;
    }
    daemon = *std::move(started);
    address = daemon->address();
    http = daemon->http();
    pid = daemon->pid();
  }
  auto cleanup = [&] {
    if (daemon != nullptr) {
      const std::string how = daemon->Stop();
      std::cout << "daemon stopped (SIGTERM): " << how << "\n";
      daemon.reset();
    }
    if (!work.empty() && !o.keep_work_dir) std::filesystem::remove_all(work);
  };

  std::unique_ptr<Reader> reader;
  if (!o.memory && o.predict_rate >= 0) {
    reader = Reader::Fork(o, address, pool, questions);
    if (reader == nullptr) {
      std::cerr << "load_gen: could not fork the reader\n";
      cleanup();
      return 2;
    }
  }

  // Watchdog: the whole run is bounded; past the bound the daemon and reader are killed.
  const int bound_seconds =
      o.memory ? 600 : o.warmup_seconds + o.seconds + 120 + (o.soak ? o.seconds / 10 : 0);
  std::atomic<bool> finished{false};
  std::thread watchdog([&] {
    const auto until = run_start + std::chrono::seconds(bound_seconds);
    while (!finished.load()) {
      if (SteadyClock::now() > until) {
        std::cerr << "load_gen: watchdog: run exceeded " << bound_seconds << " s; killing\n";
        if (daemon != nullptr) daemon->Kill();
        if (reader != nullptr) reader->Kill();
        std::fflush(nullptr);
        _exit(4);
      }
      std::this_thread::sleep_for(std::chrono::milliseconds(200));
    }
  });
  auto finish = [&](int code) {
    finished.store(true);
    watchdog.join();
    reader.reset();
    cleanup();
    return code;
  };

  std::cout << "Bellwether end-to-end load (invented campus meters, synthetic frames; "
               "predictions are advisory, not a safety system)\n";
  std::cout << absl::StrFormat("machine: %d hardware threads; load average at start %s\n",
                               std::thread::hardware_concurrency(), load_at_start);
  if (daemon != nullptr) {
    std::cout << "daemon: pid " << pid << ", " << daemon->command() << "\n";
  } else {
    std::cout << "daemon: --target " << address << (pid > 0 ? absl::StrCat(", pid ", pid) : "")
              << (http.empty() ? "" : absl::StrCat(", http ", http)) << "\n";
  }
  std::cout << absl::StrFormat(
      "pool %s: %d questions in %d blocks, %d features (featureTableSize), %s; engine estimate "
      "%.1f MiB per stream, %.1f MiB shared\n",
      pool, questions, estimate->blocks, estimate->features,
      spec->learning() == v1::PoolSpec::POOLED ? "POOLED" : "PER_STREAM", estimate->per_stream_mib,
      estimate->shared_mib);

  auto client = Client::Connect(address);
  if (absl::Status s = client->WaitUntilReachable(absl::Seconds(10)); !s.ok()) {
    std::cerr << "load_gen: " << address << ": " << s.message() << "\n";
    return finish(2);
  }
  if (o.memory) {
    if (pid <= 0) {
      std::cerr << "load_gen: --memory needs the daemon's pid (--daemon-pid with --target)\n";
      return finish(1);
    }
    const int code = MemoryRun(o, *client, pid, *spec);
    std::cout << "load average at end " << LoadAverage() << "; command: " << command_line << "\n";
    return finish(code);
  }

  const double rss_before_pool = pid > 0 ? RssMib(pid) : -1;
  if (auto applied = client->ApplyPool(*spec); !applied.ok()) {
    std::cerr << "load_gen: ApplyPool: " << CodeName(applied.status()) << ": "
              << applied.status().message() << "\n";
    return finish(2);
  }
  const double rss_after_pool = pid > 0 ? RssMib(pid) : -1;
  Producers producers(*client, pool, o, o.streams, o.batch);
  if (absl::Status s = producers.Warm(o.batch); !s.ok()) {
    std::cerr << "load_gen: " << s.message() << "\n";
    return finish(2);
  }
  const double rss_after_streams = pid > 0 ? RssMib(pid) : -1;
  std::cout << absl::StrFormat(
      "streams: %d (one batch each before the run); daemon RSS %.1f MiB before the pool, %.1f "
      "after it, %.1f with the streams: %.2f MiB per stream\n",
      o.streams, rss_before_pool, rss_after_pool, rss_after_streams,
      (rss_after_streams - rss_after_pool) / o.streams);
  std::cout << absl::StrFormat(
      "load: %d producer streams on %d threads, batches of %d frames (5 simulated minutes "
      "apart), %s; Predict reader %s; warm-up %d s, measured %d s\n",
      o.streams, o.threads, o.batch,
      o.rate > 0 ? absl::StrFormat("paced at %.0f frames/s", o.rate) : "as fast as acknowledged",
      o.predict_rate < 0 ? "off"
      : o.predict_rate == 0
          ? "back to back (own process and connection)"
          : absl::StrFormat("%.0f calls/s (own process and connection)", o.predict_rate),
      o.warmup_seconds, o.seconds);
  std::cout.flush();

  signal(SIGINT, OnSignal);
  signal(SIGTERM, OnSignal);
  RssSampler sampler(pid, std::chrono::seconds(o.sample_seconds));
  sampler.set_print(o.soak);
  if (reader != nullptr) reader->Go();
  producers.Start(o.rate);
  bool interrupted = !SleepUntil(SteadyClock::now() + std::chrono::seconds(o.warmup_seconds));

  // The measured window.
  producers.SetMeasuring(true);
  if (reader != nullptr) reader->Measure();
  const auto w0 = SteadyClock::now();
  const uint64_t acked0 = producers.AppliedFrames();
  const double metric0 =
      http.empty() ? -1 : ScrapeCounter(http, "bellwether_frames_applied_total", pool);
  const double cpu_daemon0 = pid > 0 ? CpuSeconds(pid) : -1;
  const double cpu_self0 = SelfCpuSeconds();
  const uint64_t skipped0 = producers.skipped_batches();
  if (pid > 0) sampler.Start();
  if (!interrupted) interrupted = !SleepUntil(w0 + std::chrono::seconds(o.seconds));
  const double window = SecondsSince(w0);
  const uint64_t acked1 = producers.AppliedFrames();
  const double metric1 =
      http.empty() ? -1 : ScrapeCounter(http, "bellwether_frames_applied_total", pool);
  const double cpu_daemon1 = pid > 0 ? CpuSeconds(pid) : -1;
  const double cpu_self1 = SelfCpuSeconds();
  const uint64_t skipped1 = producers.skipped_batches();
  producers.SetMeasuring(false);
  sampler.Stop();
  ReaderReport rr;
  const bool have_reader = reader != nullptr && reader->StopAndReport(&rr);
  producers.Stop();
  const std::string load_at_end = LoadAverage();
  const double rss_end = pid > 0 ? RssMib(pid) : -1;

  // Report.
  const double fps = static_cast<double>(acked1 - acked0) / window;
  const double metric_fps = metric0 >= 0 && metric1 >= 0 ? (metric1 - metric0) / window : -1;
  std::cout << absl::StrFormat("\nmeasured window %.2f s%s; load average at end %s\n", window,
                               interrupted ? " (INTERRUPTED)" : "", load_at_end);
  std::cout << absl::StrFormat("frames/s applied: %.0f from acknowledgements (%d frames)", fps,
                               acked1 - acked0);
  if (metric_fps >= 0) {
    std::cout << absl::StrFormat(
        "; %.0f from /metrics bellwether_frames_applied_total (%.0f frames, %+.2f %%)", metric_fps,
        metric1 - metric0, fps > 0 ? 100.0 * (metric_fps - fps) / fps : 0.0);
  }
  std::cout << "\n";
  if (o.rate > 0) {
    std::cout << absl::StrFormat(
        "  target %.0f frames/s: achieved %.1f %%; batches skipped "
        "(a stream over 2 s behind its schedule) %d\n",
        o.rate, 100.0 * fps / o.rate, skipped1 - skipped0);
  }
  const Summary ack = Summarize(producers.AckLatencies());
  std::cout << "ingest-to-ack latency (Send to acknowledgement): " << FormatSummary(ack) << "\n";
  Summary sched;
  if (o.rate > 0) {
    sched = Summarize(producers.ScheduledLatencies());
    std::cout << "ingest latency from the batch's scheduled time: " << FormatSummary(sched) << "\n";
  }
  if (have_reader) {
    std::cout << absl::StrFormat("Predict latency (%d questions, %.0f calls/s asked, %.1f done): ",
                                 questions, o.predict_rate,
                                 rr.seconds > 0 ? static_cast<double>(rr.calls) / rr.seconds : 0)
              << FormatSummary(rr.latency)
              << absl::StrFormat("; errors %d, incomplete answers %d\n", rr.errors, rr.bad);
    for (const std::string& e : rr.error_lines) std::cout << "  predict " << e << "\n";
  } else if (reader != nullptr) {
    std::cout << "Predict reader: no report (it went away)\n";
  }
  const double cpu_daemon = cpu_daemon1 - cpu_daemon0, cpu_self = cpu_self1 - cpu_self0;
  if (pid > 0) {
    std::cout << absl::StrFormat(
        "CPU over the window: daemon %.2f cores (%.1f us per frame), load_gen producers %.2f "
        "cores (reader process not counted)\n",
        cpu_daemon / window, fps > 0 ? cpu_daemon / window / fps * 1e6 : 0.0, cpu_self / window);
  }
  std::cout << absl::StrFormat(
      "ingest totals: %d batches acknowledged, %d frames rejected, %d reopens, "
      "RESOURCE_EXHAUSTED %d\n",
      producers.batches(), producers.rejected(), producers.reopens(), producers.exhausted());
  for (const auto& [what, n] : producers.errors()) {
    std::cout << "  ingest error x" << n << ": " << what << "\n";
  }

  std::vector<std::pair<double, double>> samples = sampler.samples();
  if (!samples.empty()) {
    double lo = 1e300, hi = 0;
    for (const auto& [t, m] : samples) {
      lo = std::min(lo, m);
      hi = std::max(hi, m);
    }
    std::cout << absl::StrFormat(
        "daemon RSS every %d s over the window: %d samples, first %.1f, last %.1f, min %.1f, max "
        "%.1f MiB; at the end %.1f MiB\n",
        o.sample_seconds, samples.size(), samples.front().second, samples.back().second, lo, hi,
        rss_end);
    Result("rss.first_mib", samples.front().second);
    Result("rss.last_mib", samples.back().second);
    Result("rss.max_mib", hi);
    if (o.soak) {
      std::vector<std::pair<double, double>> kept;
      for (const auto& s : samples) {
        if (s.first >= o.soak_ignore_seconds) kept.push_back(s);
      }
      if (kept.size() >= 2) {
        double klo = 1e300, khi = 0;
        for (const auto& [t, m] : kept) {
          klo = std::min(klo, m);
          khi = std::max(khi, m);
        }
        const double first = kept.front().second, last = kept.back().second;
        const double drift = 100.0 * (last - first) / first;
        const double spread = 100.0 * (khi - klo) / first;
        std::cout << absl::StrFormat(
            "soak: ignoring the first %d s of the window (after a %d s warm-up): %d samples "
            "from t=%.0f s to t=%.0f s: first %.1f, last %.1f, min %.1f, max %.1f MiB; drift "
            "(last-first)/first %+.2f %%, (max-min)/first %.2f %%\n",
            o.soak_ignore_seconds, o.warmup_seconds, kept.size(), kept.front().first,
            kept.back().first, first, last, klo, khi, drift, spread);
        Result("soak.first_mib", first);
        Result("soak.last_mib", last);
        Result("soak.min_mib", klo);
        Result("soak.max_mib", khi);
        Result("soak.drift_pct", drift);
        Result("soak.spread_pct", spread);
        Result("soak.ignored_s", o.soak_ignore_seconds);
        // A checkpoint holds a second copy of the state for a second or two: a sample that
        // lands in one is a transient, not growth. The baseline is the lowest sample of
        // each minute; its drift compares the first minute's with the last minute's.
        const double t0 = kept.front().first, t1 = kept.back().first;
        double first_floor = 1e300, last_floor = 1e300;
        for (const auto& [t, m] : kept) {
          if (t < t0 + 60) first_floor = std::min(first_floor, m);
          if (t > t1 - 60) last_floor = std::min(last_floor, m);
        }
        const double floor_drift = 100.0 * (last_floor - first_floor) / first_floor;
        std::cout << absl::StrFormat(
            "soak: per-minute floor (lowest sample of the first and of the last minute): %.1f "
            "-> %.1f MiB, drift %+.2f %%\n",
            first_floor, last_floor, floor_drift);
        Result("soak.floor_first_mib", first_floor);
        Result("soak.floor_last_mib", last_floor);
        Result("soak.floor_drift_pct", floor_drift);
      } else {
        std::cout << "soak: fewer than two samples after the ignored warm-up\n";
      }
    }
  }
  Result("fps", fps);
  Result("fps_metrics", metric_fps);
  Result("target_rate", o.rate);
  ResultSummary("ack", ack);
  if (o.rate > 0) ResultSummary("sched", sched);
  if (have_reader) {
    ResultSummary("predict", rr.latency);
    Result("predict.errors", static_cast<double>(rr.errors));
  }
  Result("cpu.daemon_cores", cpu_daemon / window);
  Result("cpu.client_cores", cpu_self / window);
  Result("mem.per_stream_mib", (rss_after_streams - rss_after_pool) / o.streams);
  Result("window_s", window);
  ResultText("load_end", absl::StrReplaceAll(load_at_end, {{" ", ","}}));
  if (!o.target.empty()) (void)client->DeletePool(pool);
  std::cout << "command: " << command_line << "\n";
  if (daemon != nullptr) {
    const std::string tail = daemon->StderrTail(5);
    if (!tail.empty()) std::cout << "daemon stderr (last lines):\n" << tail;
  }
  const bool failed = fps <= 0 || (have_reader && rr.latency.n == 0);
  return finish(failed ? 3 : 0);
}

}  // namespace
}  // namespace bellwether::bench

int main(int argc, char** argv) {
  bellwether::bench::Options options;
  std::string error;
  if (!bellwether::bench::ParseArgs(argc, argv, &options, &error)) {
    if (error.empty()) {
      std::cout << bellwether::bench::kUsage;
      return 0;
    }
    std::cerr << "load_gen: " << error << "\n" << bellwether::bench::kUsage;
    return 1;
  }
  // A reader or daemon that went away (e.g. a signal to the whole process group) must not
  // end this process at a pipe or socket write: the error is reported instead.
  signal(SIGPIPE, SIG_IGN);
  std::vector<std::string> args(argv, argv + argc);
  return bellwether::bench::Run(options, absl::StrJoin(args, " "));
}
