// Durability benchmarks: checkpoint size and time, ingest throughput by sync mode, and
// recovery time per logged frame. Run by hand (tests/bench/durability_bench.sh starts
// the daemons and calls the subcommands below); nothing here asserts on time.
//
// The scenario is invented: a cold-storage operator of our own making runs refrigerated
// rooms, each reporting room temperature, compressor power, a door sensor and the outdoor
// temperature once a minute. The frames are synthetic (seeded); no real site or data.
//
// Subcommands (each prints readable lines plus machine-readable "@ key value" lines that
// the script collects into its summary table):
//
//   spec [--questions N] [--table N] [--learning per_stream|pooled] | spec --pool NAME
//       Prints the large pool's spec as JSON, or with --pool the small one under NAME.
//   inproc-checkpoint --dir DIR [--questions 1000] [--table 65536] [--frames 3000]
//                     [--streams 1] [--learning per_stream|pooled]
//       In one process: creates the pool, feeds frames, then times Pool::SaveState,
//       EncodeCheckpoint and WriteCheckpoint (file written durably in DIR), then
//       ReadFile, DecodeCheckpoint, Pool::Create and RestoreState, and checks that the
//       restored pool saves the very same bytes. Peak resident memory per phase.
//   daemon-checkpoint --server HOST:PORT [--daemon-pid PID] [same pool flags] [--batch 64]
//       Applies the same pool to a running bellwetherd, feeds the same frames, then times
//       the Checkpoint RPC (client wall time and the daemon's own figure).
//   ingest --server HOST:PORT [--frames 200000] [--batch 64] [--producers 4]
//          [--max-seconds 60] [--pool NAME]
//       Applies the small pool (10 questions) and streams frames from PRODUCERS threads,
//       one stream each, one batch in flight per stream; frames/s from the acks.
//   check-stream --server HOST:PORT --pool NAME --stream NAME
//       Prints the stream's applied seq and answer count (after a restart).
//   checkpoint-stall --server HOST:PORT [--pool coldstore] [--stream room-000] [--batch 8]
//       Continues the stream from its applied seq with one producer; after 2 s calls the
//       Checkpoint RPC; 2 s after it returns, stops. Reports the longest gap between acks
//       (ingest into the pool waits while its state is captured).
//   inproc-recover --dir DIR
//       Times one pass over the write-ahead log that only parses records (ReadWal with a
//       no-op callback), then a full Recover(DIR), in this process. DIR is changed (a torn
//       tail is cut), so give it a copy.
#include <fcntl.h>
#include <malloc.h>
#include <unistd.h>

#include <algorithm>
#include <atomic>
#include <chrono>
#include <cmath>
#include <cstdint>
#include <cstdio>
#include <filesystem>
#include <fstream>
#include <iostream>
#include <map>
#include <memory>
#include <mutex>
#include <random>
#include <sstream>
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
#include "core/frame_input.h"
#include "core/io/crc32c.h"
#include "core/pool.h"
#include "google/protobuf/util/json_util.h"
#include "server/durable_file.h"
#include "server/state_dir.h"
#include "server/wal.h"

namespace bellwether::bench {
namespace {

using SteadyClock = std::chrono::steady_clock;

double SecondsSince(SteadyClock::time_point start) {
  return std::chrono::duration<double>(SteadyClock::now() - start).count();
}

// ---------------------------------------------------------------------------------------
// Options.

struct Options {
  std::string command;
  std::string server;
  std::string dir;
  std::string pool;
  std::string stream;
  std::string learning = "per_stream";
  int questions = 1000;
  int table = 65536;
  int frames = -1;  // per command default
  int streams = 1;
  int batch = 64;
  int producers = 4;
  int max_seconds = 120;
  int daemon_pid = 0;
  uint64_t seed = 11;
};

constexpr char kUsage[] =
    "usage: durability_bench COMMAND [FLAGS]\n"
    "  spec              [--questions N] [--table N] [--learning per_stream|pooled]\n"
    "                    (or --pool NAME: the small pool of ingest and recovery)\n"
    "  inproc-checkpoint --dir DIR [--questions 1000] [--table 65536] [--frames 3000]\n"
    "                    [--streams 1] [--learning per_stream|pooled]\n"
    "  daemon-checkpoint --server HOST:PORT [--daemon-pid PID] [pool flags as above]\n"
    "                    [--batch 64]\n"
    "  ingest            --server HOST:PORT [--frames 200000] [--batch 64] [--producers 4]\n"
    "                    [--max-seconds 120] [--pool NAME]\n"
    "  check-stream      --server HOST:PORT --pool NAME --stream NAME\n"
    "  checkpoint-stall  --server HOST:PORT [--pool coldstore] [--stream room-000] [--batch 8]\n"
    "  inproc-recover    --dir DIR   (changes DIR: pass a copy)\n"
    "Durability benchmarks on an invented cold-storage scenario (synthetic frames). Run by\n"
    "hand; see tests/bench/durability_bench.sh. Predictions are advisory, not a safety\n"
    "system.\n";

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
  if (argc < 2) {
    *error = "";
    return false;
  }
  o->command = argv[1];
  if (o->command == "-h" || o->command == "--help") {
    *error = "";
    return false;
  }
  for (int i = 2; i < argc; ++i) {
    std::string a = argv[i];
    if (a.rfind("--", 0) != 0) {
      *error = absl::StrCat("unexpected argument '", a, "'");
      return false;
    }
    std::string name = a.substr(2), value;
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
    } else if (name == "dir") {
      o->dir = value;
    } else if (name == "pool") {
      o->pool = value;
    } else if (name == "stream") {
      o->stream = value;
    } else if (name == "learning") {
      if (value != "per_stream" && value != "pooled") {
        *error = "--learning: expected per_stream or pooled";
        return false;
      }
      o->learning = value;
    } else if (name == "questions") {
      ok = ParseInt(name, value, 1, 100000, &o->questions, error);
    } else if (name == "table") {
      ok = ParseInt(name, value, 1, 1 << 24, &o->table, error);
    } else if (name == "frames") {
      ok = ParseInt(name, value, 1, 1000000000, &o->frames, error);
    } else if (name == "streams") {
      ok = ParseInt(name, value, 1, 10000, &o->streams, error);
    } else if (name == "batch") {
      ok = ParseInt(name, value, 1, 100000, &o->batch, error);
    } else if (name == "producers") {
      ok = ParseInt(name, value, 1, 64, &o->producers, error);
    } else if (name == "max-seconds") {
      ok = ParseInt(name, value, 1, 3600, &o->max_seconds, error);
    } else if (name == "daemon-pid") {
      ok = ParseInt(name, value, 1, 1 << 30, &o->daemon_pid, error);
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
// Memory: resident set (VmRSS) and its peak (VmHWM) from /proc/PID/status, in MiB.

struct Memory {
  double rss_mib = -1;
  double peak_mib = -1;
};

Memory ReadMemory(const std::string& pid) {
  Memory m;
  std::ifstream in(absl::StrCat("/proc/", pid, "/status"));
  std::string line;
  while (std::getline(in, line)) {
    int64_t kb = 0;
    auto value = [&](const char* key) {
      if (line.rfind(key, 0) != 0) return false;
      std::istringstream s(line.substr(std::string(key).size()));
      s >> kb;
      return true;
    };
    if (value("VmRSS:")) m.rss_mib = static_cast<double>(kb) / 1024.0;
    if (value("VmHWM:")) m.peak_mib = static_cast<double>(kb) / 1024.0;
  }
  return m;
}

Memory SelfMemory() { return ReadMemory("self"); }

// Returns freed heap memory to the system (glibc keeps freed blocks below its mmap
// threshold resident), then resets this process's peak RSS (VmHWM) to its current RSS
// (Linux: clear_refs 5), so the next reading is the peak of the phase that follows.
void ResetPeak() {
  malloc_trim(0);
  const int fd = open("/proc/self/clear_refs", O_WRONLY | O_CLOEXEC);
  if (fd < 0) return;
  const ssize_t n = write(fd, "5", 1);
  (void)n;
  close(fd);
}

void Result(const std::string& key, double value) {
  std::cout << absl::StrFormat("@ %s %.6g\n", key, value);
}
void ResultText(const std::string& key, const std::string& value) {
  std::cout << "@ " << key << " " << value << "\n";
}

// ---------------------------------------------------------------------------------------
// The scenario: refrigerated rooms. Signals in declared order.

constexpr int kRoomTemp = 0, kCompressorKw = 1, kDoorOpen = 2, kOutdoorTemp = 3;
constexpr int kSignals = 4;

void AddSignals(v1::PoolSpec* spec) {
  auto add = [&](const char* name, const char* unit, double lo, double hi) {
    v1::SignalSpec* s = spec->add_signals();
    s->set_name(name);
    s->set_unit(unit);
    s->set_min(lo);
    s->set_max(hi);
  };
  add("room_temp_c", "degC", -35, 5);
  add("compressor_kw", "kW", 0, 120);
  add("door_open", "1", 0, 1);
  add("outdoor_temp_c", "degC", -20, 40);
}

void AddTiles(v1::PoolSpec* spec, std::vector<const char*> signals, uint32_t tilings,
              uint32_t tiles, bool periodic) {
  v1::TileCoding* t = spec->add_features()->mutable_tiles();
  for (const char* s : signals) t->add_signals(s);
  t->set_tilings(tilings);
  t->set_tiles_per_dim(tiles);
  t->set_periodic(periodic);
}

// Cumulant kinds cycled through by the questions.
void SetCumulant(int kind, v1::QuestionSpec* q, std::string* label) {
  v1::Cumulant* c = q->mutable_cumulant();
  switch (kind % 6) {
    case 0:
      *label = "energy";
      c->set_signal("compressor_kw");
      break;
    case 1:
      *label = "temp";
      c->set_signal("room_temp_c");
      break;
    case 2: {
      *label = "warm";  // the room above -15 degC: a temperature excursion
      v1::Condition* ind = c->mutable_indicator();
      ind->set_signal("room_temp_c");
      ind->set_op(">");
      ind->set_threshold(-15);
      break;
    }
    case 3: {
      *label = "door";
      v1::Condition* ind = c->mutable_indicator();
      ind->set_signal("door_open");
      ind->set_op(">=");
      ind->set_threshold(0.5);
      break;
    }
    case 4:
      *label = "seconds";
      c->set_frame_period(true);
      break;
    default:
      *label = "steps";
      c->set_constant(1);
      break;
  }
}

constexpr double kGammas[] = {0.5, 0.8, 0.9, 0.95, 0.97, 0.98, 0.99, 0.995};
constexpr int kNumGammas = 8;

// The large pool of the checkpoint benchmark: `questions` GVFs over a feature recipe hashed
// into `table` entries. Question i has gamma kGammas[i % 8], AUTOSTEP or SETTLING steps
// alternating every 8 questions, and a cumulant cycling every 16: so 16 blocks (weight
// matrices of table x ~questions/16 floats each).
v1::PoolSpec LargeSpec(int questions, int table, bool pooled) {
  v1::PoolSpec spec;
  spec.set_name("coldstore");
  spec.set_time_zone("Europe/Oslo");
  spec.set_learning(pooled ? v1::PoolSpec::POOLED : v1::PoolSpec::PER_STREAM);
  spec.set_feature_table_size(static_cast<uint32_t>(table));
  AddSignals(&spec);
  // 16 tilings x 24^3 tiles = 221,184 tiles on their own: more than the table, so hashed.
  AddTiles(&spec, {"room_temp_c", "compressor_kw", "outdoor_temp_c"}, 16, 24, false);
  AddTiles(&spec, {"clock.hour_of_day"}, 8, 24, true);
  AddTiles(&spec, {"clock.day_of_week", "clock.hour_of_day"}, 4, 7, true);
  AddTiles(&spec, {"door_open"}, 2, 2, false);
  spec.add_features()->mutable_bias();
  // gamma 0.995 needs ~1,400 steps to fall under the verification floor.
  spec.mutable_progress()->set_verify_max_held(2000);
  for (int i = 0; i < questions; ++i) {
    v1::QuestionSpec* q = spec.add_questions();
    const double gamma = kGammas[i % kNumGammas];
    q->set_gamma(gamma);
    q->set_lambda(0.9);
    if ((i / kNumGammas) % 2 == 1) q->set_step_rule(v1::SETTLING);
    std::string label;
    SetCumulant(i / (2 * kNumGammas), q, &label);
    q->set_name(
        absl::StrFormat("q%04d_%s_g%04d", i, label, static_cast<int>(std::lround(gamma * 10000))));
  }
  return spec;
}

// The small pool of the ingest and recovery benchmarks: 10 questions, ~14 active features.
v1::PoolSpec SmallSpec(const std::string& name) {
  v1::PoolSpec spec;
  spec.set_name(name);
  spec.set_time_zone("Europe/Oslo");
  AddSignals(&spec);
  AddTiles(&spec, {"room_temp_c", "compressor_kw"}, 8, 10, false);
  AddTiles(&spec, {"clock.hour_of_day"}, 4, 24, true);
  spec.add_features()->mutable_bias();
  for (int i = 0; i < 10; ++i) {
    v1::QuestionSpec* q = spec.add_questions();
    const double gamma = kGammas[i % kNumGammas];
    q->set_gamma(gamma);
    q->set_lambda(0.9);
    std::string label;
    SetCumulant(i, q, &label);
    q->set_name(absl::StrFormat("q%02d_%s", i, label));
  }
  return spec;
}

// One refrigerated room, a frame a minute: the compressor cycles on a thermostat with
// hysteresis, doors open now and then during working hours, the outdoor temperature
// follows a daily cycle plus a wandering anomaly. Seeded; plausible, not real.
class Room {
 public:
  Room(uint64_t seed, int index) : rng_(seed * 7919u + static_cast<uint64_t>(index)) {
    std::uniform_real_distribution<double> u(0.0, 1.0);
    setpoint_ = -24 + 4 * u(rng_);
    leak_ = 0.01 + 0.02 * u(rng_);
    cooling_ = 0.25 + 0.15 * u(rng_);
    rated_kw_ = 40 + 60 * u(rng_);
    temp_ = setpoint_;
  }

  void Next(v1::Frame* frame) {
    ++seq_;
    // 2026-01-05 00:00 UTC, a Monday.
    constexpr int64_t kStartMicros = int64_t{1767571200} * 1000000;
    const int64_t minute = static_cast<int64_t>(seq_ - 1);
    const double hour = std::fmod(static_cast<double>(minute) / 60.0, 24.0);
    std::normal_distribution<double> noise(0.0, 1.0);
    std::uniform_real_distribution<double> u(0.0, 1.0);
    anomaly_ = 0.995 * anomaly_ + 0.1 * noise(rng_);
    const double outdoor = 2 + 7 * std::sin(2 * 3.141592653589793 * (hour - 9) / 24) + anomaly_;
    const bool working = hour >= 6 && hour < 18;
    if (door_minutes_ > 0) {
      --door_minutes_;
    } else if (working && u(rng_) < 0.02) {
      door_minutes_ = 1 + static_cast<int>(4 * u(rng_));
    }
    const bool door = door_minutes_ > 0;
    if (temp_ > setpoint_ + 2) on_ = true;
    if (temp_ < setpoint_ - 2) on_ = false;
    temp_ += leak_ * (outdoor - temp_) / 10 + (door ? 0.6 : 0) - (on_ ? cooling_ : 0) +
             0.05 * noise(rng_);
    const double kw = std::clamp(on_ ? rated_kw_ * (0.9 + 0.004 * (outdoor + 20)) + 2 * noise(rng_)
                                     : 1.5 + 0.2 * noise(rng_),
                                 0.0, 120.0);
    frame->Clear();
    frame->set_seq(seq_);
    frame->set_unix_micros(kStartMicros + minute * 60 * 1000000);
    frame->add_values(std::clamp(temp_, -35.0, 5.0));
    frame->add_values(kw);
    frame->add_values(door ? 1.0 : 0.0);
    frame->add_values(std::clamp(outdoor, -20.0, 40.0));
    static_assert(kSignals == 4 && kRoomTemp == 0 && kCompressorKw == 1 && kDoorOpen == 2 &&
                  kOutdoorTemp == 3);
  }

 private:
  std::mt19937_64 rng_;
  uint64_t seq_ = 0;
  double setpoint_, leak_, cooling_, rated_kw_, temp_;
  double anomaly_ = 0;
  bool on_ = false;
  int door_minutes_ = 0;
};

std::string RoomName(int i) { return absl::StrFormat("room-%03d", i); }

// ---------------------------------------------------------------------------------------
// Sizes of the learned state, from the pool itself.

struct StateSize {
  size_t blocks = 0;
  uint64_t weight_cells = 0;  // sum over blocks of rows x cols
  uint32_t rows = 0;
};

StateSize MeasureState(const Pool& pool, const std::string& stream) {
  StateSize s;
  s.blocks = pool.spec().blocks.size();
  for (size_t b = 0; b < s.blocks; ++b) {
    const BlockParams* p = pool.block_params(stream, b);
    if (p == nullptr) continue;
    s.weight_cells += static_cast<uint64_t>(p->rows()) * p->cols();
    s.rows = std::max(s.rows, p->rows());
  }
  return s;
}

void PrintPoolShape(const v1::PoolSpec& spec, const Pool& pool, const std::string& stream,
                    int streams) {
  const StateSize s = MeasureState(pool, stream);
  const double cells_mib = static_cast<double>(s.weight_cells) * 4 / (1 << 20);
  std::cout << absl::StrFormat(
      "pool %s: %d questions, %s learning, %d stream(s); %d blocks; feature table %d "
      "rows (featureTableSize %d); rows x cols over all blocks = %d cells = %.1f MiB per "
      "float array (%s)\n",
      spec.name(), spec.questions_size(),
      spec.learning() == v1::PoolSpec::POOLED ? "POOLED" : "PER_STREAM", streams, s.blocks, s.rows,
      spec.feature_table_size(), s.weight_cells, cells_mib,
      spec.learning() == v1::PoolSpec::POOLED ? "one set for the pool" : "per stream");
  std::cout << absl::StrFormat(
      "verification memory: %.1f MiB per stream\n",
      static_cast<double>(pool.verification_memory_bytes(stream)) / (1 << 20));
  Result("pool.blocks", static_cast<double>(s.blocks));
  Result("pool.rows", s.rows);
  Result("pool.array_mib", cells_mib);
}

// ---------------------------------------------------------------------------------------
// inproc-checkpoint

absl::StatusOr<std::string> ReadWholeFile(const std::string& path) {
  std::ifstream in(path, std::ios::binary | std::ios::ate);
  if (!in) return absl::NotFoundError(absl::StrCat(path, ": cannot open"));
  const std::streamsize size = in.tellg();
  in.seekg(0);
  std::string out(static_cast<size_t>(size), '\0');
  if (!in.read(out.data(), size)) return absl::DataLossError(absl::StrCat(path, ": short read"));
  return out;
}

int InProcessCheckpoint(const Options& o) {
  if (o.dir.empty()) {
    std::cerr << "durability_bench: inproc-checkpoint needs --dir\n";
    return 1;
  }
  const int frames = o.frames > 0 ? o.frames : 3000;
  const v1::PoolSpec spec = LargeSpec(o.questions, o.table, o.learning == "pooled");
  const Memory at_start = SelfMemory();

  auto t0 = SteadyClock::now();
  auto created = Pool::Create(spec);
  if (!created.ok()) {
    std::cerr << "durability_bench: Pool::Create: " << created.status() << "\n";
    return 2;
  }
  std::unique_ptr<Pool> pool = *std::move(created);
  const double create_s = SecondsSince(t0);

  // Feed: round robin over the streams, one frame each in turn.
  auto columns = ColumnMap::Create(pool->spec().signal_names, {});
  if (!columns.ok()) {
    std::cerr << "durability_bench: " << columns.status() << "\n";
    return 2;
  }
  std::vector<Room> rooms;
  for (int i = 0; i < o.streams; ++i) rooms.emplace_back(o.seed, i);
  v1::Frame frame;
  std::vector<double> buffer;
  FrameInput input;
  t0 = SteadyClock::now();
  for (int f = 0; f < frames; ++f) {
    const int i = f % o.streams;
    rooms[static_cast<size_t>(i)].Next(&frame);
    absl::Status s = FrameFromProto(frame, *columns, &buffer, &input);
    if (s.ok()) s = pool->Apply(RoomName(i), input);
    if (!s.ok()) {
      std::cerr << "durability_bench: frame " << f << ": " << s << "\n";
      return 2;
    }
  }
  const double feed_s = SecondsSince(t0);
  const Memory after_feed = SelfMemory();
  PrintPoolShape(spec, *pool, RoomName(0), o.streams);
  std::cout << absl::StrFormat(
      "created in %.3f s; fed %d frames in %.2f s (%.0f frames/s, %.2f ms per frame); RSS "
      "%.0f MiB (%.0f MiB at start)\n",
      create_s, frames, feed_s, frames / feed_s, 1000 * feed_s / frames, after_feed.rss_mib,
      at_start.rss_mib);
  Result("inproc.feed_frames", frames);
  Result("inproc.feed_s", feed_s);
  Result("inproc.rss_after_feed_mib", after_feed.rss_mib);

  // Write: SaveState, then the checkpoint file as the daemon writes it.
  ResetPeak();
  t0 = SteadyClock::now();
  std::string state;
  pool->SaveState(&state);
  const double save_s = SecondsSince(t0);
  const Memory after_save = SelfMemory();
  const uint64_t state_bytes = state.size();

  // Diagnostic: the same SaveState into a string reserved to the final size beforehand
  // (how much of the time above is the string growing and copying itself), then once
  // more into that string's pages, already faulted in (the copy alone).
  double save_reserved_s = 0, save_copy_s = 0;
  {
    std::string reserved;
    reserved.reserve(state_bytes);
    t0 = SteadyClock::now();
    pool->SaveState(&reserved);
    save_reserved_s = SecondsSince(t0);
    reserved.clear();  // keeps the capacity
    t0 = SteadyClock::now();
    pool->SaveState(&reserved);
    save_copy_s = SecondsSince(t0);
  }

  v1::Checkpoint checkpoint;
  checkpoint.set_format_version(server::kStateFormatVersion);
  checkpoint.set_created_unix_micros(absl::ToUnixMicros(absl::Now()));
  checkpoint.set_start_lsn(1);
  v1::PoolCheckpoint* pc = checkpoint.add_pools();
  *pc->mutable_spec() = spec;
  pc->set_generation(1);
  pc->set_wal_lsn(1);
  *pc->mutable_state() = std::move(state);

  // Diagnostic: EncodeCheckpoint's two big steps on their own.
  double serialize_s = 0, crc_s = 0;
  {
    t0 = SteadyClock::now();
    const std::string payload = checkpoint.SerializeAsString();
    serialize_s = SecondsSince(t0);
    t0 = SteadyClock::now();
    const uint32_t crc = Crc32c(payload);
    crc_s = SecondsSince(t0);
    if (payload.empty()) std::cout << "SerializeAsString gave nothing (crc " << crc << ")\n";
  }

  ResetPeak();
  t0 = SteadyClock::now();
  absl::StatusOr<std::string> encoded_or = server::EncodeCheckpoint(checkpoint);
  const double encode_s = SecondsSince(t0);
  if (!encoded_or.ok()) {
    std::cerr << "durability_bench: EncodeCheckpoint: " << encoded_or.status() << "\n";
    return 2;
  }
  std::string encoded = *std::move(encoded_or);
  const Memory encode_mem = SelfMemory();
  const uint64_t encoded_bytes = encoded.size();
  // The file half of WriteCheckpoint on its own: write, fsync, rename, fsync the directory.
  t0 = SteadyClock::now();
  if (absl::Status s = server::WriteFileDurably(o.dir, "bench-copy.bin", encoded); !s.ok()) {
    std::cerr << "durability_bench: WriteFileDurably: " << s << "\n";
    return 2;
  }
  const double durable_write_s = SecondsSince(t0);
  std::filesystem::remove(o.dir + "/bench-copy.bin");
  encoded.clear();
  encoded.shrink_to_fit();

  ResetPeak();
  t0 = SteadyClock::now();
  auto written = server::WriteCheckpoint(o.dir, checkpoint);
  const double write_s = SecondsSince(t0);
  const Memory write_mem = SelfMemory();
  if (!written.ok()) {
    std::cerr << "durability_bench: WriteCheckpoint: " << written.status() << "\n";
    return 2;
  }
  const std::string file = absl::StrFormat("%s/checkpoint-%020d.bwc", o.dir, 1);
  const double arrays = static_cast<double>(state_bytes) /
                        (static_cast<double>(MeasureState(*pool, RoomName(0)).weight_cells) * 4 *
                         (spec.learning() == v1::PoolSpec::POOLED ? 1 : o.streams));
  std::cout << absl::StrFormat(
      "SaveState: %.3f s, %d bytes (%.1f MiB; %.2f x one float array), RSS %.0f MiB after; "
      "into a string reserved to that size beforehand: %.3f s; again into the same, already "
      "faulted-in string: %.3f s\n",
      save_s, state_bytes, static_cast<double>(state_bytes) / (1 << 20), arrays, after_save.rss_mib,
      save_reserved_s, save_copy_s);
  std::cout << absl::StrFormat(
      "EncodeCheckpoint: %.3f s, %d bytes; peak RSS during it %.0f MiB (%.0f MiB before it); "
      "of which alone: Checkpoint::SerializeAsString %.3f s, Crc32c %.3f s\n",
      encode_s, encoded_bytes, encode_mem.peak_mib, after_save.rss_mib, serialize_s, crc_s);
  std::cout << absl::StrFormat(
      "WriteFileDurably of those bytes alone (write + fsync + rename + dir fsync): %.3f s "
      "(%.0f MiB/s)\n",
      durable_write_s, static_cast<double>(encoded_bytes) / (1 << 20) / durable_write_s);
  std::cout << absl::StrFormat(
      "WriteCheckpoint (encode + write + fsync + rename + dir fsync): %.3f s, %d bytes to %s; "
      "peak RSS during it %.0f MiB\n",
      write_s, *written, file, write_mem.peak_mib);
  Result("inproc.state_bytes", static_cast<double>(state_bytes));
  Result("inproc.state_arrays", arrays);
  Result("inproc.save_s", save_s);
  Result("inproc.save_reserved_s", save_reserved_s);
  Result("inproc.save_copy_s", save_copy_s);
  Result("inproc.serialize_s", serialize_s);
  Result("inproc.crc_s", crc_s);
  Result("inproc.encode_s", encode_s);
  Result("inproc.write_s", write_s);
  Result("inproc.durable_write_s", durable_write_s);
  Result("inproc.file_bytes", static_cast<double>(*written));
  Result("inproc.encode_peak_mib", encode_mem.peak_mib);
  Result("inproc.write_peak_mib", write_mem.peak_mib);
  Result("inproc.rss_before_write_mib", after_save.rss_mib);

  // Load, as recovery does it: read the file, decode, create the pool, restore.
  pool.reset();
  checkpoint = v1::Checkpoint();
  ResetPeak();
  const Memory before_load = SelfMemory();
  const auto load_start = SteadyClock::now();
  t0 = SteadyClock::now();
  auto bytes = ReadWholeFile(file);
  const double read_s = SecondsSince(t0);
  if (!bytes.ok()) {
    std::cerr << "durability_bench: " << bytes.status() << "\n";
    return 2;
  }
  t0 = SteadyClock::now();
  auto decoded = server::DecodeCheckpoint(*bytes);
  const double decode_s = SecondsSince(t0);
  if (!decoded.ok()) {
    std::cerr << "durability_bench: DecodeCheckpoint: " << decoded.status() << "\n";
    return 2;
  }
  bytes->clear();
  bytes->shrink_to_fit();
  if (decoded->pools_size() != 1) {
    std::cout << absl::StrFormat(
        "PROBLEM: the checkpoint file decodes to %d pools, expected 1 (the state was %d "
        "bytes; protobuf cannot serialize a message over 2 GiB)\n",
        decoded->pools_size(), state_bytes);
    ResultText("inproc.roundtrip", "LOST");
    return 2;
  }
  t0 = SteadyClock::now();
  auto restored = Pool::Create(decoded->pools(0).spec());
  const double recreate_s = SecondsSince(t0);
  if (!restored.ok()) {
    std::cerr << "durability_bench: Pool::Create (load): " << restored.status() << "\n";
    return 2;
  }
  t0 = SteadyClock::now();
  if (absl::Status s = (*restored)->RestoreState(decoded->pools(0).state()); !s.ok()) {
    std::cerr << "durability_bench: RestoreState: " << s << "\n";
    return 2;
  }
  const double restore_s = SecondsSince(t0);
  const double load_s = SecondsSince(load_start);
  const Memory load_mem = SelfMemory();
  std::cout << absl::StrFormat(
      "load: read %.3f s + DecodeCheckpoint %.3f s + Pool::Create %.3f s + RestoreState "
      "%.3f s = %.3f s; peak RSS during load %.0f MiB (%.0f MiB before it)\n",
      read_s, decode_s, recreate_s, restore_s, load_s, load_mem.peak_mib, before_load.rss_mib);
  Result("inproc.read_s", read_s);
  Result("inproc.decode_s", decode_s);
  Result("inproc.create_s", recreate_s);
  Result("inproc.restore_s", restore_s);
  Result("inproc.load_s", load_s);
  Result("inproc.load_peak_mib", load_mem.peak_mib);
  Result("inproc.rss_before_load_mib", before_load.rss_mib);

  // The restored pool must hold exactly what was saved (else the figures mean nothing).
  std::string again;
  again.reserve(decoded->pools(0).state().size());
  (*restored)->SaveState(&again);
  const bool same = again == decoded->pools(0).state();
  std::cout << "restored pool saves the same bytes: " << (same ? "yes" : "NO") << "\n";
  ResultText("inproc.roundtrip", same ? "identical" : "DIFFERENT");

  // The daemon's own load path on the same directory (no log: only the checkpoint).
  again.clear();
  again.shrink_to_fit();
  restored->reset();
  decoded = v1::Checkpoint();
  ResetPeak();
  const Memory before_recover = SelfMemory();
  t0 = SteadyClock::now();
  auto recovered = server::Recover(o.dir);
  const double recover_s = SecondsSince(t0);
  const Memory recover_mem = SelfMemory();
  if (!recovered.ok()) {
    std::cerr << "durability_bench: Recover: " << recovered.status() << "\n";
    return 2;
  }
  std::cout << absl::StrFormat(
      "server::Recover(dir) (what bellwetherd runs at start): %.3f s, %d pool(s); peak RSS "
      "during it %.0f MiB (%.0f MiB before it)\n",
      recover_s, recovered->pools.size(), recover_mem.peak_mib, before_recover.rss_mib);
  Result("inproc.recover_s", recover_s);
  Result("inproc.recover_peak_mib", recover_mem.peak_mib);
  Result("inproc.rss_before_recover_mib", before_recover.rss_mib);
  return same ? 0 : 2;
}

// ---------------------------------------------------------------------------------------
// Client-side helpers.

std::string CodeName(const absl::Status& s) {
  return GrpcCodeName(static_cast<grpc::StatusCode>(s.code()));
}

// Streams `frames` frames of `room` into pool/stream in batches of `batch`, one in flight.
struct ProducerReport {
  uint64_t frames_acked = 0;
  uint64_t batches = 0;
  uint64_t rejected = 0;
  uint64_t durable_behind = 0;  // acks whose durable_seq was below applied_seq
  uint64_t durable_zero = 0;    // acks with durable_seq 0
  std::string error;
};

ProducerReport Produce(Client& client, const std::string& pool, const std::string& stream,
                       Room room, int frames, int batch_size, SteadyClock::time_point deadline) {
  ProducerReport r;
  auto session = client.OpenIngest(pool, stream, {});
  if (!session.ok()) {
    r.error = absl::StrCat("open: ", CodeName(session.status()), ": ", session.status().message());
    return r;
  }
  v1::FrameBatch batch;
  int sent = 0;
  while (sent < frames && SteadyClock::now() < deadline) {
    batch.Clear();
    const int n = std::min(batch_size, frames - sent);
    for (int i = 0; i < n; ++i) room.Next(batch.add_frames());
    auto ack = (*session)->Send(batch);
    if (!ack.ok()) {
      r.error = absl::StrCat(CodeName(ack.status()), ": ", ack.status().message());
      return r;
    }
    sent += n;
    ++r.batches;
    r.frames_acked += static_cast<uint64_t>(n - ack->rejected_size());
    r.rejected += static_cast<uint64_t>(ack->rejected_size());
    if (ack->durable_seq() == 0) {
      ++r.durable_zero;
    } else if (ack->durable_seq() < ack->applied_seq()) {
      ++r.durable_behind;
    }
  }
  if (absl::Status s = (*session)->Finish(); !s.ok() && r.error.empty()) {
    r.error = absl::StrCat("finish: ", CodeName(s), ": ", s.message());
  }
  return r;
}

struct IngestTotals {
  uint64_t frames = 0, batches = 0, rejected = 0, durable_behind = 0, durable_zero = 0;
  double seconds = 0;
  std::vector<std::string> errors;
};

IngestTotals RunProducers(Client& client, const std::string& pool, int producers, int frames,
                          int batch, int max_seconds, uint64_t seed) {
  std::vector<ProducerReport> reports(static_cast<size_t>(producers));
  std::vector<std::thread> threads;
  const auto start = SteadyClock::now();
  const auto deadline = start + std::chrono::seconds(max_seconds);
  for (int p = 0; p < producers; ++p) {
    const int share = frames / producers + (p < frames % producers ? 1 : 0);
    threads.emplace_back([&, p, share] {
      reports[static_cast<size_t>(p)] =
          Produce(client, pool, RoomName(p), Room(seed, p), share, batch, deadline);
    });
  }
  for (std::thread& t : threads) t.join();
  IngestTotals t;
  t.seconds = SecondsSince(start);
  for (const ProducerReport& r : reports) {
    t.frames += r.frames_acked;
    t.batches += r.batches;
    t.rejected += r.rejected;
    t.durable_behind += r.durable_behind;
    t.durable_zero += r.durable_zero;
    if (!r.error.empty()) t.errors.push_back(r.error);
  }
  return t;
}

// ---------------------------------------------------------------------------------------
// daemon-checkpoint

int DaemonCheckpoint(const Options& o) {
  const int frames = o.frames > 0 ? o.frames : 3000;
  const v1::PoolSpec spec = LargeSpec(o.questions, o.table, o.learning == "pooled");
  auto client = Client::Connect(o.server);
  if (absl::Status s = client->WaitUntilReachable(absl::Seconds(10)); !s.ok()) {
    std::cerr << "durability_bench: " << o.server << ": " << s << "\n";
    return 2;
  }
  const std::string pid = absl::StrCat(o.daemon_pid);
  auto t0 = SteadyClock::now();
  auto applied = client->ApplyPool(spec, false, absl::Seconds(120));
  const double apply_s = SecondsSince(t0);
  if (!applied.ok()) {
    std::cerr << "durability_bench: ApplyPool: " << applied.status() << "\n";
    return 2;
  }
  const Memory after_apply = o.daemon_pid > 0 ? ReadMemory(pid) : Memory();
  std::cout << absl::StrFormat("ApplyPool (%d questions, table %d): %.3f s; daemon RSS %.0f MiB\n",
                               o.questions, o.table, apply_s, after_apply.rss_mib);
  // Streams in turn would each need their own session; the benchmark feeds them one
  // after another (frames / streams each), as the in-process run does round robin.
  t0 = SteadyClock::now();
  IngestTotals fed;
  for (int i = 0; i < o.streams; ++i) {
    const int share = frames / o.streams + (i < frames % o.streams ? 1 : 0);
    ProducerReport r = Produce(*client, spec.name(), RoomName(i), Room(o.seed, i), share, o.batch,
                               SteadyClock::now() + std::chrono::seconds(o.max_seconds));
    fed.frames += r.frames_acked;
    if (!r.error.empty()) fed.errors.push_back(r.error);
  }
  const double feed_s = SecondsSince(t0);
  if (!fed.errors.empty() || fed.frames != static_cast<uint64_t>(frames)) {
    std::cerr << "durability_bench: feeding the daemon: " << fed.frames << " of " << frames
              << " frames acknowledged; " << absl::StrJoin(fed.errors, "; ") << "\n";
    return 2;
  }
  const Memory before = o.daemon_pid > 0 ? ReadMemory(pid) : Memory();
  std::cout << absl::StrFormat(
      "fed %d frames in batches of %d in %.2f s (%.0f frames/s, --sync=batch); daemon RSS "
      "%.0f MiB, peak so far %.0f MiB\n",
      frames, o.batch, feed_s, frames / feed_s, before.rss_mib, before.peak_mib);
  Result("daemon.feed_s", feed_s);
  Result("daemon.rss_before_mib", before.rss_mib);
  Result("daemon.peak_before_mib", before.peak_mib);

  t0 = SteadyClock::now();
  auto done = client->Checkpoint(absl::Seconds(1200));
  const double rpc_s = SecondsSince(t0);
  if (!done.ok()) {
    std::cerr << "durability_bench: Checkpoint RPC: " << done.status() << " after " << rpc_s
              << " s\n";
    return 2;
  }
  const Memory after = o.daemon_pid > 0 ? ReadMemory(pid) : Memory();
  std::cout << absl::StrFormat(
      "Checkpoint RPC: %.3f s at the client, %.3f s in the daemon; %d pools, %d bytes "
      "(%.1f MiB) to %s; daemon RSS %.0f MiB after, peak %.0f MiB\n",
      rpc_s, done->seconds(), done->pools(), done->bytes(),
      static_cast<double>(done->bytes()) / (1 << 20), done->file(), after.rss_mib, after.peak_mib);
  Result("daemon.checkpoint_rpc_s", rpc_s);
  Result("daemon.checkpoint_s", done->seconds());
  Result("daemon.checkpoint_bytes", static_cast<double>(done->bytes()));
  Result("daemon.rss_after_mib", after.rss_mib);
  Result("daemon.peak_after_mib", after.peak_mib);
  ResultText("daemon.stream_seq", absl::StrCat(frames / o.streams));
  return 0;
}

// ---------------------------------------------------------------------------------------
// checkpoint-stall: a Checkpoint RPC while one producer keeps streaming into the pool. The
// pool's writer captures the state between two batches, so ingest into that pool waits
// while SaveState runs; the longest gap between acknowledgements shows how long.

int CheckpointStall(const Options& o) {
  const std::string pool = o.pool.empty() ? "coldstore" : o.pool;
  const std::string stream = o.stream.empty() ? RoomName(0) : o.stream;
  auto client = Client::Connect(o.server);
  IngestOptions io;
  io.resume = true;
  auto session = client->OpenIngest(pool, stream, {}, io);
  if (!session.ok()) {
    std::cerr << "durability_bench: open " << pool << "/" << stream << ": " << session.status()
              << "\n";
    return 2;
  }
  // Continue the stream where it stands: the same room, advanced past the frames sent.
  Room room(o.seed, 0);
  v1::Frame skip;
  for (uint64_t i = 0; i < (*session)->resumed_seq(); ++i) room.Next(&skip);

  struct Ack {
    double at = 0;  // seconds since start
    int frames = 0;
  };
  std::vector<Ack> acks;
  std::atomic<bool> stop{false};
  std::string error;
  const auto start = SteadyClock::now();
  std::thread producer([&] {
    v1::FrameBatch batch;
    while (!stop.load()) {
      batch.Clear();
      for (int i = 0; i < o.batch; ++i) room.Next(batch.add_frames());
      auto ack = (*session)->Send(batch);
      if (!ack.ok()) {
        error = absl::StrCat(CodeName(ack.status()), ": ", ack.status().message());
        return;
      }
      acks.push_back(Ack{SecondsSince(start), o.batch - ack->rejected_size()});
    }
  });
  constexpr double kQuietSeconds = 2;
  std::this_thread::sleep_for(std::chrono::duration<double>(kQuietSeconds));
  const double rpc_start = SecondsSince(start);
  auto done = client->Checkpoint(absl::Seconds(1200));
  const double rpc_end = SecondsSince(start);
  std::this_thread::sleep_for(std::chrono::duration<double>(kQuietSeconds));
  stop.store(true);
  producer.join();
  (void)(*session)->Finish();
  if (!done.ok()) {
    std::cerr << "durability_bench: Checkpoint RPC: " << done.status() << "\n";
    return 2;
  }
  if (!error.empty()) std::cout << "  producer error: " << error << "\n";

  // Gaps between consecutive acks (the first measured from the start).
  double prev = 0, max_gap = 0, max_gap_at = 0;
  std::vector<double> quiet_gaps;
  int frames_before = 0, frames_during = 0;
  for (const Ack& a : acks) {
    const double gap = a.at - prev;
    if (a.at <= rpc_start) {
      quiet_gaps.push_back(gap);
      frames_before += a.frames;
    } else if (a.at <= rpc_end) {
      frames_during += a.frames;
    }
    if (a.at > rpc_start && gap > max_gap) {
      max_gap = gap;
      max_gap_at = prev;
    }
    prev = a.at;
  }
  std::sort(quiet_gaps.begin(), quiet_gaps.end());
  const double median_quiet = quiet_gaps.empty() ? 0 : quiet_gaps[quiet_gaps.size() / 2];
  std::cout << absl::StrFormat(
      "one producer, batches of %d into %s/%s: %.0f frames/s before the checkpoint (median ack "
      "gap %.1f ms); Checkpoint RPC %.3f s under ingest (daemon %.3f s, %d bytes); %d frames "
      "acknowledged during it (%.0f frames/s); longest ack gap %.3f s, from %.3f s after the "
      "RPC began\n",
      o.batch, pool, stream, frames_before / rpc_start, 1000 * median_quiet, rpc_end - rpc_start,
      done->seconds(), done->bytes(), frames_during, frames_during / (rpc_end - rpc_start), max_gap,
      max_gap_at - rpc_start);
  Result("stall.rpc_s", rpc_end - rpc_start);
  Result("stall.max_gap_s", max_gap);
  Result("stall.median_gap_ms", 1000 * median_quiet);
  Result("stall.frames_during", frames_during);
  return error.empty() ? 0 : 2;
}

// ---------------------------------------------------------------------------------------
// ingest

int Ingest(const Options& o) {
  const int frames = o.frames > 0 ? o.frames : 200000;
  const std::string pool = o.pool.empty() ? "coldstore-small" : o.pool;
  auto client = Client::Connect(o.server);
  if (absl::Status s = client->WaitUntilReachable(absl::Seconds(10)); !s.ok()) {
    std::cerr << "durability_bench: " << o.server << ": " << s << "\n";
    return 2;
  }
  if (auto a = client->ApplyPool(SmallSpec(pool)); !a.ok()) {
    std::cerr << "durability_bench: ApplyPool: " << a.status() << "\n";
    return 2;
  }
  const IngestTotals t =
      RunProducers(*client, pool, o.producers, frames, o.batch, o.max_seconds, o.seed);
  const double fps = t.seconds > 0 ? static_cast<double>(t.frames) / t.seconds : 0;
  std::cout << absl::StrFormat(
      "ingest: %d frames acknowledged of %d asked (%d producers, one stream each, batches of "
      "%d, one batch in flight per stream) in %.2f s: %.0f frames/s, %.0f batches/s; "
      "rejected %d; acks with durable_seq 0: %d, behind applied_seq: %d\n",
      t.frames, frames, o.producers, o.batch, t.seconds, fps,
      static_cast<double>(t.batches) / t.seconds, t.rejected, t.durable_zero, t.durable_behind);
  for (const std::string& e : t.errors) std::cout << "  producer error: " << e << "\n";
  if (t.frames < static_cast<uint64_t>(frames)) {
    std::cout << absl::StrFormat("NOTE: the %d s cap (or an error) stopped the run early\n",
                                 o.max_seconds);
  }
  Result("ingest.frames", static_cast<double>(t.frames));
  Result("ingest.seconds", t.seconds);
  Result("ingest.fps", fps);
  Result("ingest.durable_zero", static_cast<double>(t.durable_zero));
  Result("ingest.errors", static_cast<double>(t.errors.size()));
  return t.errors.empty() ? 0 : 2;
}

// ---------------------------------------------------------------------------------------
// check-stream

int CheckStream(const Options& o) {
  auto client = Client::Connect(o.server);
  auto answers = client->Predict(o.pool, o.stream, absl::Seconds(30));
  if (!answers.ok()) {
    std::cerr << "durability_bench: Predict " << o.pool << "/" << o.stream << ": "
              << answers.status() << "\n";
    return 2;
  }
  const uint64_t as_of = answers->as_of_seq();
  std::cout << absl::StrFormat("%s/%s after restart: %d answers as of seq %d\n", o.pool, o.stream,
                               answers->predictions_size(), as_of);
  ResultText("check.as_of_seq", absl::StrCat(as_of));
  ResultText("check.answers", absl::StrCat(answers->predictions_size()));
  return 0;
}

// ---------------------------------------------------------------------------------------
// inproc-recover

int InProcessRecover(const Options& o) {
  if (o.dir.empty()) {
    std::cerr << "durability_bench: inproc-recover needs --dir\n";
    return 1;
  }
  uint64_t log_bytes = 0, segments = 0;
  std::error_code ec;
  for (const auto& e : std::filesystem::directory_iterator(o.dir, ec)) {
    if (e.path().filename().string().rfind("wal-", 0) == 0) {
      log_bytes += e.file_size();
      ++segments;
    }
  }
  // Pass 1: what Recover's first ReadWal does (parse and check every record, no apply).
  auto t0 = SteadyClock::now();
  uint64_t records = 0, frames = 0, next_lsn = 0;
  std::string warning;
  absl::Status s = server::ReadWal(
      o.dir, 0,
      [&](const v1::WalRecord& r) {
        ++records;
        if (r.has_batch()) frames += static_cast<uint64_t>(r.batch().batch().frames_size());
        return absl::OkStatus();
      },
      &next_lsn, &warning, /*repair=*/false);
  const double scan_s = SecondsSince(t0);
  if (!s.ok()) {
    std::cerr << "durability_bench: ReadWal: " << s << "\n";
    return 2;
  }
  ResetPeak();
  t0 = SteadyClock::now();
  auto recovered = server::Recover(o.dir);
  const double recover_s = SecondsSince(t0);
  const Memory mem = SelfMemory();
  if (!recovered.ok()) {
    std::cerr << "durability_bench: Recover: " << recovered.status() << "\n";
    return 2;
  }
  std::cout << absl::StrFormat(
      "log: %d segment(s), %.1f MiB, %d records, %d frames (%.1f bytes per frame)%s\n", segments,
      static_cast<double>(log_bytes) / (1 << 20), records, frames,
      frames > 0 ? static_cast<double>(log_bytes) / static_cast<double>(frames) : 0.0,
      warning.empty() ? "" : absl::StrCat("; ", warning));
  std::cout << absl::StrFormat(
      "in-process: one parse-only pass over the log %.3f s; Recover() %.3f s (%d records, %d "
      "frames replayed; it reads the log twice); peak RSS %.0f MiB\n",
      scan_s, recover_s, recovered->records_replayed, recovered->frames_replayed, mem.peak_mib);
  Result("recover.log_bytes", static_cast<double>(log_bytes));
  Result("recover.log_frames", static_cast<double>(frames));
  Result("recover.scan_s", scan_s);
  Result("recover.inproc_s", recover_s);
  Result("recover.frames_replayed", static_cast<double>(recovered->frames_replayed));
  Result("recover.peak_mib", mem.peak_mib);
  return 0;
}

int PrintSpec(const Options& o) {
  std::string json;
  google::protobuf::util::JsonPrintOptions print;
  print.add_whitespace = true;
  // --pool NAME prints the small pool (ingest and recovery) under that name.
  const v1::PoolSpec spec =
      !o.pool.empty() ? SmallSpec(o.pool) : LargeSpec(o.questions, o.table, o.learning == "pooled");
  const auto status = google::protobuf::util::MessageToJsonString(spec, &json, print);
  if (!status.ok()) {
    std::cerr << "durability_bench: " << status.ToString() << "\n";
    return 1;
  }
  std::cout << json;
  return 0;
}

int Run(const Options& o) {
  if (o.command == "spec") return PrintSpec(o);
  if (o.command == "inproc-checkpoint") return InProcessCheckpoint(o);
  if (o.command == "inproc-recover") return InProcessRecover(o);
  if (o.server.empty()) {
    std::cerr << "durability_bench: " << o.command << " needs --server HOST:PORT\n";
    return 1;
  }
  if (o.command == "daemon-checkpoint") return DaemonCheckpoint(o);
  if (o.command == "ingest") return Ingest(o);
  if (o.command == "check-stream") return CheckStream(o);
  if (o.command == "checkpoint-stall") return CheckpointStall(o);
  std::cerr << "durability_bench: unknown command '" << o.command << "'\n" << kUsage;
  return 1;
}

}  // namespace
}  // namespace bellwether::bench

int main(int argc, char** argv) {
  bellwether::bench::Options options;
  std::string error;
  if (!bellwether::bench::ParseArgs(argc, argv, &options, &error)) {
    if (error.empty()) {
      std::cout << bellwether::bench::kUsage;
      return argc < 2 ? 1 : 0;
    }
    std::cerr << "durability_bench: " << error << "\n" << bellwether::bench::kUsage;
    return 1;
  }
  if (options.command != "spec") {
    std::vector<std::string> args(argv, argv + argc);
    std::cout << "command: " << absl::StrJoin(args, " ") << "\n";
  }
  return bellwether::bench::Run(options);
}
