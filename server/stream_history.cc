#include "server/stream_history.h"

#include <algorithm>
#include <string>

namespace bellwether::server {
namespace {

constexpr const char* kLabels[] = {"learning", "settled", "diverging", ""};

int LabelIndex(const std::string& label) {
  for (int i = 0; i < 3; ++i) {
    if (label == kLabels[i]) return i;
  }
  return 3;
}

}  // namespace

StreamHistory::StreamHistory(size_t questions, size_t points)
    : verified_(questions), samples_(questions) {
  points = std::max<size_t>(points, 1);
  for (auto& r : verified_) r.items.resize(points);
  for (auto& r : samples_) r.items.resize(points);
}

void StreamHistory::AddVerified(size_t q, const Verified& point) {
  if (q >= verified_.size()) return;
  verified_[q].Push(point);
}

void StreamHistory::MaybeSample(const v1::StreamPredictions& current) {
  const uint64_t seq = current.as_of_seq();
  if (sampled_ && seq < last_sample_seq_ + kSampleEvery) return;
  sampled_ = true;
  last_sample_seq_ = seq;
  const size_t n = std::min(samples_.size(), static_cast<size_t>(current.predictions_size()));
  for (size_t q = 0; q < n; ++q) {
    const v1::Prediction& p = current.predictions(static_cast<int>(q));
    samples_[q].Push({seq, p.verified().count() > 0 ? p.verified().rmse() : 0.0,
                      p.progress().td_error_rms(), p.progress().weight_change(),
                      LabelIndex(p.progress().label())});
  }
}

void StreamHistory::CopyTo(size_t q, v1::QuestionHistory* out) const {
  if (q >= verified_.size()) return;
  verified_[q].ForEach([out](const Verified& v) {
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
    p->set_label(kLabels[s.label]);
  });
}

size_t StreamHistory::memory_bytes() const {
  size_t bytes = sizeof(*this);
  for (const auto& r : verified_) bytes += r.items.capacity() * sizeof(Verified);
  for (const auto& r : samples_) bytes += r.items.capacity() * sizeof(Sample);
  return bytes;
}

}  // namespace bellwether::server
