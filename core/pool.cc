#include "core/pool.h"

#include "core/io/state_codec.h"

#include <algorithm>
#include <cmath>
#include <limits>
#include <utility>

#include "absl/strings/str_cat.h"
#include "absl/time/civil_time.h"
#include "core/clock_signals.h"
#include "core/spec_diff.h"
#include "core/status_macros.h"
#include "google/protobuf/util/message_differencer.h"

namespace bellwether {
namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();

// Fields of a question spec that change what it learns (all but the unit).
v1::QuestionSpec LearningFields(const v1::QuestionSpec& q) {
  v1::QuestionSpec out = q;
  out.clear_unit();
  return out;
}

}  // namespace

absl::StatusOr<std::unique_ptr<Pool>> Pool::Create(const v1::PoolSpec& spec) {
  BW_ASSIGN_OR_RETURN(CompiledPoolSpec compiled, CompilePoolSpec(spec));
  return std::unique_ptr<Pool>(new Pool(std::move(compiled)));
}

Pool::Workspace::Workspace(const CompiledPoolSpec& spec, uint32_t num_actions)
    : learner(spec.recipe->num_features() * num_actions,
              [&spec] {
                size_t widest = 1;
                for (const BlockSpec& b : spec.blocks) widest = std::max(widest, b.questions.size());
                return static_cast<uint32_t>(widest);
              }(),
              num_actions) {
  const size_t nq = spec.questions.size();
  extended.resize(spec.num_extended_signals());
  next_x.Reserve(spec.recipe->max_active());
  next_answers.resize(nq);
  cumulants.resize(nq);
  block_answers.resize(nq);
  trans_cumulant.resize(nq);
  trans_continuation.resize(nq);
  trans_pi.resize(nq);
  trans_rho.resize(nq);
  group_values.resize(nq);
  pi_now.resize(num_actions);
  pi_next.resize(num_actions);
  q_values.resize(num_actions);
  behavior_cell.Reserve(1);
}

std::unique_ptr<Pool::Workspace> Pool::NewWorkspace() const {
  return std::make_unique<Workspace>(spec_, num_actions_);
}

bool Pool::supports_concurrent_streams() const {
  // Pooled weights and the raw inputs' running normalization are shared by every stream.
  return !spec_.pooled && normalizer_.count.empty();
}

Pool::Pool(CompiledPoolSpec spec)
    : spec_(std::move(spec)),
      num_actions_(static_cast<uint32_t>(std::max<size_t>(spec_.actions.size(), 1))),
      normalizer_(spec_.recipe->NewNormalizerState()),
      workspace_(spec_, num_actions_) {
  FormVerifierGroups();
  if (spec_.pooled) {
    for (const BlockSpec& b : spec_.blocks) {
      pooled_params_.emplace_back(b, spec_.questions, *spec_.recipe, num_actions_);
    }
    pooled_regression_.resize(spec_.questions.size());
    pooled_regression_updates_.assign(spec_.questions.size(), 0);
    for (size_t qi = 0; qi < spec_.questions.size(); ++qi) {
      const int t = spec_.questions[qi].successor;
      if (t >= 0) pooled_regression_[qi].assign(spec_.tables[static_cast<size_t>(t)].count, 0.0);
    }
  }
}

namespace {

VerificationMode VerificationModeOf(const CompiledQuestion& q) {
  if (q.control || q.policy.kind == PolicyKind::kAction || q.policy.kind == PolicyKind::kGreedy) {
    return VerificationMode::kOnTargetStretches;
  }
  if (q.policy.kind == PolicyKind::kDistribution) return VerificationMode::kImportanceWeighted;
  return VerificationMode::kOnPolicy;
}

}  // namespace

void Pool::FormVerifierGroups() {
  verifier_slot_.resize(spec_.questions.size());
  for (size_t qi = 0; qi < spec_.questions.size(); ++qi) {
    const CompiledQuestion& q = spec_.questions[qi];
    // A successor question sees the transition its table's first component sees.
    const size_t timing_block =
        q.successor >= 0
            ? spec_.questions[spec_.tables[static_cast<size_t>(q.successor)].first].block
            : q.block;
    const VerificationMode mode = VerificationModeOf(q);
    const bool gpi = !q.gpi_tables.empty();
    const bool probability =
        q.cumulant.kind == CumulantKind::kIndicator && q.gamma == 1.0 && !q.terminate_when.empty();
    size_t g = 0;
    while (g < verifier_groups_.size() &&
           !(verifier_groups_[g].timing_block == timing_block &&
             verifier_groups_[g].gamma == q.gamma && verifier_groups_[g].mode == mode &&
             verifier_groups_[g].gpi == gpi)) {
      ++g;
    }
    if (g == verifier_groups_.size()) {
      verifier_groups_.push_back(VerifierGroup{timing_block, q.gamma, mode, gpi, {}, {}});
    }
    verifier_slot_[qi] = {g, verifier_groups_[g].questions.size()};
    verifier_groups_[g].questions.push_back(qi);
    verifier_groups_[g].probability.push_back(probability);
  }
}

void Pool::InstallSink(const std::string& name, StreamState& state) {
  for (size_t g = 0; g < state.verifiers.size(); ++g) {
    if (!sink_) {
      state.verifiers[g].set_sink(nullptr);
      continue;
    }
    state.verifiers[g].set_sink([this, name, &state, g](absl::Span<const VerifiedPoint> points) {
      // The group's places become the spec's question indices.
      const std::vector<size_t>& questions = verifier_groups_[g].questions;
      state.sink_points.clear();
      for (VerifiedPoint p : points) {
        p.question = static_cast<uint32_t>(questions[p.question]);
        state.sink_points.push_back(p);
      }
      sink_(name, state.sink_points);
    });
  }
}

absl::StatusOr<std::unique_ptr<Pool>> Pool::CreateFrom(const Pool& old, const v1::PoolSpec& spec) {
  BW_ASSIGN_OR_RETURN(std::unique_ptr<Pool> pool, Create(spec));
  using google::protobuf::util::MessageDifferencer;
  if (DiffPoolSpecs(old.spec_.proto, spec).recipe_changed) {
    return pool;  // a different feature table: nothing learned carries over
  }
  // Matching questions: new index -> old index.
  std::vector<int> from(pool->spec_.questions.size(), -1);
  // The successor table (proto) a compiled question belongs to, if internal.
  auto table_of = [](const Pool& p, size_t qi) -> const v1::SuccessorTable* {
    const CompiledPoolSpec& cs = p.spec_;
    for (size_t t = 0; t < cs.tables.size(); ++t) {
      if (qi >= cs.tables[t].first && qi < cs.tables[t].first + cs.tables[t].count) {
        return &cs.proto.successor_tables(static_cast<int>(t));
      }
    }
    return nullptr;
  };
  for (size_t n = 0; n < pool->spec_.questions.size(); ++n) {
    const bool n_visible = n < pool->spec_.num_visible_questions;
    for (size_t o = 0; o < old.spec_.questions.size(); ++o) {
      if (old.spec_.questions[o].name != pool->spec_.questions[n].name) continue;
      const bool o_visible = o < old.spec_.num_visible_questions;
      if (n_visible != o_visible) continue;
      const bool same =
          n_visible
              ? MessageDifferencer::Equals(
                    LearningFields(old.spec_.proto.questions(static_cast<int>(o))),
                    LearningFields(spec.questions(static_cast<int>(n))))
              : MessageDifferencer::Equals(*table_of(old, o), *table_of(*pool, n));
      if (same) from[n] = static_cast<int>(o);
    }
  }
  auto copy_params = [&](const std::vector<BlockParams>& src, std::vector<BlockParams>& dst) {
    for (size_t n = 0; n < from.size(); ++n) {
      if (from[n] < 0 || pool->spec_.questions[n].successor >= 0) continue;
      const CompiledQuestion& nq = pool->spec_.questions[n];
      const CompiledQuestion& oq = old.spec_.questions[static_cast<size_t>(from[n])];
      dst[nq.block].CopyColumnFrom(src[oq.block], static_cast<uint32_t>(oq.index_in_block),
                                   static_cast<uint32_t>(nq.index_in_block));
    }
  };
  if (pool->spec_.pooled) {
    copy_params(old.pooled_params_, pool->pooled_params_);
    for (size_t n = 0; n < from.size(); ++n) {
      if (from[n] < 0 || pool->spec_.questions[n].successor < 0) continue;
      pool->pooled_regression_[n] = old.pooled_regression_[static_cast<size_t>(from[n])];
      pool->pooled_regression_updates_[n] =
          old.pooled_regression_updates_[static_cast<size_t>(from[n])];
    }
  }
  pool->normalizer_ = old.normalizer_;
  for (const auto& [name, old_state] : old.streams_) {
    StreamState& s = pool->GetOrCreateStream(name);
    s.last_seq = old_state->last_seq;
    s.has_prev = old_state->has_prev;
    s.prev_x = old_state->prev_x;
    s.prev_action = old_state->prev_action;
    s.prev_behavior_prob = old_state->prev_behavior_prob;
    s.prev_time_micros = old_state->prev_time_micros;
    s.behavior_counts = old_state->behavior_counts;
    s.feature_gap_frames = old_state->feature_gap_frames;
    s.frames_applied = old_state->frames_applied;
    if (!pool->spec_.pooled) {
      for (const BlockTraceState& b : old_state->block_states) b.FoldLazy();
      copy_params(old_state->own_params, s.own_params);
    }
    for (size_t n = 0; n < from.size(); ++n) {
      if (from[n] < 0) continue;
      const size_t o = static_cast<size_t>(from[n]);
      s.answers[n] = old_state->answers[o];
      if (!pool->spec_.pooled && pool->spec_.questions[n].successor >= 0) {
        s.regression[n] = old_state->regression[o];
        s.regression_updates[n] = old_state->regression_updates[o];
      }
      s.greedy_actions[n] = old_state->greedy_actions[o];
    }
    // Verified-error state, question by question, in each new group's order (the first
    // question adopted sets the group's timing).
    for (size_t n = 0; n < from.size(); ++n) {
      if (from[n] < 0) continue;
      const auto [og, oslot] = old.verifier_slot_[static_cast<size_t>(from[n])];
      const auto [ng, nslot] = pool->verifier_slot_[n];
      s.verifiers[ng].Adopt(nslot, old_state->verifiers[og].Export(oslot));
    }
  }
  return pool;
}

Pool::StreamState& Pool::GetOrCreateStream(absl::string_view stream) {
  auto it = streams_.find(stream);
  if (it != streams_.end()) return *it->second;
  auto state = std::make_unique<StreamState>();
  state->prev_x.Reserve(spec_.recipe->max_active());
  state->prev_behavior_prob = kNaN;
  state->answers.assign(spec_.questions.size(), 0.0);
  state->greedy_actions.assign(spec_.questions.size(), -1);
  for (const BlockSpec& b : spec_.blocks) {
    const uint32_t rows = spec_.recipe->num_features() * (b.action_valued ? num_actions_ : 1);
    state->block_states.emplace_back(rows);
    state->block_states.back().v_old.assign(b.questions.size(), 0.0);
    if (!spec_.pooled) state->own_params.emplace_back(b, spec_.questions, *spec_.recipe, num_actions_);
  }
  size_t widest = 0;
  for (const VerifierGroup& g : verifier_groups_) {
    state->verifiers.emplace_back(g.gamma, spec_.verify_max_held, spec_.verify_window, g.mode,
                                  g.probability);
    widest = std::max(widest, g.questions.size());
  }
  state->sink_points.reserve(widest);
  InstallSink(std::string(stream), *state);
  if (!spec_.pooled) {
    state->regression.resize(spec_.questions.size());
    state->regression_updates.assign(spec_.questions.size(), 0);
    for (size_t qi = 0; qi < spec_.questions.size(); ++qi) {
      const int t = spec_.questions[qi].successor;
      if (t >= 0) state->regression[qi].assign(spec_.tables[static_cast<size_t>(t)].count, 0.0);
    }
  }
  if (spec_.estimate_behavior) {
    state->behavior_counts.assign((spec_.behavior_cells->num_tiles() + 1) * num_actions_, 0);
  }
  StreamState& ref = *state;
  streams_.emplace(std::string(stream), std::move(state));
  return ref;
}

BlockParams& Pool::ParamsFor(StreamState& s, size_t b) {
  return spec_.pooled ? pooled_params_[b] : s.own_params[b];
}
const BlockParams& Pool::ParamsFor(const StreamState& s, size_t b) const {
  return spec_.pooled ? pooled_params_[b] : s.own_params[b];
}

std::optional<int64_t> Pool::AbsoluteTime(const FrameInput& frame) const {
  switch (frame.time_kind) {
    case FrameTimeKind::kNone:
      return std::nullopt;
    case FrameTimeKind::kUnix:
      return frame.time_micros;
    case FrameTimeKind::kLocal: {
      int64_t secs = frame.time_micros / 1000000, sub = frame.time_micros % 1000000;
      if (sub < 0) {
        sub += 1000000;
        --secs;
      }
      const absl::CivilSecond civil = absl::CivilSecond(1970, 1, 1, 0, 0, 0) + secs;
      return absl::ToUnixMicros(absl::FromCivil(civil, spec_.time_zone)) + sub;
    }
  }
  return std::nullopt;
}

double Pool::TransitionCumulant(const Workspace& ws, const CompiledCumulant& c,
                                const FrameInput& frame, const std::optional<int64_t>& now,
                                const StreamState& s) const {
  switch (c.kind) {
    case CumulantKind::kSignal:
      return frame.values[c.signal];
    case CumulantKind::kIndicator: {
      const double v = frame.values[c.condition.signal];
      return std::isnan(v) ? kNaN : (c.condition.Holds(v) ? 1.0 : 0.0);
    }
    case CumulantKind::kConstant:
      return c.constant;
    case CumulantKind::kFramePeriod:
      if (now.has_value() && s.prev_time_micros.has_value() && *now > *s.prev_time_micros) {
        int64_t elapsed = 0;
        // Hostile timestamps can be far enough apart to overflow: no period then.
        if (__builtin_sub_overflow(*now, *s.prev_time_micros, &elapsed)) return kNaN;
        return static_cast<double>(elapsed) * 1e-6;
      }
      return kNaN;
    case CumulantKind::kQuestion:
      return ws.next_answers[c.question];
  }
  return kNaN;
}

void Pool::AnswerSuccessorQuestions(Workspace& ws, StreamState& s, const FrameInput& frame,
                                    const std::optional<int64_t>& now, bool learn) {
  for (size_t qi = 0; qi < spec_.num_visible_questions; ++qi) {
    const CompiledQuestion& q = spec_.questions[qi];
    if (q.successor < 0) continue;
    const SuccessorTableSpec& table = spec_.tables[static_cast<size_t>(q.successor)];
    std::vector<double>& w = spec_.pooled ? pooled_regression_[qi] : s.regression[qi];
    uint64_t& updates = spec_.pooled ? pooled_regression_updates_[qi] : s.regression_updates[qi];
    // The transition as the table's first component saw it.
    ws.trans_continuation[qi] = ws.trans_continuation[table.first];
    ws.trans_pi[qi] = ws.trans_pi[table.first];
    ws.trans_rho[qi] = ws.trans_rho[table.first];
    ws.trans_cumulant[qi] = kNaN;
    if (learn) {
      // Normalized LMS: c_{t+1} ~ w . phi_{t+1}.
      const double c = TransitionCumulant(ws, q.cumulant, frame, now, s);
      double fit = 0, norm = 0;
      bool complete = !std::isnan(c);
      // phi_{t+1}: the table's components already read it as their cumulants.
      const double* phi_next = &ws.trans_cumulant[table.first];
      for (size_t k = 0; k < table.count && complete; ++k) {
        const double phi = phi_next[k];
        complete &= !std::isnan(phi);
        fit += w[k] * phi;
        norm += phi * phi;
      }
      ws.trans_cumulant[qi] = c;
      if (complete && norm > 0) {
        const double step = q.regression_step_size * (c - fit) / norm;
        for (size_t k = 0; k < table.count; ++k) {
          w[k] += step * phi_next[k];
        }
        ++updates;
      }
    }
    if (q.gpi_tables.empty()) {
      // The answer: psi(S_{t+1}) . w.
      double answer = 0;
      for (size_t k = 0; k < table.count; ++k) answer += ws.next_answers[table.first + k] * w[k];
      ws.next_answers[qi] = answer;
      continue;
    }
    // Generalized policy improvement: max_a max_i psi_i(S_{t+1}, a) . w.
    double best = -std::numeric_limits<double>::infinity();
    int best_action = 0;
    for (int ti : q.gpi_tables) {
      const SuccessorTableSpec& t = spec_.tables[static_cast<size_t>(ti)];
      std::fill(ws.pi_now.begin(), ws.pi_now.end(), 0.0);  // scratch: sum_k psi_k(s, a) w_k
      for (size_t k = 0; k < t.count; ++k) {
        const CompiledQuestion& component = spec_.questions[t.first + k];
        ws.learner.ActionValues(ws.next_x, ParamsFor(s, component.block),
                              static_cast<uint32_t>(component.index_in_block),
                              absl::MakeSpan(ws.q_values));
        for (uint32_t a = 0; a < num_actions_; ++a) ws.pi_now[a] += ws.q_values[a] * w[k];
      }
      for (uint32_t a = 0; a < num_actions_; ++a) {
        if (ws.pi_now[a] > best) {
          best = ws.pi_now[a];
          best_action = static_cast<int>(a);
        }
      }
    }
    ws.next_answers[qi] = best;
    s.greedy_actions[qi] = best_action;
  }
}

void Pool::PolicyDistribution(Workspace& ws, const CompiledPolicy& policy, StreamState& s,
                              const SparseFeatures& x, absl::Span<double> out) {
  switch (policy.kind) {
    case PolicyKind::kBehavior:
      std::fill(out.begin(), out.end(), 1.0 / static_cast<double>(out.size()));
      return;
    case PolicyKind::kAction:
      std::fill(out.begin(), out.end(), 0.0);
      out[policy.action] = 1.0;
      return;
    case PolicyKind::kDistribution:
      std::copy(policy.probabilities.begin(), policy.probabilities.end(), out.begin());
      return;
    case PolicyKind::kGreedy: {
      const CompiledQuestion& control = spec_.questions[policy.control_question];
      ws.learner.ActionValues(x, ParamsFor(s, control.block),
                            static_cast<uint32_t>(control.index_in_block),
                            absl::MakeSpan(ws.q_values));
      double best = -std::numeric_limits<double>::infinity();
      for (double v : ws.q_values) best = std::max(best, v);
      int count = 0;
      for (double v : ws.q_values) count += (v == best);
      for (size_t a = 0; a < out.size(); ++a) {
        out[a] = count == 0 ? 1.0 / static_cast<double>(out.size())
                            : (ws.q_values[a] == best ? 1.0 / count : 0.0);
      }
      return;
    }
  }
}

double Pool::EstimateBehavior(Workspace& ws, StreamState& s, int action) {
  // Laplace-smoothed counts of actions in the frame's coarse cell, before this action.
  SparseFeatures& cell = ws.behavior_cell;
  cell.Clear();
  double inputs[8];
  bool complete = true;
  for (size_t d = 0; d < spec_.behavior_cell_inputs.size(); ++d) {
    inputs[d] = ws.extended[spec_.behavior_cell_inputs[d]];
    complete &= !std::isnan(inputs[d]);
  }
  size_t c = spec_.behavior_cells->num_tiles();  // the "unknown" cell
  if (complete) {
    spec_.behavior_cells->Encode(absl::MakeConstSpan(inputs, spec_.behavior_cell_inputs.size()), 0,
                                 0, &cell);
    c = cell.index[0];
  }
  uint32_t* counts = &s.behavior_counts[c * num_actions_];
  uint64_t total = 0;
  for (uint32_t a = 0; a < num_actions_; ++a) total += counts[a];
  const double mu = (counts[action] + 1.0) / (static_cast<double>(total) + num_actions_);
  ++counts[action];
  return mu;
}

absl::Status Pool::Apply(absl::string_view stream, const FrameInput& frame) {
  return Apply(stream, frame, workspace_);
}

absl::Status Pool::Apply(absl::string_view stream, const FrameInput& frame, Workspace& ws) {
  if (frame.values.size() != spec_.signal_names.size()) {
    return absl::InvalidArgumentError(absl::StrCat("frame seq ", frame.seq, ": values: has ",
                                                   frame.values.size(), " entries, the pool has ",
                                                   spec_.signal_names.size(), " signals"));
  }
  if (stream.empty()) return absl::InvalidArgumentError("stream: name must not be empty");
  // One lookup of the stream per frame.
  const auto found = streams_.find(stream);
  const uint64_t last = found == streams_.end() ? 0 : found->second->last_seq;
  if (frame.seq <= last) {
    return absl::InvalidArgumentError(
        absl::StrCat("frame seq ", frame.seq, ": seq does not increase (stream '", stream,
                     "' last applied seq ", last, ")"));
  }
  if (frame.action.has_value() && *frame.action >= spec_.actions.size()) {
    return absl::InvalidArgumentError(absl::StrCat(
        "frame seq ", frame.seq, ": action: ", *frame.action, " is not an action of pool ",
        name(), " (", spec_.actions.size(), " declared)"));
  }
  StreamState& s = found != streams_.end() ? *found->second : GetOrCreateStream(stream);

  // Extended signal vector: declared signals, then clock signals; NaN = missing.
  std::copy(frame.values.begin(), frame.values.end(), ws.extended.begin());
  ComputeClockSignals(frame.time_kind, frame.time_micros, spec_.time_zone,
                      absl::MakeSpan(ws.extended).subspan(spec_.signal_names.size()));
  if (spec_.recipe->Encode(ws.extended, &normalizer_, &ws.next_x) > 0) ++s.feature_gap_frames;
  // Every block reads the new frame's rows of its weights: start fetching them all now,
  // so the misses overlap instead of coming one block at a time.
  if (!spec_.pooled) {
    for (size_t bi = 0; bi < spec_.blocks.size(); ++bi) {
      if (spec_.blocks[bi].action_valued) continue;
      const BlockParams& params = s.own_params[bi];
      for (uint32_t j : ws.next_x.index) __builtin_prefetch(params.row(j), 0, 3);
    }
  }
  const std::optional<int64_t> now = AbsoluteTime(frame);

  if (frame.restart) {
    for (BlockTraceState& b : s.block_states) b.Reset();
  }
  const bool learn = s.has_prev && !frame.restart && !s.prev_x.empty();
  for (size_t bi = 0; bi < spec_.blocks.size(); ++bi) {
    const BlockSpec& block = spec_.blocks[bi];
    BlockParams& params = ParamsFor(s, bi);
    BlockTraceState& state = s.block_states[bi];
    const size_t nq = block.questions.size();
    const auto answers = absl::MakeSpan(ws.block_answers.data(), nq);
    const bool off_policy = block.policy.kind != PolicyKind::kBehavior;
    if (block.action_valued && block.learner == LearnerKind::kTreeBackup) {
      PolicyDistribution(ws, block.policy, s, ws.next_x, absl::MakeSpan(ws.pi_next));
    }
    int greedy = -1;
    if (!learn) {
      ws.learner.Answer(block, ws.next_x, ws.pi_next, params, answers, &greedy);
      for (size_t i = 0; i < nq; ++i) {
        const size_t qi = block.questions[i];
        ws.next_answers[qi] = answers[i];
        s.greedy_actions[qi] = block.learner == LearnerKind::kQLambda ? greedy : -1;
      }
      continue;
    }
    // Continuation into the new frame.
    double gamma_next = block.gamma;
    bool continuation_known = true;
    for (const CompiledCondition& c : block.terminate_when) {
      const double v = frame.values[c.signal];
      if (std::isnan(v)) {
        continuation_known = false;
      } else if (c.Holds(v)) {
        gamma_next = 0.0;
      }
    }
    if (gamma_next == 0.0) continuation_known = true;  // an event seen ends the return
    // Importance ratio (state values) or target distributions (action values).
    BlockStep step;
    step.x = &s.prev_x;
    step.x_next = &ws.next_x;
    step.gamma_next = gamma_next;
    step.own_params = !spec_.pooled;
    bool usable = continuation_known;
    double pi_taken = 1.0;
    if (block.action_valued) {
      usable &= s.prev_action >= 0;
      step.action = s.prev_action;
      if (block.learner == LearnerKind::kQLambda && usable) {
        // The control question's own greedy policy at S_t, before this update.
        ws.learner.ActionValues(s.prev_x, params, 0, absl::MakeSpan(ws.q_values));
        double best = -std::numeric_limits<double>::infinity();
        for (double v : ws.q_values) best = std::max(best, v);
        int count = 0;
        for (double v : ws.q_values) count += (v == best);
        pi_taken = ws.q_values[static_cast<size_t>(s.prev_action)] == best && count > 0
                       ? 1.0 / count
                       : 0.0;
      }
      if (block.learner == LearnerKind::kTreeBackup && usable) {
        PolicyDistribution(ws, block.policy, s, s.prev_x, absl::MakeSpan(ws.pi_now));
        pi_taken = ws.pi_now[static_cast<size_t>(s.prev_action)];
      }
      step.pi_now = ws.pi_now;
      step.pi_next = ws.pi_next;
    } else if (off_policy) {
      usable &= s.prev_action >= 0 && !std::isnan(s.prev_behavior_prob);
      if (usable) {
        PolicyDistribution(ws, block.policy, s, s.prev_x, absl::MakeSpan(ws.pi_now));
        pi_taken = ws.pi_now[static_cast<size_t>(s.prev_action)];
        double rho = pi_taken / s.prev_behavior_prob;
        const double clip = spec_.questions[block.questions[0]].rho_clip;
        if (clip > 0) rho = std::min(rho, clip);
        step.rho = rho;
      }
    }
    for (size_t i = 0; i < nq; ++i) {
      const size_t qi = block.questions[i];
      const double value = TransitionCumulant(ws, spec_.questions[qi].cumulant, frame, now, s);
      ws.trans_cumulant[qi] = continuation_known ? value : kNaN;
      ws.trans_continuation[qi] = gamma_next;
      ws.trans_pi[qi] = usable ? pi_taken : 0.0;
      ws.trans_rho[qi] = step.rho;
      ws.cumulants[i] = usable ? ws.trans_cumulant[qi] : kNaN;
    }
    step.cumulants = absl::MakeConstSpan(ws.cumulants.data(), nq);
    ws.learner.Learn(block, spec_.questions, step, params, state, answers, &greedy);
    for (size_t i = 0; i < nq; ++i) {
      const size_t qi = block.questions[i];
      ws.next_answers[qi] = answers[i];
      s.greedy_actions[qi] = block.learner == LearnerKind::kQLambda ? greedy : -1;
    }
  }

  if (!spec_.tables.empty()) AnswerSuccessorQuestions(ws, s, frame, now, learn);

  // Verified error: held predictions accumulate the transition's cumulant; off-policy
  // questions verify on the target's stretches or with importance weights (see
  // ReturnVerifier). A group's questions share the continuation, pi and rho.
  for (size_t g = 0; g < verifier_groups_.size(); ++g) {
    const VerifierGroup& group = verifier_groups_[g];
    ReturnVerifier& verifier = s.verifiers[g];
    const size_t n = group.questions.size();
    const auto values = absl::MakeSpan(ws.group_values.data(), n);
    if (frame.restart || group.gpi) {
      // A GPI answer is about a policy the behavior does not follow: not verified.
      verifier.Interrupt();
    } else if (learn) {
      for (size_t i = 0; i < n; ++i) values[i] = ws.trans_cumulant[group.questions[i]];
      const size_t first = group.questions[0];
      verifier.Observe(values, ws.trans_continuation[first], ws.trans_pi[first],
                       ws.trans_rho[first]);
    }
    for (size_t i = 0; i < n; ++i) values[i] = ws.next_answers[group.questions[i]];
    verifier.Hold(values, frame.seq);
  }

  std::swap(s.prev_x, ws.next_x);
  std::copy(ws.next_answers.begin(), ws.next_answers.end(), s.answers.begin());
  s.prev_action = frame.action.has_value() ? static_cast<int>(*frame.action) : -1;
  if (s.prev_action < 0) {
    s.prev_behavior_prob = kNaN;
  } else if (spec_.estimate_behavior) {
    s.prev_behavior_prob = EstimateBehavior(ws, s, s.prev_action);
  } else {
    s.prev_behavior_prob = frame.behavior_prob.value_or(kNaN);
  }
  s.prev_time_micros = now;
  s.has_prev = true;
  s.last_seq = frame.seq;
  ++s.frames_applied;
  return absl::OkStatus();
}

uint64_t Pool::frames_applied(absl::string_view stream) const {
  auto it = streams_.find(stream);
  return it == streams_.end() ? 0 : it->second->frames_applied;
}

uint64_t Pool::last_seq(absl::string_view stream) const {
  auto it = streams_.find(stream);
  return it == streams_.end() ? 0 : it->second->last_seq;
}

bool Pool::has_stream(absl::string_view stream) const { return streams_.contains(stream); }

absl::Span<const double> Pool::predictions(absl::string_view stream) const {
  auto it = streams_.find(stream);
  if (it == streams_.end()) return {};
  return absl::MakeConstSpan(it->second->answers).subspan(0, spec_.num_visible_questions);
}

std::vector<std::string> Pool::stream_names() const {
  std::vector<std::string> names;
  for (const auto& [name, state] : streams_) names.push_back(name);
  return names;
}

const BlockParams* Pool::block_params(absl::string_view stream, size_t b) const {
  if (b >= spec_.blocks.size()) return nullptr;
  if (spec_.pooled) return &pooled_params_[b];
  auto it = streams_.find(stream);
  if (it == streams_.end()) return nullptr;
  it->second->block_states[b].FoldLazy();  // the weights with every update applied
  return &it->second->own_params[b];
}

void Pool::SetVerificationSink(VerificationSink sink) {
  sink_ = std::move(sink);
  for (auto& [name, state] : streams_) InstallSink(name, *state);
}

size_t Pool::verification_memory_bytes(absl::string_view stream) const {
  auto it = streams_.find(stream);
  if (it == streams_.end()) return 0;
  size_t bytes = 0;
  for (const ReturnVerifier& v : it->second->verifiers) bytes += v.memory_bytes();
  return bytes;
}

BlockParams* Pool::mutable_block_params(absl::string_view stream, size_t b) {
  return const_cast<BlockParams*>(block_params(stream, b));
}

absl::Status Pool::SampleProgress(absl::string_view stream, absl::Span<ProgressSample> out) const {
  auto it = streams_.find(stream);
  if (it == streams_.end()) {
    return absl::NotFoundError(
        absl::StrCat("pool ", name(), ": stream '", stream, "' has sent no frames"));
  }
  const StreamState& s = *it->second;
  const size_t n = std::min(out.size(), spec_.num_visible_questions);
  for (size_t qi = 0; qi < n; ++qi) {
    const CompiledQuestion& q = spec_.questions[qi];
    const auto [g, slot] = verifier_slot_[qi];
    const ReturnVerifier& verifier = s.verifiers[g];
    ProgressSample& p = out[qi];
    p.verified_rmse = verifier.verified_count(slot) > 0 ? verifier.window_rmse(slot) : 0.0;
    if (q.successor >= 0) {
      // As GetPredictions: the label of the table's first component, no TD figures.
      const CompiledQuestion& first =
          spec_.questions[spec_.tables[static_cast<size_t>(q.successor)].first];
      const QuestionCounters& tc = ParamsFor(s, first.block).counters()[first.index_in_block];
      p.td_error_rms = 0;
      p.weight_change = 0;
      p.label = tc.progress.Label(spec_.progress_decay);
      continue;
    }
    const QuestionCounters& c = ParamsFor(s, q.block).counters()[q.index_in_block];
    p.td_error_rms = c.progress.td_rms();
    p.weight_change = c.progress.weight_change;
    p.label = c.progress.Label(spec_.progress_decay);
  }
  return absl::OkStatus();
}

absl::Status Pool::GetPredictions(absl::string_view stream, v1::StreamPredictions* out) const {
  auto it = streams_.find(stream);
  if (it == streams_.end()) {
    return absl::NotFoundError(
        absl::StrCat("pool ", name(), ": stream '", stream, "' has sent no frames"));
  }
  const StreamState& s = *it->second;
  // Every field is set in place: a message reused across calls (the writer's history
  // samples) keeps its allocations, where Clear() would free each sub-message.
  out->set_pool(name());
  out->set_stream(stream.data(), stream.size());
  out->set_as_of_seq(s.last_seq);
  double norm_sq = 0;
  for (float v : s.prev_x.value) norm_sq += static_cast<double>(v) * static_cast<double>(v);
  std::vector<uint32_t> rows;  // action-valued blocks only (empty: no allocation)
  auto* predictions = out->mutable_predictions();
  const int visible = static_cast<int>(spec_.num_visible_questions);
  while (predictions->size() > visible) predictions->RemoveLast();
  for (size_t qi = 0; qi < spec_.num_visible_questions; ++qi) {
    const CompiledQuestion& q = spec_.questions[qi];
    const int i = static_cast<int>(qi);
    v1::Prediction* p = i < predictions->size() ? predictions->Mutable(i) : predictions->Add();
    p->set_question(q.name);
    p->set_value(s.answers[qi]);
    p->set_unit(q.unit);
    p->set_as_of_seq(s.last_seq);
    p->clear_greedy_action();
    if ((q.control || !q.gpi_tables.empty()) && s.greedy_actions[qi] >= 0) {
      p->set_greedy_action(spec_.actions[static_cast<size_t>(s.greedy_actions[qi])]);
    }
    const auto [g, slot] = verifier_slot_[qi];
    const ReturnVerifier& verifier = s.verifiers[g];
    const VerifiedErrorStats st = verifier.stats(slot);
    v1::VerifiedError* ve = p->mutable_verified();
    ve->Clear();  // no sub-message to free: scalars, a string, repeated bins kept
    ve->set_count(st.count);
    ve->set_rmse(st.rmse);
    ve->set_bias(st.bias);
    ve->set_window(st.window);
    ve->set_nrmse(st.nrmse);
    ve->set_truncated(st.truncated);
    ve->set_unverifiable(st.unverifiable);
    ve->set_effective_sample_size(st.effective_sample_size);
    ve->set_memory_bytes(verifier.memory_bytes() / verifier.num_questions());
    p->set_error_band(st.count > 0 ? st.rmse : 0.0);
    switch (verifier.mode()) {
      case VerificationMode::kOnPolicy: ve->set_mode("on-policy"); break;
      case VerificationMode::kOnTargetStretches: ve->set_mode("on-target stretches"); break;
      case VerificationMode::kImportanceWeighted: ve->set_mode("importance-weighted"); break;
    }
    const bool probability = q.cumulant.kind == CumulantKind::kIndicator && q.gamma == 1.0 &&
                             !q.terminate_when.empty();
    for (size_t b = 0; probability && b < st.calibration.size(); ++b) {
      const CalibrationBin& bin = st.calibration[b];
      v1::CalibrationBin* out_bin = ve->add_calibration();
      out_bin->set_lower(0.1 * static_cast<double>(b));
      out_bin->set_count(bin.count);
      if (bin.count > 0) {
        out_bin->set_mean_predicted(bin.sum_predicted / static_cast<double>(bin.count));
        out_bin->set_observed_frequency(bin.sum_observed / static_cast<double>(bin.count));
      }
    }
    v1::QuestionProgress* pr = p->mutable_progress();
    pr->Clear();  // scalars and strings only
    if (q.successor >= 0) {
      // Answered by regression on a successor table: report its updates and the
      // table's first component's learning progress.
      pr->set_updates(spec_.pooled ? pooled_regression_updates_[qi] : s.regression_updates[qi]);
      pr->set_feature_gap_frames(s.feature_gap_frames);
      const CompiledQuestion& first =
          spec_.questions[spec_.tables[static_cast<size_t>(q.successor)].first];
      const QuestionCounters& tc = ParamsFor(s, first.block).counters()[first.index_in_block];
      pr->set_label(ProgressLabelName(tc.progress.Label(spec_.progress_decay)));
      pr->set_divergence_resets(tc.divergence_resets);
      p->set_label(pr->label());
      continue;
    }
    const BlockSpec& block = spec_.blocks[q.block];
    const BlockParams& params = ParamsFor(s, q.block);
    const QuestionCounters& c = params.counters()[q.index_in_block];
    pr->set_updates(c.updates);
    pr->set_skipped_missing(c.skipped_missing);
    pr->set_divergence_resets(c.divergence_resets);
    pr->set_step_scale(c.step_scale);
    pr->set_feature_gap_frames(s.feature_gap_frames);
    pr->set_td_error_mean(c.progress.td_mean);
    pr->set_td_error_rms(c.progress.td_rms());
    pr->set_rupee(c.progress.rupee);
    pr->set_ude(c.progress.ude());
    pr->set_weight_change(c.progress.weight_change);
    pr->set_effective_sample_fraction(c.progress.effective_sample_fraction());
    pr->set_label(ProgressLabelName(c.progress.Label(spec_.progress_decay)));
    p->set_label(pr->label());
    pr->set_behavior_estimated(spec_.estimate_behavior &&
                               (q.policy.kind != PolicyKind::kBehavior) && !block.action_valued);
    // The weight rows of the last frame's features: the features themselves for state
    // values (no copy: the writer samples this every few frames), every action's row of
    // each feature for action values.
    absl::Span<const uint32_t> summary_rows = s.prev_x.index;
    if (block.action_valued) {
      rows.clear();
      for (uint32_t j : s.prev_x.index) {
        for (uint32_t a = 0; a < num_actions_; ++a) rows.push_back(j * num_actions_ + a);
      }
      summary_rows = rows;
    }
    double mean = 0, lo = 0, hi = 0;
    params.StepSizeSummary(static_cast<uint32_t>(q.index_in_block), summary_rows, norm_sq, &mean,
                           &lo, &hi);
    pr->set_step_size_mean(mean);
    pr->set_step_size_min(lo);
    pr->set_step_size_max(hi);
  }
  return absl::OkStatus();
}

namespace {

constexpr uint32_t kPoolStateMagic = 0x42575354;  // "BWST"
// 2: per-stream frames_applied. 3: verifiers hold returns as differences of running
// sums. 4: verifiers keep their window's sums. 5: a block's restore point as the rows
// that differ from its weights. 6: one verifier per group of questions sharing their
// timing, instead of one per question. (Versions 2 to 5 are still read.)
constexpr uint32_t kPoolStateVersion = 6;
constexpr uint32_t kOldestPoolStateVersion = 2;

void SaveSparse(StateWriter& w, const SparseFeatures& x) {
  w.PutVector(x.index);
  w.PutVector(x.value);
}

bool LoadSparse(StateReader& r, SparseFeatures* x) {
  return r.GetVector(&x->index) && r.GetVector(&x->value, x->index.size());
}

}  // namespace

void Pool::SaveState(std::string* out) const {
  StateWriter count;
  SaveStateTo(count);
  out->reserve(out->size() + count.bytes());
  StateWriter w(out);
  SaveStateTo(w);
}

void Pool::SaveStateTo(StateWriter& w) const {
  w.Put(kPoolStateMagic);
  w.Put(kPoolStateVersion);
  w.PutVector(normalizer_.count);
  w.PutVector(normalizer_.mean);
  w.PutVector(normalizer_.m2);
  w.Put<uint64_t>(pooled_params_.size());
  for (const BlockParams& p : pooled_params_) p.SaveState(w);
  w.Put<uint64_t>(pooled_regression_.size());
  for (const std::vector<double>& v : pooled_regression_) w.PutVector(v);
  w.PutVector(pooled_regression_updates_);
  // Streams in name order, so the same state always gives the same bytes.
  std::vector<std::string> names = stream_names();
  std::sort(names.begin(), names.end());
  w.Put<uint64_t>(names.size());
  for (const std::string& name : names) {
    const StreamState& st = *streams_.find(name)->second;
    w.PutString(name);
    w.Put(st.last_seq);
    w.Put<uint8_t>(st.has_prev ? 1 : 0);
    SaveSparse(w, st.prev_x);
    w.Put<int32_t>(st.prev_action);
    w.Put(st.prev_behavior_prob);
    w.Put<uint8_t>(st.prev_time_micros.has_value() ? 1 : 0);
    w.Put<int64_t>(st.prev_time_micros.value_or(0));
    w.PutVector(st.answers);
    w.PutVector(st.greedy_actions);
    for (const BlockTraceState& b : st.block_states) b.SaveState(w);
    for (const BlockParams& p : st.own_params) p.SaveState(w);
    for (const ReturnVerifier& v : st.verifiers) v.SaveState(w);
    w.PutVector(st.behavior_counts);
    w.Put(st.feature_gap_frames);
    w.Put(st.frames_applied);
    for (const std::vector<double>& v : st.regression) w.PutVector(v);
    w.PutVector(st.regression_updates);
  }
}

absl::Status Pool::RestoreState(absl::string_view state) {
  StateReader r(state);
  uint32_t magic = 0, version = 0;
  if (!r.Get(&magic) || !r.Get(&version)) return r.status();
  if (magic != kPoolStateMagic) {
    r.Fail("not a pool state (bad magic)");
    return r.status();
  }
  if (version < kOldestPoolStateVersion || version > kPoolStateVersion) {
    return absl::FailedPreconditionError(absl::StrCat(
        "pool state format version ", version, " is not supported (this build reads versions ",
        kOldestPoolStateVersion, " to ", kPoolStateVersion, ")"));
  }
  r.set_version(version);
  auto bad = [&r](absl::string_view what) {
    r.Fail(what);
    return r.status();
  };
  if (!r.GetVector(&normalizer_.count, normalizer_.count.size()) ||
      !r.GetVector(&normalizer_.mean, normalizer_.mean.size()) ||
      !r.GetVector(&normalizer_.m2, normalizer_.m2.size())) {
    return r.status();
  }
  uint64_t n = 0;
  if (!r.Get(&n)) return r.status();
  if (n != pooled_params_.size()) return bad("pooled block count differs from the spec's");
  for (BlockParams& p : pooled_params_) {
    if (!p.LoadState(r)) return r.status();
  }
  if (!r.Get(&n)) return r.status();
  if (n != pooled_regression_.size()) return bad("pooled regression count differs");
  for (std::vector<double>& v : pooled_regression_) {
    if (!r.GetVector(&v, v.size())) return r.status();
  }
  if (!r.GetVector(&pooled_regression_updates_, pooled_regression_updates_.size())) {
    return r.status();
  }
  uint64_t streams = 0;
  if (!r.Get(&streams)) return r.status();
  streams_.clear();
  for (uint64_t i = 0; i < streams; ++i) {
    std::string name;
    if (!r.GetString(&name)) return r.status();
    if (name.empty() || streams_.contains(name)) return bad("bad or repeated stream name");
    StreamState& st = GetOrCreateStream(name);
    uint8_t has_prev = 0, has_time = 0;
    int32_t prev_action = -1;
    int64_t time = 0;
    if (!r.Get(&st.last_seq) || !r.Get(&has_prev) || !LoadSparse(r, &st.prev_x) ||
        !r.Get(&prev_action) || !r.Get(&st.prev_behavior_prob) || !r.Get(&has_time) ||
        !r.Get(&time) || !r.GetVector(&st.answers, st.answers.size()) ||
        !r.GetVector(&st.greedy_actions, st.greedy_actions.size())) {
      return r.status();
    }
    for (uint32_t f : st.prev_x.index) {
      if (f >= spec_.recipe->num_features()) return bad("feature index out of range");
    }
    st.prev_x.Reserve(spec_.recipe->max_active());  // no allocation on the next frames
    if (prev_action < -1 || prev_action >= static_cast<int32_t>(spec_.actions.size())) {
      return bad("previous action out of range");
    }
    for (int a : st.greedy_actions) {
      if (a < -1 || a >= static_cast<int>(std::max<size_t>(spec_.actions.size(), 1))) {
        return bad("greedy action out of range");
      }
    }
    st.has_prev = has_prev != 0;
    st.prev_action = prev_action;
    if (has_time != 0) st.prev_time_micros = time;
    for (BlockTraceState& b : st.block_states) {
      if (!b.LoadState(r)) return r.status();
    }
    for (BlockParams& p : st.own_params) {
      if (!p.LoadState(r)) return r.status();
    }
    if (version >= 6) {
      for (ReturnVerifier& v : st.verifiers) {
        if (!v.LoadState(r)) return r.status();
      }
    } else {
      // One verifier per question, in question order: each joins its group.
      for (size_t qi = 0; qi < spec_.questions.size(); ++qi) {
        const auto [g, slot] = verifier_slot_[qi];
        ReturnVerifier& v = st.verifiers[g];
        QuestionVerification q;
        if (!ReturnVerifier::ReadLegacy(r, v.ring_capacity(), v.window_size(), &q)) {
          return r.status();
        }
        v.Adopt(slot, q);
      }
    }
    if (!r.GetVector(&st.behavior_counts, st.behavior_counts.size()) ||
        !r.Get(&st.feature_gap_frames) || !r.Get(&st.frames_applied)) {
      return r.status();
    }
    for (std::vector<double>& v : st.regression) {
      if (!r.GetVector(&v, v.size())) return r.status();
    }
    if (!r.GetVector(&st.regression_updates, st.regression_updates.size())) return r.status();
  }
  if (!r.done()) return bad("trailing bytes after the pool state");
  return absl::OkStatus();
}

}  // namespace bellwether
