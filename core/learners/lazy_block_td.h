// Block TD(lambda) whose trace update is applied lazily: one block of Q questions shares
// one accumulating eligibility trace over N feature rows, and the per-frame cost does not
// grow with the trace's length.
//
// The eager update (what ../shared/bench/block_td_reference.py does, one frame t):
//     v      = x_t . W,   v' = x_{t+1} . W                      (W: N x Q, feature-major)
//     delta  = c_{t+1} + gamma_{t+1} v' - v                      (per question)
//     e      = d_t e;  e_j <- 0 where |e_j| < prune;  e += x_t    (d_t = gamma_t lambda)
//     W_jq  += alpha_q(t) delta_q(t) e_j(t)   for every j with e_j(t) != 0
// touches every row in the trace (about 500 rows per frame on the default workload).
//
// The lazy form. Let D(t) = d_1 d_2 ... d_t (the product of this epoch's decays, see
// rebasing below). Between two frames at which feature j is accumulated, its trace only
// decays, so e_j(t) = c_j D(t) with a per-row coefficient c_j that changes only when j is
// accumulated: e_j(t) = d_t e_j(t-1) + x_j  <=>  c_j <- c_j + x_j / D(t). Summing the
// eager updates over the frames s = m+1 .. n during which c_j is constant:
//     sum_s alpha_q(s) delta_q(s) e_j(s) = c_j sum_s alpha_q(s) delta_q(s) D(s)
//                                        = c_j (S_q(n) - S_q(m)),
//     S_q(t) = sum_{s <= t} alpha_q(s) delta_q(s) D(s)          (running sums, double)
// exactly, for step sizes alpha_q(s) that change every frame and any decays d_s >= 0.
// So each row remembers the frame m_j up to which it has been brought ("synced"), and
// its pending update c_j (S_q(now) - S_q(m_j)) is applied only when:
//   * the row is read (its feature is in x_t or x_{t+1}): W must be current for v, v';
//   * the row is accumulated (c_j is about to change);
//   * its trace decays below the pruning level: |c_j| D(t) < prune is tested with D(t)
//     after frame t's decay, and such a row is synced to S(t-1) and dropped, so it gets
//     none of frame t's update, as in the eager form. Rows are kept in a min-heap on
//     |c_j|, so finding the rows to drop costs O(log n) per row dropped, not O(n);
//   * Flush(), or a rebase.
// A row that is synced at frame t and again at frame t+1 has exactly one frame pending,
// c_j (S(t) - S(t-1)) = e_j(t) alpha delta(t): that common case is applied in float from
// the last frame's alpha delta, as the eager loop would.
//
// Rebasing. D(t) shrinks geometrically, c_j = e_j / D grows, and S(n) - S(m) cancels in
// double (its absolute error is about 1e-16 sum_s |alpha delta| D(s), relative to a
// pending update of size |alpha delta| D(n) that is 1e-16 / D(n)). So the epoch ends
// (before frame t's decay) when D would leave [2^-20, 2^20] or the history of S vectors
// (LazyBlockTdOptions::history_frames) is full: c_j is multiplied by D (it becomes e_j,
// a uniform rescaling that keeps the heap's order), and D = 1, S = 0 start a new epoch.
// The S history of the ending epoch is kept (two are kept, used alternately), with its
// final D: a row synced at m in the previous epoch has pending
//     (c_j / D_prev_end) (S_prev(end) - S_prev(m)) + c_j S(now)
// so a rebase only has to sync the rows not synced during the whole ending epoch (they
// would refer to an older one). A decay below 2^-20 (0 at a restart) is applied to the
// c_j directly, after syncing every row: that rebase costs one eager frame. On the
// default workload an epoch lasts ~120 frames. Up to rounding, the result equals the eager update,
// including which entries are pruned when (the test |c_j| D < prune is done in double
// while the eager form multiplies float32 trace values, so an entry within rounding of
// the threshold may be dropped one frame apart: an update of about prune alpha delta).
// prune = 0 keeps every entry until its magnitude falls below FLT_MIN (where float32
// trace entries turn subnormal), bounding the trace's life; what that drops is below
// float rounding of any weight above 1e-30.
//
// Per-weight factors (for per-weight step rules such as SETTLING, whose alpha_jq changes
// only when feature j is active): with SetWeightFactors(f), the update is
// W_jq += f_jq alpha_q delta_q e_j. The pending form stays exact as long as f_jq changes
// only while row j has nothing pending, i.e. between ReadRows (which syncs the rows of
// x_t and x_{t+1}) and the Advance of the same frame, for rows listed in that ReadRows.
//
// Cost per frame: the rows of x_t and x_{t+1} (read, most with one frame pending), the
// rows dropped by pruning (about as many as features leave x per frame), and O(Q) for
// delta and S; plus, per rebase, the rows idle for a whole epoch (one eager frame at a
// restart). Memory: W, 16 bytes of row state per feature, 2 (history_frames + 1) x Q
// doubles of S history, all allocated at construction.
// Nothing is allocated per frame.
//
// Not thread-safe; one instance per trace (per stream). Several instances over one
// external weight matrix (pooled learning, one trace per stream) each hold pending
// updates for it: an instance must Flush() before another one reads or advances.
#ifndef BELLWETHER_CORE_LEARNERS_LAZY_BLOCK_TD_H_
#define BELLWETHER_CORE_LEARNERS_LAZY_BLOCK_TD_H_

#include <cstddef>
#include <cstdint>
#include <memory>

#include "absl/status/status.h"
#include "absl/status/statusor.h"
#include "absl/types/span.h"

namespace bellwether {

// One sparse feature vector as rows of the weight matrix: indices and their values.
// `value` empty means every value is 1 (binary features such as tiles). An index may
// repeat (its values add, as numpy.add.at does).
struct SparseRows {
  absl::Span<const uint32_t> index;
  absl::Span<const float> value;
};

struct LazyBlockTdOptions {
  uint32_t num_features = 0;   // N, rows of W
  uint32_t num_questions = 0;  // Q, columns of W
  uint32_t max_active = 64;    // the most entries one SparseRows may list
  // Trace entries whose magnitude after a frame's decay is below this are dropped before
  // that frame's update. 0: kept until they fall below FLT_MIN.
  float prune = 1e-4f;
  // Frames per epoch at most (the S history kept): more means rarer rebases and
  // 2 (history_frames + 1) x Q x 8 bytes of memory (two epochs' histories).
  uint32_t history_frames = 128;
};

// One transition t -> t+1 for Learn().
struct LazyBlockTdFrame {
  SparseRows x;                        // x_t
  SparseRows x_next;                   // x_{t+1}
  absl::Span<const float> cumulants;   // c_{t+1}, per question; NaN: no update for it
  absl::Span<const float> step_sizes;  // alpha_q(t), per question
  float gamma_next = 0;                // gamma_{t+1}, the TD target's discount
  double trace_decay = 0;              // d_t = gamma_t lambda (x rho), >= 0; 0 restarts
};

// Work counters (for the benchmark's byte and FLOP model, and for tests).
struct LazyBlockTdStats {
  uint64_t frames = 0;
  uint64_t rows_read = 0;          // distinct rows read by ReadRows
  uint64_t one_frame_syncs = 0;    // pending of exactly one frame, applied in float
  uint64_t multi_frame_syncs = 0;  // pending from the S history, applied in double
  uint64_t pruned = 0;             // rows dropped from the trace
  uint64_t rebases = 0;
  uint64_t rebase_rows = 0;  // rows synced by rebases and Flush()
  uint64_t bytes = 0;        // bytes of W, S and step vectors loaded and stored
  uint64_t flops = 0;        // useful float/double arithmetic operations
};

class LazyBlockTd {
 public:
  // A block with its own zeroed weights: rows padded to a multiple of 8 floats (so each
  // row starts on a 32-byte boundary).
  static absl::StatusOr<std::unique_ptr<LazyBlockTd>> Create(const LazyBlockTdOptions& options);
  // A block over caller-owned weights: row j is weights[j * row_stride, + num_questions).
  // `weights` must outlive the block; row_stride >= num_questions.
  static absl::StatusOr<std::unique_ptr<LazyBlockTd>> CreateOver(const LazyBlockTdOptions& options,
                                                                 float* weights, size_t row_stride);

  LazyBlockTd(const LazyBlockTd&) = delete;
  LazyBlockTd& operator=(const LazyBlockTd&) = delete;
  ~LazyBlockTd();

  // One frame of TD(lambda): ReadRows(x, x_next), delta, Advance(x, alpha delta, decay).
  // v(), v_next() and delta() hold this frame's values afterwards. Questions whose
  // cumulant is NaN get delta NaN and no update. Allocates nothing.
  absl::Status Learn(const LazyBlockTdFrame& frame);

  // Phase 1 of a frame, for callers that compute delta themselves: applies what is
  // pending on the rows of x and x_next, then v = x . W and v_next = x_next . W (each of
  // size num_questions; either SparseRows may be empty). The rows of x are read once for
  // both sums (a row of x absent from x_next enters v_next with coefficient 0, so a
  // non-finite weight there makes v_next NaN too). Allocates nothing; the same holds for
  // every call below.
  absl::Status ReadRows(SparseRows x, SparseRows x_next, absl::Span<float> v,
                        absl::Span<float> v_next);
  // Phase 2: e <- decay e, entries below the pruning level dropped, e += x, then
  // W_jq += f_jq step_q e_j for every row in the trace (applied lazily). step_q is
  // alpha_q delta_q; 0 leaves question q unchanged. Rows of x need not have been read.
  absl::Status Advance(SparseRows x, absl::Span<const float> step, double decay);

  // out = x . W with everything pending included, without changing any state.
  absl::Status Predict(SparseRows x, absl::Span<float> out) const;

  // Applies every pending update, so that every row() is current. The trace is kept.
  void Flush();
  // Flush(), then e = 0 (a restart between frames).
  void ClearTrace();

  // Optional per-weight factors f (see the file comment); nullptr for none. Layout as the
  // weights: row j is factors[j * row_stride, + num_questions); must outlive the block.
  // Call with nothing pending (after Flush()).
  void SetWeightFactors(const float* factors, size_t row_stride);

  // Raw weight storage: row j excludes what is pending on it unless Flush() was called
  // (or the row was read) since the last Advance. Writing a row is safe after Flush().
  const float* row(uint32_t j) const { return weights_ + static_cast<size_t>(j) * stride_; }
  float* mutable_row(uint32_t j) { return weights_ + static_cast<size_t>(j) * stride_; }
  size_t row_stride() const { return stride_; }
  // Weight (j, q) with what is pending on it.
  float Weight(uint32_t j, uint32_t q) const;

  // The trace: number of non-zero entries, e_j, and |e|^2 (kept incrementally).
  size_t trace_size() const { return heap_size_; }
  float TraceValue(uint32_t j) const;
  double TraceNormSq() const;
  // Writes the trace's entries (any order) into rows / values, each of size trace_size().
  void TraceEntries(absl::Span<uint32_t> rows, absl::Span<float> values) const;
  // The row of the trace's i-th entry (any order), i < trace_size().
  uint32_t trace_row(size_t i) const { return heap_[i].row; }
  // Flush(), then replaces the trace (for checkpoints). Zero values are skipped.
  absl::Status SetTrace(absl::Span<const uint32_t> rows, absl::Span<const float> values);

  uint32_t num_features() const { return options_.num_features; }
  uint32_t num_questions() const { return options_.num_questions; }
  absl::Span<const float> v() const { return {v_, options_.num_questions}; }
  absl::Span<const float> v_next() const { return {v_next_, options_.num_questions}; }
  absl::Span<const float> delta() const { return {delta_, options_.num_questions}; }
  const LazyBlockTdStats& stats() const { return stats_; }

 private:
  struct RowState {
    double c = 0;           // e_j / D; 0: not in the trace
    uint32_t synced = 0;    // tagged S index up to which the row's updates are applied
    uint32_t heap_pos = 0;  // position in heap_ while in the trace
  };
  struct HeapEntry {
    double key;  // |c_j|
    uint32_t row;
  };
  struct ReadEntry {
    float* w;         // the row's weights
    float coef;       // its value in x (x_next for rows only in x_next), summed over repeats
    float coef_next;  // for rows of x: its value in x_next
    float pending;    // e_j(t-1) for a one-frame pending update applied while reading, else 0
    uint32_t row;
  };

  struct SlotEntry {
    uint32_t row_plus_1;  // 0: empty
    uint32_t index;       // into reads_
  };

  LazyBlockTd(const LazyBlockTdOptions& options, float* weights, size_t stride, bool owned);
  // The slot of row j: its entry, or the empty one where it would go. ReadRows empties
  // the slots it filled in the reverse order of filling, so probing stays exact.
  SlotEntry& FindSlot(uint32_t j) {
    const uint32_t mask = (1u << slot_bits_) - 1;
    uint32_t at = (j * 0x9E3779B1u) >> (32 - slot_bits_);
    while (slots_[at].row_plus_1 != 0 && slots_[at].row_plus_1 != j + 1) at = (at + 1) & mask;
    return slots_[at];
  }
  absl::Status CheckRows(SparseRows x) const;
  // Advance() after its arguments were checked.
  void AdvanceChecked(SparseRows x, absl::Span<const float> step, double decay);
  // Prefetches the first KiB of row j's weights.
  void PrefetchRow(uint32_t j) const;
  // Brings row j up to S[k_] (its pending applied), whatever its age.
  void SyncRow(uint32_t j);
  void SyncOneFrame(float* w, const float* f, float e_prev);
  void SyncFromHistory(float* w, const float* f, double c, uint32_t from);
  // Ends the epoch before a frame whose decay is `decay`; returns the frame's D.
  double Rebase(double decay);
  void HeapSiftUp(uint32_t pos);
  void HeapSiftDown(uint32_t pos);
  void HeapRemove(uint32_t pos);
  // Sync points are tagged with the epoch's parity (bit 31) and the index of S in it.
  static uint32_t Tag(uint32_t parity, uint32_t index) { return parity << 31 | index; }
  uint32_t Now() const { return Tag(parity_, k_); }
  const double* Hist(uint32_t tag) const {
    return s_hist_ +
           ((tag >> 31) * (options_.history_frames + size_t{1}) + (tag & 0x7fffffffu)) * s_stride_;
  }
  double* Hist(uint32_t tag) {
    return s_hist_ +
           ((tag >> 31) * (options_.history_frames + size_t{1}) + (tag & 0x7fffffffu)) * s_stride_;
  }
  // What is pending on weight (j, q) of a row with state `rs`, in double.
  double PendingOf(const RowState& rs, size_t q) const;

  LazyBlockTdOptions options_;
  float prune_;  // effective threshold (FLT_MIN for 0)
  float* weights_;
  size_t stride_;
  bool owned_;
  const float* factors_ = nullptr;
  size_t factor_stride_ = 0;

  RowState* rows_ = nullptr;   // N
  HeapEntry* heap_ = nullptr;  // N, a binary min-heap on |c_j|
  uint32_t heap_size_ = 0;
  // ReadRows' rows by index (open addressing, linear probing; empty outside ReadRows).
  SlotEntry* slots_ = nullptr;
  uint32_t slot_bits_ = 0;
  ReadEntry* reads_ = nullptr;  // 2 x max_active: x's rows, then x_next's others
  double* s_hist_ = nullptr;    // 2 epochs x (history_frames + 1) x s_stride_
  size_t s_stride_ = 0;
  uint32_t parity_ = 0;         // the current epoch's S history (0 or 1)
  uint32_t k_ = 0;              // S(k_) is the sum through the last frame
  uint32_t prev_end_ = 0;       // the previous epoch's last S index
  double prev_scale_ = 1;       // D at its end (c_j was multiplied by it)
  double d_ = 1;                // D after the last frame
  double d_last_ = 0;           // D of the last frame's update (0: none this epoch)
  float* step_last_ = nullptr;  // f-free alpha delta of the last frame
  double c_sq_sum_ = 0;         // sum of c_j^2 over the trace
  float* v_ = nullptr;
  float* v_next_ = nullptr;
  float* delta_ = nullptr;
  float* step_ = nullptr;
  void* block_ = nullptr;  // every array above, one allocation
  LazyBlockTdStats stats_;
};

}  // namespace bellwether

#endif  // BELLWETHER_CORE_LEARNERS_LAZY_BLOCK_TD_H_
