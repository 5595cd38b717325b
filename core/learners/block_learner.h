// One block of questions learning together: same target policy, continuation, lambda,
// learner and step rule, so they share one sparse eligibility trace per stream, and their
// weights are stored feature-major (row j holds feature j's weight for every question of
// the block), so each trace row is one contiguous pass over the block's questions. The
// per-question work is the TD error and the step size.
//
// Learners (state values unless noted; x = x_t, x' = x_{t+1}, rho = pi(A_t|S_t) /
// mu(A_t|S_t), gamma_t the continuation into S_t, gamma' into S_{t+1}):
//   TD(lambda), per-decision importance sampling (Sutton & Barto 2nd ed., eq. 12.25):
//       e = rho (gamma_t lambda e + x);  w += alpha delta e
//   True online TD(lambda) (van Seijen & Sutton 2014; van Seijen et al. 2016, JMLR),
//   exact up to the trace pruning below (entries under 1e-4 are dropped):
//       e = gamma_t lambda e + (1 - alpha gamma_t lambda e.x) x
//       w += alpha (delta + v - v_old) e - alpha (v - v_old) x;  v_old = v'
//   GTD(lambda) in TDC form (Maei 2011; Sutton & Barto 2nd ed., Section 12.11):
//       e = rho (gamma_t lambda e + x)
//       w += alpha (delta e - gamma' (1 - lambda) (e.h) x');  h += beta (delta e - (h.x) x)
//   Emphatic TD(lambda) (Sutton, Mahmood & White 2016, JMLR), interest 1:
//       F = rho_{t-1} gamma_t F + 1;  M = lambda + (1 - lambda) F
//       e = rho (gamma_t lambda e + M x);  w += alpha delta e
//   Tree backup TB(lambda) over action values (Precup, Sutton & Singh 2000; Sutton &
//   Barto 2nd ed., Section 12.10), and Watkins's Q(lambda) as TB with the greedy policy:
//       e = gamma_t lambda pi(A_t|S_t) e + x(S_t, A_t)
//       delta = c + gamma' sum_a pi(a|S') q(S', a) - q(S_t, A_t);  w += alpha delta e
//
// Step rules: FIXED alpha = step / |x_t|^2. AUTOSTEP (Mahmood, Sutton, Degris & Pilarski
// 2012) per weight, applied to TD with the trace in place of the input:
//       v_i = max(|delta e_i h_i|, v_i + alpha_i x_i e_i (|delta e_i h_i| - v_i) / tau)
//       alpha_i *= exp(mu delta e_i h_i / v_i);  M = max(sum_i alpha_i e_i (x_i - gamma' x'_i), 1)
//       alpha_i /= M;  w_i += alpha_i delta e_i;  h_i = h_i (1 - alpha_i x_i e_i)^+ + alpha_i delta e_i
// which is exactly supervised Autostep when gamma = lambda = 0 (e = x). The normalization
// by M keeps the update from overshooting the TD target (the effective step below one),
// as in AutoTIDBD (Kearney et al. 2019). Only the trace's rows are touched, so a weight
// whose feature is not in the trace keeps its step size (the supervised algorithm divides
// every alpha_i by M; for dense inputs the two agree).
// SETTLING (Sutton & Barto 2nd ed., Exercise 2.7, per weight): o_i += alpha (1 - o_i)
// when feature i is active; alpha_i = alpha / o_i; M = max(sum_{i in x} alpha_i x_i^2, 1);
// w_i += (alpha_i / M) delta e_i.
// Centering (Naik, Wan, Tomar & Sutton 2024): a centered question learns from
// c - r_bar, where r_bar += max(1 / n, (1 - gamma) / 10) (c - r_bar), and answers
// v(s) + r_bar / (1 - gamma).
// TIDBD (Kearney, Veeriah, Travnik, Pilarski & Sutton 2019, semi-gradient form; from
// memory of the paper): beta_i += theta delta x_i h_i; alpha_i = exp(beta_i);
// w_i += alpha_i delta e_i; h_i = h_i (1 - alpha_i x_i e_i)^+ + alpha_i delta e_i.
#ifndef BELLWETHER_CORE_LEARNERS_BLOCK_LEARNER_H_
#define BELLWETHER_CORE_LEARNERS_BLOCK_LEARNER_H_

#include <algorithm>
#include <cstdint>
#include <vector>

#include "absl/types/span.h"
#include "core/features/sparse_features.h"
#include "core/learners/lazy_block_td.h"
#include "core/learners/sparse_trace.h"
#include "core/pool_spec.h"
#include "core/progress/learning_progress.h"

namespace bellwether {

class StateWriter;
class StateReader;

// How many written rows the divergence guard lists before it copies whole snapshots
// instead: every row of a small table, an eighth of a large one.
inline uint32_t DirtyListCapacity(uint32_t rows) {
  return std::min(rows, std::max<uint32_t>(rows / 8, 4096));
}

// Per-question counters of a block's learning (part of its learned state).
struct QuestionCounters {
  uint64_t updates = 0;
  uint64_t skipped_missing = 0;
  uint64_t divergence_resets = 0;
  double step_scale = 1.0;     // halved at each divergence reset
  double max_abs_cumulant = 0;  // largest |c| seen, for the divergence bound
  LearningProgress progress;
};

// The learned parameters of one block: in a pooled pool one per block, otherwise one
// per block per stream.
class BlockParams {
 public:
  // `spec` and `recipe` describe the block; weights start at zero.
  BlockParams(const BlockSpec& spec, const std::vector<CompiledQuestion>& questions,
              const FeatureRecipe& recipe, uint32_t num_actions);

  uint32_t rows() const { return rows_; }
  uint32_t cols() const { return cols_; }
  float* row(uint32_t r) { return &w_[static_cast<size_t>(r) * cols_]; }
  const float* row(uint32_t r) const { return &w_[static_cast<size_t>(r) * cols_]; }

  // Copies question `from_col` of `other` (same row count) into column `to_col`:
  // weights, secondary weights, per-weight step sizes and counters. Used to keep learned
  // state when a pool's spec changes.
  void CopyColumnFrom(const BlockParams& other, uint32_t from_col, uint32_t to_col);

  // Step-size summary of column `q` over `rows`: mean, min, max of the per-weight steps
  // (or the fixed step) for a feature vector with squared norm `norm_sq`.
  void StepSizeSummary(uint32_t q, absl::Span<const uint32_t> rows, double norm_sq,
                       double* mean, double* min, double* max) const;

  // The step size of weight (r, q): the per-weight alpha under AUTOSTEP / TIDBD, else
  // the fixed step for a unit-norm feature vector.
  float step_size(uint32_t r, uint32_t q) const;

  // Declares the current weights sound: the divergence guard's restore point. Call after
  // setting weights from outside (a restored checkpoint, a test's initial weights).
  void MarkSound();

  // Divergence guard bookkeeping. The guard's snapshot copies only the rows written since
  // the last one; whoever writes a weight row outside BlockLearner::Learn must call
  // MarkAllDirty() (the next snapshot then copies every row).
  void MarkDirty(uint32_t r) {
    if (all_dirty_ || RowListed(r)) return;
    dirty_bits_[r >> 6] |= uint64_t{1} << (r & 63);
    if (dirty_rows_.size() >= DirtyListCapacity(rows_)) {  // reserved up to that
      all_dirty_ = true;  // past DirtyListCapacity a whole copy is about as cheap
      return;
    }
    dirty_rows_.push_back(r);
  }
  void MarkAllDirty() { all_dirty_ = true; }
  // The restore point (rows x cols like the weights) and how many snapshots this object
  // took since it was made or loaded.
  absl::Span<const float> restore_point() const { return good_w_; }
  uint64_t snapshots() const { return snapshots_; }
  // If every weight is finite, copies the weights into the restore point (the rows
  // written since the last snapshot, or every row) and returns true; else changes nothing.
  bool TrySnapshot();

  // Centering: the running mean of column `q`'s cumulant and how many it has seen.
  double cumulant_mean(uint32_t q) const { return cumulant_mean_[q]; }
  uint64_t cumulant_count(uint32_t q) const { return cumulant_count_[q]; }

  std::vector<QuestionCounters>& counters() { return counters_; }
  const std::vector<QuestionCounters>& counters() const { return counters_; }

  // Checkpoints: every array and counter (the shape comes from the spec on load).
  void SaveState(StateWriter& w) const;
  bool LoadState(StateReader& r);

 private:
  friend class BlockLearner;
  uint32_t rows_, cols_;
  std::vector<float> w_;      // rows x cols, feature-major
  std::vector<float> aux_;    // TDC: secondary weights h
  // AUTOSTEP: alpha_i; TIDBD: beta_i = log alpha_i; SETTLING: o_i.
  std::vector<float> alpha_;
  std::vector<float> ss_h_;   // AUTOSTEP/TIDBD: h_i
  std::vector<float> ss_v_;   // AUTOSTEP: v_i
  std::vector<float> good_w_;  // divergence guard: the last weights known to be sound
  // Rows that may differ from good_w_: a bit per row and their list (up to
  // DirtyListCapacity), or all of them. Saved with the restore point (state version 5).
  std::vector<uint64_t> dirty_bits_;
  bool RowListed(uint32_t r) const { return (dirty_bits_[r >> 6] >> (r & 63) & 1) != 0; }
  std::vector<uint32_t> dirty_rows_;
  bool all_dirty_ = true;
  uint64_t snapshots_ = 0;
  // RUPEE: h (secondary weights) and u, with avg(delta e) = rupee_scale_ * u stored
  // lazily scaled so its decay costs nothing per step; rupee_dot_[q] = h_q . u_q.
  std::vector<float> rupee_h_, rupee_u_;
  double rupee_scale_ = 1.0;
  std::vector<double> rupee_dot_;
  uint64_t updates_since_snapshot_ = 0;
  bool implausible_since_snapshot_ = false;
  std::vector<QuestionCounters> counters_;
  std::vector<float> initial_alpha_;  // per column
  std::vector<double> cumulant_mean_;   // centering, per column
  std::vector<uint64_t> cumulant_count_;
};

// Per-stream trace state of one block.
//
// A block of 32 or more questions that learns by TD(lambda) with FIXED steps, state
// values, no RUPEE and weights of its own (per-stream learning) runs on a LazyBlockTd: its trace lives in `lazy`, and
// the updates of the block's weight rows are applied when each row is next read or its
// trace entry is pruned (core/learners/lazy_block_td.h). `trace` is the canonical form:
// the kernel is made from it at the next frame, and SaveState, Reset and FoldLazy() fold
// the kernel back into it (every pending update applied to the weights, the trace
// entries rounded to float), so a saved and a restored pool continue alike.
struct BlockTraceState {
  explicit BlockTraceState(uint32_t rows) : trace(rows) {}
  mutable SparseTrace trace;
  double follow_on = 0;  // emphatic F
  double rho_prev = 1;   // emphatic: rho_{t-1}
  double gamma_t = 0;    // continuation into the current state
  std::vector<double> v_old;  // true online: per question
  mutable std::unique_ptr<LazyBlockTd> lazy;
  void SaveState(StateWriter& w) const;
  bool LoadState(StateReader& r);
  // Applies what the lazy kernel holds to the weights and moves its trace into `trace`
  // (a change of representation, not of what was learned). No-op without a kernel.
  void FoldLazy() const;
  void Reset() {
    FoldLazy();
    trace.Clear();
    follow_on = 0;
    rho_prev = 1;
    gamma_t = 0;
    for (double& v : v_old) v = 0;
  }
};

// One transition t -> t+1 as a block sees it.
struct BlockStep {
  const SparseFeatures* x = nullptr;       // x_t
  const SparseFeatures* x_next = nullptr;  // x_{t+1}
  double gamma_next = 0;                   // gamma_{t+1}
  double rho = 1;                          // per-decision ratio (clipped), state values
  int action = -1;                         // A_t (action values)
  absl::Span<const double> pi_now;         // pi(.|S_t), action values with a fixed target
  absl::Span<const double> pi_next;        // pi(.|S_{t+1}), same
  absl::Span<const double> cumulants;      // per question of the block; NaN = skip
  // The weights belong to this stream alone (per-stream learning), so the block may run
  // on a lazy kernel (see BlockTraceState).
  bool own_params = false;
};

// Applies block updates. Holds scratch buffers sized for the widest block, so a step
// allocates nothing. Not thread-safe: one per writer.
class BlockLearner {
 public:
  BlockLearner(uint32_t max_rows, uint32_t max_cols, uint32_t num_actions);

  // Learns from one transition, then writes each question's answer at S_{t+1} into
  // `answers` (size cols): v(x') for state values, sum_a pi(a|S') q(S', a) for tree
  // backup, max_a q(S', a) for control questions (whose greedy action goes to
  // `greedy_action`, if non-null). Questions whose cumulant is NaN skip the update.
  void Learn(const BlockSpec& spec, const std::vector<CompiledQuestion>& questions,
             const BlockStep& step, BlockParams& params, BlockTraceState& state,
             absl::Span<double> answers, int* greedy_action);

  // Answers at `x` without learning (first frame of a stream, after a restart).
  void Answer(const BlockSpec& spec, const SparseFeatures& x, absl::Span<const double> pi,
              const BlockParams& params, absl::Span<double> answers, int* greedy_action);

  // q(x, a) for every action a of column `q` of an action-valued block (size num_actions).
  void ActionValues(const SparseFeatures& x, const BlockParams& params, uint32_t q,
                    absl::Span<double> out) const;

 private:
  void PredictRows(const BlockParams& p, const SparseFeatures& x, int action, float* out) const;
  // Whether this block and step run on the lazy kernel.
  static bool UsesLazyKernel(const BlockSpec& spec, const BlockStep& step);
  // The stream's kernel over `p`'s weights, made from `state.trace` if there is none.
  LazyBlockTd& LazyKernel(BlockParams& p, BlockTraceState& state);
  static SparseRows Rows(const SparseFeatures& x) { return {x.index, x.value}; }
  void ApplyStepRule(const BlockSpec& spec, const std::vector<CompiledQuestion>& questions,
                     const BlockStep& step, double norm_sq, const SparseTrace& trace,
                     BlockParams& p);
  // Divergence guard: a question whose answer is non-finite or beyond 10 x its plausible
  // range max(1, max |c|) x min(1 / (1 - gamma), 10^4) gets its last sound weights back
  // and half its step size; the stream's trace state restarts. Weights are snapshotted
  // as sound every 1,000 updates, only if every answer since the last snapshot stayed
  // within the plausible range. Returns whether any question was reset.
  void UpdateRupee(const BlockSpec& spec, const BlockStep& step, double norm_sq,
                   const SparseTrace& trace, BlockParams& p);
  // `track_rows`: the snapshot copies only the rows marked dirty (see BlockParams), and
  // the trace's rows are marked after it.
  bool Guard(const BlockSpec& spec, BlockParams& p, BlockTraceState& state,
             absl::Span<const double> answers, bool track_rows);

  uint32_t num_actions_;
  std::vector<float> v_, v_next_, delta_, scratch_;
  std::vector<double> dscratch_, pi_buf_, q_buf_, wsq_;
  std::vector<float> wsq_f_;
  std::vector<float> x_scaled_;  // rho x for the lazy kernel
  std::vector<uint32_t> trace_rows_;
  std::vector<float> x_dense_, xn_dense_;  // feature values by row for the current step
};

}  // namespace bellwether

#endif  // BELLWETHER_CORE_LEARNERS_BLOCK_LEARNER_H_
