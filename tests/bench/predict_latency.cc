// Predict latency while frames are being ingested: a benchmark run by hand, not in CI.
//
// An invented fleet of building meters (synthetic, seeded; no real site or data) streams
// 15-minute frames of power_kw and outdoor_temp_c into one PER_STREAM pool with ~50
// questions. The main thread times Predict calls round-robin over the streams, first
// with ingest off (baseline), then while 1-2 background threads push 64-frame batches at
// full speed. Reports p50/p90/p99/p99.9/max per phase and the frames applied per second
// (from the daemon's applied_seq acknowledgements) during the loaded phase.
//
// Within one process gRPC puts every channel to the same address on one TCP connection,
// so by default ingest and Predict share an HTTP/2 connection; --ingest-process moves the
// ingest threads into a forked child with its own connection (as separate producer and
// query services would be).
//
// Usage (tests/bench/predict_latency.sh starts a daemon and runs this):
//   predict_latency --server 127.0.0.1:PORT [--predicts 20000] [--streams 200]
//                   [--questions 50] [--ingest-threads 2] [--batch 64]
//                   [--max-seconds 120] [--seed 7] [--ingest-process] [--keep-pool]
//
// Nothing here asserts on time. The exit code is 0 unless a call failed in a way that
// makes the figures meaningless (ApplyPool refused, a stream never created, predictions
// missing). Note: client and daemon share the same machine's cores.
#include <sys/wait.h>
#include <unistd.h>

#include <algorithm>
#include <atomic>
#include <cerrno>
#include <chrono>
#include <cmath>
#include <cstdint>
#include <cstdio>
#include <fstream>
#include <iostream>
#include <map>
#include <memory>
#include <mutex>
#include <numbers>
#include <random>
#include <string>
#include <thread>
#include <vector>

#include "absl/strings/numbers.h"
#include "absl/strings/str_cat.h"
#include "absl/strings/str_format.h"
#include "absl/strings/str_join.h"
#include "absl/time/clock.h"
#include "absl/time/time.h"
#include "client/bellwether_client.h"
#include "google/protobuf/util/json_util.h"
#include "grpcpp/grpcpp.h"

namespace bellwether::bench {
namespace {

using SteadyClock = std::chrono::steady_clock;

struct Options {
  std::string server = "127.0.0.1:50151";
  int predicts = 20000;
  int streams = 200;
  int questions = 50;
  int ingest_threads = 2;
  int batch = 64;
  int max_seconds = 120;
  uint64_t seed = 7;
  bool keep_pool = false;
  bool ingest_process = false;
  bool print_spec = false;
};

constexpr char kUsage[] =
    "usage: predict_latency [--server HOST:PORT] [--predicts N] [--streams N]\n"
    "                       [--questions N] [--ingest-threads N] [--batch N]\n"
    "                       [--max-seconds N] [--seed N] [--ingest-process] [--keep-pool]\n"
    "       predict_latency --print-spec [--questions N]\n"
    "Times Predict calls against bellwetherd with ingest off, then while frames of an\n"
    "invented meter fleet are ingested at full speed. Run by hand; see predict_latency.sh.\n"
    "  --ingest-process  ingest from a forked child process with its own connection\n"
    "                    (default: threads of this process, sharing Predict's connection)\n"
    "  --keep-pool       leave the benchmark's pool in the daemon (default: delete it)\n"
    "  --print-spec      print the pool spec as JSON and exit\n";

bool ParseInt(const std::string& name, const std::string& value, int lo, int hi, int* out,
              std::string* error) {
  if (!absl::SimpleAtoi(value, out) || *out < lo || *out > hi) {
    *error =
        absl::StrCat("--", name, ": expected an integer in ", lo, "..", hi, ", got '", value, "'");
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
    if (name == "keep-pool") {
      o->keep_pool = true;
      continue;
    }
    if (name == "ingest-process") {
      o->ingest_process = true;
      continue;
    }
    if (name == "print-spec") {
      o->print_spec = true;
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
    if (name == "server") {
      o->server = value;
    } else if (name == "predicts") {
      ok = ParseInt(name, value, 1, 10000000, &o->predicts, error);
    } else if (name == "streams") {
      ok = ParseInt(name, value, 1, 10000, &o->streams, error);
    } else if (name == "questions") {
      ok = ParseInt(name, value, 1, 1000, &o->questions, error);
    } else if (name == "ingest-threads") {
      ok = ParseInt(name, value, 1, 16, &o->ingest_threads, error);
    } else if (name == "batch") {
      ok = ParseInt(name, value, 1, 10000, &o->batch, error);
    } else if (name == "max-seconds") {
      ok = ParseInt(name, value, 5, 3600, &o->max_seconds, error);
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
  return true;
}

// ---------------------------------------------------------------------------------------
// The pool: an invented fleet of building meters.

constexpr double kPowerMaxKw = 1000;
constexpr double kHighLoadKw = 350;  // indicator threshold for "high load" questions
constexpr int64_t kFrameMinutes = 15;

v1::PoolSpec FleetSpec(const std::string& name, int questions) {
  v1::PoolSpec spec;
  spec.set_name(name);
  spec.set_time_zone("America/Chicago");
  spec.set_learning(v1::PoolSpec::PER_STREAM);
  auto add_signal = [&](const char* signal, const char* unit, double lo, double hi) {
    v1::SignalSpec* s = spec.add_signals();
    s->set_name(signal);
    s->set_unit(unit);
    s->set_min(lo);
    s->set_max(hi);
  };
  add_signal("power_kw", "kW", 0, kPowerMaxKw);
  add_signal("outdoor_temp_c", "degC", -25, 40);
  auto add_tiles = [&](std::vector<const char*> signals, uint32_t tilings, uint32_t tiles,
                       bool periodic) {
    v1::TileCoding* t = spec.add_features()->mutable_tiles();
    for (const char* s : signals) t->add_signals(s);
    t->set_tilings(tilings);
    t->set_tiles_per_dim(tiles);
    t->set_periodic(periodic);
  };
  add_tiles({"clock.hour_of_day"}, 8, 24, true);
  add_tiles({"clock.day_of_week", "clock.hour_of_day"}, 4, 7, true);
  add_tiles({"power_kw"}, 4, 10, false);
  add_tiles({"outdoor_temp_c"}, 4, 10, false);
  spec.add_features()->mutable_bias();
  // gamma 0.995 needs ~1,400 steps before its discount falls under 1e-3: hold 2,000.
  spec.mutable_progress()->set_verify_max_held(2000);

  // Questions: gamma spread over [0.9, 0.995], cumulants cycling through the kinds the
  // spec offers (a signal, an indicator, the frame period), step rules alternating.
  for (int i = 0; i < questions; ++i) {
    const double gamma =
        questions == 1 ? 0.95 : 0.9 + 0.095 * static_cast<double>(i) / (questions - 1);
    v1::QuestionSpec* q = spec.add_questions();
    q->set_gamma(gamma);
    q->set_lambda(i % 3 == 0 ? 0.9 : (i % 3 == 1 ? 0.8 : 0.95));
    v1::Cumulant* c = q->mutable_cumulant();
    std::string kind;
    switch (i % 5) {
      case 0:
        kind = "power";
        c->set_signal("power_kw");
        q->set_centered(i % 2 == 0);
        break;
      case 1:
        kind = "temp";
        c->set_signal("outdoor_temp_c");
        q->set_centered(i % 2 == 1);
        break;
      case 2: {
        kind = "highload";
        v1::Condition* ind = c->mutable_indicator();
        ind->set_signal("power_kw");
        ind->set_op(">");
        ind->set_threshold(kHighLoadKw);
        break;
      }
      case 3: {
        kind = "frost";
        v1::Condition* ind = c->mutable_indicator();
        ind->set_signal("outdoor_temp_c");
        ind->set_op("<");
        ind->set_threshold(0);
        break;
      }
      default:
        kind = "seconds";
        c->set_frame_period(true);
        break;
    }
    if (i % 2 == 1) q->set_step_rule(v1::SETTLING);
    q->set_name(
        absl::StrFormat("q%02d_%s_g%04d", i, kind, static_cast<int>(std::lround(gamma * 10000))));
  }
  return spec;
}

// One synthetic meter: a building with a schedule, base load, occupancy load and
// heating / cooling sensitivity, in a climate with a daily cycle, a season and a slowly
// wandering weather anomaly. Seeded; values are plausible, not real.
class Meter {
 public:
  Meter(uint64_t seed, int index) : rng_(seed * 1000003u + static_cast<uint64_t>(index)) {
    std::uniform_real_distribution<double> u(0.0, 1.0);
    base_kw_ = 15 + 105 * u(rng_);
    occupied_kw_ = 30 + 270 * u(rng_);
    heat_kw_per_c_ = 1 + 7 * u(rng_);
    cool_kw_per_c_ = 1 + 9 * u(rng_);
    open_hour_ = 6 + 3 * u(rng_);
    close_hour_ = 16 + 4 * u(rng_);
    weekend_share_ = 0.05 + 0.55 * u(rng_);
    site_offset_c_ = 3 * (u(rng_) - 0.5);
  }

  // Fills `frame` (values in the pool's declared order: power_kw, outdoor_temp_c).
  void Next(v1::Frame* frame) {
    ++seq_;
    // 2026-03-02 06:00 UTC is 00:00 on a Monday in the pool's zone (CST, UTC-6).
    static const int64_t kStartMicros = absl::ToUnixMicros(
        absl::FromCivil(absl::CivilSecond(2026, 3, 2, 6, 0, 0), absl::UTCTimeZone()));
    const int64_t minutes = static_cast<int64_t>(seq_ - 1) * kFrameMinutes;
    const double day = static_cast<double>(minutes) / (24.0 * 60.0);
    const double hour = std::fmod(day, 1.0) * 24.0;             // local standard time
    const int weekday = static_cast<int>(std::fmod(day, 7.0));  // 0 = Monday
    std::normal_distribution<double> noise(0.0, 1.0);
    anomaly_c_ = 0.99 * anomaly_c_ + 0.3 * noise(rng_);
    // Early March start: mean temperature rising over the spring.
    const double season =
        11.0 - 13.0 * std::cos(2 * std::numbers::pi * (day + 60.0 - 15.0) / 365.0);
    const double temp = season + 6.0 * std::sin(2 * std::numbers::pi * (hour - 9.0) / 24.0) +
                        anomaly_c_ + site_offset_c_;
    const bool open = hour >= open_hour_ && hour < close_hour_;
    double occupancy = open ? 0.85 : 0.05;
    if (weekday >= 5) occupancy *= weekend_share_;
    occupancy = std::clamp(occupancy + 0.05 * noise(rng_), 0.0, 1.0);
    const double power = std::clamp(
        base_kw_ + occupied_kw_ * occupancy + heat_kw_per_c_ * std::max(0.0, 15.0 - temp) +
            cool_kw_per_c_ * std::max(0.0, temp - 22.0) + 5.0 * noise(rng_),
        0.0, kPowerMaxKw);
    frame->Clear();
    frame->set_seq(seq_);
    frame->set_unix_micros(kStartMicros + minutes * 60 * 1000000);
    frame->add_values(power);
    frame->add_values(temp);
  }

  // Rewinds the last `frames` frames' seq so they can be regenerated (after a batch the
  // daemon refused as a whole). Values differ, which does not matter here.
  void Rewind(uint64_t frames) { seq_ -= frames; }

 private:
  std::mt19937_64 rng_;
  uint64_t seq_ = 0;
  double base_kw_, occupied_kw_, heat_kw_per_c_, cool_kw_per_c_;
  double open_hour_, close_hour_, weekend_share_, site_offset_c_;
  double anomaly_c_ = 0;
};

std::string StreamName(int i) { return absl::StrFormat("meter-%04d", i); }

std::string CodeName(const absl::Status& s) {
  return GrpcCodeName(static_cast<grpc::StatusCode>(s.code()));
}

// ---------------------------------------------------------------------------------------
// Ingest: each thread owns the streams i with i % threads == t, one session each, and
// sends one batch per stream in turn until told to stop.

// What ingest did; plain numbers so that a child process can send it back as text.
struct IngestReport {
  uint64_t warm_frames = 0;         // applied before timing (one batch per stream)
  uint64_t timed_frames = 0;        // applied while Predict was being timed
  double timed_seconds = 0;         // length of that window, as the ingest side saw it
  uint64_t batches = 0;             // acknowledged after warm-up
  uint64_t resource_exhausted = 0;  // batches or opens refused with RESOURCE_EXHAUSTED
  uint64_t timed_resource_exhausted = 0;
  uint64_t reopens = 0;
  uint64_t rejected_frames = 0;
  uint64_t other_errors = 0;
  std::map<std::string, uint64_t> errors;  // "CODE: message" -> count (a few kinds)
};

class IngestRunner {
 public:
  IngestRunner(Client& client, std::string pool, const Options& o)
      : client_(client), pool_(std::move(pool)), o_(o) {
    states_.reserve(static_cast<size_t>(o.streams));
    for (int i = 0; i < o.streams; ++i) {
      states_.push_back(StreamState{StreamName(i), Meter(o.seed, i), nullptr, 0});
    }
  }
  ~IngestRunner() { Stop(); }

  // One batch per stream, so that every stream exists and has answers before timing.
  absl::Status Warm(SteadyClock::time_point deadline) {
    v1::FrameBatch batch;
    for (StreamState& s : states_) {
      while (s.applied_seq == 0) {
        if (SteadyClock::now() >= deadline) {
          return absl::DeadlineExceededError(absl::StrCat("warm-up of ", s.name));
        }
        if (!SendOne(s, batch)) {
          std::string what;
          for (const auto& [e, n] : report_.errors) absl::StrAppend(&what, "; ", e);
          return absl::UnavailableError(absl::StrCat("warm-up ingest into ", s.name, what));
        }
      }
    }
    report_.warm_frames = frames_.load();
    report_.batches = 0;
    batches_.store(0);
    return absl::OkStatus();
  }

  void Start() {
    for (int t = 0; t < o_.ingest_threads; ++t) {
      threads_.emplace_back([this, t] { Loop(static_cast<size_t>(t)); });
    }
  }

  // The timed window starts now.
  void MarkTiming() {
    timing_start_ = SteadyClock::now();
    frames_at_mark_ = frames_.load();
    exhausted_at_mark_ = exhausted_.load();
  }

  // Ends the timed window, stops the threads and closes the sessions.
  void Stop() {
    if (stopped_) return;
    stopped_ = true;
    if (timing_start_ != SteadyClock::time_point{}) {
      report_.timed_seconds =
          std::chrono::duration<double>(SteadyClock::now() - timing_start_).count();
      report_.timed_frames = frames_.load() - frames_at_mark_;
      report_.timed_resource_exhausted = exhausted_.load() - exhausted_at_mark_;
    }
    stop_.store(true);
    for (std::thread& t : threads_) t.join();
    threads_.clear();
    for (StreamState& s : states_) {
      if (s.session != nullptr) {
        if (absl::Status st = s.session->Finish(); !st.ok()) NoteError(st);
        s.session.reset();
      }
    }
  }

  IngestReport Report() {
    IngestReport r = report_;
    r.batches = batches_.load();
    r.resource_exhausted = exhausted_.load();
    r.reopens = reopens_.load();
    r.rejected_frames = rejected_.load();
    r.other_errors = other_errors_.load();
    std::lock_guard<std::mutex> lock(mu_);
    r.errors = errors_;
    return r;
  }

 private:
  struct StreamState {
    std::string name;
    Meter meter;
    std::unique_ptr<IngestSession> session;
    uint64_t applied_seq = 0;
  };

  void Loop(size_t t) {
    const size_t step = static_cast<size_t>(o_.ingest_threads);
    v1::FrameBatch batch;
    while (!stop_.load(std::memory_order_relaxed)) {
      for (size_t i = t; i < states_.size() && !stop_.load(std::memory_order_relaxed); i += step) {
        if (!SendOne(states_[i], batch)) {
          std::this_thread::sleep_for(std::chrono::milliseconds(10));
        }
      }
    }
  }

  void NoteError(const absl::Status& s) {
    std::string key = absl::StrCat(CodeName(s), ": ", s.message());
    if (key.size() > 160) key.resize(160);
    std::lock_guard<std::mutex> lock(mu_);
    if (errors_.size() < 8 || errors_.count(key)) ++errors_[key];
  }

  // Sends one batch to `s` (opening its session first if needed). A batch refused as a
  // whole (RESOURCE_EXHAUSTED: the pool's queue was full and nothing of it was queued)
  // is regenerated with the same seqs after a short back-off and a reopen. Returns false
  // on any other error.
  bool SendOne(StreamState& s, v1::FrameBatch& batch) {
    const uint64_t n = static_cast<uint64_t>(o_.batch);
    batch.Clear();
    for (uint64_t k = 0; k < n; ++k) s.meter.Next(batch.add_frames());
    absl::Status failed;
    if (s.session == nullptr) {
      auto opened = client_.OpenIngest(pool_, s.name, {});
      if (opened.ok()) {
        s.session = *std::move(opened);
      } else {
        failed = opened.status();
      }
    }
    if (failed.ok()) {
      auto ack = s.session->Send(batch);
      if (ack.ok()) {
        if (ack->applied_seq() > s.applied_seq) {
          frames_.fetch_add(ack->applied_seq() - s.applied_seq);
          s.applied_seq = ack->applied_seq();
        }
        rejected_.fetch_add(static_cast<uint64_t>(ack->rejected_size()));
        batches_.fetch_add(1);
        return true;
      }
      failed = ack.status();
      s.session.reset();
      reopens_.fetch_add(1);
    }
    s.meter.Rewind(n);
    if (failed.code() == absl::StatusCode::kResourceExhausted) {
      exhausted_.fetch_add(1);
      std::this_thread::sleep_for(std::chrono::milliseconds(2));
      return true;
    }
    NoteError(failed);
    other_errors_.fetch_add(1);
    return false;
  }

  Client& client_;
  const std::string pool_;
  const Options& o_;
  std::vector<StreamState> states_;  // stream i is touched by thread i % threads only
  std::vector<std::thread> threads_;
  std::atomic<bool> stop_{false};
  bool stopped_ = false;
  std::atomic<uint64_t> frames_{0}, batches_{0}, exhausted_{0}, reopens_{0}, rejected_{0},
      other_errors_{0};
  SteadyClock::time_point timing_start_{};
  uint64_t frames_at_mark_ = 0, exhausted_at_mark_ = 0;
  IngestReport report_;
  std::mutex mu_;
  std::map<std::string, uint64_t> errors_;
};

// ---------------------------------------------------------------------------------------
// --ingest-process: the same IngestRunner in a child process with its own connection.
// The child is forked before this process touches gRPC. Commands go down a pipe as single bytes;
// replies come back as lines.

bool WriteAll(int fd, const std::string& text) {
  size_t off = 0;
  while (off < text.size()) {
    const ssize_t w = ::write(fd, text.data() + off, text.size() - off);
    if (w < 0 && errno == EINTR) continue;
    if (w <= 0) return false;
    off += static_cast<size_t>(w);
  }
  return true;
}

// Reads one line (without the newline); false on EOF or error.
bool ReadLine(int fd, std::string* line) {
  line->clear();
  char c;
  while (true) {
    const ssize_t r = ::read(fd, &c, 1);
    if (r < 0 && errno == EINTR) continue;
    if (r <= 0) return false;
    if (c == '\n') return true;
    line->push_back(c);
  }
}

std::string EncodeReport(const IngestReport& r) {
  std::string out =
      absl::StrFormat("report %d %d %.9f %d %d %d %d %d %d\n", r.warm_frames, r.timed_frames,
                      r.timed_seconds, r.batches, r.resource_exhausted, r.timed_resource_exhausted,
                      r.reopens, r.rejected_frames, r.other_errors);
  for (const auto& [what, n] : r.errors) {
    std::string clean = what;
    std::replace(clean.begin(), clean.end(), '\n', ' ');
    absl::StrAppend(&out, "error ", n, " ", clean, "\n");
  }
  absl::StrAppend(&out, "end\n");
  return out;
}

bool DecodeReport(int fd, IngestReport* r) {
  std::string line;
  if (!ReadLine(fd, &line)) return false;
  unsigned long long v[8];
  if (std::sscanf(line.c_str(), "report %llu %llu %lf %llu %llu %llu %llu %llu %llu", &v[0], &v[1],
                  &r->timed_seconds, &v[2], &v[3], &v[4], &v[5], &v[6], &v[7]) != 9) {
    return false;
  }
  r->warm_frames = v[0];
  r->timed_frames = v[1];
  r->batches = v[2];
  r->resource_exhausted = v[3];
  r->timed_resource_exhausted = v[4];
  r->reopens = v[5];
  r->rejected_frames = v[6];
  r->other_errors = v[7];
  while (ReadLine(fd, &line) && line != "end") {
    unsigned long long n = 0;
    int used = 0;
    if (std::sscanf(line.c_str(), "error %llu %n", &n, &used) == 1) {
      r->errors[line.substr(static_cast<size_t>(used))] = n;
    }
  }
  return true;
}

// The child: waits for commands W (warm up), G (go), T (timing starts), S (stop and
// report). EOF (the parent went away) stops it.
[[noreturn]] void ChildMain(int in, int out, const Options& o, const std::string& pool,
                            SteadyClock::time_point deadline) {
  auto client = Client::Connect(o.server);
  std::unique_ptr<IngestRunner> runner;
  char c;
  while (true) {
    const ssize_t r = ::read(in, &c, 1);
    if (r < 0 && errno == EINTR) continue;
    if (r <= 0) break;
    if (c == 'W') {
      runner = std::make_unique<IngestRunner>(*client, pool, o);
      const absl::Status s = runner->Warm(deadline);
      std::string reply = s.ok() ? "ok\n" : absl::StrCat("fail ", s.message(), "\n");
      if (!WriteAll(out, reply)) break;
    } else if (c == 'G' && runner != nullptr) {
      runner->Start();
      if (!WriteAll(out, "ok\n")) break;
    } else if (c == 'T' && runner != nullptr) {
      runner->MarkTiming();
      if (!WriteAll(out, "ok\n")) break;
    } else if (c == 'S' && runner != nullptr) {
      runner->Stop();
      (void)WriteAll(out, EncodeReport(runner->Report()));
      break;
    }
  }
  runner.reset();
  client.reset();
  std::fflush(nullptr);
  ::_exit(0);
}

// Drives ingest either in this process (threads) or in the forked child.
class IngestDriver {
 public:
  // With --ingest-process, forks: call it before this process touches gRPC.
  static std::unique_ptr<IngestDriver> Create(const Options& o, const std::string& pool,
                                              SteadyClock::time_point deadline) {
    std::unique_ptr<IngestDriver> d(new IngestDriver(o, pool, deadline));
    if (!o.ingest_process) return d;
    int down[2], up[2];
    if (::pipe(down) != 0 || ::pipe(up) != 0) {
      std::perror("predict_latency: pipe");
      return nullptr;
    }
    std::cout.flush();
    const pid_t pid = ::fork();
    if (pid < 0) {
      std::perror("predict_latency: fork");
      return nullptr;
    }
    if (pid == 0) {
      ::close(down[1]);
      ::close(up[0]);
      ChildMain(down[0], up[1], o, pool, deadline);
    }
    ::close(down[0]);
    ::close(up[1]);
    d->child_ = pid;
    d->to_child_ = down[1];
    d->from_child_ = up[0];
    return d;
  }

  ~IngestDriver() {
    if (child_ > 0) {
      ::close(to_child_);  // EOF: the child stops if it has not yet
      ::close(from_child_);
      int status = 0;
      ::waitpid(child_, &status, 0);
    }
  }

  // Needs the pool applied. `client` serves the in-process mode.
  absl::Status Warm(Client& client) {
    if (child_ <= 0) {
      runner_ = std::make_unique<IngestRunner>(client, pool_, o_);
      return runner_->Warm(deadline_);
    }
    return Command('W');
  }
  absl::Status Start() {
    if (child_ <= 0) {
      runner_->Start();
      return absl::OkStatus();
    }
    return Command('G');
  }
  absl::Status MarkTiming() {
    if (child_ <= 0) {
      runner_->MarkTiming();
      return absl::OkStatus();
    }
    return Command('T');
  }
  absl::StatusOr<IngestReport> StopAndReport() {
    if (child_ <= 0) {
      runner_->Stop();
      return runner_->Report();
    }
    IngestReport r;
    if (!WriteAll(to_child_, "S") || !DecodeReport(from_child_, &r)) {
      return absl::InternalError("the ingest process did not report");
    }
    return r;
  }

 private:
  IngestDriver(const Options& o, std::string pool, SteadyClock::time_point deadline)
      : o_(o), pool_(std::move(pool)), deadline_(deadline) {}

  absl::Status Command(char c) {
    std::string line;
    if (!WriteAll(to_child_, std::string(1, c)) || !ReadLine(from_child_, &line)) {
      return absl::InternalError("the ingest process went away");
    }
    if (line != "ok") return absl::UnavailableError(line);
    return absl::OkStatus();
  }

  const Options& o_;
  const std::string pool_;
  const SteadyClock::time_point deadline_;
  std::unique_ptr<IngestRunner> runner_;
  pid_t child_ = -1;
  int to_child_ = -1, from_child_ = -1;
};

// ---------------------------------------------------------------------------------------
// Latency statistics.

struct Summary {
  size_t n = 0;
  double p50 = 0, p90 = 0, p99 = 0, p999 = 0, max = 0, mean = 0;  // microseconds
  size_t over_1ms = 0, over_10ms = 0;
};

// Nearest-rank percentile of sorted values.
double Percentile(const std::vector<double>& sorted, double p) {
  if (sorted.empty()) return 0;
  const double rank = std::ceil(p * static_cast<double>(sorted.size()));
  const size_t index = static_cast<size_t>(std::max(1.0, rank)) - 1;
  return sorted[std::min(index, sorted.size() - 1)];
}

Summary Summarize(std::vector<double> us) {
  Summary s;
  s.n = us.size();
  if (us.empty()) return s;
  std::sort(us.begin(), us.end());
  s.p50 = Percentile(us, 0.50);
  s.p90 = Percentile(us, 0.90);
  s.p99 = Percentile(us, 0.99);
  s.p999 = Percentile(us, 0.999);
  s.max = us.back();
  double sum = 0;
  for (double v : us) {
    sum += v;
    s.over_1ms += v > 1000 ? 1 : 0;
    s.over_10ms += v > 10000 ? 1 : 0;
  }
  s.mean = sum / static_cast<double>(us.size());
  return s;
}

struct PhaseResult {
  std::vector<double> latencies_us;
  uint64_t errors = 0;
  uint64_t moved = 0;  // answers newer than this stream's previous answer
  double seconds = 0;
  bool cut_short = false;
  std::map<std::string, uint64_t> error_examples;
};

// Times `count` Predict calls round-robin over the streams, stopping at `deadline`.
PhaseResult TimePredicts(Client& client, const std::string& pool,
                         const std::vector<std::string>& streams, int count, size_t questions,
                         SteadyClock::time_point deadline, size_t* bad_answers) {
  PhaseResult r;
  r.latencies_us.reserve(static_cast<size_t>(count));
  std::vector<uint64_t> last_seq(streams.size(), 0);
  const auto start = SteadyClock::now();
  for (int i = 0; i < count; ++i) {
    const size_t k = static_cast<size_t>(i) % streams.size();
    const auto t0 = SteadyClock::now();
    if (t0 >= deadline) {
      r.cut_short = true;
      break;
    }
    auto p = client.Predict(pool, streams[k]);
    const auto t1 = SteadyClock::now();
    if (!p.ok()) {
      ++r.errors;
      std::string key = absl::StrCat(CodeName(p.status()), ": ", p.status().message());
      if (r.error_examples.size() < 8 || r.error_examples.count(key)) ++r.error_examples[key];
      continue;
    }
    r.latencies_us.push_back(std::chrono::duration<double, std::micro>(t1 - t0).count());
    if (static_cast<size_t>(p->predictions_size()) != questions) ++*bad_answers;
    if (p->as_of_seq() != last_seq[k]) {
      if (last_seq[k] != 0) ++r.moved;
      last_seq[k] = p->as_of_seq();
    }
  }
  r.seconds = std::chrono::duration<double>(SteadyClock::now() - start).count();
  return r;
}

void PrintRow(const char* label, const PhaseResult& r) {
  const Summary s = Summarize(r.latencies_us);
  std::cout << absl::StrFormat("%-22s %7d %9.1f %9.1f %9.1f %9.1f %10.1f %9.1f %7d %7d %6d\n",
                               label, s.n, s.p50, s.p90, s.p99, s.p999, s.max, s.mean, s.over_1ms,
                               s.over_10ms, r.errors);
}

std::string LoadAverage() {
  std::ifstream f("/proc/loadavg");
  std::string one, five, fifteen;
  if (!(f >> one >> five >> fifteen)) return "?";
  return absl::StrCat(one, " ", five, " ", fifteen);
}

int Run(const Options& o, const std::string& command_line) {
  const auto run_start = SteadyClock::now();
  const auto deadline = run_start + std::chrono::seconds(o.max_seconds);
  const std::string load_at_start = LoadAverage();
  const std::string pool =
      absl::StrFormat("meter-fleet-bench-%d-%d", absl::ToUnixSeconds(absl::Now()), ::getpid());
  const v1::PoolSpec spec = FleetSpec(pool, o.questions);

  // Forks the ingest process (with --ingest-process) before any gRPC use here.
  std::unique_ptr<IngestDriver> ingest = IngestDriver::Create(o, pool, deadline);
  if (ingest == nullptr) return 2;

  auto client = Client::Connect(o.server);
  if (auto s = client->WaitUntilReachable(absl::Seconds(10)); !s.ok()) {
    std::cerr << "predict_latency: " << o.server << ": " << s.message() << "\n";
    return 2;
  }
  if (auto applied = client->ApplyPool(spec); !applied.ok()) {
    std::cerr << "predict_latency: ApplyPool: " << CodeName(applied.status()) << ": "
              << applied.status().message() << "\n";
    return 2;
  }
  if (absl::Status s = ingest->Warm(*client); !s.ok()) {
    std::cerr << "predict_latency: " << s.message() << "\n";
    return 2;
  }
  std::vector<std::string> names;
  for (int i = 0; i < o.streams; ++i) names.push_back(StreamName(i));

  // A sample answer, to state what one Predict returns.
  size_t response_bytes = 0;
  uint64_t verify_memory = 0;
  if (auto p = client->Predict(pool, names[0]); p.ok()) {
    response_bytes = p->ByteSizeLong();
    for (const v1::Prediction& q : p->predictions()) verify_memory += q.verified().memory_bytes();
  }

  size_t bad_answers = 0;
  const size_t questions = static_cast<size_t>(o.questions);
  const int untimed = std::min(o.predicts, 500);
  // Untimed warm-up calls (connection, allocator, caches).
  (void)TimePredicts(*client, pool, names, untimed, questions, deadline, &bad_answers);

  // Phase 1: ingest off. The time budget is split so that phase 2 always gets some.
  const auto budget_half = SteadyClock::now() + (deadline - SteadyClock::now()) / 2;
  const PhaseResult off =
      TimePredicts(*client, pool, names, o.predicts, questions, budget_half, &bad_answers);

  // Phase 2: ingest on, after half a second to reach its steady rate.
  if (absl::Status s = ingest->Start(); !s.ok()) {
    std::cerr << "predict_latency: starting ingest: " << s.message() << "\n";
    return 2;
  }
  std::this_thread::sleep_for(std::chrono::milliseconds(500));
  if (absl::Status s = ingest->MarkTiming(); !s.ok()) {
    std::cerr << "predict_latency: " << s.message() << "\n";
    return 2;
  }
  const PhaseResult on =
      TimePredicts(*client, pool, names, o.predicts, questions, deadline, &bad_answers);
  absl::StatusOr<IngestReport> report = ingest->StopAndReport();
  if (!report.ok()) {
    std::cerr << "predict_latency: " << report.status().message() << "\n";
    return 2;
  }
  const IngestReport& r = *report;
  const std::string load_at_end = LoadAverage();

  if (!o.keep_pool) {
    // The client library has no DeletePool; use the generated stub directly.
    auto stub =
        v1::Bellwether::NewStub(grpc::CreateChannel(o.server, grpc::InsecureChannelCredentials()));
    grpc::ClientContext context;
    context.set_deadline(std::chrono::system_clock::now() + std::chrono::seconds(10));
    v1::DeletePoolRequest request;
    request.set_pool(pool);
    v1::DeletePoolResponse response;
    if (grpc::Status s = stub->DeletePool(&context, request, &response); !s.ok()) {
      std::cerr << "predict_latency: DeletePool " << pool << ": " << s.error_message() << "\n";
    }
  }

  const double frames_per_second =
      r.timed_seconds > 0 ? static_cast<double>(r.timed_frames) / r.timed_seconds : 0;
  std::cout << "\nBellwether Predict latency under ingest (invented meter fleet, synthetic "
               "data; predictions are advisory, not a safety system)\n";
  std::cout << absl::StrFormat(
      "pool %s: %d streams (PER_STREAM), %d questions, 2 signals; one Predict answer is %d "
      "bytes; verification memory %.1f KiB per stream\n",
      pool, o.streams, o.questions, response_bytes, static_cast<double>(verify_memory) / 1024.0);
  std::cout << absl::StrFormat(
      "warm-up: %d frames (one batch of %d per stream) before timing; %d untimed Predict calls\n",
      r.warm_frames, o.batch, untimed);
  std::cout << absl::StrFormat(
      "ingest: %d thread(s) %s, batches of %d frames, 15 simulated minutes apart\n",
      o.ingest_threads,
      o.ingest_process ? "in a child process (own gRPC connection)"
                       : "in this process (same gRPC connection as Predict)",
      o.batch);
  std::cout << "\nPredict latency, microseconds (steady_clock around Client::Predict; "
               "nearest-rank percentiles)\n";
  std::cout << absl::StrFormat("%-22s %7s %9s %9s %9s %9s %10s %9s %7s %7s %6s\n", "phase", "n",
                               "p50", "p90", "p99", "p99.9", "max", "mean", ">1ms", ">10ms",
                               "errors");
  PrintRow("ingest off", off);
  const std::string on_label = absl::StrFormat("ingest on (%d thr)", o.ingest_threads);
  PrintRow(on_label.c_str(), on);
  std::cout << absl::StrFormat(
      "\ningest while timed: %.0f frames/s applied (%d frames in %.2f s, from applied_seq "
      "acks)\n",
      frames_per_second, r.timed_frames, r.timed_seconds);
  std::cout << absl::StrFormat(
      "ingest totals after warm-up: %d batches acked, RESOURCE_EXHAUSTED %d (%d while timed), "
      "reopens %d, rejected frames %d, other errors %d\n",
      r.batches, r.resource_exhausted, r.timed_resource_exhausted, r.reopens, r.rejected_frames,
      r.other_errors);
  std::cout << absl::StrFormat(
      "answers newer than the same stream's previous Predict (ingest on): %d of %d\n", on.moved,
      on.latencies_us.size());
  if (off.cut_short || on.cut_short) {
    std::cout << absl::StrFormat("NOTE: the %d s cap cut a phase short (see n)\n", o.max_seconds);
  }
  for (const auto& [what, n] : r.errors) {
    std::cout << "  ingest error x" << n << ": " << what << "\n";
  }
  for (const PhaseResult* ph : {&off, &on}) {
    for (const auto& [what, n] : ph->error_examples) {
      std::cout << "  predict error x" << n << ": " << what << "\n";
    }
  }
  std::cout << absl::StrFormat(
      "machine: %d hardware threads shared by this client and the daemon; load average "
      "%s at start, %s at end; run took %.1f s\n",
      std::thread::hardware_concurrency(), load_at_start, load_at_end,
      std::chrono::duration<double>(SteadyClock::now() - run_start).count());
  std::cout << "command: " << command_line << "\n";
  if (bad_answers > 0) {
    std::cerr << "predict_latency: " << bad_answers << " answers lacked some of the " << o.questions
              << " questions\n";
    return 2;
  }
  return 0;
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
    std::cerr << "predict_latency: " << error << "\n" << bellwether::bench::kUsage;
    return 1;
  }
  if (options.print_spec) {
    std::string json;
    google::protobuf::util::JsonPrintOptions print;
    print.add_whitespace = true;
    const auto status = google::protobuf::util::MessageToJsonString(
        bellwether::bench::FleetSpec("meter-fleet", options.questions), &json, print);
    if (!status.ok()) {
      std::cerr << "predict_latency: " << status.ToString() << "\n";
      return 1;
    }
    std::cout << json;
    return 0;
  }
  std::vector<std::string> args(argv, argv + argc);
  return bellwether::bench::Run(options, absl::StrJoin(args, " "));
}
