#include "core/pool.h"

#include <algorithm>
#include <cmath>
#include <utility>

#include "absl/strings/str_cat.h"
#include "core/clock_signals.h"
#include "core/status_macros.h"

namespace bellwether {

absl::StatusOr<std::unique_ptr<Pool>> Pool::Create(const v1::PoolSpec& spec) {
  BW_ASSIGN_OR_RETURN(CompiledPoolSpec compiled, CompilePoolSpec(spec));
  return std::unique_ptr<Pool>(new Pool(std::move(compiled)));
}

Pool::Pool(CompiledPoolSpec spec) : spec_(std::move(spec)) {
  const uint32_t nf = spec_.recipe->num_features();
  size_t widest = 1;
  for (const BlockSpec& b : spec_.blocks) widest = std::max(widest, b.questions.size());
  if (spec_.pooled) {
    for (const BlockSpec& b : spec_.blocks) {
      pooled_weights_.emplace_back(nf, static_cast<uint32_t>(b.questions.size()));
    }
  }
  extended_.resize(spec_.num_extended_signals());
  next_x_.Reserve(spec_.recipe->max_active());
  v_now_.resize(widest);
  v_next_.resize(widest);
  step_delta_.resize(widest);
}

Pool::StreamState& Pool::GetOrCreateStream(absl::string_view stream) {
  auto it = streams_.find(stream);
  if (it != streams_.end()) return *it->second;
  auto state = std::make_unique<StreamState>();
  const uint32_t nf = spec_.recipe->num_features();
  state->prev_x.Reserve(spec_.recipe->max_active());
  state->predictions.assign(spec_.questions.size(), 0.0);
  for (const BlockSpec& b : spec_.blocks) {
    state->traces.emplace_back(nf);
    if (!spec_.pooled) {
      state->own_weights.emplace_back(nf, static_cast<uint32_t>(b.questions.size()));
    }
  }
  for (const CompiledQuestion& q : spec_.questions) state->verifiers.emplace_back(q.gamma);
  StreamState& ref = *state;
  streams_.emplace(std::string(stream), std::move(state));
  return ref;
}

absl::Status Pool::Apply(absl::string_view stream, const FrameInput& frame) {
  if (frame.values.size() != spec_.signal_names.size()) {
    return absl::InvalidArgumentError(absl::StrCat("frame seq ", frame.seq, ": values: has ",
                                                   frame.values.size(), " entries, the pool has ",
                                                   spec_.signal_names.size(), " signals"));
  }
  if (stream.empty()) return absl::InvalidArgumentError("stream: name must not be empty");
  const uint64_t last = last_seq(stream);
  if (frame.seq <= last) {
    return absl::InvalidArgumentError(
        absl::StrCat("frame seq ", frame.seq, ": seq does not increase (stream '", stream,
                     "' last applied seq ", last, ")"));
  }
  StreamState& s = GetOrCreateStream(stream);

  // Extended signal vector: declared signals, then clock signals; NaN = missing.
  std::copy(frame.values.begin(), frame.values.end(), extended_.begin());
  ComputeClockSignals(frame.time_kind, frame.time_micros, spec_.time_zone,
                      absl::MakeSpan(extended_).subspan(spec_.signal_names.size()));
  spec_.recipe->Encode(extended_, &next_x_);

  const bool learn = s.has_prev && !frame.restart && !s.prev_x.empty();
  for (size_t b = 0; b < spec_.blocks.size(); ++b) {
    const BlockSpec& block = spec_.blocks[b];
    BlockWeights& w = spec_.pooled ? pooled_weights_[b] : s.own_weights[b];
    const size_t nq = block.questions.size();
    const auto v_now = absl::MakeSpan(v_now_.data(), nq);
    const auto v_next = absl::MakeSpan(v_next_.data(), nq);
    SparseTrace& trace = s.traces[b];
    if (frame.restart) trace.Clear();
    if (learn) {
      w.Predict(s.prev_x, v_now);
      w.Predict(next_x_, v_next);
      const double gamma = block.gamma;
      const double norm = 1.0 / static_cast<double>(s.prev_x.size());
      bool any = false;
      for (size_t i = 0; i < nq; ++i) {
        const CompiledQuestion& q = spec_.questions[block.questions[i]];
        const double c = frame.values[q.cumulant_signal];
        if (std::isnan(c)) {  // missing cumulant: this question skips the update
          step_delta_[i] = 0.0f;
          continue;
        }
        const double delta =
            c + gamma * static_cast<double>(v_next[i]) - static_cast<double>(v_now[i]);
        step_delta_[i] = static_cast<float>(q.step_size * norm * delta);
        any = true;
      }
      trace.DecayAndPrune(static_cast<float>(gamma * block.lambda));
      trace.Accumulate(s.prev_x);
      if (any) {
        const float* __restrict ad = step_delta_.data();
        for (uint32_t j : trace.active()) {
          const float e = trace.value(j);
          float* __restrict row = w.row(j);
          for (size_t i = 0; i < nq; ++i) row[i] += e * ad[i];
        }
      }
    }
    w.Predict(next_x_, v_next);
    for (size_t i = 0; i < nq; ++i) s.predictions[block.questions[i]] = v_next[i];
  }

  for (size_t qi = 0; qi < spec_.questions.size(); ++qi) {
    ReturnVerifier& verifier = s.verifiers[qi];
    if (frame.restart) {
      verifier.Interrupt();
    } else if (s.has_prev) {
      verifier.Observe(frame.values[spec_.questions[qi].cumulant_signal]);
    }
    verifier.Hold(s.predictions[qi]);
  }

  std::swap(s.prev_x, next_x_);
  s.has_prev = true;
  s.last_seq = frame.seq;
  return absl::OkStatus();
}

uint64_t Pool::last_seq(absl::string_view stream) const {
  auto it = streams_.find(stream);
  return it == streams_.end() ? 0 : it->second->last_seq;
}

bool Pool::has_stream(absl::string_view stream) const { return streams_.contains(stream); }

absl::Span<const double> Pool::predictions(absl::string_view stream) const {
  auto it = streams_.find(stream);
  if (it == streams_.end()) return {};
  return it->second->predictions;
}

absl::Status Pool::GetPredictions(absl::string_view stream, v1::StreamPredictions* out) const {
  auto it = streams_.find(stream);
  if (it == streams_.end()) {
    return absl::NotFoundError(
        absl::StrCat("pool ", name(), ": stream '", stream, "' has sent no frames"));
  }
  const StreamState& s = *it->second;
  out->Clear();
  out->set_pool(name());
  out->set_stream(std::string(stream));
  out->set_as_of_seq(s.last_seq);
  for (size_t qi = 0; qi < spec_.questions.size(); ++qi) {
    const CompiledQuestion& q = spec_.questions[qi];
    v1::Prediction* p = out->add_predictions();
    p->set_question(q.name);
    p->set_value(s.predictions[qi]);
    p->set_unit(q.unit);
    const VerifiedErrorStats st = s.verifiers[qi].stats();
    v1::VerifiedError* ve = p->mutable_verified();
    ve->set_count(st.count);
    ve->set_rmse(st.rmse);
    ve->set_bias(st.bias);
    ve->set_window(st.window);
  }
  return absl::OkStatus();
}

}  // namespace bellwether
