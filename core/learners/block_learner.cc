#include "core/learners/block_learner.h"

#include "core/io/state_codec.h"
#include "core/learners/fast_exp.h"

#include <algorithm>
#include <cmath>
#include <limits>

namespace bellwether {
namespace {

// Autostep's time scale for its running normalizer (the published default).
constexpr float kAutostepTau = 1e4f;
// TIDBD's log step sizes stay within [log 1e-9, log 1].
constexpr float kMinLogStep = -20.7f;
constexpr float kMaxLogStep = 0.0f;
// Updates between snapshots of sound weights for the divergence guard.
constexpr uint64_t kSnapshotEvery = 1000;
// A prediction beyond this multiple of the largest plausible return is divergence.
constexpr double kDivergenceFactor = 10.0;
constexpr double kMaxHorizon = 1e4;
// The most active features one frame may have on the lazy kernel's path (past it, the
// frame runs eagerly).
constexpr uint32_t kLazyMaxActive = 1024;
// Blocks of fewer questions stay on the eager loop: the kernel keeps 32 bytes per feature
// row, as much as 8 questions' weights, and a short row's update costs little. Measured
// on tests/bench/load_gen_pool_fixed.json (blocks of 8): lazy +13 % frames/s, +75 % RSS.
constexpr size_t kLazyMinQuestions = 32;
// The eager loops visit the trace's rows, scattered over the table: each prefetches the
// arrays of the row this many entries ahead.
constexpr size_t kPrefetchAhead = 8;

// Prefetches, for writing, row rows[i + kPrefetchAhead] of each row-major array (`cols`
// floats per row), if there is such an entry.
template <typename... Arrays>
void PrefetchRowAhead(const std::vector<uint32_t>& rows, size_t i, uint32_t cols,
                      Arrays*... arrays) {
  if (i + kPrefetchAhead >= rows.size()) return;
  const size_t at = static_cast<size_t>(rows[i + kPrefetchAhead]) * cols;
  (__builtin_prefetch(arrays + at, 1, 3), ...);
}

bool UsesPerWeightSteps(StepRuleKind r) {
  return r == StepRuleKind::kAutostep || r == StepRuleKind::kTidbd ||
         r == StepRuleKind::kSettling;
}

// Centering's averaging window, in horizons 1 / (1 - gamma).
constexpr double kCenteringHorizons = 10.0;

double NormSq(const SparseFeatures& x) {
  double s = 0;
  for (float v : x.value) s += static_cast<double>(v) * static_cast<double>(v);
  return s;
}

// Greedy distribution over `q` (ties split evenly) into `pi`; returns an argmax.
int Greedy(absl::Span<const double> q, absl::Span<double> pi) {
  double best = -std::numeric_limits<double>::infinity();
  for (double v : q) best = std::max(best, v);
  int count = 0, first = 0;
  for (size_t a = 0; a < q.size(); ++a) {
    if (q[a] == best) {
      if (count == 0) first = static_cast<int>(a);
      ++count;
    }
  }
  for (size_t a = 0; a < q.size(); ++a) pi[a] = q[a] == best ? 1.0 / count : 0.0;
  if (count == 0) {  // all NaN: uniform
    for (double& p : pi) p = 1.0 / static_cast<double>(pi.size());
  }
  return first;
}

}  // namespace

BlockParams::BlockParams(const BlockSpec& spec, const std::vector<CompiledQuestion>& questions,
                         const FeatureRecipe& recipe, uint32_t num_actions)
    : rows_(recipe.num_features() * (spec.action_valued ? num_actions : 1)),
      cols_(static_cast<uint32_t>(spec.questions.size())) {
  const size_t n = static_cast<size_t>(rows_) * cols_;
  w_.assign(n, 0.0f);
  good_w_.assign(n, 0.0f);
  dirty_bits_.assign((static_cast<size_t>(rows_) + 63) / 64, uint64_t{0});
  dirty_rows_.reserve(DirtyListCapacity(rows_));
  all_dirty_ = false;  // zero weights, zero restore point
  if (spec.learner == LearnerKind::kTdc) aux_.assign(n, 0.0f);
  if (spec.rupee) {
    rupee_h_.assign(n, 0.0f);
    rupee_u_.assign(n, 0.0f);
  }
  rupee_dot_.assign(cols_, 0.0);
  counters_.resize(cols_);
  cumulant_mean_.assign(cols_, 0.0);
  cumulant_count_.assign(cols_, 0);
  initial_alpha_.resize(cols_);
  for (uint32_t c = 0; c < cols_; ++c) {
    const CompiledQuestion& q = questions[spec.questions[c]];
    initial_alpha_[c] = static_cast<float>(q.step_size / recipe.expected_norm_sq());
  }
  if (UsesPerWeightSteps(spec.step_rule)) {
    alpha_.resize(n);
    for (size_t r = 0; r < rows_; ++r) {
      for (uint32_t c = 0; c < cols_; ++c) {
        alpha_[r * cols_ + c] = spec.step_rule == StepRuleKind::kTidbd ? std::log(initial_alpha_[c])
                                : spec.step_rule == StepRuleKind::kSettling ? 0.0f
                                                                            : initial_alpha_[c];
      }
    }
    if (spec.step_rule != StepRuleKind::kSettling) ss_h_.assign(n, 0.0f);
    if (spec.step_rule == StepRuleKind::kAutostep) ss_v_.assign(n, 0.0f);
  }
}

void BlockParams::MarkSound() {
  good_w_ = w_;
  // A live trace may still hold rows that were never marked: the next snapshot copies all.
  MarkAllDirty();
}

bool BlockParams::TrySnapshot() {
  if (all_dirty_) {
    bool finite = true;
    for (float w : w_) finite &= std::isfinite(w);
    if (!finite) return false;
    std::copy(w_.begin(), w_.end(), good_w_.begin());
    std::fill(dirty_bits_.begin(), dirty_bits_.end(), uint64_t{0});
  } else {
    bool finite = true;
    for (uint32_t r : dirty_rows_) {
      const float* w = row(r);
      for (uint32_t q = 0; q < cols_; ++q) finite &= std::isfinite(w[q]);
    }
    if (!finite) return false;
    for (uint32_t r : dirty_rows_) {
      const size_t at = static_cast<size_t>(r) * cols_;
      std::copy(w_.begin() + at, w_.begin() + at + cols_, good_w_.begin() + at);
      dirty_bits_[r >> 6] = 0;  // the whole word: every row in it is clean now
    }
  }
  dirty_rows_.clear();
  all_dirty_ = false;
  ++snapshots_;
  return true;
}

void BlockParams::CopyColumnFrom(const BlockParams& other, uint32_t from_col, uint32_t to_col) {
  MarkAllDirty();
  auto copy = [&](const std::vector<float>& src, std::vector<float>& dst) {
    if (src.empty() || dst.empty()) return;
    for (uint32_t r = 0; r < rows_; ++r) {
      dst[static_cast<size_t>(r) * cols_ + to_col] = src[static_cast<size_t>(r) * other.cols_ + from_col];
    }
  };
  copy(other.w_, w_);
  copy(other.good_w_, good_w_);
  copy(other.aux_, aux_);
  copy(other.alpha_, alpha_);
  copy(other.ss_h_, ss_h_);
  copy(other.ss_v_, ss_v_);
  counters_[to_col] = other.counters_[from_col];
  cumulant_mean_[to_col] = other.cumulant_mean_[from_col];
  cumulant_count_[to_col] = other.cumulant_count_[from_col];
  if (!rupee_u_.empty() && !other.rupee_u_.empty()) {
    // Bring the other block's lazily scaled u onto this block's scale.
    const float ratio = static_cast<float>(other.rupee_scale_ / rupee_scale_);
    for (uint32_t r = 0; r < rows_; ++r) {
      const size_t src = static_cast<size_t>(r) * other.cols_ + from_col;
      const size_t dst = static_cast<size_t>(r) * cols_ + to_col;
      rupee_h_[dst] = other.rupee_h_[src];
      rupee_u_[dst] = other.rupee_u_[src] * ratio;
    }
    rupee_dot_[to_col] = other.rupee_dot_[from_col] * (other.rupee_scale_ / rupee_scale_);
  }
}

float BlockParams::step_size(uint32_t r, uint32_t q) const {
  if (alpha_.empty()) return static_cast<float>(static_cast<double>(initial_alpha_[q]) * counters_[q].step_scale);
  const float a = alpha_[static_cast<size_t>(r) * cols_ + q];
  if (!ss_v_.empty()) return a;             // Autostep
  if (!ss_h_.empty()) return std::exp(a);  // TIDBD stores log steps
  // SETTLING stores o_i; an unseen feature's first step is 1.
  const float alpha = static_cast<float>(static_cast<double>(initial_alpha_[q]) * counters_[q].step_scale);
  return a > 0.0f ? alpha / a : 1.0f;
}

void BlockParams::StepSizeSummary(uint32_t q, absl::Span<const uint32_t> rows, double norm_sq,
                                  double* mean, double* min, double* max) const {
  const double scale = counters_[q].step_scale;
  if (alpha_.empty()) {
    const double a = norm_sq > 0 ? static_cast<double>(initial_alpha_[q]) / norm_sq : 0.0;
    *mean = *min = *max = a * scale;
    return;
  }
  // alpha_ holds log steps for TIDBD (negative), steps for Autostep (positive).
  double sum = 0, lo = std::numeric_limits<double>::infinity(), hi = 0;
  for (uint32_t r : rows) {
    const float a = step_size(r, q);
    sum += static_cast<double>(a);
    lo = std::min(lo, static_cast<double>(a));
    hi = std::max(hi, static_cast<double>(a));
  }
  *mean = rows.empty() ? 0.0 : sum / static_cast<double>(rows.size());
  *min = rows.empty() ? 0.0 : lo;
  *max = hi;
}

BlockLearner::BlockLearner(uint32_t max_rows, uint32_t max_cols, uint32_t num_actions)
    : num_actions_(std::max<uint32_t>(num_actions, 1)) {
  v_.resize(max_cols);
  v_next_.resize(max_cols);
  delta_.resize(max_cols);
  scratch_.resize(max_cols * 4);
  dscratch_.resize(max_cols * 4);
  wsq_.resize(max_cols);
  wsq_f_.resize(max_cols);
  pi_buf_.resize(num_actions_ * 2);
  q_buf_.resize(num_actions_ * 2);
  x_dense_.assign(max_rows, 0.0f);
  xn_dense_.assign(max_rows, 0.0f);
}

void BlockLearner::PredictRows(const BlockParams& p, const SparseFeatures& x, int action,
                               float* out) const {
  const uint32_t nq = p.cols();
  std::fill(out, out + nq, 0.0f);
  const uint32_t stride = action >= 0 ? num_actions_ : 1;
  const uint32_t offset = action >= 0 ? static_cast<uint32_t>(action) : 0;
  for (size_t k = 0; k < x.size(); ++k) {
    const float xj = x.value[k];
    const float* __restrict w = p.row(x.index[k] * stride + offset);
    for (uint32_t q = 0; q < nq; ++q) out[q] += xj * w[q];
  }
}

bool BlockLearner::UsesLazyKernel(const BlockSpec& spec, const BlockStep& step) {
  return step.own_params && spec.learner == LearnerKind::kTd &&
         spec.step_rule == StepRuleKind::kFixed && !spec.action_valued && !spec.rupee &&
         spec.questions.size() >= kLazyMinQuestions;
}

LazyBlockTd& BlockLearner::LazyKernel(BlockParams& p, BlockTraceState& state) {
  if (state.lazy == nullptr) {
    LazyBlockTdOptions o;
    o.num_features = p.rows();
    o.num_questions = p.cols();
    o.max_active = kLazyMaxActive;
    o.prune = SparseTrace::kDefaultPrune;
    auto made = LazyBlockTd::CreateOver(o, p.w_.data(), p.cols());
    // The options are valid by construction (rows and columns of a compiled block).
    state.lazy = *std::move(made);
    // Rows are in range and distinct.
    state.lazy->SetTrace(state.trace.active(), state.trace.values()).IgnoreError();
    state.trace.Clear();
  }
  return *state.lazy;
}

void BlockTraceState::FoldLazy() const {
  if (lazy == nullptr) return;
  lazy->Flush();
  std::vector<uint32_t> rows(lazy->trace_size());
  std::vector<float> values(rows.size());
  lazy->TraceEntries(absl::MakeSpan(rows), absl::MakeSpan(values));
  trace.Set(rows, values);
  lazy.reset();
}

void BlockLearner::ActionValues(const SparseFeatures& x, const BlockParams& params, uint32_t q,
                                absl::Span<double> out) const {
  for (uint32_t a = 0; a < num_actions_; ++a) {
    double sum = 0;
    for (size_t k = 0; k < x.size(); ++k) {
      sum += static_cast<double>(x.value[k]) *
             static_cast<double>(params.row(x.index[k] * num_actions_ + a)[q]);
    }
    out[a] = sum;
  }
}

void BlockLearner::Answer(const BlockSpec& spec, const SparseFeatures& x,
                          absl::Span<const double> pi, const BlockParams& params,
                          absl::Span<double> answers, int* greedy_action) {
  const uint32_t nq = params.cols();
  if (!spec.action_valued) {
    PredictRows(params, x, -1, v_.data());
    const double offset_scale = spec.centered ? 1.0 / (1.0 - spec.gamma) : 0.0;
    for (uint32_t q = 0; q < nq; ++q) {
      answers[q] = static_cast<double>(v_[q]) + params.cumulant_mean_[q] * offset_scale;
    }
    return;
  }
  const auto qv = absl::MakeSpan(q_buf_.data(), num_actions_);
  const auto greedy_pi = absl::MakeSpan(pi_buf_.data(), num_actions_);
  for (uint32_t q = 0; q < nq; ++q) {
    ActionValues(x, params, q, qv);
    if (spec.learner == LearnerKind::kQLambda) {
      const int g = Greedy(qv, greedy_pi);
      answers[q] = qv[static_cast<size_t>(g)];
      if (greedy_action != nullptr) *greedy_action = g;
    } else {
      double sum = 0;
      // Without a target distribution (no action known), the uniform one.
      for (uint32_t a = 0; a < num_actions_; ++a) {
        sum += (pi.size() > a ? pi[a] : 1.0 / num_actions_) * qv[a];
      }
      answers[q] = sum;
    }
  }
}

void BlockLearner::Learn(const BlockSpec& spec, const std::vector<CompiledQuestion>& questions,
                         const BlockStep& step, BlockParams& p, BlockTraceState& state,
                         absl::Span<double> answers, int* greedy_action) {
  const uint32_t nq = p.cols();
  const SparseFeatures& x = *step.x;
  const SparseFeatures& xn = *step.x_next;
  const double norm_sq = NormSq(x);
  const double gl = state.gamma_t * spec.lambda;
  const double gamma_next = step.gamma_next;
  const uint32_t A = num_actions_;

  if (spec.action_valued && step.action < 0) {
    // No action is known for S_t (the frame carried none): nothing to learn from, and the
    // trace is cut. Found by fuzzing: indexing by action -1 read and wrote out of bounds.
    for (uint32_t q = 0; q < nq; ++q) ++p.counters_[q].skipped_missing;
    state.trace.Clear();
    state.gamma_t = step.gamma_next;
    Answer(spec, *step.x_next,
           step.pi_next.size() >= num_actions_ ? step.pi_next : absl::Span<const double>(),
           p, answers, greedy_action);
    return;
  }
  LazyBlockTd* lazy = UsesLazyKernel(spec, step) && x.size() <= kLazyMaxActive &&
                              xn.size() <= kLazyMaxActive
                          ? &LazyKernel(p, state)
                          : nullptr;
  if (lazy == nullptr) state.FoldLazy();
  // Target distributions for action values: fixed by the caller, or greedy (control).
  double pi_taken = 1.0;
  const double* pi_next = step.pi_next.data();
  if (spec.action_valued) {
    const auto q_now = absl::MakeSpan(q_buf_.data(), A);
    const auto pi_now_buf = absl::MakeSpan(pi_buf_.data(), A);
    const auto pi_next_buf = absl::MakeSpan(pi_buf_.data() + A, A);
    if (spec.learner == LearnerKind::kQLambda) {
      ActionValues(x, p, 0, q_now);
      Greedy(q_now, pi_now_buf);
      pi_taken = pi_now_buf[static_cast<size_t>(step.action)];
      ActionValues(xn, p, 0, absl::MakeSpan(q_buf_.data() + A, A));
      Greedy(absl::MakeConstSpan(q_buf_.data() + A, A), pi_next_buf);
      pi_next = pi_next_buf.data();
    } else {
      pi_taken = step.pi_now[static_cast<size_t>(step.action)];
    }
  }

  // Predictions before the update: v(x_t) (or q(S_t, A_t)) and the bootstrap target.
  if (spec.action_valued) {
    PredictRows(p, x, step.action, v_.data());
    for (uint32_t q = 0; q < nq; ++q) {
      double backup = 0;
      for (uint32_t a = 0; a < A; ++a) {
        if (pi_next[a] == 0.0) continue;
        double qa = 0;
        for (size_t k = 0; k < xn.size(); ++k) {
          qa += static_cast<double>(xn.value[k]) *
                static_cast<double>(p.row(xn.index[k] * A + a)[q]);
        }
        backup += pi_next[a] * qa;
      }
      v_next_[q] = static_cast<float>(backup);
    }
  } else {
    if (lazy != nullptr &&
        !lazy->ReadRows(Rows(x), Rows(xn), absl::MakeSpan(v_.data(), nq),
                        absl::MakeSpan(v_next_.data(), nq))
             .ok()) {
      state.FoldLazy();  // more active features than the kernel takes: this frame is eager
      lazy = nullptr;
    }
    if (lazy == nullptr) {
      PredictRows(p, x, -1, v_.data());
      PredictRows(p, xn, -1, v_next_.data());
    }
  }

  // TD errors; a missing cumulant skips the question.
  bool any = false;
  for (uint32_t q = 0; q < nq; ++q) {
    QuestionCounters& counters = p.counters_[q];
    const double c = step.cumulants[q];
    if (std::isnan(c) || norm_sq <= 0.0) {
      delta_[q] = 0.0f;
      dscratch_[q] = 0.0;  // mask: skip
      ++counters.skipped_missing;
      continue;
    }
    counters.max_abs_cumulant = std::max(counters.max_abs_cumulant, std::fabs(c));
    double centered_c = c;
    if (spec.centered) {
      const uint64_t n = ++p.cumulant_count_[q];
      const double beta = std::max(1.0 / static_cast<double>(n),
                                   (1.0 - spec.gamma) / kCenteringHorizons);
      p.cumulant_mean_[q] += beta * (c - p.cumulant_mean_[q]);
      centered_c = c - p.cumulant_mean_[q];
    }
    const double delta =
        centered_c + gamma_next * static_cast<double>(v_next_[q]) - static_cast<double>(v_[q]);
    delta_[q] = static_cast<float>(delta);
    dscratch_[q] = 1.0;
    ++counters.updates;
    any = true;
  }

  // Trace.
  SparseTrace& e = state.trace;
  const float rho = static_cast<float>(step.rho);
  double dutch_alpha = 0;
  switch (spec.learner) {
    case LearnerKind::kTd:
    case LearnerKind::kTdc:
      if (lazy != nullptr) break;  // the kernel's Advance, with the weights below
      e.DecayAndPrune(static_cast<float>(step.rho * gl));
      if (rho != 0.0f) e.Accumulate(x, rho);
      break;
    case LearnerKind::kEmphaticTd: {
      state.follow_on = state.rho_prev * state.gamma_t * state.follow_on + 1.0;
      const double m = spec.lambda + (1.0 - spec.lambda) * state.follow_on;
      state.rho_prev = step.rho;
      e.DecayAndPrune(static_cast<float>(step.rho * gl));
      if (rho != 0.0f) e.Accumulate(x, static_cast<float>(step.rho * m));
      break;
    }
    case LearnerKind::kTrueOnlineTd: {
      double scale = 1.0;
      for (uint32_t q = 0; q < nq; ++q) scale = std::min(scale, p.counters_[q].step_scale);
      dutch_alpha = norm_sq > 0 ? spec.shared_step_size * scale / norm_sq : 0.0;
      double ex = 0;
      for (size_t k = 0; k < x.size(); ++k) {
        ex += static_cast<double>(e.value(x.index[k])) * static_cast<double>(x.value[k]);
      }
      e.DecayAndPrune(static_cast<float>(gl));
      e.Accumulate(x, static_cast<float>(1.0 - dutch_alpha * gl * ex));
      break;
    }
    case LearnerKind::kTreeBackup:
    case LearnerKind::kQLambda:
      e.DecayAndPrune(static_cast<float>(gl * pi_taken));
      e.Accumulate(x, 1.0f, A, static_cast<uint32_t>(step.action));
      break;
  }

  // Weights.
  if (lazy != nullptr) {
    // FIXED: W_r += e_r (alpha_q delta_q) over the trace, applied lazily; the trace
    // decays and takes x_t (scaled by rho) even when no question learns.
    float* ad = scratch_.data();
    for (uint32_t q = 0; q < nq; ++q) {
      const CompiledQuestion& cq = questions[spec.questions[q]];
      ad[q] = any ? static_cast<float>(dscratch_[q] * cq.step_size * p.counters_[q].step_scale /
                                       norm_sq * static_cast<double>(delta_[q]))
                  : 0.0f;
    }
    SparseRows xr = Rows(x);
    if (rho == 0.0f) {
      xr = SparseRows{};
    } else if (rho != 1.0f) {
      x_scaled_.resize(x.size());
      for (size_t k = 0; k < x.size(); ++k) x_scaled_[k] = rho * x.value[k];
      xr.value = x_scaled_;
    }
    lazy->Advance(xr, absl::MakeConstSpan(ad, nq), step.rho * gl).IgnoreError();  // checked sizes
  } else if (any) {
    const std::vector<uint32_t>& rows = e.active();
    if (spec.learner == LearnerKind::kTrueOnlineTd) {
      float* a1 = scratch_.data();
      float* a2 = scratch_.data() + nq;
      for (uint32_t q = 0; q < nq; ++q) {
        const double vq = static_cast<double>(v_[q]);
        const double dv = vq - state.v_old[q];
        a1[q] = static_cast<float>(dscratch_[q] * dutch_alpha * (static_cast<double>(delta_[q]) + dv));
        a2[q] = static_cast<float>(dscratch_[q] * dutch_alpha * dv);
        if (dscratch_[q] != 0.0) state.v_old[q] = static_cast<double>(v_next_[q]);
      }
      for (size_t i = 0; i < rows.size(); ++i) {
        const uint32_t r = rows[i];
        const float er = e.values()[i];
        float* __restrict w = p.row(r);
        for (uint32_t q = 0; q < nq; ++q) w[q] += er * a1[q];
      }
      for (size_t k = 0; k < x.size(); ++k) {
        const float xk = x.value[k];
        float* __restrict w = p.row(x.index[k]);
        for (uint32_t q = 0; q < nq; ++q) w[q] -= xk * a2[q];
      }
    } else if (spec.learner == LearnerKind::kTdc) {
      float* eh = scratch_.data();
      float* hx = scratch_.data() + nq;
      float* ad = scratch_.data() + 2 * nq;
      float* bd = scratch_.data() + 3 * nq;
      std::fill(eh, eh + nq, 0.0f);
      std::fill(hx, hx + nq, 0.0f);
      for (size_t i = 0; i < rows.size(); ++i) {
        const uint32_t r = rows[i];
        const float er = e.values()[i];
        const float* h = &p.aux_[static_cast<size_t>(r) * nq];
        for (uint32_t q = 0; q < nq; ++q) eh[q] += er * h[q];
      }
      for (size_t k = 0; k < x.size(); ++k) {
        const float xk = x.value[k];
        const float* h = &p.aux_[static_cast<size_t>(x.index[k]) * nq];
        for (uint32_t q = 0; q < nq; ++q) hx[q] += xk * h[q];
      }
      for (uint32_t q = 0; q < nq; ++q) {
        const CompiledQuestion& cq = questions[spec.questions[q]];
        const double s = dscratch_[q] * p.counters_[q].step_scale / norm_sq;
        ad[q] = static_cast<float>(s * cq.step_size);
        bd[q] = static_cast<float>(s * cq.secondary_step_size);
      }
      const float corr = static_cast<float>(gamma_next * (1.0 - spec.lambda));
      for (size_t i = 0; i < rows.size(); ++i) {
        const uint32_t r = rows[i];
        const float er = e.values()[i];
        float* __restrict w = p.row(r);
        float* __restrict h = &p.aux_[static_cast<size_t>(r) * nq];
        for (uint32_t q = 0; q < nq; ++q) {
          w[q] += ad[q] * delta_[q] * er;
          h[q] += bd[q] * delta_[q] * er;
        }
      }
      for (size_t k = 0; k < xn.size(); ++k) {
        const float xk = xn.value[k];
        float* __restrict w = p.row(xn.index[k]);
        for (uint32_t q = 0; q < nq; ++q) w[q] -= ad[q] * corr * eh[q] * xk;
      }
      for (size_t k = 0; k < x.size(); ++k) {
        const float xk = x.value[k];
        float* __restrict h = &p.aux_[static_cast<size_t>(x.index[k]) * nq];
        for (uint32_t q = 0; q < nq; ++q) h[q] -= bd[q] * hx[q] * xk;
      }
    } else if (UsesPerWeightSteps(spec.step_rule)) {
      // Feature values by row for x_t and the discounted expected next features.
      const uint32_t stride = spec.action_valued ? A : 1;
      const uint32_t off = spec.action_valued ? static_cast<uint32_t>(step.action) : 0;
      for (size_t k = 0; k < x.size(); ++k) x_dense_[x.index[k] * stride + off] += x.value[k];
      for (size_t k = 0; k < xn.size(); ++k) {
        if (spec.action_valued) {
          for (uint32_t a = 0; a < A; ++a) {
            xn_dense_[xn.index[k] * A + a] += static_cast<float>(pi_next[a]) * xn.value[k];
          }
        } else {
          xn_dense_[xn.index[k]] += xn.value[k];
        }
      }
      ApplyStepRule(spec, questions, step, norm_sq, e, p);
      for (size_t k = 0; k < x.size(); ++k) x_dense_[x.index[k] * stride + off] = 0.0f;
      for (size_t k = 0; k < xn.size(); ++k) {
        if (spec.action_valued) {
          for (uint32_t a = 0; a < A; ++a) xn_dense_[xn.index[k] * A + a] = 0.0f;
        } else {
          xn_dense_[xn.index[k]] = 0.0f;
        }
      }
    } else {
      // FIXED: w_r += e_r * (alpha_q delta_q) for every row r in the trace.
      float* ad = scratch_.data();
      for (uint32_t q = 0; q < nq; ++q) {
        const CompiledQuestion& cq = questions[spec.questions[q]];
        ad[q] = static_cast<float>(dscratch_[q] * cq.step_size * p.counters_[q].step_scale /
                                   norm_sq * static_cast<double>(delta_[q]));
      }
      const std::vector<float>& values = e.values();
      for (size_t i = 0; i < rows.size(); ++i) {
        PrefetchRowAhead(rows, i, nq, p.w_.data());
        const float er = values[i];
        float* __restrict w = p.row(rows[i]);
        for (uint32_t q = 0; q < nq; ++q) w[q] += er * ad[q];
      }
    }
  }
  state.gamma_t = gamma_next;

  // Learning progress: TD error, amount of learning, importance ratio.
  if (any) {
    double e_sq = 0;
    if (lazy != nullptr) {
      e_sq = lazy->TraceNormSq();
    } else {
      // Four running sums: one would wait on each add (the trace has hundreds of entries).
      const std::vector<float>& ev = e.values();
      double part[4] = {0, 0, 0, 0};
      size_t i = 0;
      for (; i + 4 <= ev.size(); i += 4) {
        for (size_t k = 0; k < 4; ++k) {
          part[k] += static_cast<double>(ev[i + k]) * static_cast<double>(ev[i + k]);
        }
      }
      for (; i < ev.size(); ++i) part[0] += static_cast<double>(ev[i]) * static_cast<double>(ev[i]);
      e_sq = (part[0] + part[1]) + (part[2] + part[3]);
    }
    const double e_norm = std::sqrt(e_sq);
    const bool per_weight = UsesPerWeightSteps(spec.step_rule) &&
                            spec.learner != LearnerKind::kTdc &&
                            spec.learner != LearnerKind::kTrueOnlineTd;
    for (uint32_t q = 0; q < nq; ++q) {
      if (dscratch_[q] == 0.0) continue;
      QuestionCounters& c = p.counters_[q];
      double change;
      if (per_weight) {
        change = std::sqrt(wsq_[q]);
      } else {
        const double alpha = spec.learner == LearnerKind::kTrueOnlineTd
                                 ? dutch_alpha
                                 : questions[spec.questions[q]].step_size * c.step_scale / norm_sq;
        change = std::fabs(alpha * static_cast<double>(delta_[q])) * e_norm;
      }
      c.progress.Update(static_cast<double>(delta_[q]), change, step.rho, spec.progress_decay);
    }
    if (spec.rupee) UpdateRupee(spec, step, norm_sq, e, p);
  }

  // Answers at S_{t+1} with the updated weights (restored ones after a guard reset).
  const auto pi_answer = absl::MakeConstSpan(pi_next, spec.action_valued ? A : 0);
  if (lazy != nullptr && lazy->Predict(Rows(xn), absl::MakeSpan(v_.data(), nq)).ok()) {
    const double offset_scale = spec.centered ? 1.0 / (1.0 - spec.gamma) : 0.0;
    for (uint32_t q = 0; q < nq; ++q) {
      answers[q] = static_cast<double>(v_[q]) + p.cumulant_mean_[q] * offset_scale;
    }
  } else {
    Answer(spec, xn, pi_answer, p, answers, greedy_action);
  }
  // Rows this frame wrote that the guard's snapshot must copy: x_t's (they enter the trace)
  // and x_{t+1}'s (TDC writes them). Rows already in the trace were marked when the last
  // snapshot was taken. Weights shared by streams or indexed by action: all rows.
  const bool track_rows = step.own_params && !spec.action_valued;
  if (track_rows) {
    for (uint32_t r : x.index) p.MarkDirty(r);
    for (uint32_t r : xn.index) p.MarkDirty(r);
  } else {
    p.MarkAllDirty();
  }
  if (Guard(spec, p, state, answers, track_rows)) {
    Answer(spec, xn, pi_answer, p, answers, greedy_action);
  }
}

void BlockLearner::ApplyStepRule(const BlockSpec& spec,
                                 const std::vector<CompiledQuestion>& questions,
                                 const BlockStep& step, double /*norm_sq*/,
                                 const SparseTrace& e, BlockParams& p) {
  // The loops over a row's questions are branch-free (a skipped question is masked with
  // a select, and its TD error is 0), so the compiler vectorizes them; ExpF is a
  // polynomial exp it can vectorize too.
  const uint32_t nq = p.cols();
  const std::vector<uint32_t>& rows = e.active();
  const float gamma_next = static_cast<float>(step.gamma_next);
  // Disjoint parts of the scratch buffer.
  float* __restrict meta = scratch_.data();
  float* __restrict msum = scratch_.data() + nq;
  float* __restrict on = scratch_.data() + 3 * nq;  // 1 where the question learns this step
  float* __restrict wsq = wsq_f_.data();
  for (uint32_t q = 0; q < nq; ++q) {
    meta[q] = static_cast<float>(questions[spec.questions[q]].meta_step_size);
    msum[q] = 0.0f;
    wsq[q] = 0.0f;
    on[q] = dscratch_[q] != 0.0 ? 1.0f : 0.0f;
  }
  const float* __restrict delta = delta_.data();
  if (spec.step_rule == StepRuleKind::kAutostep) {
    const float inv_tau = 1.0f / kAutostepTau;
    // Pass 1: adapt alpha_i, accumulate the effective step M per question.
    for (size_t i = 0; i < rows.size(); ++i) {
      PrefetchRowAhead(rows, i, nq, p.alpha_.data(), p.ss_h_.data(), p.ss_v_.data());
      const uint32_t r = rows[i];
      const float er = e.values()[i], xr = x_dense_[r], xnr = xn_dense_[r];
      const float dx = xr - gamma_next * xnr;
      const size_t base = static_cast<size_t>(r) * nq;
      float* __restrict alpha = &p.alpha_[base];
      const float* __restrict h = &p.ss_h_[base];
      float* __restrict v = &p.ss_v_[base];
      float* __restrict ratio = scratch_.data() + 2 * nq;
      for (uint32_t q = 0; q < nq; ++q) {
        const float gh = delta[q] * er * h[q];
        const float u = std::fabs(gh);
        const float vn = std::max(u, v[q] + inv_tau * alpha[q] * xr * er * (u - v[q]));
        // vn >= |gh|, so vn == 0 means gh == 0 and the step keeps alpha (exp(0) = 1).
        ratio[q] = meta[q] * gh / std::max(vn, std::numeric_limits<float>::min());
        v[q] = on[q] != 0.0f ? vn : v[q];
      }
      for (uint32_t q = 0; q < nq; ++q) {
        const float an = alpha[q] * ExpF(ratio[q]);
        alpha[q] = on[q] != 0.0f ? an : alpha[q];
        msum[q] += on[q] * (an * er * dx);
      }
    }
    // A skipped question's sum is 0, so its factor is 1: its alpha is left as it was.
    for (uint32_t q = 0; q < nq; ++q) msum[q] = 1.0f / std::max(msum[q], 1.0f);
    // Pass 2: normalize, update weights and h.
    for (size_t i = 0; i < rows.size(); ++i) {
      PrefetchRowAhead(rows, i, nq, p.w_.data());
      const uint32_t r = rows[i];
      const float er = e.values()[i], xr = x_dense_[r];
      const size_t base = static_cast<size_t>(r) * nq;
      float* __restrict alpha = &p.alpha_[base];
      float* __restrict h = &p.ss_h_[base];
      float* __restrict w = &p.w_[base];
      for (uint32_t q = 0; q < nq; ++q) {
        alpha[q] *= msum[q];
        const float step_w = alpha[q] * delta[q] * er;  // 0 for a skipped question
        w[q] += step_w;
        wsq[q] += step_w * step_w;
        const float hn = h[q] * std::max(0.0f, 1.0f - alpha[q] * xr * er) + step_w;
        h[q] = on[q] != 0.0f ? hn : h[q];
      }
    }
  } else if (spec.step_rule == StepRuleKind::kSettling) {
    const SparseFeatures& x = *step.x;
    const uint32_t stride = spec.action_valued ? num_actions_ : 1;
    const uint32_t off = spec.action_valued ? static_cast<uint32_t>(step.action) : 0;
    float* alpha = scratch_.data() + 2 * nq;
    for (uint32_t q = 0; q < nq; ++q) {
      alpha[q] = static_cast<float>(static_cast<double>(p.initial_alpha_[q]) *
                                    p.counters_[q].step_scale);
    }
    // Pass 1: the active features' averaging traces o_i and the total step M.
    for (size_t k = 0; k < x.size(); ++k) {
      const size_t base = static_cast<size_t>(x.index[k] * stride + off) * nq;
      const float x_sq = x.value[k] * x.value[k];
      float* __restrict o = &p.alpha_[base];
      for (uint32_t q = 0; q < nq; ++q) {
        const float on_ = o[q] + alpha[q] * (1.0f - o[q]);
        const bool learn = on[q] != 0.0f;
        o[q] = learn ? on_ : o[q];
        msum[q] += learn ? alpha[q] / on_ * x_sq : 0.0f;
      }
    }
    // Per question: alpha / M * delta (0 for a skipped question).
    for (uint32_t q = 0; q < nq; ++q) {
      msum[q] = alpha[q] / std::max(msum[q], 1.0f) * delta[q];
    }
    // Pass 2: w_i += (alpha / o_i / M) delta e_i over the trace.
    for (size_t i = 0; i < rows.size(); ++i) {
      PrefetchRowAhead(rows, i, nq, p.alpha_.data(), p.w_.data());
      const uint32_t r = rows[i];
      const float er = e.values()[i];
      const size_t base = static_cast<size_t>(r) * nq;
      const float* __restrict o = &p.alpha_[base];
      float* __restrict w = &p.w_[base];
      for (uint32_t q = 0; q < nq; ++q) {
        const float inv_o = o[q] > 0.0f ? 1.0f / std::max(o[q], 1e-30f) : 0.0f;
        const float step_w = msum[q] * inv_o * er;
        w[q] += step_w;
        wsq[q] += step_w * step_w;
      }
    }
  } else {  // TIDBD
    for (size_t i = 0; i < rows.size(); ++i) {
      PrefetchRowAhead(rows, i, nq, p.alpha_.data(), p.ss_h_.data(), p.w_.data());
      const uint32_t r = rows[i];
      const float er = e.values()[i], xr = x_dense_[r];
      const size_t base = static_cast<size_t>(r) * nq;
      float* __restrict beta = &p.alpha_[base];
      float* __restrict h = &p.ss_h_[base];
      float* __restrict w = &p.w_[base];
      for (uint32_t q = 0; q < nq; ++q) {
        // A skipped question's TD error is 0: its beta and weight stay; h is masked.
        beta[q] = std::clamp(beta[q] + meta[q] * delta[q] * xr * h[q], kMinLogStep, kMaxLogStep);
        const float alpha = ExpF(beta[q]);
        const float step_w = alpha * delta[q] * er;
        w[q] += step_w;
        wsq[q] += step_w * step_w;
        const float hn = h[q] * std::max(0.0f, 1.0f - alpha * xr * er) + step_w;
        h[q] = on[q] != 0.0f ? hn : h[q];
      }
    }
  }
  for (uint32_t q = 0; q < nq; ++q) wsq_[q] = static_cast<double>(wsq[q]);
}

void BlockLearner::UpdateRupee(const BlockSpec& spec, const BlockStep& step, double norm_sq,
                               const SparseTrace& e, BlockParams& p) {
  // RUPEE (A. White 2015, thesis; from memory): h += alpha_h (delta e - (h.x) x),
  // avg(delta e) decays at beta = 1 - decay; RUPEE = sqrt(|h . avg(delta e)|), with
  // alpha_h = 0.1 / |x|^2.
  const uint32_t nq = p.cols();
  const SparseFeatures& x = *step.x;
  const double beta = 1.0 - spec.progress_decay;
  const float alpha_h = static_cast<float>(0.1 / norm_sq);
  p.rupee_scale_ *= 1.0 - beta;
  const float du_scale = static_cast<float>(beta / p.rupee_scale_);
  const uint32_t stride = spec.action_valued ? num_actions_ : 1;
  const uint32_t off = spec.action_valued ? static_cast<uint32_t>(step.action) : 0;
  double* dot = p.rupee_dot_.data();
  float* hx = scratch_.data();
  std::fill(hx, hx + nq, 0.0f);
  for (size_t k = 0; k < x.size(); ++k) {
    const float* h = &p.rupee_h_[static_cast<size_t>(x.index[k] * stride + off) * nq];
    for (uint32_t q = 0; q < nq; ++q) hx[q] += x.value[k] * h[q];
  }
  const std::vector<uint32_t>& rows = e.active();
  for (size_t i = 0; i < rows.size(); ++i) {
    PrefetchRowAhead(rows, i, nq, p.rupee_h_.data(), p.rupee_u_.data());
    const uint32_t r = rows[i];
    const float er = e.values()[i];
    float* __restrict h = &p.rupee_h_[static_cast<size_t>(r) * nq];
    float* __restrict u = &p.rupee_u_[static_cast<size_t>(r) * nq];
    for (uint32_t q = 0; q < nq; ++q) {
      const float de = delta_[q] * er;
      const float du = du_scale * de;
      dot[q] += static_cast<double>(h[q]) * static_cast<double>(du);
      u[q] += du;
      const float dh = alpha_h * de;
      h[q] += dh;
      dot[q] += static_cast<double>(dh) * static_cast<double>(u[q]);
    }
  }
  for (size_t k = 0; k < x.size(); ++k) {
    const size_t r = static_cast<size_t>(x.index[k] * stride + off);
    float* __restrict h = &p.rupee_h_[r * nq];
    const float* u = &p.rupee_u_[r * nq];
    for (uint32_t q = 0; q < nq; ++q) {
      const float dh = -alpha_h * hx[q] * x.value[k];
      h[q] += dh;
      dot[q] += static_cast<double>(dh) * static_cast<double>(u[q]);
    }
  }
  if (p.rupee_scale_ < 1e-30) {
    // Fold the scale into u (rare: every few tens of thousands of updates) and recompute
    // the dot products exactly.
    const float s = static_cast<float>(p.rupee_scale_);
    std::fill(p.rupee_dot_.begin(), p.rupee_dot_.end(), 0.0);
    for (size_t i = 0; i < p.rupee_u_.size(); ++i) {
      p.rupee_u_[i] *= s;
      dot[i % nq] += static_cast<double>(p.rupee_h_[i]) * static_cast<double>(p.rupee_u_[i]);
    }
    p.rupee_scale_ = 1.0;
  }
  for (uint32_t q = 0; q < nq; ++q) {
    p.counters_[q].progress.rupee = std::sqrt(std::fabs(p.rupee_scale_ * dot[q]));
  }
}

bool BlockLearner::Guard(const BlockSpec& spec, BlockParams& p, BlockTraceState& state,
                         absl::Span<const double> answers, bool track_rows) {
  const uint32_t nq = p.cols();
  const size_t rows = p.rows();
  bool reset = false;
  bool plausible = true;
  // A block's questions share gamma (the pool spec forms blocks so).
  const double horizon =
      spec.gamma < 1.0 ? std::min(1.0 / (1.0 - spec.gamma), kMaxHorizon) : kMaxHorizon;
  for (uint32_t q = 0; q < nq; ++q) {
    QuestionCounters& c = p.counters_[q];
    // The largest return the cumulants seen so far could add up to.
    const double range = std::max(1.0, c.max_abs_cumulant) * horizon;
    if (std::isfinite(answers[q]) && std::fabs(answers[q]) <= kDivergenceFactor * range) {
      // Weights whose answers left the plausible range are not a restore point.
      plausible &= std::fabs(answers[q]) <= range;
      continue;
    }
    // Restore the last sound weights of this question and halve its steps.
    state.FoldLazy();  // every pending update applied first
    reset = true;
    ++c.divergence_resets;
    c.step_scale *= 0.5;
    c.progress.MarkReset();
    p.rupee_dot_[q] = 0.0;
    for (size_t r = 0; r < rows; ++r) {
      const size_t i = r * nq + q;
      p.w_[i] = p.good_w_[i];
      if (!p.aux_.empty()) p.aux_[i] = 0.0f;
      if (!p.ss_h_.empty()) p.ss_h_[i] = 0.0f;
      if (!p.ss_v_.empty()) p.ss_v_[i] = 0.0f;
      if (!p.rupee_h_.empty()) {
        p.rupee_h_[i] = 0.0f;
        p.rupee_u_[i] = 0.0f;
      }
      if (!p.alpha_.empty()) {
        const float a = static_cast<float>(static_cast<double>(p.initial_alpha_[q]) * c.step_scale);
        p.alpha_[i] = spec.step_rule == StepRuleKind::kTidbd      ? std::log(a)
                      : spec.step_rule == StepRuleKind::kSettling ? 0.0f
                                                                  : a;
      }
    }
  }
  if (reset) {
    state.Reset();
    p.updates_since_snapshot_ = 0;
    p.implausible_since_snapshot_ = false;
    return true;
  }
  // A snapshot needs every answer since the last one inside the plausible range.
  p.implausible_since_snapshot_ |= !plausible;
  if (++p.updates_since_snapshot_ >= kSnapshotEvery) {
    p.updates_since_snapshot_ = 0;
    if (state.lazy != nullptr) state.lazy->Flush();
    if (!p.implausible_since_snapshot_ && p.TrySnapshot() && track_rows) {
      // The trace's rows keep receiving updates after the snapshot.
      if (state.lazy != nullptr) {
        for (size_t i = 0; i < state.lazy->trace_size(); ++i) p.MarkDirty(state.lazy->trace_row(i));
      } else {
        for (uint32_t r : state.trace.active()) p.MarkDirty(r);
      }
    }
    p.implausible_since_snapshot_ = false;
  }
  return false;
}

namespace {

void SaveCounters(StateWriter& w, const QuestionCounters& c) {
  w.Put(c.updates);
  w.Put(c.skipped_missing);
  w.Put(c.divergence_resets);
  w.Put(c.step_scale);
  w.Put(c.max_abs_cumulant);
  const LearningProgress& p = c.progress;
  for (double v : {p.td_mean, p.td_sq, p.td_fast_mean, p.weight_change, p.weight_change_peak,
                   p.rho_mean, p.rho_sq, p.rupee}) {
    w.Put(v);
  }
  w.Put(p.observed);
  w.Put(p.last_reset_at);
  w.Put<uint8_t>(p.reset_ever ? 1 : 0);
}

bool LoadCounters(StateReader& r, QuestionCounters* c) {
  LearningProgress& p = c->progress;
  uint8_t reset_ever = 0;
  const bool ok = r.Get(&c->updates) && r.Get(&c->skipped_missing) &&
                  r.Get(&c->divergence_resets) && r.Get(&c->step_scale) &&
                  r.Get(&c->max_abs_cumulant) && r.Get(&p.td_mean) && r.Get(&p.td_sq) &&
                  r.Get(&p.td_fast_mean) && r.Get(&p.weight_change) &&
                  r.Get(&p.weight_change_peak) && r.Get(&p.rho_mean) && r.Get(&p.rho_sq) &&
                  r.Get(&p.rupee) && r.Get(&p.observed) && r.Get(&p.last_reset_at) &&
                  r.Get(&reset_ever);
  p.reset_ever = reset_ever != 0;
  return ok;
}

}  // namespace

void BlockParams::SaveState(StateWriter& w) const {
  w.Put(rows_);
  w.Put(cols_);
  for (const std::vector<float>* v : {&w_, &aux_, &alpha_, &ss_h_, &ss_v_}) w.PutVector(*v);
  // The restore point differs from the weights only in the rows written since the last
  // snapshot, when they are tracked: those rows alone (state version 5), which halves a
  // per-stream checkpoint. Else all of it.
  if (all_dirty_) {
    w.Put<uint8_t>(0);
    w.PutVector(good_w_);
  } else {
    w.Put<uint8_t>(1);
    w.PutVector(dirty_rows_);
    for (uint32_t r : dirty_rows_) {
      for (uint32_t q = 0; q < cols_; ++q) w.Put(good_w_[static_cast<size_t>(r) * cols_ + q]);
    }
  }
  for (const std::vector<float>* v : {&rupee_h_, &rupee_u_, &initial_alpha_}) w.PutVector(*v);
  w.Put(rupee_scale_);
  w.PutVector(rupee_dot_);
  w.Put(updates_since_snapshot_);
  w.Put<uint8_t>(implausible_since_snapshot_ ? 1 : 0);
  w.PutVector(cumulant_mean_);
  w.PutVector(cumulant_count_);
  for (const QuestionCounters& c : counters_) SaveCounters(w, c);
}

bool BlockParams::LoadState(StateReader& r) {
  uint32_t rows = 0, cols = 0;
  if (!r.Get(&rows) || !r.Get(&cols)) return false;
  if (rows != rows_ || cols != cols_) return r.Fail("block shape differs from the spec's");
  for (std::vector<float>* v : {&w_, &aux_, &alpha_, &ss_h_, &ss_v_}) {
    if (!r.GetVector(v, v->size())) return false;
  }
  std::fill(dirty_bits_.begin(), dirty_bits_.end(), uint64_t{0});
  dirty_rows_.clear();
  all_dirty_ = true;
  uint8_t sparse = 0;
  if (r.version() >= 5 && !r.Get(&sparse)) return false;
  if (sparse > 1) return r.Fail("restore point: unknown layout");
  if (sparse == 0) {
    if (!r.GetVector(&good_w_, good_w_.size())) return false;
  } else {
    // The weights, with the listed rows' own values; those rows stay marked as written.
    std::vector<uint32_t> listed;
    if (!r.GetVector(&listed) || listed.size() > DirtyListCapacity(rows_)) {
      return r.Fail("restore point: row list");
    }
    std::copy(w_.begin(), w_.end(), good_w_.begin());
    all_dirty_ = false;
    for (uint32_t row : listed) {
      if (row >= rows_ || RowListed(row)) {
        return r.Fail("restore point: row out of range or repeated");
      }
      for (uint32_t q = 0; q < cols_; ++q) {
        if (!r.Get(&good_w_[static_cast<size_t>(row) * cols_ + q])) return false;
      }
      MarkDirty(row);
    }
  }
  for (std::vector<float>* v : {&rupee_h_, &rupee_u_, &initial_alpha_}) {
    if (!r.GetVector(v, v->size())) return false;
  }
  uint8_t implausible = 0;
  if (!r.Get(&rupee_scale_) || !r.GetVector(&rupee_dot_, cols_) ||
      !r.Get(&updates_since_snapshot_) || !r.Get(&implausible) ||
      !r.GetVector(&cumulant_mean_, cols_) || !r.GetVector(&cumulant_count_, cols_)) {
    return false;
  }
  implausible_since_snapshot_ = implausible != 0;
  for (QuestionCounters& c : counters_) {
    if (!LoadCounters(r, &c)) return false;
  }
  return true;
}

void BlockTraceState::SaveState(StateWriter& w) const {
  FoldLazy();
  trace.SaveState(w);
  w.Put(follow_on);
  w.Put(rho_prev);
  w.Put(gamma_t);
  w.PutVector(v_old);
}

bool BlockTraceState::LoadState(StateReader& r) {
  lazy.reset();  // the weights are being replaced too
  return trace.LoadState(r) && r.Get(&follow_on) && r.Get(&rho_prev) && r.Get(&gamma_t) &&
         r.GetVector(&v_old, v_old.size());
}

}  // namespace bellwether
