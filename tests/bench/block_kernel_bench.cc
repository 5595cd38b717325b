// Block TD(lambda) kernel benchmark (Google Benchmark) on the workload written by
// ../shared/bench/block_td_reference.py gen (format in that script: 5 x int32 header T, Q,
// N, K, version 1; int32 active indices [T, K]; float32 cumulants [T, Q]).
//
// It runs, with the reference's gamma, lambda, alpha / K and pruning level:
//   LazyKernel    core/learners/lazy_block_td.h (the project's block kernel)
//   EagerKernel   a straightforward loop over the pruned trace (for comparison)
//   Engine/...    the engine's BlockLearner (core/learners/block_learner.h) with FIXED,
//                 AUTOSTEP and TIDBD steps, as the engine runs them (RUPEE on), and FIXED
//                 with RUPEE off, on the first --engine_frames frames
// and, in the same run, this machine's limits: a STREAM-style triad (a = b + s c over
// doubles, 24 bytes per element) at sizes for L1, L2, L3 and DRAM, and an FMA-throughput
// loop (12 independent chains of 8-float FMAs, 2 FLOP each). It prints the checksums of
// the reference's run (checksum_w_sum, checksum_w_sq, last_prediction_mean), and a summary:
// frames/s, question-updates/s, the ratio to the NumPy reference's question-updates/s
// (--numpy_qups, measured by block_kernel_bench.sh in the same run), and each kernel's
// bytes/s and FLOP/s as fractions of the triad and FMA figures, with a roofline. Rates
// are given per wall-clock second and per CPU-second of the benchmark thread (on a shared
// machine the second is the steadier one); triad, FMA and the fractions use CPU time.
//
// Usage:
//   block_kernel_bench --workload=FILE [--gamma=0.99 --lam=0.9 --alpha=0.1 --prune=1e-4]
//       [--numpy_qups=X] [--numpy_checksums=SUM,SQ,MEAN] [--engine_frames=2000]
//       [--history=128] [--check] [--check_eager] [--check_engine] [benchmark flags]
// --check prints the lazy kernel's checksums (and the eager loop's / the engine FIXED
// path's with --check_eager / --check_engine) for one pass and exits: no timing.
// Byte and FLOP counts are the kernel's own (LazyBlockTdStats; the eager loop counts the
// same way): bytes of weight rows, S history and step vectors loaded and stored.
#include <immintrin.h>

#include <algorithm>
#include <chrono>
#include <cmath>
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <ctime>
#include <fstream>
#include <limits>
#include <map>
#include <memory>
#include <string>
#include <vector>

#include "absl/strings/numbers.h"
#include "absl/strings/str_split.h"
#include "absl/types/span.h"
#include "benchmark/benchmark.h"
#include "core/features/feature_recipe.h"
#include "core/features/sparse_features.h"
#include "core/features/tile_coder.h"
#include "core/learners/block_learner.h"
#include "core/learners/lazy_block_td.h"
#include "core/pool_spec.h"

namespace bellwether {
namespace {

// ---- Flags --------------------------------------------------------------------------

struct Flags {
  std::string workload;
  double gamma = 0.99, lam = 0.9, alpha = 0.1, prune = 1e-4;
  double numpy_qups = 0;      // the reference's question-updates per wall-clock second
  double numpy_cpu_qups = 0;  // and per CPU-second of its process (block_kernel_bench.sh)
  std::vector<double> numpy_checksums;
  int engine_frames = 2000;
  uint32_t history = 128;
  bool check = false, check_eager = false, check_engine = false;
  int passes = 1;  // --check: lazy passes (for profiling with perf)
};
Flags g_flags;

// Consumes our --name=value flags from argv; leaves the rest for Google Benchmark.
bool ParseFlags(int* argc, char** argv) {
  int out = 1;
  bool ok = true;
  for (int i = 1; i < *argc; ++i) {
    const std::string a = argv[i];
    auto value = [&](const char* name, std::string* v) {
      const std::string prefix = std::string("--") + name + "=";
      if (a.rfind(prefix, 0) != 0) return false;
      *v = a.substr(prefix.size());
      return true;
    };
    std::string v;
    auto number = [&](double* d) {
      if (!absl::SimpleAtod(v, d)) {
        std::fprintf(stderr, "bad number in %s\n", a.c_str());
        ok = false;
      }
    };
    double d = 0;
    if (value("workload", &v)) {
      g_flags.workload = v;
    } else if (value("gamma", &v)) {
      number(&g_flags.gamma);
    } else if (value("lam", &v)) {
      number(&g_flags.lam);
    } else if (value("alpha", &v)) {
      number(&g_flags.alpha);
    } else if (value("prune", &v)) {
      number(&g_flags.prune);
    } else if (value("numpy_qups", &v)) {
      number(&g_flags.numpy_qups);
    } else if (value("numpy_cpu_qups", &v)) {
      number(&g_flags.numpy_cpu_qups);
    } else if (value("engine_frames", &v)) {
      number(&d);
      g_flags.engine_frames = static_cast<int>(d);
    } else if (value("passes", &v)) {
      number(&d);
      g_flags.passes = std::max(1, static_cast<int>(d));
    } else if (value("history", &v)) {
      number(&d);
      g_flags.history = static_cast<uint32_t>(d);
    } else if (value("numpy_checksums", &v)) {
      for (absl::string_view part : absl::StrSplit(v, ',')) {
        double c = 0;
        if (!absl::SimpleAtod(part, &c)) ok = false;
        g_flags.numpy_checksums.push_back(c);
      }
      if (g_flags.numpy_checksums.size() != 3) ok = false;
    } else if (a == "--check") {
      g_flags.check = true;
    } else if (a == "--check_eager") {
      g_flags.check = g_flags.check_eager = true;
    } else if (a == "--check_engine") {
      g_flags.check = g_flags.check_engine = true;
    } else {
      argv[out++] = argv[i];
    }
  }
  *argc = out;
  return ok && !g_flags.workload.empty();
}

// ---- The workload -----------------------------------------------------------------------

struct Workload {
  uint32_t frames = 0, questions = 0, features = 0, active = 0;
  std::vector<uint32_t> idx;  // [frames, active]
  std::vector<float> cum;     // [frames, questions]
  absl::Span<const uint32_t> x(uint32_t t) const { return {&idx[size_t{t} * active], active}; }
  absl::Span<const float> c(uint32_t t) const { return {&cum[size_t{t} * questions], questions}; }
};

bool LoadWorkload(const std::string& path, Workload* w) {
  std::ifstream in(path, std::ios::binary);
  int32_t header[5];
  if (!in.read(reinterpret_cast<char*>(header), sizeof(header))) return false;
  if (header[4] != 1 || header[0] < 2 || header[1] <= 0 || header[2] <= 0 || header[3] <= 0) {
    std::fprintf(stderr, "%s: unexpected header\n", path.c_str());
    return false;
  }
  w->frames = static_cast<uint32_t>(header[0]);
  w->questions = static_cast<uint32_t>(header[1]);
  w->features = static_cast<uint32_t>(header[2]);
  w->active = static_cast<uint32_t>(header[3]);
  w->idx.resize(size_t{w->frames} * w->active);
  w->cum.resize(size_t{w->frames} * w->questions);
  in.read(reinterpret_cast<char*>(w->idx.data()),
          static_cast<std::streamsize>(w->idx.size() * sizeof(uint32_t)));
  in.read(reinterpret_cast<char*>(w->cum.data()),
          static_cast<std::streamsize>(w->cum.size() * sizeof(float)));
  if (!in) return false;
  for (uint32_t j : w->idx) {
    if (j >= w->features) return false;
  }
  return true;
}

Workload g_work;

struct Checksums {
  double w_sum = 0, w_sq = 0, last_mean = 0;
};

// The reference's checksums: W.sum(), (W^2).sum() in float64, and the mean over questions
// of the float32 prediction W[x_{T-1}].sum(0). `row(j)` gives feature j's weights.
template <typename RowFn>
Checksums ComputeChecksums(RowFn row) {
  Checksums c;
  const uint32_t nq = g_work.questions;
  for (uint32_t j = 0; j < g_work.features; ++j) {
    const float* w = row(j);
    for (uint32_t q = 0; q < nq; ++q) {
      const double v = static_cast<double>(w[q]);
      c.w_sum += v;
      c.w_sq += v * v;
    }
  }
  std::vector<float> pred(nq, 0.0f);
  for (uint32_t j : g_work.x(g_work.frames - 1)) {
    const float* w = row(j);
    for (uint32_t q = 0; q < nq; ++q) pred[q] += w[q];
  }
  for (float p : pred) c.last_mean += static_cast<double>(p);
  c.last_mean /= nq;
  return c;
}

void PrintChecksums(const char* who, const Checksums& c) {
  std::printf("%s checksum_w_sum=%.6e checksum_w_sq=%.6e last_prediction_mean=%.6e\n", who, c.w_sum,
              c.w_sq, c.last_mean);
}

float StepSize() { return static_cast<float>(g_flags.alpha / g_work.active); }
float GammaLambda() { return static_cast<float>(g_flags.gamma * g_flags.lam); }

// ---- Results shared with the summary ----------------------------------------------------

struct Measured {
  double seconds = 0;  // timed wall-clock seconds over all passes
  double cpu = 0;      // this thread's CPU seconds in the same intervals
  double frames = 0;   // frames learned in them
  double bytes = 0, flops = 0;
  double value = 0;  // triad: bytes/s; FMA: FLOP/s
};
std::map<std::string, Measured> g_results;
std::map<std::string, Checksums> g_checksums;
size_t g_lazy_trace_rows = 0;
size_t g_eager_trace_rows = 0;

using Clock = std::chrono::steady_clock;
double Since(Clock::time_point t0) {
  return std::chrono::duration<double>(Clock::now() - t0).count();
}
// This thread's CPU time: on a shared machine it shows how much of the wall time the
// kernel actually ran.
double ThreadCpu() {
  timespec ts;
  clock_gettime(CLOCK_THREAD_CPUTIME_ID, &ts);
  return static_cast<double>(ts.tv_sec) + 1e-9 * static_cast<double>(ts.tv_nsec);
}

// ---- Machine limits -----------------------------------------------------------------------

// Timed by this thread's CPU clock around the whole loop (a clock read per iteration
// would cost more than an L1-sized triad).
void BM_Triad(benchmark::State& state) {
  const size_t n = static_cast<size_t>(state.range(0));
  std::vector<double> a(n, 0.0), b(n, 1.0), c(n, 2.0);
  const double s = 3.0;
  double bytes = 0;
  const double t0 = ThreadCpu();
  for (auto _ : state) {
    double* __restrict pa = a.data();
    const double* __restrict pb = b.data();
    const double* __restrict pc = c.data();
    for (size_t i = 0; i < n; ++i) pa[i] = pb[i] + s * pc[i];
    benchmark::ClobberMemory();
    bytes += 24.0 * static_cast<double>(n);
  }
  const double seconds = ThreadCpu() - t0;
  benchmark::DoNotOptimize(a.data());
  state.SetBytesProcessed(static_cast<int64_t>(bytes));
  g_results["Triad/" + std::to_string(n)].value = bytes / seconds;
  state.counters["GB/s"] = bytes / seconds / 1e9;
}

void BM_FmaPeak(benchmark::State& state) {
  constexpr int kChains = 12;
  constexpr int64_t kSteps = 1 << 16;
  __m256 acc[kChains];
  for (int i = 0; i < kChains; ++i) acc[i] = _mm256_set1_ps(static_cast<float>(i));
  const __m256 m = _mm256_set1_ps(0.999999f), add = _mm256_set1_ps(1e-3f);
  double flops = 0;
  const double t0 = ThreadCpu();
  for (auto _ : state) {
    for (int64_t s = 0; s < kSteps; ++s) {
      for (int i = 0; i < kChains; ++i) acc[i] = _mm256_fmadd_ps(acc[i], m, add);
    }
    for (int i = 0; i < kChains; ++i) benchmark::DoNotOptimize(acc[i]);
    flops += 2.0 * 8 * kChains * static_cast<double>(kSteps);
  }
  const double seconds = ThreadCpu() - t0;
  g_results["FmaPeak"].value = flops / seconds;
  state.counters["GFLOP/s"] = flops / seconds / 1e9;
}

// ---- The lazy kernel ----------------------------------------------------------------------

std::unique_ptr<LazyBlockTd> NewLazy() {
  LazyBlockTdOptions o;
  o.num_features = g_work.features;
  o.num_questions = g_work.questions;
  o.max_active = g_work.active;
  o.prune = static_cast<float>(g_flags.prune);
  o.history_frames = g_flags.history;
  auto k = LazyBlockTd::Create(o);
  if (!k.ok()) {
    std::fprintf(stderr, "%s\n", k.status().ToString().c_str());
    std::exit(2);
  }
  return std::move(k).value();
}

// One pass over the workload from zero weights, as the reference's run does.
bool LazyPass(LazyBlockTd& k) {
  const std::vector<float> alpha(g_work.questions, StepSize());
  LazyBlockTdFrame f;
  f.step_sizes = alpha;
  f.gamma_next = static_cast<float>(g_flags.gamma);
  f.trace_decay = static_cast<double>(GammaLambda());
  for (uint32_t t = 0; t + 1 < g_work.frames; ++t) {
    f.x = SparseRows{g_work.x(t), {}};
    f.x_next = SparseRows{g_work.x(t + 1), {}};
    f.cumulants = g_work.c(t + 1);
    if (!k.Learn(f).ok()) return false;
  }
  k.Flush();
  return true;
}

Checksums LazyChecksums(const LazyBlockTd& k) {
  return ComputeChecksums([&](uint32_t j) { return k.row(j); });
}

void BM_LazyKernel(benchmark::State& state) {
  auto k = NewLazy();
  Measured m;
  for (auto _ : state) {
    state.PauseTiming();
    // Zero weights and trace, reusing the memory (the first pass also pays page faults).
    k->ClearTrace();
    std::memset(k->mutable_row(0), 0, sizeof(float) * k->row_stride() * g_work.features);
    const LazyBlockTdStats before = k->stats();
    state.ResumeTiming();
    const auto t0 = Clock::now();
    const double c0 = ThreadCpu();
    if (!LazyPass(*k)) state.SkipWithError("lazy kernel failed");
    m.cpu += ThreadCpu() - c0;
    m.seconds += Since(t0);
    state.PauseTiming();
    m.frames += static_cast<double>(k->stats().frames - before.frames);
    m.bytes += static_cast<double>(k->stats().bytes - before.bytes);
    m.flops += static_cast<double>(k->stats().flops - before.flops);
    state.ResumeTiming();
  }
  g_results["LazyKernel"] = m;
  g_checksums["LazyKernel"] = LazyChecksums(*k);
  const LazyBlockTdStats& s = k->stats();
  const double frames = static_cast<double>(s.frames);
  state.counters["frames/s"] = m.frames / m.seconds;
  state.counters["q_updates/s"] = m.frames * g_work.questions / m.seconds;
  state.counters["rows_read/frame"] = static_cast<double>(s.rows_read) / frames;
  state.counters["syncs1/frame"] = static_cast<double>(s.one_frame_syncs) / frames;
  state.counters["syncsN/frame"] = static_cast<double>(s.multi_frame_syncs) / frames;
  state.counters["pruned/frame"] = static_cast<double>(s.pruned) / frames;
  state.counters["rebase_rows/frame"] = static_cast<double>(s.rebase_rows) / frames;
  state.counters["trace_rows"] = static_cast<double>(k->trace_size());
  g_lazy_trace_rows = k->trace_size();
}

// ---- The eager loop -----------------------------------------------------------------------

// The straightforward kernel: a dense trace with a list of its non-zero rows; per frame
// v, v' by rows, delta, decay + prune + accumulate, then w_j += e_j (alpha delta) for every
// row in the trace. Weights feature-major, rows padded to 8 floats.
class EagerKernel {
 public:
  EagerKernel()
      : nq_(g_work.questions),
        stride_((g_work.questions + 7) / 8 * 8),
        w_(size_t{g_work.features} * stride_, 0.0f),
        e_(g_work.features, 0.0f),
        v_(stride_),
        vn_(stride_),
        ad_(stride_) {
    active_.reserve(g_work.features);
  }

  void Frame(absl::Span<const uint32_t> x, absl::Span<const uint32_t> xn, absl::Span<const float> c,
             float alpha, float gamma, float gl, float prune) {
    Dot(x, v_.data());
    Dot(xn, vn_.data());
    for (size_t q = 0; q < nq_; ++q) ad_[q] = alpha * (c[q] + gamma * vn_[q] - v_[q]);
    // e = gl e, pruned; e[x] += 1.
    size_t kept = 0;
    for (uint32_t j : active_) {
      const float v = e_[j] * gl;
      if (std::fabs(v) < prune) {
        e_[j] = 0.0f;
      } else {
        e_[j] = v;
        active_[kept++] = j;
      }
    }
    active_.resize(kept);
    for (uint32_t j : x) {
      if (e_[j] == 0.0f) active_.push_back(j);
      e_[j] += 1.0f;
    }
    // W += outer(e, alpha delta) over the trace.
    const float* __restrict ad = ad_.data();
    for (uint32_t j : active_) {
      const float ej = e_[j];
      float* __restrict w = &w_[size_t{j} * stride_];
      for (size_t q = 0; q < nq_; ++q) w[q] += ej * ad[q];
    }
    rows_updated_ += active_.size();
    rows_read_ += x.size() + xn.size();
  }
  void Reset() {
    std::fill(w_.begin(), w_.end(), 0.0f);
    std::fill(e_.begin(), e_.end(), 0.0f);
    active_.clear();
  }
  const float* row(uint32_t j) const { return &w_[size_t{j} * stride_]; }
  // Bytes and FLOPs counted as the lazy kernel counts them.
  double bytes() const {
    return static_cast<double>(nq_) *
           (4.0 * static_cast<double>(rows_read_) + 12.0 * static_cast<double>(rows_updated_));
  }
  double flops() const {
    return static_cast<double>(nq_) *
           (2.0 * static_cast<double>(rows_read_) + 2.0 * static_cast<double>(rows_updated_));
  }
  uint64_t rows_updated() const { return rows_updated_; }

 private:
  void Dot(absl::Span<const uint32_t> x, float* __restrict out) const {
    std::fill(out, out + nq_, 0.0f);
    for (uint32_t j : x) {
      const float* __restrict w = &w_[size_t{j} * stride_];
      for (size_t q = 0; q < nq_; ++q) out[q] += w[q];
    }
  }
  size_t nq_, stride_;
  std::vector<float> w_, e_, v_, vn_, ad_;
  std::vector<uint32_t> active_;
  uint64_t rows_updated_ = 0, rows_read_ = 0;
};

void EagerPass(EagerKernel& k) {
  const float alpha = StepSize(), g = static_cast<float>(g_flags.gamma), gl = GammaLambda();
  const float prune = static_cast<float>(g_flags.prune);
  for (uint32_t t = 0; t + 1 < g_work.frames; ++t) {
    k.Frame(g_work.x(t), g_work.x(t + 1), g_work.c(t + 1), alpha, g, gl, prune);
  }
}

void BM_EagerKernel(benchmark::State& state) {
  auto k = std::make_unique<EagerKernel>();
  Measured m;
  for (auto _ : state) {
    state.PauseTiming();
    k->Reset();
    const double bytes0 = k->bytes(), flops0 = k->flops();
    state.ResumeTiming();
    const auto t0 = Clock::now();
    const double c0 = ThreadCpu();
    EagerPass(*k);
    m.cpu += ThreadCpu() - c0;
    m.seconds += Since(t0);
    state.PauseTiming();
    m.frames += g_work.frames - 1;
    m.bytes += k->bytes() - bytes0;
    m.flops += k->flops() - flops0;
    state.ResumeTiming();
  }
  g_results["EagerKernel"] = m;
  g_checksums["EagerKernel"] = ComputeChecksums([&](uint32_t j) { return k->row(j); });
  state.counters["frames/s"] = m.frames / m.seconds;
  state.counters["q_updates/s"] = m.frames * g_work.questions / m.seconds;
  state.counters["trace_rows/frame"] =
      static_cast<double>(k->rows_updated()) / (m.frames > 0 ? m.frames : 1.0);
  g_eager_trace_rows = static_cast<size_t>(state.counters["trace_rows/frame"]);
}

// ---- The engine's BlockLearner --------------------------------------------------------------

// One block of the workload's questions as the engine compiles it: TD(lambda), gamma,
// lambda, step size alpha (FIXED divides it by |x|^2 = K, as the reference divides by K),
// over a hashed tile table of exactly N entries with K active features (no bias).
struct EngineSetup {
  std::unique_ptr<FeatureRecipe> recipe;
  BlockSpec spec;
  std::vector<CompiledQuestion> questions;
};

EngineSetup MakeEngine(StepRuleKind rule, bool rupee) {
  EngineSetup s;
  TileCoder::Options to;
  to.lo = {0.0, 0.0};
  to.hi = {1.0, 1.0};
  to.tilings = g_work.active;
  to.tiles_per_dim = 1024;  // (1025^2) K tiles: more than N, so they are hashed into N
  std::vector<FeatureRecipe::TileGroup> tiles;
  tiles.push_back(FeatureRecipe::TileGroup{TileCoder(to), {0, 1}});
  s.recipe = std::make_unique<FeatureRecipe>(
      std::move(tiles), std::vector<FeatureRecipe::RbfGroup>{},
      std::vector<FeatureRecipe::RawGroup>{}, false, g_work.features);
  s.spec.gamma = g_flags.gamma;
  s.spec.lambda = g_flags.lam;
  s.spec.learner = LearnerKind::kTd;
  s.spec.step_rule = rule;
  s.spec.rupee = rupee;
  for (uint32_t q = 0; q < g_work.questions; ++q) {
    CompiledQuestion cq;
    cq.name = "q" + std::to_string(q);
    cq.gamma = g_flags.gamma;
    cq.lambda = g_flags.lam;
    cq.step_rule = rule;
    cq.step_size = g_flags.alpha;
    cq.index_in_block = q;
    s.questions.push_back(cq);
    s.spec.questions.push_back(q);
  }
  return s;
}

struct EngineRun {
  EngineSetup setup;
  std::unique_ptr<BlockParams> params;
  std::unique_ptr<BlockTraceState> trace;
  std::unique_ptr<BlockLearner> learner;
  SparseFeatures x, xn;
  std::vector<double> cum, answers;
};

std::unique_ptr<EngineRun> NewEngineRun(StepRuleKind rule, bool rupee) {
  auto r = std::make_unique<EngineRun>();
  r->setup = MakeEngine(rule, rupee);
  if (r->setup.recipe->num_features() != g_work.features) {
    std::fprintf(stderr, "engine recipe has %u features, workload %u\n",
                 r->setup.recipe->num_features(), g_work.features);
    std::exit(2);
  }
  r->params = std::make_unique<BlockParams>(r->setup.spec, r->setup.questions, *r->setup.recipe, 1);
  r->trace = std::make_unique<BlockTraceState>(g_work.features);
  r->learner = std::make_unique<BlockLearner>(g_work.features, g_work.questions, 1);
  r->x.Reserve(g_work.active);
  r->xn.Reserve(g_work.active);
  r->cum.resize(g_work.questions);
  r->answers.resize(g_work.questions);
  return r;
}

void EngineFrames(EngineRun& r, uint32_t frames) {
  for (uint32_t t = 0; t < frames && t + 1 < g_work.frames; ++t) {
    r.x.Clear();
    r.xn.Clear();
    for (uint32_t j : g_work.x(t)) r.x.Add(j, 1.0f);
    for (uint32_t j : g_work.x(t + 1)) r.xn.Add(j, 1.0f);
    const absl::Span<const float> c = g_work.c(t + 1);
    for (uint32_t q = 0; q < g_work.questions; ++q) r.cum[q] = static_cast<double>(c[q]);
    BlockStep step;
    step.x = &r.x;
    step.x_next = &r.xn;
    step.gamma_next = g_flags.gamma;
    step.cumulants = r.cum;
    r.learner->Learn(r.setup.spec, r.setup.questions, step, *r.params, *r.trace,
                     absl::MakeSpan(r.answers), nullptr);
  }
}

void BM_Engine(benchmark::State& state, StepRuleKind rule, bool rupee, std::string name) {
  const uint32_t frames =
      static_cast<uint32_t>(std::min<int64_t>(g_flags.engine_frames, g_work.frames - 1));
  Measured m;
  for (auto _ : state) {
    state.PauseTiming();
    auto r = NewEngineRun(rule, rupee);
    state.ResumeTiming();
    const auto t0 = Clock::now();
    const double c0 = ThreadCpu();
    EngineFrames(*r, frames);
    m.cpu += ThreadCpu() - c0;
    m.seconds += Since(t0);
    m.frames += frames;
    state.PauseTiming();
    r = nullptr;
    state.ResumeTiming();
  }
  g_results[name] = m;
  state.counters["frames/s"] = m.frames / m.seconds;
  state.counters["q_updates/s"] = m.frames * g_work.questions / m.seconds;
}

// The lazy kernel on the engine's frame count, for a like-for-like ratio.
void BM_LazyFirstFrames(benchmark::State& state) {
  const uint32_t frames =
      static_cast<uint32_t>(std::min<int64_t>(g_flags.engine_frames, g_work.frames - 1));
  const std::vector<float> alpha(g_work.questions, StepSize());
  Measured m;
  for (auto _ : state) {
    state.PauseTiming();
    auto k = NewLazy();
    state.ResumeTiming();
    const auto t0 = Clock::now();
    const double c0 = ThreadCpu();
    LazyBlockTdFrame f;
    f.step_sizes = alpha;
    f.gamma_next = static_cast<float>(g_flags.gamma);
    f.trace_decay = static_cast<double>(GammaLambda());
    for (uint32_t t = 0; t < frames; ++t) {
      f.x = SparseRows{g_work.x(t), {}};
      f.x_next = SparseRows{g_work.x(t + 1), {}};
      f.cumulants = g_work.c(t + 1);
      if (!k->Learn(f).ok()) state.SkipWithError("lazy kernel failed");
    }
    m.cpu += ThreadCpu() - c0;
    m.seconds += Since(t0);
    m.frames += frames;
    state.PauseTiming();
    k = nullptr;
    state.ResumeTiming();
  }
  g_results["LazyFirstFrames"] = m;
  state.counters["frames/s"] = m.frames / m.seconds;
}

// ---- Summary --------------------------------------------------------------------------------

// Bytes a kernel keeps touching: the trace's rows of W (each is read or written again
// within its ~80-frame life), plus for the lazy kernel one epoch's S history and the row
// states, for the eager loop its dense trace.
double WorkingSetBytes(const std::string& name) {
  const double nq = g_work.questions;
  if (name == "LazyKernel") {
    return static_cast<double>(g_lazy_trace_rows) * (4.0 * nq + 16.0) +
           (g_flags.history + 1.0) * 8.0 * nq;
  }
  return static_cast<double>(g_eager_trace_rows) * 4.0 * nq + 4.0 * g_work.features;
}

double Rel(double a, double b) { return std::fabs(a - b) / std::max(std::fabs(b), 1e-30); }

int PrintSummary() {
  int rc = 0;
  const uint32_t nq = g_work.questions;
  std::printf("\n=== block kernel summary: %u frames, %u questions, %u features, %u active ===\n",
              g_work.frames, nq, g_work.features, g_work.active);
  for (const auto& [name, c] : g_checksums) PrintChecksums(name.c_str(), c);
  if (g_flags.numpy_checksums.size() == 3) {
    const Checksums ref{g_flags.numpy_checksums[0], g_flags.numpy_checksums[1],
                        g_flags.numpy_checksums[2]};
    PrintChecksums("NumPyReference", ref);
    for (const auto& [name, c] : g_checksums) {
      const double worst = std::max(
          {Rel(c.w_sum, ref.w_sum), Rel(c.w_sq, ref.w_sq), Rel(c.last_mean, ref.last_mean)});
      std::printf("%s vs NumPy: worst relative checksum difference %.2e (%s 1e-4)\n", name.c_str(),
                  worst, worst <= 1e-4 ? "within" : "NOT within");
      if (worst > 1e-4) rc = 1;
    }
  }
  const double triad_dram = g_results["Triad/16777216"].value;
  const double triad_l3 = g_results["Triad/524288"].value;
  const double triad_l2 = g_results["Triad/16384"].value;
  const double triad_l1 = g_results["Triad/1024"].value;
  const double fma = g_results["FmaPeak"].value;
  std::printf(
      "machine (one core, per CPU-second): triad %.1f GB/s DRAM (3 x 128 MiB), %.1f GB/s L3 (3 x 4 "
      "MiB), "
      "%.1f GB/s L2 (3 x 128 KiB), %.1f GB/s L1 (3 x 8 KiB); FMA %.1f GFLOP/s (AVX2)\n",
      triad_dram / 1e9, triad_l3 / 1e9, triad_l2 / 1e9, triad_l1 / 1e9, fma / 1e9);
  if (g_flags.numpy_qups > 0) {
    std::printf("NumPy reference (same run): %.3f M question-updates/s (wall clock)",
                g_flags.numpy_qups / 1e6);
    if (g_flags.numpy_cpu_qups > 0) {
      std::printf(", %.3f M per CPU-second of its process", g_flags.numpy_cpu_qups / 1e6);
    }
    std::printf("\n");
  }
  for (const char* name : {"LazyKernel", "EagerKernel"}) {
    if (!g_results.count(name)) continue;
    const Measured& m = g_results[name];
    const double fps = m.frames / m.seconds, qups = fps * nq;
    // Bytes and FLOPs per CPU-second, like the triad and FMA figures.
    const double bps = m.bytes / m.cpu, flops = m.flops / m.cpu;
    const double cpu_qups = m.frames * nq / m.cpu;
    std::printf("%s: %.0f frames/s, %.2f M question-updates/s", name, fps, qups / 1e6);
    if (g_flags.numpy_qups > 0) std::printf(" = %.1fx NumPy", qups / g_flags.numpy_qups);
    std::printf(" (wall clock; the thread ran %.0f%% of it)\n", 100.0 * m.cpu / m.seconds);
    std::printf("  per CPU-second: %.0f frames, %.2f M question-updates", m.frames / m.cpu,
                cpu_qups / 1e6);
    if (g_flags.numpy_cpu_qups > 0)
      std::printf(" = %.1fx NumPy", cpu_qups / g_flags.numpy_cpu_qups);
    std::printf(
        "\n  per CPU-second: bytes %.1f GB/s = %.2f of DRAM triad, %.2f of L3, %.2f of L2; "
        "FLOP %.1f GFLOP/s = %.3f of FMA peak\n",
        bps / 1e9, bps / triad_dram, bps / triad_l3, bps / triad_l2, flops / 1e9, flops / fma);
    // Roofline: the bandwidth roof is the triad of the cache level that holds the kernel's
    // working set (this machine: L2 1 MiB per core, L3 32 MiB shared).
    const double ws = WorkingSetBytes(name);
    const bool in_l2 = ws <= 1024.0 * 1024, in_l3 = ws <= 32.0 * 1024 * 1024;
    const char* level = in_l2 ? "L2" : in_l3 ? "L3" : "DRAM";
    const double bw = in_l2 ? triad_l2 : in_l3 ? triad_l3 : triad_dram;
    const double ai = m.flops / m.bytes, roof = std::min(fma, ai * bw);
    std::printf(
        "  roofline: %.3f FLOP/byte vs machine balance %.1f FLOP/byte (%s): %s-bound; working "
        "set %.2f MiB -> %s triad %.1f GB/s x %.3f = %.1f GFLOP/s attainable, reached %.2f\n",
        ai, fma / bw, level, ai * bw < fma ? "bandwidth" : "compute", ws / (1 << 20), level,
        bw / 1e9, ai, roof / 1e9, flops / roof);
  }
  if (g_results.count("LazyKernel") && g_results.count("EagerKernel")) {
    const Measured& l = g_results["LazyKernel"];
    const Measured& e = g_results["EagerKernel"];
    std::printf("lazy / eager speed: %.1fx wall clock, %.1fx per CPU-second\n",
                (l.frames / l.seconds) / (e.frames / e.seconds),
                (l.frames / l.cpu) / (e.frames / e.cpu));
  }
  const char* engine[] = {"Engine/FIXED", "Engine/FIXED_norupee", "Engine/AUTOSTEP",
                          "Engine/TIDBD"};
  if (g_results.count("Engine/FIXED")) {
    // Per CPU-second: on a shared machine wall-clock ratios of runs this short are noise.
    const double fixed = g_results["Engine/FIXED"].frames / g_results["Engine/FIXED"].cpu;
    std::printf("engine BlockLearner, first %d frames (RUPEE on unless noted), per CPU-second:\n",
                g_flags.engine_frames);
    for (const char* name : engine) {
      if (!g_results.count(name)) continue;
      const Measured& m = g_results[name];
      const double fps = m.frames / m.cpu;
      std::printf("  %-22s %9.0f frames  %8.2f M question-updates  cost %.2fx FIXED", name, fps,
                  fps * nq / 1e6, fixed / fps);
      if (g_flags.numpy_cpu_qups > 0) {
        std::printf("  %.1fx NumPy", fps * nq / g_flags.numpy_cpu_qups);
      }
      std::printf("  (wall %.0f frames/s)\n", m.frames / m.seconds);
    }
    if (g_results.count("LazyFirstFrames")) {
      const Measured& m = g_results["LazyFirstFrames"];
      const double lazy = m.frames / m.cpu;
      std::printf("  %-22s %9.0f frames  (%.1fx engine FIXED on the same frames)\n", "LazyKernel",
                  lazy, lazy / fixed);
    }
  }
  return rc;
}

// --check: one pass, checksums, no timing.
int RunCheck() {
  auto k = NewLazy();
  for (int pass = 0; pass < g_flags.passes; ++pass) {
    k->ClearTrace();
    std::memset(k->mutable_row(0), 0, sizeof(float) * k->row_stride() * g_work.features);
    if (!LazyPass(*k)) {
      std::fprintf(stderr, "lazy kernel failed\n");
      return 2;
    }
  }
  PrintChecksums("LazyKernel", LazyChecksums(*k));
  std::printf("lazy_stats frames=%lu rebases=%lu pruned=%lu multi_frame_syncs=%lu\n",
              static_cast<unsigned long>(k->stats().frames),
              static_cast<unsigned long>(k->stats().rebases),
              static_cast<unsigned long>(k->stats().pruned),
              static_cast<unsigned long>(k->stats().multi_frame_syncs));
  if (g_flags.check_eager) {
    EagerKernel e;
    EagerPass(e);
    PrintChecksums("EagerKernel", ComputeChecksums([&](uint32_t j) { return e.row(j); }));
  }
  if (g_flags.check_engine) {
    auto r = NewEngineRun(StepRuleKind::kFixed, true);
    EngineFrames(*r, g_work.frames - 1);
    PrintChecksums("EngineFixed", ComputeChecksums([&](uint32_t j) { return r->params->row(j); }));
  }
  return 0;
}

}  // namespace
}  // namespace bellwether

int main(int argc, char** argv) {
  using namespace bellwether;
  if (!ParseFlags(&argc, argv)) {
    std::fprintf(stderr, "usage: %s --workload=FILE [flags]; see the file comment\n", argv[0]);
    return 2;
  }
  if (!LoadWorkload(g_flags.workload, &g_work)) {
    std::fprintf(stderr, "cannot read workload %s\n", g_flags.workload.c_str());
    return 2;
  }
  if (g_flags.check) return RunCheck();

  benchmark::Initialize(&argc, argv);
  for (int64_t n : {int64_t{1} << 10, int64_t{1} << 14, int64_t{1} << 19, int64_t{1} << 24}) {
    benchmark::RegisterBenchmark("Triad", BM_Triad)->Arg(n)->Unit(benchmark::kMillisecond);
  }
  benchmark::RegisterBenchmark("FmaPeak", BM_FmaPeak)->Unit(benchmark::kMillisecond);
  benchmark::RegisterBenchmark("LazyKernel", BM_LazyKernel)
      ->Unit(benchmark::kMillisecond)
      ->MinTime(2.0);
  benchmark::RegisterBenchmark("EagerKernel", BM_EagerKernel)
      ->Unit(benchmark::kMillisecond)
      ->MinTime(2.0);
  if (g_flags.engine_frames > 0) {
    benchmark::RegisterBenchmark("LazyFirstFrames", BM_LazyFirstFrames)
        ->Unit(benchmark::kMillisecond);
    const struct {
      const char* name;
      StepRuleKind rule;
      bool rupee;
    } engines[] = {{"Engine/FIXED", StepRuleKind::kFixed, true},
                   {"Engine/FIXED_norupee", StepRuleKind::kFixed, false},
                   {"Engine/AUTOSTEP", StepRuleKind::kAutostep, true},
                   {"Engine/TIDBD", StepRuleKind::kTidbd, true}};
    for (const auto& e : engines) {
      benchmark::RegisterBenchmark(e.name, BM_Engine, e.rule, e.rupee, std::string(e.name))
          ->Unit(benchmark::kMillisecond)
          ->Iterations(1);
    }
  }
  benchmark::RunSpecifiedBenchmarks();
  benchmark::Shutdown();
  return PrintSummary();
}
