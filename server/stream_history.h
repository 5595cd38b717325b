// Recent history of one stream's questions, for the status page and the Progress RPC:
// per question, a ring of the latest verified predictions (prediction made at seq s and
// the return realized for it) and a ring of progress samples (verified RMSE, TD-error
// RMS, weight change, label), one taken every `kSampleEvery` frames.
//
// Memory is fixed at construction: 2 x points x ~40 bytes per question.
#ifndef BELLWETHER_SERVER_STREAM_HISTORY_H_
#define BELLWETHER_SERVER_STREAM_HISTORY_H_

#include <cstddef>
#include <cstdint>
#include <vector>

#include "bellwether/v1/prediction.pb.h"

namespace bellwether::server {

class StreamHistory {
 public:
  static constexpr size_t kDefaultPoints = 360;
  static constexpr uint64_t kSampleEvery = 8;

  StreamHistory(size_t questions, size_t points);

  // One verified prediction: made at `seq`, and the return realized for it.
  struct Verified {
    uint64_t seq;
    double predicted, realized;
    bool truncated;
  };

  // Records a verified prediction of question `q` (a plain struct: the writer thread
  // gathers one per question per frame, so no message is built until someone asks).
  void AddVerified(size_t q, const Verified& point);
  // Takes a progress sample of every question from `current` if `kSampleEvery` frames
  // passed since the last one.
  void MaybeSample(const v1::StreamPredictions& current);

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
  struct Sample {
    uint64_t seq;
    double rmse, td_rms, weight_change;
    int label;  // index into the label names
  };
  std::vector<Ring<Verified>> verified_;
  std::vector<Ring<Sample>> samples_;
  uint64_t last_sample_seq_ = 0;
  bool sampled_ = false;
};

}  // namespace bellwether::server

#endif  // BELLWETHER_SERVER_STREAM_HISTORY_H_
