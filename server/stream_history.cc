#include "server/stream_history.h"

#include <algorithm>
#include <string>

namespace bellwether::server {
StreamHistory::StreamHistory(size_t questions, size_t points)
    : points_(std::max<size_t>(points, 1)), samples_(questions) {
  verified_.items.resize(std::max<size_t>(questions, 1) * points_);
  for (auto& r : samples_) r.items.resize(points_);
}

void StreamHistory::AddVerified(absl::Span<const Verified> points) {
  for (const Verified& v : points) {
    if (v.question < samples_.size()) verified_.Push(v);
  }
}

void StreamHistory::AddSample(uint64_t seq, absl::Span<const Pool::ProgressSample> samples) {
  if (!SampleDue(seq)) return;
  sampled_ = true;
  last_sample_seq_ = seq;
  const size_t n = std::min(samples_.size(), samples.size());
  for (size_t q = 0; q < n; ++q) {
    const Pool::ProgressSample& p = samples[q];
    samples_[q].Push({seq, p.verified_rmse, p.td_error_rms, p.weight_change,
                      p.label});
  }
}

void StreamHistory::CopyTo(size_t q, v1::QuestionHistory* out) const {
  if (q >= samples_.size()) return;
  // The question's newest points_ of the shared ring, oldest first.
  size_t mine = 0;
  verified_.ForEach([&mine, q](const Verified& v) { mine += v.question == q; });
  size_t skip = mine > points_ ? mine - points_ : 0;
  verified_.ForEach([out, q, &skip](const Verified& v) {
    if (v.question != q) return;
    if (skip > 0) {
      --skip;
      return;
    }
    v1::VerifiedPoint* p = out->add_verified();
    p->set_seq(v.seq);
    p->set_predicted(v.predicted);
    p->set_realized(v.realized);
    p->set_truncated(v.truncated);
  });
  samples_[q].ForEach([out](const Sample& s) {
    v1::ProgressPoint* p = out->add_progress();
    p->set_seq(s.seq);
    p->set_verified_rmse(s.rmse);
    p->set_td_error_rms(s.td_rms);
    p->set_weight_change(s.weight_change);
    p->set_label(ProgressLabelName(s.label));
  });
}

size_t StreamHistory::memory_bytes() const {
  size_t bytes = sizeof(*this);
  bytes += verified_.items.capacity() * sizeof(Verified);
  for (const auto& r : samples_) bytes += r.items.capacity() * sizeof(Sample);
  return bytes;
}

}  // namespace bellwether::server
