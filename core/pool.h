// The pool engine: applies frames of many streams to the pool's questions and keeps each
// stream's current answers. Single-threaded: one writer owns a Pool (the daemon's pool
// worker, or the CLI's replay); readers get copies of answers from that writer.
#ifndef BELLWETHER_CORE_POOL_H_
#define BELLWETHER_CORE_POOL_H_

#include <functional>
#include <memory>
#include <optional>
#include <string>
#include <vector>

#include "absl/container/flat_hash_map.h"
#include "absl/status/status.h"
#include "absl/status/statusor.h"
#include "absl/strings/string_view.h"
#include "bellwether/v1/prediction.pb.h"
#include "core/frame_input.h"
#include "core/learners/block_learner.h"
#include "core/pool_spec.h"
#include "core/progress/return_verifier.h"

namespace bellwether {

class Pool {
 public:
  // Validates and compiles `spec`; errors name the field (see CompilePoolSpec).
  static absl::StatusOr<std::unique_ptr<Pool>> Create(const v1::PoolSpec& spec);

  // A pool for `spec` that keeps what `old` learned for every question that is unchanged
  // (same name and the same learning-relevant fields) when the signals, features,
  // actions, time zone and learning mode are unchanged: weights, step sizes, counters and
  // verified error. Traces restart. Added questions start fresh; removed ones are dropped.
  static absl::StatusOr<std::unique_ptr<Pool>> CreateFrom(const Pool& old,
                                                          const v1::PoolSpec& spec);

  Pool(const Pool&) = delete;
  Pool& operator=(const Pool&) = delete;

  const CompiledPoolSpec& spec() const { return spec_; }
  const std::string& name() const { return spec_.proto.name(); }

  // Applies one frame of `stream` (created on its first frame). The frame must have
  // `frame.values.size()` equal to the pool's signal count (FrameFromProto guarantees
  // it), a seq greater than the stream's last, and an action (if any) below the number
  // of declared actions. On error nothing changes.
  //
  // For the transition from the stream's previous frame t to this frame t+1 (skipped
  // when this frame has `restart` set or is the stream's first), every block of
  // questions learns (see block_learner.h), in dependency order, then answers at t+1.
  absl::Status Apply(absl::string_view stream, const FrameInput& frame);

  // Scratch for applying frames, sized for this pool's spec, so that a frame allocates
  // nothing. Apply() above uses the pool's own.
  struct Workspace {
    Workspace(const CompiledPoolSpec& spec, uint32_t num_actions);
    BlockLearner learner;
    std::vector<double> extended;
    SparseFeatures next_x;
    std::vector<double> next_answers;   // per question, at the new frame
    std::vector<double> cumulants;      // per question of the current block
    std::vector<double> block_answers;  // per question of the current block
    std::vector<double> trans_cumulant, trans_continuation, trans_pi, trans_rho;
    std::vector<double> group_values;  // one verifier group's cumulants or answers
    std::vector<double> pi_now, pi_next, q_values;
    SparseFeatures behavior_cell;  // the coarse cell of the behavior estimate
  };
  std::unique_ptr<Workspace> NewWorkspace() const;

  // Whether streams may learn concurrently: true unless learning is pooled or the recipe
  // normalizes raw inputs (both are state every stream shares). Then Apply() with a
  // workspace of its own per thread may run on several threads at once for DISTINCT
  // streams that already exist (has_stream()), and nothing else may run meanwhile (the
  // verification sink is called from each of those threads). A stream's answers depend
  // only on its own frames, so the result is the same in any interleaving.
  bool supports_concurrent_streams() const;
  absl::Status Apply(absl::string_view stream, const FrameInput& frame, Workspace& ws);

  // Last applied seq of `stream`, 0 if the pool has not seen it.
  uint64_t last_seq(absl::string_view stream) const;
  // Frames of `stream` applied so far (kept across spec changes and checkpoints).
  uint64_t frames_applied(absl::string_view stream) const;
  bool has_stream(absl::string_view stream) const;
  size_t num_streams() const { return streams_.size(); }
  std::vector<std::string> stream_names() const;

  // The stream's answers as of its last applied frame, with verified error and
  // progress. NOT_FOUND if unknown.
  absl::Status GetPredictions(absl::string_view stream, v1::StreamPredictions* out) const;

  // Each visible question's learning progress as GetPredictions reports it (verified
  // RMSE, 0 before anything was verified; TD-error RMS; weight change; label), without
  // building a message: the daemon's writer samples it every few frames. NOT_FOUND if
  // the stream is unknown; `out` has one entry per visible question.
  struct ProgressSample {
    double verified_rmse = 0;
    double td_error_rms = 0;
    double weight_change = 0;
    ProgressLabel label = ProgressLabel::kLearning;
  };
  absl::Status SampleProgress(absl::string_view stream, absl::Span<ProgressSample> out) const;

  // Current answers of `stream` in the spec's question order (empty span if unknown);
  // successor tables' internal components are not included.
  absl::Span<const double> predictions(absl::string_view stream) const;

  // Receives every verified prediction of every stream (offline summaries, e.g. the
  // CLI's replay --summary; the daemon's history): the stream, then the points one
  // verifier group verified in one step, each with its question's index in the spec's
  // order, the seq the prediction was made at, the prediction, the realized return, and
  // whether the return was cut at the cap.
  using VerificationSink =
      std::function<void(const std::string& stream, absl::Span<const VerifiedPoint> points)>;
  void SetVerificationSink(VerificationSink sink);

  // Bytes the verified-error bookkeeping holds for `stream` (fixed per stream).
  size_t verification_memory_bytes(absl::string_view stream) const;

  // Checkpoints. SaveState appends every bit of learned state (weights, traces, step-size
  // and normalizer state, progress, verified-error buffers, each stream's last frame and
  // seq) to `out`; Restore loads it into a pool made from the same spec. Applying the
  // same later frames to the saved pool and to the restored one gives bit-identical
  // answers. Restore fails with DATA_LOSS (naming the byte offset) on a damaged payload
  // and leaves the pool unusable; callers discard it then. SaveState sizes `out` first
  // (one counting pass), so the state is copied once.
  void SaveState(std::string* out) const;
  absl::Status RestoreState(absl::string_view state);

  // Learned parameters of block `b` for `stream` (the pool's own when pooled); nullptr
  // if unknown. For tests and diagnostics.
  const BlockParams* block_params(absl::string_view stream, size_t b) const;
  // Mutable access, to set weights from outside (a test's initial weights; restoring a
  // checkpoint). Call BlockParams::MarkSound() after changing them. The stream must exist.
  BlockParams* mutable_block_params(absl::string_view stream, size_t b);

 private:
  void SaveStateTo(StateWriter& w) const;
  struct StreamState {
    uint64_t last_seq = 0;
    bool has_prev = false;  // prev_x is a frame we may learn from
    SparseFeatures prev_x;
    int prev_action = -1;
    double prev_behavior_prob = 0;  // NaN if unknown
    std::optional<int64_t> prev_time_micros;  // absolute
    std::vector<double> answers;        // per question, at the last frame
    std::vector<int> greedy_actions;    // per question (control questions), -1 otherwise
    std::vector<BlockTraceState> block_states;  // per block
    std::vector<BlockParams> own_params;        // per block, per-stream learning only
    std::vector<ReturnVerifier> verifiers;      // per verifier group
    std::vector<VerifiedPoint> sink_points;     // the sink's, relabelled by question
    std::vector<uint32_t> behavior_counts;      // (cells + 1) x actions, when estimating
    uint64_t feature_gap_frames = 0;  // frames with a missing feature input
    uint64_t frames_applied = 0;
    // Successor-table questions (per-stream learning): regression weights w over the
    // table's phi, by question (empty for other questions), and their update counts.
    std::vector<std::vector<double>> regression;
    std::vector<uint64_t> regression_updates;
  };

  explicit Pool(CompiledPoolSpec spec);
  StreamState& GetOrCreateStream(absl::string_view stream);
  BlockParams& ParamsFor(StreamState& s, size_t b);
  const BlockParams& ParamsFor(const StreamState& s, size_t b) const;
  // pi(.|x) of a target policy into `out` (size num_actions); false if not defined.
  void PolicyDistribution(Workspace& ws, const CompiledPolicy& policy, StreamState& s,
                          const SparseFeatures& x, absl::Span<double> out);
  double EstimateBehavior(Workspace& ws, StreamState& s, int action);
  std::optional<int64_t> AbsoluteTime(const FrameInput& frame) const;
  // c_{t+1} of a transition into `frame` (NaN when it cannot be known).
  double TransitionCumulant(const Workspace& ws, const CompiledCumulant& c,
                            const FrameInput& frame, const std::optional<int64_t>& now,
                            const StreamState& s) const;
  // Answers (and, when learning, regresses) the successor-table questions.
  void AnswerSuccessorQuestions(Workspace& ws, StreamState& s, const FrameInput& frame,
                                const std::optional<int64_t>& now, bool learn);

  // Questions verified together, by one ReturnVerifier per stream: those that see the
  // same continuation, target probability and importance ratio every step (a block's
  // questions, and the successor questions over the block's table) and share gamma and
  // verification mode.
  struct VerifierGroup {
    size_t timing_block = 0;
    double gamma = 0;
    VerificationMode mode = VerificationMode::kOnPolicy;
    bool gpi = false;  // answers about a policy the behavior does not follow: never verified
    std::vector<size_t> questions;
    std::vector<bool> probability;
  };
  void FormVerifierGroups();
  void InstallSink(const std::string& name, StreamState& state);

  CompiledPoolSpec spec_;
  uint32_t num_actions_;
  std::vector<VerifierGroup> verifier_groups_;
  // Per question: its group and its place in the group.
  std::vector<std::pair<size_t, size_t>> verifier_slot_;
  VerificationSink sink_;
  std::vector<BlockParams> pooled_params_;  // per block, pooled learning only
  std::vector<std::vector<double>> pooled_regression_;  // pooled: per question
  std::vector<uint64_t> pooled_regression_updates_;
  FeatureRecipe::NormalizerState normalizer_;
  absl::flat_hash_map<std::string, std::unique_ptr<StreamState>> streams_;

  Workspace workspace_;  // Apply()'s
};

}  // namespace bellwether

#endif  // BELLWETHER_CORE_POOL_H_
