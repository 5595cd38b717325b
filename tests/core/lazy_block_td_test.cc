// LazyBlockTd (core/learners/lazy_block_td.h) against the eager block TD(lambda) update.
//
// Source of the eager update: the docstring and run() of ../shared/bench/block_td_reference.py
// (the NumPy reference), transcribed below as EagerBlockTd in float32, with a dense trace:
//     v = x.W;  v' = x'.W;  delta = c + gamma' v' - v
//     e = d e;  e[|e| < prune] = 0;  e[x] += x values;  W += alpha outer(e, delta)
// extended as the lazy kernel's header states: per-question, per-frame step sizes, any decay
// d >= 0 per frame, a NaN cumulant skips its question, optional per-weight factors f_jq.
//
// This binary replaces the global operator new to count allocations, so it is its own
// executable (lazy_block_td_tests).
#include "core/learners/lazy_block_td.h"

#include <algorithm>
#include <atomic>
#include <cmath>
#include <cstdint>
#include <cstdlib>
#include <limits>
#include <memory>
#include <new>
#include <random>
#include <vector>

#include "gtest/gtest.h"

// ---- Counting allocator -----------------------------------------------------------------

namespace {
std::atomic<bool> g_counting{false};
std::atomic<uint64_t> g_allocations{0};

void* CountedAlloc(std::size_t n, std::size_t align) {
  if (g_counting.load(std::memory_order_relaxed)) {
    g_allocations.fetch_add(1, std::memory_order_relaxed);
  }
  if (n == 0) n = 1;
  void* p = align <= alignof(std::max_align_t)
                ? std::malloc(n)
                : std::aligned_alloc(align, (n + align - 1) / align * align);
  if (p == nullptr) std::abort();
  return p;
}
}  // namespace

void* operator new(std::size_t n) { return CountedAlloc(n, 0); }
void* operator new[](std::size_t n) { return CountedAlloc(n, 0); }
void* operator new(std::size_t n, std::align_val_t a) {
  return CountedAlloc(n, static_cast<std::size_t>(a));
}
void* operator new[](std::size_t n, std::align_val_t a) {
  return CountedAlloc(n, static_cast<std::size_t>(a));
}
void operator delete(void* p) noexcept { std::free(p); }
void operator delete[](void* p) noexcept { std::free(p); }
void operator delete(void* p, std::size_t) noexcept { std::free(p); }
void operator delete[](void* p, std::size_t) noexcept { std::free(p); }
void operator delete(void* p, std::align_val_t) noexcept { std::free(p); }
void operator delete[](void* p, std::align_val_t) noexcept { std::free(p); }
void operator delete(void* p, std::size_t, std::align_val_t) noexcept { std::free(p); }
void operator delete[](void* p, std::size_t, std::align_val_t) noexcept { std::free(p); }

namespace bellwether {
namespace {

// ---- The eager reference ----------------------------------------------------------------

class EagerBlockTd {
 public:
  EagerBlockTd(uint32_t n, uint32_t q, float prune)
      : n_(n),
        q_(q),
        prune_(prune),
        w_(static_cast<size_t>(n) * q, 0.0f),
        e_(n, 0.0f),
        f_(static_cast<size_t>(n) * q, 1.0f),
        v_(q),
        vn_(q),
        delta_(q) {}

  void Read(SparseRows x, SparseRows xn) {
    Dot(x, v_);
    Dot(xn, vn_);
  }
  // After Read: e = d e, pruned, e += x, W += f * step * e.
  void Advance(SparseRows x, const std::vector<float>& step, float decay) {
    for (float& e : e_) {
      e *= decay;
      if (prune_ > 0.0f && std::fabs(e) < prune_) e = 0.0f;
    }
    for (size_t i = 0; i < x.index.size(); ++i) {
      e_[x.index[i]] += x.value.empty() ? 1.0f : x.value[i];
    }
    for (uint32_t j = 0; j < n_; ++j) {
      if (e_[j] == 0.0f) continue;
      for (uint32_t q = 0; q < q_; ++q) {
        const size_t at = static_cast<size_t>(j) * q_ + q;
        w_[at] += f_[at] * (step[q] * e_[j]);
      }
    }
  }
  void Learn(SparseRows x, SparseRows xn, const std::vector<float>& c,
             const std::vector<float>& alpha, float gamma_next, float decay) {
    Read(x, xn);
    std::vector<float> step(q_);
    for (uint32_t q = 0; q < q_; ++q) {
      delta_[q] = c[q] + gamma_next * vn_[q] - v_[q];
      step[q] = std::isnan(c[q]) ? 0.0f : alpha[q] * delta_[q];
    }
    Advance(x, step, decay);
  }
  void Dot(SparseRows x, std::vector<float>& out) const {
    std::fill(out.begin(), out.end(), 0.0f);
    for (size_t i = 0; i < x.index.size(); ++i) {
      const float value = x.value.empty() ? 1.0f : x.value[i];
      for (uint32_t q = 0; q < q_; ++q) out[q] += value * w(x.index[i], q);
    }
  }
  float w(uint32_t j, uint32_t q) const { return w_[static_cast<size_t>(j) * q_ + q]; }
  float e(uint32_t j) const { return e_[j]; }
  float& f(uint32_t j, uint32_t q) { return f_[static_cast<size_t>(j) * q_ + q]; }
  const std::vector<float>& v() const { return v_; }
  const std::vector<float>& v_next() const { return vn_; }
  const std::vector<float>& delta() const { return delta_; }
  const std::vector<float>& factors() const { return f_; }
  double TraceNormSq() const {
    double s = 0;
    for (float e : e_) s += static_cast<double>(e) * static_cast<double>(e);
    return s;
  }

 private:
  uint32_t n_, q_;
  float prune_;
  std::vector<float> w_, e_, f_, v_, vn_, delta_;
};

// ---- Random problems --------------------------------------------------------------------

struct Problem {
  uint32_t features = 300;
  uint32_t questions = 45;  // 32 + 8 + 5: the AVX2 chunks of 32 and 8 and a scalar tail
  uint32_t active = 6;
  uint32_t frames = 1500;
  float prune = 1e-4f;
  uint32_t history = 128;
  bool real_values = false;    // values in [-1, 2] (some negative) instead of 1
  bool vary_steps = false;     // alpha_q(t) drawn per frame and question
  bool vary_decay = false;     // d_t in [0, 1.05], sometimes exactly 0
  float decay = 0.99f * 0.9f;  // when not varied
  double restart_prob = 0.0;   // d_t = 0 with this probability
  double nan_prob = 0.0;       // a cumulant is NaN with this probability
  bool factors = false;        // per-weight factors changing on active rows
  uint32_t seed = 1;
};

// Active rows move slowly (as tile features of a slowly moving point do): each frame a
// few of the previous rows are replaced, and an index may repeat.
class FeatureStream {
 public:
  FeatureStream(const Problem& p, std::mt19937& rng) : p_(p), rng_(rng) {
    for (uint32_t k = 0; k < p.active; ++k) idx_.push_back(Draw());
    Values();
  }
  void Next() {
    std::bernoulli_distribution change(0.35);
    for (uint32_t& j : idx_) {
      if (change(rng_)) j = Draw();
    }
    Values();
  }
  SparseRows rows() const {
    return SparseRows{idx_,
                      p_.real_values ? absl::Span<const float>(val_) : absl::Span<const float>()};
  }
  std::vector<uint32_t> idx_;
  std::vector<float> val_;

 private:
  uint32_t Draw() {
    // Half the draws near the previous centre, the rest anywhere: rows come back after
    // long absences (multi-frame pending updates) and after being pruned.
    std::uniform_int_distribution<uint32_t> any(0, p_.features - 1);
    std::uniform_int_distribution<int> near(-8, 8);
    if (std::bernoulli_distribution(0.5)(rng_)) return any(rng_);
    centre_ = static_cast<uint32_t>(
        (static_cast<int>(centre_) + near(rng_) + static_cast<int>(p_.features)) %
        static_cast<int>(p_.features));
    return centre_;
  }
  void Values() {
    val_.resize(idx_.size());
    std::uniform_real_distribution<float> u(-1.0f, 2.0f);
    for (float& v : val_) v = u(rng_);
  }
  const Problem& p_;
  std::mt19937& rng_;
  uint32_t centre_ = 0;
};

struct Comparison {
  double max_weight_error = 0;  // max |lazy - eager| over W, relative to max(1, max |W|)
  double max_value_error = 0;   // same for v, v', delta over every frame
  double max_trace_error = 0;   // max |e_lazy - e_eager| over the final trace
  double max_abs_weight = 0;
  LazyBlockTdStats stats;
};

double Scale(const std::vector<float>& a) {
  double m = 1.0;
  for (float x : a) m = std::max(m, static_cast<double>(std::fabs(x)));
  return m;
}

// Runs the problem through both and compares.
Comparison RunBoth(const Problem& p) {
  std::mt19937 rng(p.seed);
  LazyBlockTdOptions options;
  options.num_features = p.features;
  options.num_questions = p.questions;
  options.max_active = p.active;
  options.prune = p.prune;
  options.history_frames = p.history;
  auto lazy_or = LazyBlockTd::Create(options);
  EXPECT_TRUE(lazy_or.ok()) << lazy_or.status();
  LazyBlockTd& lazy = **lazy_or;
  EagerBlockTd eager(p.features, p.questions, p.prune);
  // The lazy kernel's factors live in its weight layout (row stride), eager's densely.
  std::vector<float> lazy_f(static_cast<size_t>(p.features) * lazy.row_stride(), 1.0f);
  if (p.factors) lazy.SetWeightFactors(lazy_f.data(), lazy.row_stride());

  FeatureStream xs(p, rng);
  std::normal_distribution<float> noise(0.0f, 1.0f);
  std::uniform_real_distribution<float> unit(0.0f, 1.0f);
  std::vector<float> cum(p.questions), alpha(p.questions, 0.1f / static_cast<float>(p.active));
  std::vector<float> mix(p.questions);
  for (float& m : mix) m = noise(rng);
  std::vector<float> v(p.questions), vn(p.questions), step(p.questions);
  Comparison out;
  for (uint32_t t = 0; t < p.frames; ++t) {
    const std::vector<uint32_t> x_idx = xs.idx_;
    const std::vector<float> x_val = xs.val_;
    const SparseRows x{x_idx,
                       p.real_values ? absl::Span<const float>(x_val) : absl::Span<const float>()};
    xs.Next();
    const SparseRows xn = xs.rows();
    const float signal = std::sin(0.01f * static_cast<float>(t));
    for (uint32_t q = 0; q < p.questions; ++q) {
      cum[q] = mix[q] * signal + 0.1f * noise(rng);
      if (p.nan_prob > 0 && static_cast<double>(unit(rng)) < p.nan_prob)
        cum[q] = std::numeric_limits<float>::quiet_NaN();
      if (p.vary_steps) alpha[q] = 0.2f * unit(rng) / static_cast<float>(p.active);
    }
    float decay = p.decay;
    if (p.vary_decay) decay = 1.05f * unit(rng);
    if (p.restart_prob > 0 && static_cast<double>(unit(rng)) < p.restart_prob) decay = 0.0f;
    const float gamma_next = 0.99f;

    if (!p.factors) {
      LazyBlockTdFrame frame;
      frame.x = x;
      frame.x_next = xn;
      frame.cumulants = cum;
      frame.step_sizes = alpha;
      frame.gamma_next = gamma_next;
      frame.trace_decay = static_cast<double>(decay);
      const absl::Status s = lazy.Learn(frame);
      EXPECT_TRUE(s.ok()) << s;
      eager.Learn(x, xn, cum, alpha, gamma_next, decay);
      const double scale = std::max(Scale(eager.v()), Scale(eager.v_next()));
      for (uint32_t q = 0; q < p.questions; ++q) {
        out.max_value_error = std::max(
            {out.max_value_error,
             std::fabs(static_cast<double>(lazy.v()[q] - eager.v()[q])) / scale,
             std::fabs(static_cast<double>(lazy.v_next()[q] - eager.v_next()[q])) / scale});
        if (!std::isnan(cum[q])) {
          out.max_value_error =
              std::max(out.max_value_error,
                       std::fabs(static_cast<double>(lazy.delta()[q] - eager.delta()[q])) / scale);
        } else {
          EXPECT_TRUE(std::isnan(lazy.delta()[q]));
        }
      }
      continue;
    }
    // Two-phase, with per-weight factors that change on the rows of x_t between the read
    // and the update (as SETTLING's 1 / o_jq does).
    EXPECT_TRUE(lazy.ReadRows(x, xn, absl::MakeSpan(v), absl::MakeSpan(vn)).ok());
    eager.Read(x, xn);
    for (uint32_t j : x.index) {
      for (uint32_t q = 0; q < p.questions; ++q) {
        const float f = 0.5f + unit(rng);
        eager.f(j, q) = f;
        lazy_f[static_cast<size_t>(j) * lazy.row_stride() + q] = f;
      }
    }
    for (uint32_t q = 0; q < p.questions; ++q) {
      const float delta = cum[q] + gamma_next * vn[q] - v[q];
      step[q] = alpha[q] * delta;
      out.max_value_error =
          std::max(out.max_value_error, std::fabs(static_cast<double>(v[q] - eager.v()[q])) /
                                            std::max(1.0, Scale(eager.v())));
    }
    EXPECT_TRUE(lazy.Advance(x, step, static_cast<double>(decay)).ok());
    eager.Advance(x, step, decay);
  }
  // Weights through Weight() (pending included) before Flush, then raw rows after.
  std::vector<float> eager_w(static_cast<size_t>(p.features) * p.questions);
  for (uint32_t j = 0; j < p.features; ++j) {
    for (uint32_t q = 0; q < p.questions; ++q)
      eager_w[static_cast<size_t>(j) * p.questions + q] = eager.w(j, q);
  }
  const double wscale = Scale(eager_w);
  out.max_abs_weight = wscale;
  for (uint32_t j = 0; j < p.features; ++j) {
    for (uint32_t q = 0; q < p.questions; ++q) {
      out.max_weight_error =
          std::max(out.max_weight_error,
                   std::fabs(static_cast<double>(lazy.Weight(j, q) - eager.w(j, q))) / wscale);
    }
  }
  // Predict (pending included, nothing materialized) on the next frame's rows (one frame
  // pending) and on rows spread over the table (many frames pending, or none).
  std::vector<uint32_t> spread(p.active);
  for (uint32_t k = 0; k < p.active; ++k) spread[k] = k * (p.features / p.active);
  for (const SparseRows rows : {xs.rows(), SparseRows{spread, {}}}) {
    std::vector<float> predicted(p.questions), expected(p.questions);
    EXPECT_TRUE(lazy.Predict(rows, absl::MakeSpan(predicted)).ok());
    eager.Dot(rows, expected);
    const double pscale = Scale(expected);
    for (uint32_t q = 0; q < p.questions; ++q) {
      out.max_value_error = std::max(
          out.max_value_error, std::fabs(static_cast<double>(predicted[q] - expected[q])) / pscale);
    }
  }
  for (uint32_t j = 0; j < p.features; ++j) {
    out.max_trace_error = std::max(out.max_trace_error,
                                   std::fabs(static_cast<double>(lazy.TraceValue(j) - eager.e(j))));
  }
  lazy.Flush();
  for (uint32_t j = 0; j < p.features; ++j) {
    for (uint32_t q = 0; q < p.questions; ++q) {
      out.max_weight_error =
          std::max(out.max_weight_error,
                   std::fabs(static_cast<double>(lazy.row(j)[q] - eager.w(j, q))) / wscale);
    }
  }
  const double norm_eager = eager.TraceNormSq();
  EXPECT_NEAR(lazy.TraceNormSq(), norm_eager, 1e-5 * std::max(1.0, norm_eager));
  out.stats = lazy.stats();
  return out;
}

// Float rounding over a few thousand frames, and entries within rounding of the pruning
// level dropped a frame apart (an update of about prune * alpha * delta): far below this.
constexpr double kTolerance = 2e-5;

void ExpectMatches(const Comparison& c) {
  EXPECT_LT(c.max_weight_error, kTolerance);
  EXPECT_LT(c.max_value_error, kTolerance);
  EXPECT_LT(c.max_trace_error, 1e-4);
  // The problem learned something (an error bound on all-zero weights proves nothing).
  EXPECT_GT(c.max_abs_weight, 1.0);
  EXPECT_GT(c.stats.multi_frame_syncs, 0u);
  EXPECT_GT(c.stats.one_frame_syncs, 0u);
}

TEST(LazyBlockTd, MatchesEagerWithFixedSteps) {
  Problem p;
  const Comparison c = RunBoth(p);
  ExpectMatches(c);
  EXPECT_GT(c.stats.pruned, 100u);
  EXPECT_GT(c.stats.rebases, 5u);
}

TEST(LazyBlockTd, MatchesEagerWithStepsAndDecaysVaryingEveryFrame) {
  Problem p;
  p.vary_steps = true;
  p.vary_decay = true;  // includes decays above 1 (off-policy rho > 1)
  p.real_values = true;
  p.nan_prob = 0.02;
  p.seed = 2;
  ExpectMatches(RunBoth(p));
}

TEST(LazyBlockTd, MatchesEagerThroughRestarts) {
  Problem p;
  p.restart_prob = 0.03;  // decay 0: the trace restarts
  p.vary_steps = true;
  p.seed = 3;
  const Comparison c = RunBoth(p);
  ExpectMatches(c);
  EXPECT_GT(c.stats.rebases, 20u);
}

TEST(LazyBlockTd, MatchesEagerThroughManyRebasesOfBothKinds) {
  // A short S history: an epoch ends every 3 frames.
  Problem p;
  p.history = 3;
  p.frames = 3000;
  p.seed = 4;
  Comparison c = RunBoth(p);
  ExpectMatches(c);
  EXPECT_GE(c.stats.rebases, 900u);
  // A long history with a fast decay: epochs end because D would fall below 2^-20
  // (0.5^21), every 20 frames.
  p.history = 100000;
  p.decay = 0.5f;
  p.prune = 1e-9f;
  p.seed = 5;
  c = RunBoth(p);
  ExpectMatches(c);
  EXPECT_GE(c.stats.rebases, 140u);
  EXPECT_LE(c.stats.rebases, 160u);
}

TEST(LazyBlockTd, MatchesEagerWithoutPruning) {
  Problem p;
  p.prune = 0.0f;
  p.frames = 700;  // 0.891^700 = 8e-36: no entry can reach FLT_MIN (1.2e-38)
  p.vary_steps = true;
  p.seed = 6;
  const Comparison c = RunBoth(p);
  ExpectMatches(c);
  EXPECT_EQ(c.stats.pruned, 0u);
}

TEST(LazyBlockTd, MatchesEagerWithPerWeightFactors) {
  Problem p;
  p.factors = true;
  p.vary_steps = true;
  p.real_values = true;
  p.seed = 7;
  ExpectMatches(RunBoth(p));
}

TEST(LazyBlockTd, PruningLevelDecidesTraceLength) {
  // With prune 1e-4 and decay 0.891 an entry lives about log(1e-4) / log(0.891) = 80
  // frames after its last visit; with prune 1e-2, about 40. The trace is shorter.
  auto run_size = [&](float prune) {
    LazyBlockTdOptions o;
    o.num_features = 1000;
    o.num_questions = 8;
    o.prune = prune;
    auto lazy = std::move(LazyBlockTd::Create(o)).value();
    std::vector<float> step(8, 0.01f);
    for (uint32_t t = 0; t < 400; ++t) {
      const uint32_t j = t;  // a new row every frame
      EXPECT_TRUE(lazy->Advance(SparseRows{absl::MakeConstSpan(&j, 1), {}}, step, 0.891).ok());
    }
    return lazy->trace_size();
  };
  const size_t long_trace = run_size(1e-4f), short_trace = run_size(1e-2f);
  // 0.891^k >= 1e-4 for k <= 79 (80 entries); 0.891^k >= 1e-2 for k <= 39 (40 entries).
  EXPECT_EQ(long_trace, 80u);
  EXPECT_EQ(short_trace, 40u);
}

TEST(LazyBlockTd, TraceRoundTripsThroughSetTrace) {
  LazyBlockTdOptions o;
  o.num_features = 200;
  o.num_questions = 16;
  o.max_active = 4;
  auto a = std::move(LazyBlockTd::Create(o)).value();
  auto b = std::move(LazyBlockTd::Create(o)).value();
  std::mt19937 rng(11);
  std::uniform_int_distribution<uint32_t> row(0, 199);
  std::normal_distribution<float> noise;
  std::vector<float> cum(16), alpha(16, 0.02f);
  auto frame_on = [&](LazyBlockTd& k, const std::vector<uint32_t>& x,
                      const std::vector<uint32_t>& xn) {
    LazyBlockTdFrame f;
    f.x = SparseRows{x, {}};
    f.x_next = SparseRows{xn, {}};
    f.cumulants = cum;
    f.step_sizes = alpha;
    f.gamma_next = 0.9f;
    f.trace_decay = 0.8;
    EXPECT_TRUE(k.Learn(f).ok());
  };
  std::vector<uint32_t> x = {row(rng), row(rng), row(rng), row(rng)}, xn = x;
  for (int t = 0; t < 300; ++t) {
    xn = {row(rng), row(rng), row(rng), row(rng)};
    for (float& c : cum) c = noise(rng);
    frame_on(*a, x, xn);
    x = xn;
  }
  // Checkpoint a into b: weights after Flush, then the trace.
  a->Flush();
  for (uint32_t j = 0; j < 200; ++j) std::copy_n(a->row(j), 16, b->mutable_row(j));
  std::vector<uint32_t> rows(a->trace_size());
  std::vector<float> values(a->trace_size());
  a->TraceEntries(absl::MakeSpan(rows), absl::MakeSpan(values));
  ASSERT_TRUE(b->SetTrace(rows, values).ok());
  EXPECT_EQ(b->trace_size(), a->trace_size());
  for (int t = 0; t < 200; ++t) {
    xn = {row(rng), row(rng), row(rng), row(rng)};
    for (float& c : cum) c = noise(rng);
    frame_on(*a, x, xn);
    frame_on(*b, x, xn);
    x = xn;
  }
  for (uint32_t j = 0; j < 200; ++j) {
    for (uint32_t q = 0; q < 16; ++q) {
      EXPECT_NEAR(a->Weight(j, q), b->Weight(j, q), 1e-5f * (1.0f + std::fabs(a->Weight(j, q))));
    }
  }
}

TEST(LazyBlockTd, RejectsBadInput) {
  LazyBlockTdOptions o;
  o.num_features = 10;
  o.num_questions = 3;
  o.max_active = 2;
  EXPECT_FALSE(LazyBlockTd::Create(LazyBlockTdOptions{}).ok());
  LazyBlockTdOptions bad_prune = o;
  bad_prune.prune = -1.0f;
  EXPECT_FALSE(LazyBlockTd::Create(bad_prune).ok());
  auto k = std::move(LazyBlockTd::Create(o)).value();
  const std::vector<float> three(3, 0.1f), two(2, 0.1f);
  const uint32_t out_of_range = 10, ok_row = 1;
  const std::vector<uint32_t> too_many = {1, 2, 3};
  std::vector<float> v(3), vn(3);
  EXPECT_FALSE(k->Advance(SparseRows{absl::MakeConstSpan(&out_of_range, 1), {}}, three, 0.5).ok());
  EXPECT_FALSE(k->Advance(SparseRows{too_many, {}}, three, 0.5).ok());
  EXPECT_FALSE(k->Advance(SparseRows{absl::MakeConstSpan(&ok_row, 1), two}, three, 0.5).ok());
  EXPECT_FALSE(k->Advance(SparseRows{absl::MakeConstSpan(&ok_row, 1), {}}, two, 0.5).ok());
  EXPECT_FALSE(k->Advance(SparseRows{absl::MakeConstSpan(&ok_row, 1), {}}, three, -0.1).ok());
  EXPECT_FALSE(
      k->Advance(SparseRows{absl::MakeConstSpan(&ok_row, 1), {}}, three, std::nan("")).ok());
  EXPECT_FALSE(
      k->ReadRows(SparseRows{}, SparseRows{}, absl::MakeSpan(v), absl::Span<float>()).ok());
  EXPECT_TRUE(k->Advance(SparseRows{absl::MakeConstSpan(&ok_row, 1), {}}, three, 0.5).ok());
  EXPECT_EQ(k->trace_size(), 1u);
}

TEST(LazyBlockTd, LearnAllocatesNothingAfterConstruction) {
  Problem p;
  p.features = 4096;
  p.questions = 64;
  p.active = 8;
  LazyBlockTdOptions o;
  o.num_features = p.features;
  o.num_questions = p.questions;
  o.max_active = p.active;
  o.history_frames = 16;  // rebases included
  auto lazy = std::move(LazyBlockTd::Create(o)).value();
  std::mt19937 rng(9);
  FeatureStream xs(p, rng);
  std::vector<float> cum(p.questions, 1.0f), alpha(p.questions, 0.01f);
  std::vector<float> out(p.questions);
  // Frames prepared before counting (the test's own vectors allocate).
  std::vector<std::vector<uint32_t>> frames;
  for (int t = 0; t < 2001; ++t) {
    frames.push_back(xs.idx_);
    xs.Next();
  }
  // The counter works: an allocation inside the counted region is seen.
  g_allocations = 0;
  g_counting = true;
  auto* probe = new std::vector<int>(3);
  g_counting = false;
  delete probe;
  ASSERT_GE(g_allocations.load(), 1u);

  g_allocations = 0;
  g_counting = true;
  for (size_t t = 0; t + 1 < frames.size(); ++t) {
    LazyBlockTdFrame f;
    f.x = SparseRows{frames[t], {}};
    f.x_next = SparseRows{frames[t + 1], {}};
    f.cumulants = cum;
    f.step_sizes = alpha;
    f.gamma_next = 0.99f;
    f.trace_decay = t % 500 == 499 ? 0.0 : 0.891;
    if (!lazy->Learn(f).ok()) break;
    if (!lazy->Predict(f.x_next, absl::MakeSpan(out)).ok()) break;
  }
  lazy->Flush();
  g_counting = false;
  EXPECT_EQ(g_allocations.load(), 0u);
  EXPECT_EQ(lazy->stats().frames, 2000u);
  EXPECT_GT(lazy->stats().rebases, 100u);
  EXPECT_GT(lazy->stats().pruned, 0u);
}

}  // namespace
}  // namespace bellwether
