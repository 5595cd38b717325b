// The engine alone, in process: how long Pool::Apply takes per frame on the load
// benchmark's pool and frames, with no gRPC, log or history around it. It separates what
// the engine costs from what the daemon adds (tests/bench/load_gen.cc measures the two
// together), and gives profilers a steady single-threaded target:
//   perf record -g build/tests/bench/engine_bench --frames 400000
// Run by hand; nothing asserts on time. Frames: tests/bench/synthetic_buildings.h
// (invented buildings; predictions are advisory, not a safety system).
//
// Usage: engine_bench [--spec FILE] [--streams 8] [--batch 256] [--frames 200000]
//                     [--warmup-frames 20000] [--repeats 5] [--sink] [--seed 7]
//   --sink  installs a verification sink that keeps each verified point, as the daemon's
//           stream history does
// Prints frames/s and microseconds per frame for each repeat, and their median.
#include <algorithm>
#include <chrono>
#include <cstdint>
#include <cstdlib>
#include <iostream>
#include <string>
#include <vector>

#include "absl/strings/numbers.h"
#include "absl/strings/str_format.h"
#include "core/frame_input.h"
#include "core/io/spec_json.h"
#include "core/pool.h"
#include "tests/bench/synthetic_buildings.h"

namespace bellwether::bench {
namespace {

struct Options {
  std::string spec = std::string(BELLWETHER_SOURCE_DIR) + "/tests/bench/load_gen_pool_fixed.json";
  int streams = 8;
  int batch = 256;
  int64_t frames = 200000;
  int64_t warmup_frames = 20000;
  int repeats = 5;
  bool sink = false;
  uint64_t seed = 7;
};

bool ParseArgs(int argc, char** argv, Options* o) {
  for (int i = 1; i < argc; ++i) {
    const std::string a = argv[i];
    auto next = [&](std::string* out) {
      if (i + 1 >= argc) return false;
      *out = argv[++i];
      return true;
    };
    std::string v;
    bool ok = true;
    if (a == "--sink") {
      o->sink = true;
    } else if (a == "--spec") {
      ok = next(&o->spec);
    } else if (a == "--streams") {
      ok = next(&v) && absl::SimpleAtoi(v, &o->streams) && o->streams >= 1;
    } else if (a == "--batch") {
      ok = next(&v) && absl::SimpleAtoi(v, &o->batch) && o->batch >= 1;
    } else if (a == "--frames") {
      ok = next(&v) && absl::SimpleAtoi(v, &o->frames) && o->frames >= 1;
    } else if (a == "--warmup-frames") {
      ok = next(&v) && absl::SimpleAtoi(v, &o->warmup_frames) && o->warmup_frames >= 0;
    } else if (a == "--repeats") {
      ok = next(&v) && absl::SimpleAtoi(v, &o->repeats) && o->repeats >= 1;
    } else if (a == "--seed") {
      ok = next(&v) && absl::SimpleAtoi(v, &o->seed);
    } else {
      std::cerr << "engine_bench: unknown flag " << a << "\n";
      return false;
    }
    if (!ok) {
      std::cerr << "engine_bench: " << a << " needs a valid value\n";
      return false;
    }
  }
  return true;
}

// Round-robin over the streams, `batch` consecutive frames of one stream at a time (as
// the daemon's writer applies a batch), continuing each stream's seq and clock.
class Driver {
 public:
  Driver(Pool& pool, const Options& o) : pool_(pool), batch_(o.batch) {
    for (int i = 0; i < o.streams; ++i) {
      streams_.push_back({absl::StrFormat("building-%04d", i), BuildingWeek(o.seed, i), 0});
    }
  }

  // Applies `frames` frames; false (with a message) if the pool refused one.
  bool Run(int64_t frames) {
    FrameInput in;
    in.time_kind = FrameTimeKind::kUnix;
    for (int64_t done = 0; done < frames;) {
      Stream& s = streams_[next_];
      next_ = (next_ + 1) % streams_.size();
      for (int k = 0; k < batch_ && done < frames; ++k, ++done) {
        const uint64_t seq = ++s.seq;
        in.seq = seq;
        in.time_micros = kStartMicros + static_cast<int64_t>(seq - 1) * kFrameSeconds * 1000000;
        in.values = absl::MakeConstSpan(&s.week[((seq - 1) % kFramesPerWeek) * kSignals], kSignals);
        if (absl::Status st = pool_.Apply(s.name, in); !st.ok()) {
          std::cerr << "engine_bench: " << st << "\n";
          return false;
        }
      }
    }
    return true;
  }

 private:
  struct Stream {
    std::string name;
    std::vector<double> week;
    uint64_t seq;
  };
  Pool& pool_;
  int batch_;
  std::vector<Stream> streams_;
  size_t next_ = 0;
};

int Main(int argc, char** argv) {
  Options o;
  if (!ParseArgs(argc, argv, &o)) return 2;
  auto spec = ReadPoolSpecFile(o.spec);
  if (!spec.ok()) {
    std::cerr << "engine_bench: " << spec.status() << "\n";
    return 1;
  }
  auto pool = Pool::Create(*spec);
  if (!pool.ok()) {
    std::cerr << "engine_bench: " << pool.status() << "\n";
    return 1;
  }
  struct Point {
    size_t question;
    uint64_t seq;
    double predicted, realized;
    bool truncated;
  };
  std::vector<Point> points;
  points.reserve(1 << 16);
  if (o.sink) {
    (*pool)->SetVerificationSink(
        [&points](const std::string&, absl::Span<const VerifiedPoint> verified) {
          for (const VerifiedPoint& v : verified) {
            if (points.size() == points.capacity()) points.clear();
            points.push_back({v.question, v.seq, v.prediction, v.realized, v.truncated});
          }
        });
  }
  const auto& cs = (*pool)->spec();
  std::cout << absl::StrFormat(
      "engine_bench: pool %s, %d questions in %d blocks, %d features; %d streams, batches of "
      "%d, %d frames x %d repeats after %d warm-up frames%s\n",
      (*pool)->name(), cs.questions.size(), cs.blocks.size(), cs.recipe->num_features(), o.streams,
      o.batch, o.frames, o.repeats, o.warmup_frames, o.sink ? "; verification sink on" : "");
  Driver driver(**pool, o);
  if (!driver.Run(o.warmup_frames)) return 1;
  std::vector<double> us_per_frame;
  for (int r = 0; r < o.repeats; ++r) {
    const auto start = std::chrono::steady_clock::now();
    if (!driver.Run(o.frames)) return 1;
    const double s =
        std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
    us_per_frame.push_back(s * 1e6 / static_cast<double>(o.frames));
    std::cout << absl::StrFormat("repeat %d: %.0f frames/s, %.3f us per frame\n", r + 1,
                                 static_cast<double>(o.frames) / s, us_per_frame.back());
  }
  std::sort(us_per_frame.begin(), us_per_frame.end());
  const double median = us_per_frame[us_per_frame.size() / 2];
  std::cout << absl::StrFormat("median: %.0f frames/s, %.3f us per frame (one thread)\n",
                               1e6 / median, median);
  return 0;
}

}  // namespace
}  // namespace bellwether::bench

int main(int argc, char** argv) { return bellwether::bench::Main(argc, argv); }
