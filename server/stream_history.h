// Recent history of one stream's questions, for the status page and the Progress RPC:
// the latest verified predictions of each question (prediction made at seq s and the
// return realized for it) and a ring per question of progress samples (verified RMSE,
// TD-error RMS, weight change, label), one taken every `kSampleEvery` frames.
//
// Verified points arrive a question group at a time, about one per question per frame,
// so they go to one ring shared by the questions, in arrival order: appending is a
// sequential copy, and a reader (rare: the status page, the Progress RPC) picks out its
// question's newest `points`. A question keeps fewer only while others verify more often
// (its cumulant went missing; it is new).
//
// Memory is fixed at construction: 2 x points x ~32 bytes per question.
#ifndef BELLWETHER_SERVER_STREAM_HISTORY_H_
#define BELLWETHER_SERVER_STREAM_HISTORY_H_

#include <cstddef>
#include <cstdint>
#include <vector>

#include "absl/types/span.h"
#include "bellwether/v1/prediction.pb.h"
#include "core/pool.h"
#include "core/progress/learning_progress.h"

namespace bellwether::server {

class StreamHistory {
 public:
  static constexpr size_t kDefaultPoints = 360;
  static constexpr uint64_t kSampleEvery = 8;

  StreamHistory(size_t questions, size_t points);

  // One verified prediction of question `question`: made at `seq`, and the return
  // realized for it.
  struct Verified {
    uint64_t seq;
    double predicted, realized;
    uint32_t question;
    bool truncated;
  };
  // One progress sample of a question.
  struct Sample {
    uint64_t seq;
    double rmse, td_rms, weight_change;
    ProgressLabel label;
  };

  // Records verified predictions, oldest first (plain structs: the writer thread gathers
  // about one per question per frame, so no message is built until someone asks).
  void AddVerified(absl::Span<const Verified> points);
  // True if a progress sample is due at `seq`: `kSampleEvery` frames passed since the
  // last one (or none was taken).
  bool SampleDue(uint64_t seq) const { return !sampled_ || seq >= last_sample_seq_ + kSampleEvery; }
  // Takes a progress sample at `seq` of every question (the pool's values, one per
  // question in question order) if one is due.
  void AddSample(uint64_t seq, absl::Span<const Pool::ProgressSample> samples);

  // Question `q`'s history, oldest first.
  void CopyTo(size_t q, v1::QuestionHistory* out) const;

  size_t memory_bytes() const;

 private:
  template <typename T>
  struct Ring {
    std::vector<T> items;
    size_t next = 0;
    bool full = false;
    void Push(const T& v) {
      items[next] = v;
      if (++next == items.size()) {  // no division: one push per question per frame
        next = 0;
        full = true;
      }
    }
    template <typename F>
    void ForEach(F f) const {
      const size_t n = full ? items.size() : next;
      const size_t start = full ? next : 0;
      for (size_t i = 0; i < n; ++i) f(items[(start + i) % items.size()]);
    }
  };
  size_t points_;            // per question
  Ring<Verified> verified_;  // every question's, in arrival order
  std::vector<Ring<Sample>> samples_;
  uint64_t last_sample_seq_ = 0;
  bool sampled_ = false;
};

}  // namespace bellwether::server

#endif  // BELLWETHER_SERVER_STREAM_HISTORY_H_
