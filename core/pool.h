// The pool engine: applies frames of many streams to the pool's questions and keeps each
// stream's current answers. Single-threaded: one writer owns a Pool (the daemon's pool
// worker, or the CLI's replay); readers get copies of answers from that writer.
#ifndef BELLWETHER_CORE_POOL_H_
#define BELLWETHER_CORE_POOL_H_

#include <memory>
#include <string>
#include "absl/strings/string_view.h"
#include <vector>

#include "absl/container/flat_hash_map.h"
#include "absl/status/status.h"
#include "absl/status/statusor.h"
#include "bellwether/v1/prediction.pb.h"
#include "core/frame_input.h"
#include "core/learners/block_weights.h"
#include "core/learners/sparse_trace.h"
#include "core/pool_spec.h"
#include "core/progress/return_verifier.h"

namespace bellwether {

class Pool {
 public:
  // Validates and compiles `spec`; errors name the field (see CompilePoolSpec).
  static absl::StatusOr<std::unique_ptr<Pool>> Create(const v1::PoolSpec& spec);

  Pool(const Pool&) = delete;
  Pool& operator=(const Pool&) = delete;

  const CompiledPoolSpec& spec() const { return spec_; }
  const std::string& name() const { return spec_.proto.name(); }

  // Applies one frame of `stream` (created on its first frame). The frame must have
  // `frame.values.size()` equal to the pool's signal count (FrameFromProto guarantees
  // it) and a seq greater than the stream's last. On error nothing changes.
  //
  // For the transition from the stream's previous frame t to this frame t+1 (skipped
  // when this frame has `restart` set or is the stream's first), every question learns
  // by TD(lambda) with accumulating traces (Sutton & Barto 2nd ed., Section 12.2):
  //   delta = c_{t+1} + gamma * v(x_{t+1}) - v(x_t)
  //   e     = gamma * lambda * e + x_t
  //   w    += (alpha / |x_t|) * delta * e
  // then predicts v(x_{t+1}) with the updated weights.
  absl::Status Apply(absl::string_view stream, const FrameInput& frame);

  // Last applied seq of `stream`, 0 if the pool has not seen it.
  uint64_t last_seq(absl::string_view stream) const;
  bool has_stream(absl::string_view stream) const;
  size_t num_streams() const { return streams_.size(); }

  // The stream's answers as of its last applied frame. NOT_FOUND if unknown.
  absl::Status GetPredictions(absl::string_view stream, v1::StreamPredictions* out) const;

  // Current predictions of `stream` in question order (empty span if unknown).
  absl::Span<const double> predictions(absl::string_view stream) const;

 private:
  struct StreamState {
    uint64_t last_seq = 0;
    bool has_prev = false;  // prev_x is a frame we may learn from
    SparseFeatures prev_x;
    std::vector<double> predictions;        // per question, made at the last frame
    std::vector<SparseTrace> traces;        // per block
    std::vector<BlockWeights> own_weights;  // per block, per-stream learning only
    std::vector<ReturnVerifier> verifiers;  // per question
  };

  explicit Pool(CompiledPoolSpec spec);
  StreamState& GetOrCreateStream(absl::string_view stream);

  CompiledPoolSpec spec_;
  std::vector<BlockWeights> pooled_weights_;  // per block, pooled learning only
  absl::flat_hash_map<std::string, std::unique_ptr<StreamState>> streams_;

  // Scratch reused across frames (the writer is single-threaded): no allocation per frame.
  std::vector<double> extended_;
  SparseFeatures next_x_;
  std::vector<float> v_now_, v_next_, step_delta_;
};

}  // namespace bellwether

#endif  // BELLWETHER_CORE_POOL_H_
