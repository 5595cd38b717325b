#include "core/learners/lazy_block_td.h"

#include <algorithm>
#include <cfloat>
#include <cmath>
#include <cstring>
#include <new>
#include <utility>

#include "absl/strings/str_format.h"

#if defined(__AVX2__) && defined(__FMA__)
#include <immintrin.h>
#define BW_LAZY_TD_AVX2 1
#endif

namespace bellwether {
namespace {

// The epoch's D stays within [kMinD, kMaxD] (see the header: S's cancellation error
// relative to a pending update is about 1e-16 / D).
constexpr double kMinD = 0x1p-20;
constexpr double kMaxD = 0x1p20;
constexpr size_t kAlign = 64;
constexpr uint32_t kNotInHeap = UINT32_MAX;

size_t RoundUp(size_t n, size_t to) { return (n + to - 1) / to * to; }

void* AlignedAlloc(size_t bytes) { return ::operator new(bytes, std::align_val_t(kAlign)); }
void AlignedFree(void* p) { ::operator delete(p, std::align_val_t(kAlign)); }

// A byte offset into one allocation, each array starting on a 64-byte boundary.
class Layout {
 public:
  template <typename T>
  size_t Add(size_t count) {
    const size_t at = bytes_;
    bytes_ = RoundUp(bytes_ + count * sizeof(T), kAlign);
    return at;
  }
  size_t bytes() const { return bytes_; }

 private:
  size_t bytes_ = 0;
};

// Reads G rows once, question by question: out (+)= sum_g coef_g w_g and, with kTwo,
// out_next (+)= sum_g coef_next_g w_g. With kPending each row's one-frame pending update
// (w_g += pending_g step) is applied and stored first. `first` starts the sums from zero.
template <int G, bool kTwo, bool kPending, typename Entry>
void ReadGroup(const Entry* e, const float* __restrict step, size_t nq, bool first,
               float* __restrict out, float* __restrict out_next) {
  float* w[G];
  for (int g = 0; g < G; ++g) w[g] = e[g].w;
  size_t q = 0;
#ifdef BW_LAZY_TD_AVX2
  __m256 coef[G], coef_next[G], pend[G];
  for (int g = 0; g < G; ++g) {
    coef[g] = _mm256_set1_ps(e[g].coef);
    coef_next[g] = _mm256_set1_ps(e[g].coef_next);
    pend[g] = _mm256_set1_ps(e[g].pending);
  }
  for (; q + 8 <= nq; q += 8) {
    __m256 acc = first ? _mm256_setzero_ps() : _mm256_loadu_ps(out + q);
    __m256 acc_next = _mm256_setzero_ps();
    if (kTwo && !first) acc_next = _mm256_loadu_ps(out_next + q);
    __m256 s = _mm256_setzero_ps();
    if (kPending) s = _mm256_loadu_ps(step + q);
    for (int g = 0; g < G; ++g) {
      __m256 x = _mm256_loadu_ps(w[g] + q);
      if (kPending) {
        x = _mm256_fmadd_ps(pend[g], s, x);
        _mm256_storeu_ps(w[g] + q, x);
      }
      acc = _mm256_fmadd_ps(coef[g], x, acc);
      if (kTwo) acc_next = _mm256_fmadd_ps(coef_next[g], x, acc_next);
    }
    _mm256_storeu_ps(out + q, acc);
    if (kTwo) _mm256_storeu_ps(out_next + q, acc_next);
  }
#endif
  for (; q < nq; ++q) {
    float acc = first ? 0.0f : out[q];
    float acc_next = kTwo && !first ? out_next[q] : 0.0f;
    for (int g = 0; g < G; ++g) {
      float x = w[g][q];
      if (kPending) {
        x += e[g].pending * step[q];
        w[g][q] = x;
      }
      acc += e[g].coef * x;
      if (kTwo) acc_next += e[g].coef_next * x;
    }
    out[q] = acc;
    if (kTwo) out_next[q] = acc_next;
  }
}

// Runs ReadGroup over a list of n rows in groups of up to 4; returns the groups.
template <bool kTwo, typename Entry>
uint32_t ReadRowList(const Entry* list, uint32_t n, const float* step, size_t nq, bool first,
                     float* out, float* out_next) {
  uint32_t groups = 0;
  for (uint32_t i = 0; i < n; i += 4, ++groups) {
    const uint32_t g = std::min<uint32_t>(4, n - i);
    bool pending = false;
    for (uint32_t k = 0; k < g; ++k) pending |= list[i + k].pending != 0.0f;
    const Entry* e = list + i;
    const bool f = first && i == 0;
#define BW_READ_GROUP(G)                                             \
  (pending ? ReadGroup<G, kTwo, true>(e, step, nq, f, out, out_next) \
           : ReadGroup<G, kTwo, false>(e, step, nq, f, out, out_next))
    switch (g) {
      case 4:
        BW_READ_GROUP(4);
        break;
      case 3:
        BW_READ_GROUP(3);
        break;
      case 2:
        BW_READ_GROUP(2);
        break;
      default:
        BW_READ_GROUP(1);
        break;
    }
#undef BW_READ_GROUP
  }
  return groups;
}

}  // namespace

absl::StatusOr<std::unique_ptr<LazyBlockTd>> LazyBlockTd::Create(
    const LazyBlockTdOptions& options) {
  if (options.num_features == 0 || options.num_questions == 0) {
    return absl::InvalidArgumentError("lazy block TD: num_features and num_questions must be > 0");
  }
  const size_t stride = RoundUp(options.num_questions, 8);
  float* w = static_cast<float*>(
      AlignedAlloc(static_cast<size_t>(options.num_features) * stride * sizeof(float)));
  std::memset(w, 0, static_cast<size_t>(options.num_features) * stride * sizeof(float));
  auto result = CreateOver(options, w, stride);
  if (!result.ok()) {
    AlignedFree(w);
    return result.status();
  }
  (*result)->owned_ = true;
  return result;
}

absl::StatusOr<std::unique_ptr<LazyBlockTd>> LazyBlockTd::CreateOver(
    const LazyBlockTdOptions& options, float* weights, size_t row_stride) {
  if (options.num_features == 0 || options.num_questions == 0) {
    return absl::InvalidArgumentError("lazy block TD: num_features and num_questions must be > 0");
  }
  if (weights == nullptr || row_stride < options.num_questions) {
    return absl::InvalidArgumentError(
        absl::StrFormat("lazy block TD: weights missing or row_stride %d < num_questions %d",
                        row_stride, options.num_questions));
  }
  if (options.max_active == 0 || options.history_frames == 0 ||
      options.history_frames >= (1u << 30)) {
    return absl::InvalidArgumentError(absl::StrFormat(
        "lazy block TD: max_active %d must be > 0 and history_frames %d in [1, 2^30)",
        options.max_active, options.history_frames));
  }
  if (!(options.prune >= 0.0f) || !std::isfinite(options.prune)) {
    return absl::InvalidArgumentError(
        absl::StrFormat("lazy block TD: prune %g is not a finite value >= 0", options.prune));
  }
  return std::unique_ptr<LazyBlockTd>(new LazyBlockTd(options, weights, row_stride, false));
}

LazyBlockTd::LazyBlockTd(const LazyBlockTdOptions& options, float* weights, size_t stride,
                         bool owned)
    : options_(options),
      prune_(options.prune > 0.0f ? options.prune : FLT_MIN),
      weights_(weights),
      stride_(stride),
      owned_(owned) {
  const size_t n = options.num_features;
  const size_t q = options.num_questions;
  s_stride_ = RoundUp(q, 8);
  Layout layout;
  const size_t rows_at = layout.Add<RowState>(n);
  const size_t heap_at = layout.Add<HeapEntry>(n);
  slot_bits_ = 1;  // a table of at least 4 x 2 max_active slots: short probes
  while ((size_t{1} << slot_bits_) < 8 * static_cast<size_t>(options.max_active)) ++slot_bits_;
  const size_t slot_at = layout.Add<SlotEntry>(size_t{1} << slot_bits_);
  const size_t reads_at = layout.Add<ReadEntry>(2 * static_cast<size_t>(options.max_active));
  const size_t s_at = layout.Add<double>(2 * (options.history_frames + 1) * s_stride_);
  const size_t step_last_at = layout.Add<float>(s_stride_);
  const size_t v_at = layout.Add<float>(s_stride_);
  const size_t v_next_at = layout.Add<float>(s_stride_);
  const size_t delta_at = layout.Add<float>(s_stride_);
  const size_t step_at = layout.Add<float>(s_stride_);
  block_ = AlignedAlloc(layout.bytes());
  char* base = static_cast<char*>(block_);
  std::memset(base, 0, layout.bytes());
  rows_ = reinterpret_cast<RowState*>(base + rows_at);
  heap_ = reinterpret_cast<HeapEntry*>(base + heap_at);
  slots_ = reinterpret_cast<SlotEntry*>(base + slot_at);
  reads_ = reinterpret_cast<ReadEntry*>(base + reads_at);
  s_hist_ = reinterpret_cast<double*>(base + s_at);
  step_last_ = reinterpret_cast<float*>(base + step_last_at);
  v_ = reinterpret_cast<float*>(base + v_at);
  v_next_ = reinterpret_cast<float*>(base + v_next_at);
  delta_ = reinterpret_cast<float*>(base + delta_at);
  step_ = reinterpret_cast<float*>(base + step_at);
  for (size_t j = 0; j < n; ++j) {
    rows_[j] = RowState{0.0, 0, kNotInHeap};
  }
}

LazyBlockTd::~LazyBlockTd() {
  AlignedFree(block_);
  if (owned_) AlignedFree(weights_);
}

void LazyBlockTd::SetWeightFactors(const float* factors, size_t row_stride) {
  factors_ = factors;
  factor_stride_ = row_stride;
}

absl::Status LazyBlockTd::CheckRows(SparseRows x) const {
  if (x.index.size() > options_.max_active) {
    return absl::InvalidArgumentError(absl::StrFormat(
        "lazy block TD: %d active rows exceed max_active %d", x.index.size(), options_.max_active));
  }
  if (!x.value.empty() && x.value.size() != x.index.size()) {
    return absl::InvalidArgumentError(
        absl::StrFormat("lazy block TD: %d values for %d rows", x.value.size(), x.index.size()));
  }
  for (uint32_t j : x.index) {
    if (j >= options_.num_features) {
      return absl::InvalidArgumentError(absl::StrFormat(
          "lazy block TD: row %d is outside the %d features", j, options_.num_features));
    }
  }
  return absl::OkStatus();
}

// ---- Pending updates ---------------------------------------------------------------

void LazyBlockTd::SyncOneFrame(float* __restrict w, const float* __restrict f, float e_prev) {
  // c_j (S(k) - S(k-1)) = e_j(t-1) alpha delta(t-1): the eager update of the last frame.
  const size_t nq = options_.num_questions;
  const float* __restrict step = step_last_;
  if (f == nullptr) {
    for (size_t q = 0; q < nq; ++q) w[q] += e_prev * step[q];
  } else {
    for (size_t q = 0; q < nq; ++q) w[q] += f[q] * (e_prev * step[q]);
  }
  ++stats_.one_frame_syncs;
  stats_.bytes += nq * (f == nullptr ? 12 : 16);
  stats_.flops += nq * (f == nullptr ? 2 : 3);
}

void LazyBlockTd::SyncFromHistory(float* __restrict w, const float* __restrict f, double c,
                                  uint32_t from) {
  const size_t nq = options_.num_questions;
  const double* __restrict now = Hist(Now());
  const double* __restrict then = Hist(from);
  if ((from >> 31) == parity_) {
    // c_j (S_q(k) - S_q(m_j)): every frame since the row was last brought up to date.
    if (f == nullptr) {
      for (size_t q = 0; q < nq; ++q) w[q] += static_cast<float>(c * (now[q] - then[q]));
    } else {
      for (size_t q = 0; q < nq; ++q) w[q] += f[q] * static_cast<float>(c * (now[q] - then[q]));
    }
    stats_.bytes += nq * (f == nullptr ? 24 : 28);
    stats_.flops += nq * (f == nullptr ? 3 : 4);
  } else {
    // Synced in the previous epoch: the rest of that epoch under its scale (c_j was
    // multiplied by prev_scale_ at the rebase), then this epoch's sum from S = 0.
    const double* __restrict prev_end = Hist(Tag(parity_ ^ 1u, prev_end_));
    const double c_prev = c / prev_scale_;
    if (f == nullptr) {
      for (size_t q = 0; q < nq; ++q) {
        w[q] += static_cast<float>(c * now[q] + c_prev * (prev_end[q] - then[q]));
      }
    } else {
      for (size_t q = 0; q < nq; ++q) {
        w[q] += f[q] * static_cast<float>(c * now[q] + c_prev * (prev_end[q] - then[q]));
      }
    }
    stats_.bytes += nq * (f == nullptr ? 32 : 36);
    stats_.flops += nq * (f == nullptr ? 5 : 6);
  }
  ++stats_.multi_frame_syncs;
}

double LazyBlockTd::PendingOf(const RowState& rs, size_t q) const {
  if (rs.c == 0.0 || rs.synced == Now()) return 0.0;
  if (k_ > 0 && rs.synced == Now() - 1) {
    return static_cast<double>(static_cast<float>(rs.c * d_last_) * step_last_[q]);
  }
  const double now = Hist(Now())[q], then = Hist(rs.synced)[q];
  if ((rs.synced >> 31) == parity_) return rs.c * (now - then);
  return rs.c * now + rs.c / prev_scale_ * (Hist(Tag(parity_ ^ 1u, prev_end_))[q] - then);
}

void LazyBlockTd::SyncRow(uint32_t j) {
  RowState& rs = rows_[j];
  const uint32_t now = Now();
  if (rs.c == 0.0 || rs.synced == now) {
    rs.synced = now;
    return;
  }
  float* w = weights_ + static_cast<size_t>(j) * stride_;
  const float* f =
      factors_ == nullptr ? nullptr : factors_ + static_cast<size_t>(j) * factor_stride_;
  if (k_ > 0 && rs.synced == now - 1) {
    SyncOneFrame(w, f, static_cast<float>(rs.c * d_last_));
  } else {
    SyncFromHistory(w, f, rs.c, rs.synced);
  }
  rs.synced = now;
}

float LazyBlockTd::Weight(uint32_t j, uint32_t q) const {
  const float f =
      factors_ == nullptr ? 1.0f : factors_[static_cast<size_t>(j) * factor_stride_ + q];
  return row(j)[q] + f * static_cast<float>(PendingOf(rows_[j], q));
}

// ---- The trace's heap (min-heap on |c_j|) ---------------------------------------------

void LazyBlockTd::HeapSiftUp(uint32_t pos) {
  const HeapEntry moving = heap_[pos];
  while (pos > 0) {
    const uint32_t parent = (pos - 1) / 2;
    if (!(moving.key < heap_[parent].key)) break;
    heap_[pos] = heap_[parent];
    rows_[heap_[pos].row].heap_pos = pos;
    pos = parent;
  }
  heap_[pos] = moving;
  rows_[moving.row].heap_pos = pos;
}

void LazyBlockTd::HeapSiftDown(uint32_t pos) {
  const HeapEntry moving = heap_[pos];
  for (;;) {
    uint32_t child = 2 * pos + 1;
    if (child >= heap_size_) break;
    // The smaller child, without a branch (which would mispredict half the time).
    if (child + 1 < heap_size_) child += heap_[child + 1].key < heap_[child].key ? 1u : 0u;
    if (!(heap_[child].key < moving.key)) break;
    heap_[pos] = heap_[child];
    rows_[heap_[pos].row].heap_pos = pos;
    pos = child;
  }
  heap_[pos] = moving;
  rows_[moving.row].heap_pos = pos;
}

void LazyBlockTd::HeapRemove(uint32_t pos) {
  rows_[heap_[pos].row].heap_pos = kNotInHeap;
  --heap_size_;
  if (pos == heap_size_) return;
  heap_[pos] = heap_[heap_size_];
  rows_[heap_[pos].row].heap_pos = pos;
  if (pos > 0 && heap_[pos].key < heap_[(pos - 1) / 2].key) {
    HeapSiftUp(pos);
  } else {
    HeapSiftDown(pos);
  }
}

// ---- Frames ----------------------------------------------------------------------------

void LazyBlockTd::PrefetchRow(uint32_t j) const {
  const char* w = reinterpret_cast<const char*>(weights_ + static_cast<size_t>(j) * stride_);
  const size_t bytes = std::min<size_t>(1024, options_.num_questions * sizeof(float));
  for (size_t b = 0; b < bytes; b += 64) __builtin_prefetch(w + b);
}

absl::Status LazyBlockTd::ReadRows(SparseRows x, SparseRows x_next, absl::Span<float> v,
                                   absl::Span<float> v_next) {
  const size_t nq = options_.num_questions;
  if (v.size() != nq || v_next.size() != nq) {
    return absl::InvalidArgumentError(
        absl::StrFormat("lazy block TD: v and v_next must have %d entries, not %d and %d", nq,
                        v.size(), v_next.size()));
  }
  if (absl::Status s = CheckRows(x); !s.ok()) return s;
  if (absl::Status s = CheckRows(x_next); !s.ok()) return s;
  for (uint32_t j : x_next.index) __builtin_prefetch(&rows_[j]);

  // The distinct rows of x, each with its value in x and in x_next; one-frame pending
  // updates are left for the read loop (one pass over each row applies it and sums it
  // into v and v_next), older ones applied now.
  ReadEntry* xs = reads_;
  uint32_t nx = 0;
  uint64_t fused = 0;
  for (size_t i = 0; i < x.index.size(); ++i) {
    const uint32_t j = x.index[i];
    const float value = x.value.empty() ? 1.0f : x.value[i];
    SlotEntry& slot = FindSlot(j);
    if (slot.row_plus_1 != 0) {  // a repeated index: values add
      xs[slot.index].coef += value;
      continue;
    }
    slot = SlotEntry{j + 1, nx};
    ReadEntry& e = xs[nx++];
    e = ReadEntry{weights_ + static_cast<size_t>(j) * stride_, value, 0.0f, 0.0f, j};
    RowState& rs = rows_[j];
    if (rs.c == 0.0 || rs.synced == Now()) continue;
    if (factors_ == nullptr && k_ > 0 && rs.synced == Now() - 1) {
      e.pending = static_cast<float>(rs.c * d_last_);
      rs.synced = Now();
      ++fused;
    } else {
      SyncRow(j);
    }
  }
  // x_next: rows of x get their coefficient; the others (usually not in cache: features
  // that just became active) are listed apart and their loads started now.
  ReadEntry* others = reads_ + options_.max_active;
  uint32_t n_others = 0;
  for (size_t i = 0; i < x_next.index.size(); ++i) {
    const uint32_t j = x_next.index[i];
    const float value = x_next.value.empty() ? 1.0f : x_next.value[i];
    SlotEntry& slot = FindSlot(j);
    if (slot.row_plus_1 != 0 && slot.index < nx) {
      xs[slot.index].coef_next += value;
      continue;
    }
    if (slot.row_plus_1 != 0) {  // repeated in x_next
      others[slot.index - options_.max_active].coef += value;
      continue;
    }
    slot = SlotEntry{j + 1, options_.max_active + n_others};
    others[n_others++] =
        ReadEntry{weights_ + static_cast<size_t>(j) * stride_, value, 0.0f, 0.0f, j};
    PrefetchRow(j);
  }
  // Emptied in the reverse order of insertion, so each probe still finds its entry.
  for (uint32_t i = n_others; i-- > 0;) FindSlot(others[i].row) = SlotEntry{0, 0};
  for (uint32_t i = nx; i-- > 0;) FindSlot(xs[i].row) = SlotEntry{0, 0};

  // One pass over x's rows for v and their part of v_next, then x_next's other rows.
  float* out = v.data();
  float* out_next = v_next.data();
  uint32_t groups = 0;
  if (nx == 0) {
    std::fill(out, out + nq, 0.0f);
    std::fill(out_next, out_next + nq, 0.0f);
  } else {
    groups += ReadRowList<true>(xs, nx, step_last_, nq, true, out, out_next);
  }
  for (uint32_t i = 0; i < n_others; ++i) SyncRow(others[i].row);
  groups += ReadRowList<false>(others, n_others, step_last_, nq, false, out_next, nullptr);

  stats_.rows_read += nx + n_others;
  stats_.one_frame_syncs += fused;
  stats_.bytes += 4 * static_cast<uint64_t>(nq) * (nx + n_others + 2 * fused + 4 * groups);
  uint64_t uses = fused;
  for (uint32_t i = 0; i < nx; ++i) uses += 1 + (xs[i].coef_next != 0.0f);
  stats_.flops += 2 * static_cast<uint64_t>(nq) * (uses + n_others);
  return absl::OkStatus();
}

double LazyBlockTd::Rebase(double decay) {
  ++stats_.rebases;
  // A new epoch: D and S restart from 1 and 0, each c_j becomes c_j D = e_j, and rows keep
  // their sync point in this epoch's S history (which becomes the previous one). Rows
  // still synced in the previous epoch (idle for a whole epoch) are brought up to date
  // first, so that no row refers to an older one. A decay below kMinD (0 at a restart)
  // is applied to the c_j directly, after every row has been brought up to date.
  const bool apply_decay = decay < kMinD;
  uint32_t flushed = 0;
  for (uint32_t i = 0; i < heap_size_; ++i) {
    const RowState& rs = rows_[heap_[i].row];
    if (apply_decay || (rs.synced >> 31) != parity_) {
      if (i + 4 < heap_size_) PrefetchRow(heap_[i + 4].row);
      SyncRow(heap_[i].row);
      ++flushed;
    }
  }
  stats_.rebase_rows += flushed;
  const double scale = apply_decay ? d_ * decay : d_;
  c_sq_sum_ = 0.0;
  for (uint32_t i = 0; i < heap_size_; ++i) {
    RowState& rs = rows_[heap_[i].row];
    rs.c *= scale;
    heap_[i].key *= scale;  // |c_j| scaled: the heap keeps its order
    c_sq_sum_ += rs.c * rs.c;
  }
  prev_end_ = k_;
  prev_scale_ = scale;
  parity_ ^= 1u;
  k_ = 0;
  std::fill(Hist(Now()), Hist(Now()) + s_stride_, 0.0);
  if (apply_decay) {  // every row is up to date: it starts from this epoch's S = 0
    for (uint32_t i = 0; i < heap_size_; ++i) rows_[heap_[i].row].synced = Now();
  }
  d_ = 1.0;
  d_last_ = 0.0;
  return apply_decay ? 1.0 : decay;
}

absl::Status LazyBlockTd::Advance(SparseRows x, absl::Span<const float> step, double decay) {
  const size_t nq = options_.num_questions;
  if (step.size() != nq) {
    return absl::InvalidArgumentError(
        absl::StrFormat("lazy block TD: %d step entries for %d questions", step.size(), nq));
  }
  if (!(decay >= 0.0) || !std::isfinite(decay)) {
    return absl::InvalidArgumentError(
        absl::StrFormat("lazy block TD: trace decay %g is not a finite value >= 0", decay));
  }
  if (absl::Status s = CheckRows(x); !s.ok()) return s;
  AdvanceChecked(x, step, decay);
  return absl::OkStatus();
}

void LazyBlockTd::AdvanceChecked(SparseRows x, absl::Span<const float> step, double decay) {
  const size_t nq = options_.num_questions;
  double c_sq_sum = c_sq_sum_;  // kept in a register through the loops below

  // e <- decay e: D(t) = D(t-1) decay, or a new epoch.
  double d = d_ * decay;
  if (k_ >= options_.history_frames || !(d >= kMinD && d <= kMaxD)) {
    d = Rebase(decay);
    c_sq_sum = c_sq_sum_;
  }

  // Entries with |e_j| = |c_j| D(t) < prune leave the trace, with what they were owed up to
  // frame t-1 and nothing of frame t. They are taken off the heap in batches whose rows
  // (idle for many frames, rarely in cache) are prefetched before they are synced.
  const double prune = static_cast<double>(prune_);
  constexpr uint32_t kBatch = 16;
  uint32_t batch[kBatch];
  while (heap_size_ > 0 && heap_[0].key * d < prune) {
    uint32_t nb = 0;
    while (nb < kBatch && heap_size_ > 0 && heap_[0].key * d < prune) {
      const uint32_t j = heap_[0].row;
      HeapRemove(0);
      PrefetchRow(j);
      batch[nb++] = j;
    }
    for (uint32_t i = 0; i < nb; ++i) {
      SyncRow(batch[i]);
      RowState& rs = rows_[batch[i]];
      c_sq_sum -= rs.c * rs.c;
      rs.c = 0.0;
    }
    stats_.pruned += nb;
  }
  if (heap_size_ == 0) c_sq_sum = 0.0;

  // e += x: c_j += x_j / D(t), after the row's pending update under the old c_j.
  for (size_t i = 0; i < x.index.size(); ++i) {
    const uint32_t j = x.index[i];
    const double value = x.value.empty() ? 1.0 : static_cast<double>(x.value[i]);
    if (value == 0.0) continue;
    RowState& rs = rows_[j];
    if (rs.c == 0.0) {
      rs.c = value / d;
      rs.synced = Now();
      c_sq_sum += rs.c * rs.c;
      const uint32_t pos = heap_size_++;
      heap_[pos] = HeapEntry{std::fabs(rs.c), j};
      HeapSiftUp(pos);
      continue;
    }
    SyncRow(j);
    c_sq_sum -= rs.c * rs.c;
    rs.c += value / d;
    c_sq_sum += rs.c * rs.c;
    const uint32_t pos = rs.heap_pos;
    if (rs.c == 0.0) {
      HeapRemove(pos);  // an exact cancellation: e_j = 0 is no longer in the trace
      continue;
    }
    const double old_key = heap_[pos].key;
    heap_[pos].key = std::fabs(rs.c);
    if (heap_[pos].key < old_key) {
      HeapSiftUp(pos);
    } else {
      HeapSiftDown(pos);
    }
  }

  // W += outer(e, step), recorded as S(k+1) = S(k) + step D(t).
  const double* __restrict s_old = Hist(Now());
  double* __restrict s_new = Hist(Now() + 1);
  float* __restrict last = step_last_;
  const float* __restrict st = step.data();
  for (size_t q = 0; q < nq; ++q) {
    s_new[q] = s_old[q] + static_cast<double>(st[q]) * d;
    last[q] = st[q];
  }
  stats_.bytes += nq * 24;
  stats_.flops += nq * 2;
  ++k_;
  d_ = d;
  d_last_ = d;
  c_sq_sum_ = c_sq_sum;
  ++stats_.frames;
}

absl::Status LazyBlockTd::Learn(const LazyBlockTdFrame& frame) {
  const size_t nq = options_.num_questions;
  if (frame.cumulants.size() != nq || frame.step_sizes.size() != nq) {
    return absl::InvalidArgumentError(
        absl::StrFormat("lazy block TD: %d cumulants and %d step sizes for %d questions",
                        frame.cumulants.size(), frame.step_sizes.size(), nq));
  }
  if (!(frame.trace_decay >= 0.0) || !std::isfinite(frame.trace_decay)) {
    return absl::InvalidArgumentError(absl::StrFormat(
        "lazy block TD: trace decay %g is not a finite value >= 0", frame.trace_decay));
  }
  if (absl::Status s =
          ReadRows(frame.x, frame.x_next, absl::MakeSpan(v_, nq), absl::MakeSpan(v_next_, nq));
      !s.ok()) {
    return s;
  }
  // delta = c + gamma' v' - v; the step alpha delta (0 for a missing cumulant).
  const float g = frame.gamma_next;
  const float* __restrict c = frame.cumulants.data();
  const float* __restrict alpha = frame.step_sizes.data();
  const float* __restrict v = v_;
  const float* __restrict v_next = v_next_;
  float* __restrict delta = delta_;
  float* __restrict step = step_;
  size_t q = 0;
#ifdef BW_LAZY_TD_AVX2
  const __m256 gv = _mm256_set1_ps(g);
  for (; q + 8 <= nq; q += 8) {
    const __m256 cq = _mm256_loadu_ps(c + q);
    const __m256 d =
        _mm256_sub_ps(_mm256_fmadd_ps(gv, _mm256_loadu_ps(v_next + q), cq), _mm256_loadu_ps(v + q));
    _mm256_storeu_ps(delta + q, d);
    const __m256 known = _mm256_cmp_ps(cq, cq, _CMP_ORD_Q);  // false for a NaN cumulant
    _mm256_storeu_ps(step + q, _mm256_and_ps(known, _mm256_mul_ps(_mm256_loadu_ps(alpha + q), d)));
  }
#endif
  for (; q < nq; ++q) {
    const float d = c[q] + g * v_next[q] - v[q];
    delta[q] = d;
    step[q] = c[q] == c[q] ? alpha[q] * d : 0.0f;  // c != c: a NaN cumulant, no update
  }
  stats_.bytes += nq * 24;
  stats_.flops += nq * 4;
  AdvanceChecked(frame.x, absl::MakeConstSpan(step_, nq), frame.trace_decay);  // x checked
  return absl::OkStatus();
}

absl::Status LazyBlockTd::Predict(SparseRows x, absl::Span<float> out) const {
  const size_t nq = options_.num_questions;
  if (out.size() != nq) {
    return absl::InvalidArgumentError(
        absl::StrFormat("lazy block TD: out must have %d entries, not %d", nq, out.size()));
  }
  if (absl::Status s = CheckRows(x); !s.ok()) return s;
  float* __restrict o = out.data();
  std::fill(o, o + nq, 0.0f);
  for (size_t i = 0; i < x.index.size(); ++i) {
    const uint32_t j = x.index[i];
    const float value = x.value.empty() ? 1.0f : x.value[i];
    const float* __restrict w = row(j);
    const RowState& rs = rows_[j];
    const float* __restrict f =
        factors_ == nullptr ? nullptr : factors_ + static_cast<size_t>(j) * factor_stride_;
    if (rs.c == 0.0 || rs.synced == Now()) {
      for (size_t q = 0; q < nq; ++q) o[q] += value * w[q];
    } else if (k_ > 0 && rs.synced == Now() - 1) {
      const float e_prev = static_cast<float>(rs.c * d_last_);
      const float* __restrict st = step_last_;
      for (size_t q = 0; q < nq; ++q) {
        const float pending = e_prev * st[q];
        o[q] += value * (w[q] + (f == nullptr ? pending : f[q] * pending));
      }
    } else {
      for (size_t q = 0; q < nq; ++q) {
        const float pending = static_cast<float>(PendingOf(rs, q));
        o[q] += value * (w[q] + (f == nullptr ? pending : f[q] * pending));
      }
    }
  }
  return absl::OkStatus();
}

void LazyBlockTd::Flush() {
  for (uint32_t i = 0; i < heap_size_; ++i) {
    if (i + 4 < heap_size_) PrefetchRow(heap_[i + 4].row);
    SyncRow(heap_[i].row);
  }
  stats_.rebase_rows += heap_size_;
}

void LazyBlockTd::ClearTrace() {
  Flush();
  for (uint32_t i = 0; i < heap_size_; ++i) {
    RowState& rs = rows_[heap_[i].row];
    rs.c = 0.0;
    rs.heap_pos = kNotInHeap;
  }
  heap_size_ = 0;
  c_sq_sum_ = 0.0;
  k_ = 0;
  std::fill(Hist(Now()), Hist(Now()) + s_stride_, 0.0);
  d_ = 1.0;
  d_last_ = 0.0;
}

float LazyBlockTd::TraceValue(uint32_t j) const { return static_cast<float>(rows_[j].c * d_); }

double LazyBlockTd::TraceNormSq() const { return c_sq_sum_ * d_ * d_; }

void LazyBlockTd::TraceEntries(absl::Span<uint32_t> rows, absl::Span<float> values) const {
  const size_t n = std::min({rows.size(), values.size(), static_cast<size_t>(heap_size_)});
  for (size_t i = 0; i < n; ++i) {
    rows[i] = heap_[i].row;
    values[i] = TraceValue(heap_[i].row);
  }
}

absl::Status LazyBlockTd::SetTrace(absl::Span<const uint32_t> rows,
                                   absl::Span<const float> values) {
  if (rows.size() != values.size()) {
    return absl::InvalidArgumentError(
        absl::StrFormat("lazy block TD: %d trace rows with %d values", rows.size(), values.size()));
  }
  for (size_t i = 0; i < rows.size(); ++i) {
    if (rows[i] >= options_.num_features || !std::isfinite(values[i])) {
      return absl::InvalidArgumentError(
          absl::StrFormat("lazy block TD: trace entry %d (row %d, value %g) is out of range", i,
                          rows[i], values[i]));
    }
  }
  ClearTrace();  // D = 1: c_j = e_j
  for (size_t i = 0; i < rows.size(); ++i) {
    if (values[i] == 0.0f) continue;
    RowState& rs = rows_[rows[i]];
    const bool listed = rs.c != 0.0;
    rs.c += static_cast<double>(values[i]);
    rs.synced = Now();
    if (!listed) {
      const uint32_t pos = heap_size_++;
      heap_[pos] = HeapEntry{std::fabs(rs.c), rows[i]};
      HeapSiftUp(pos);
    } else if (rs.c == 0.0) {
      HeapRemove(rs.heap_pos);
    } else {
      heap_[rs.heap_pos].key = std::fabs(rs.c);
      HeapSiftUp(rs.heap_pos);
      HeapSiftDown(rs.heap_pos);
    }
  }
  c_sq_sum_ = 0.0;
  for (uint32_t i = 0; i < heap_size_; ++i) {
    const double c = rows_[heap_[i].row].c;
    c_sq_sum_ += c * c;
  }
  return absl::OkStatus();
}

}  // namespace bellwether
