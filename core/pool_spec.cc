#include "core/pool_spec.h"

#include "core/learners/block_learner.h"  // DirtyListCapacity, for the state estimate

#include <algorithm>
#include <cmath>
#include <functional>
#include <limits>
#include <utility>

#include "absl/container/flat_hash_map.h"
#include "absl/strings/match.h"
#include "absl/strings/str_cat.h"
#include "absl/strings/str_join.h"
#include "core/clock_signals.h"

namespace bellwether {
namespace {

constexpr size_t kMaxNameLength = 128;
constexpr uint32_t kMaxTableSize = 1u << 24;
constexpr uint64_t kMaxExactTiles = 1ull << 24;
constexpr int kMaxActions = 64;
constexpr double kProbabilityTolerance = 1e-6;

bool IsValidName(const std::string& name, bool allow_dash) {
  if (name.empty() || name.size() > kMaxNameLength) return false;
  for (char c : name) {
    const bool ok = (c >= 'a' && c <= 'z') || (c >= 'A' && c <= 'Z') || (c >= '0' && c <= '9') ||
                    c == '_' || c == '.' || (allow_dash && c == '-');
    if (!ok) return false;
  }
  return true;
}

class Compiler {
 public:
  explicit Compiler(const v1::PoolSpec& spec) : spec_(spec) {}

  absl::StatusOr<CompiledPoolSpec> Run() {
    if (!IsValidName(spec_.name(), /*allow_dash=*/true)) {
      return absl::InvalidArgumentError(absl::StrCat(
          "pool: name '", spec_.name(),
          "' must be 1..128 characters of letters, digits, '_', '-' and '.'"));
    }
    out_.proto = spec_;
    for (auto step : {&Compiler::CompileTimeZone, &Compiler::CompileSignals,
                      &Compiler::CompileActions, &Compiler::CompileFeatures,
                      &Compiler::CompileBehavior, &Compiler::CompileProgress,
                      &Compiler::CompileQuestions,
                      &Compiler::OrderQuestions, &Compiler::FormBlocks}) {
      if (absl::Status s = (this->*step)(); !s.ok()) return s;
    }
    out_.pooled = spec_.learning() == v1::PoolSpec::POOLED;
    return std::move(out_);
  }

 private:
  absl::Status Error(const std::string& field, const std::string& reason) const {
    return absl::InvalidArgumentError(
        absl::StrCat("pool ", spec_.name(), ": ", field, ": ", reason));
  }

  absl::Status CompileTimeZone() {
    const std::string name = spec_.time_zone().empty() ? "UTC" : spec_.time_zone();
    if (!absl::LoadTimeZone(name, &out_.time_zone)) {
      return Error("time_zone", absl::StrCat("'", name, "' is not a known IANA time zone"));
    }
    return absl::OkStatus();
  }

  absl::Status CompileSignals() {
    for (int i = 0; i < spec_.signals_size(); ++i) {
      const v1::SignalSpec& s = spec_.signals(i);
      const std::string field = absl::StrCat("signals[", i, "]");
      if (!IsValidName(s.name(), false)) {
        return Error(field, absl::StrCat("name '", s.name(),
                                         "' must be 1..128 letters, digits, '_' or '.'"));
      }
      if (absl::StartsWith(s.name(), "clock.")) {
        return Error(field, absl::StrCat("name '", s.name(),
                                         "': the prefix 'clock.' is reserved for derived "
                                         "clock signals"));
      }
      if (!std::isfinite(s.min()) || !std::isfinite(s.max()) || !(s.min() < s.max())) {
        return Error(field + " (" + s.name() + ")",
                     absl::StrCat("range [", s.min(), ", ", s.max(),
                                  "] is invalid: min and max must be finite with min < max"));
      }
      if (!signal_index_.emplace(s.name(), i).second) {
        return Error(field, absl::StrCat("signal '", s.name(), "' is declared twice"));
      }
      out_.signal_names.push_back(s.name());
      out_.signal_units.push_back(s.unit());
    }
    for (size_t c = 0; c < kNumClockSignals; ++c) {
      signal_index_.emplace(std::string(kClockSignalNames[c]), spec_.signals_size() + c);
    }
    return absl::OkStatus();
  }

  absl::Status CompileActions() {
    if (spec_.actions_size() > kMaxActions) {
      return Error("actions", absl::StrCat(spec_.actions_size(), " actions; at most ",
                                           kMaxActions, " are allowed"));
    }
    for (int i = 0; i < spec_.actions_size(); ++i) {
      const std::string& a = spec_.actions(i);
      if (!IsValidName(a, true)) {
        return Error(absl::StrCat("actions[", i, "]"), absl::StrCat("name '", a, "' is invalid"));
      }
      if (!action_index_.emplace(a, i).second) {
        return Error(absl::StrCat("actions[", i, "]"),
                     absl::StrCat("action '", a, "' is declared twice"));
      }
      out_.actions.push_back(a);
    }
    return absl::OkStatus();
  }

  // Resolves a list of signal names to extended-signal indices with their ranges.
  absl::Status ResolveSignals(const google::protobuf::RepeatedPtrField<std::string>& names,
                              const std::string& field, bool declared_only,
                              std::vector<size_t>* inputs, std::vector<double>* lo,
                              std::vector<double>* hi) {
    for (int s = 0; s < names.size(); ++s) {
      auto it = signal_index_.find(names[s]);
      const bool declared = it != signal_index_.end() &&
                            it->second < static_cast<size_t>(spec_.signals_size());
      if (it == signal_index_.end() || (declared_only && !declared)) {
        return Error(absl::StrCat(field, "[", s, "]"),
                     absl::StrCat("unknown signal '", names[s], "'"));
      }
      const size_t idx = it->second;
      inputs->push_back(idx);
      if (declared) {
        lo->push_back(spec_.signals(static_cast<int>(idx)).min());
        hi->push_back(spec_.signals(static_cast<int>(idx)).max());
      } else {
        lo->push_back(0.0);
        hi->push_back(kClockSignalMax[idx - spec_.signals_size()]);
      }
    }
    return absl::OkStatus();
  }

  absl::Status CompileFeatures() {
    if (spec_.features_size() == 0) {
      return Error("features", "the recipe is empty: declare at least one feature");
    }
    if (spec_.feature_table_size() > kMaxTableSize) {
      return Error("feature_table_size",
                   absl::StrCat(spec_.feature_table_size(), " exceeds the maximum ", kMaxTableSize));
    }
    std::vector<FeatureRecipe::TileGroup> tiles;
    std::vector<FeatureRecipe::RbfGroup> rbfs;
    std::vector<FeatureRecipe::RawGroup> raws;
    bool bias = false;
    uint64_t exact_tiles = 0, dense = 0;
    for (int i = 0; i < spec_.features_size(); ++i) {
      const v1::FeatureSpec& f = spec_.features(i);
      const std::string field = absl::StrCat("features[", i, "]");
      switch (f.kind_case()) {
        case v1::FeatureSpec::kBias:
          if (bias) return Error(field, "bias is declared twice");
          bias = true;
          ++dense;
          break;
        case v1::FeatureSpec::kTiles: {
          const v1::TileCoding& t = f.tiles();
          if (t.signals_size() < 1 || t.signals_size() > 8) {
            return Error(field + ".tiles.signals",
                         absl::StrCat("has ", t.signals_size(), " signals; 1..8 are allowed"));
          }
          if (t.tilings() < 1 || t.tilings() > 64) {
            return Error(field + ".tiles.tilings", absl::StrCat(t.tilings(), " is outside 1..64"));
          }
          if (t.tiles_per_dim() < 1 || t.tiles_per_dim() > 4096) {
            return Error(field + ".tiles.tiles_per_dim",
                         absl::StrCat(t.tiles_per_dim(), " is outside 1..4096"));
          }
          TileCoder::Options opt;
          opt.tilings = t.tilings();
          opt.tiles_per_dim = t.tiles_per_dim();
          opt.periodic = t.periodic();
          opt.group_id = static_cast<uint64_t>(i);
          std::vector<size_t> inputs;
          if (auto s = ResolveSignals(t.signals(), field + ".tiles.signals", false, &inputs,
                                      &opt.lo, &opt.hi);
              !s.ok()) {
            return s;
          }
          TileCoder coder(std::move(opt));
          exact_tiles += coder.num_tiles();
          if (spec_.feature_table_size() == 0 && exact_tiles > kMaxExactTiles) {
            return Error(field + ".tiles",
                         absl::StrCat("the recipe needs ", exact_tiles,
                                      " tiles; set feature_table_size (at most ", kMaxTableSize,
                                      ") to hash them"));
          }
          tiles.push_back({std::move(coder), std::move(inputs)});
          break;
        }
        case v1::FeatureSpec::kRbf: {
          const v1::RadialBasis& r = f.rbf();
          FeatureRecipe::RbfGroup g;
          if (r.signals_size() < 1 || r.signals_size() > 4) {
            return Error(field + ".rbf.signals",
                         absl::StrCat("has ", r.signals_size(), " signals; 1..4 are allowed"));
          }
          if (r.centers_per_dim() < 2 || r.centers_per_dim() > 64) {
            return Error(field + ".rbf.centers_per_dim",
                         absl::StrCat(r.centers_per_dim(), " is outside 2..64"));
          }
          if (auto s = ResolveSignals(r.signals(), field + ".rbf.signals", false, &g.inputs, &g.lo,
                                      &g.hi);
              !s.ok()) {
            return s;
          }
          g.centers_per_dim = r.centers_per_dim();
          if (g.num_centers() > 4096) {
            return Error(field + ".rbf", absl::StrCat(g.num_centers(),
                                                      " centers; at most 4096 are allowed"));
          }
          if (r.width() != 0 && !(r.width() > 0 && r.width() <= 1)) {
            return Error(field + ".rbf.width", absl::StrCat(r.width(), " is outside (0, 1]"));
          }
          g.width = r.width() == 0 ? 1.0 / r.centers_per_dim() : r.width();
          dense += g.num_centers();
          rbfs.push_back(std::move(g));
          break;
        }
        case v1::FeatureSpec::kRaw: {
          const v1::RawSignals& r = f.raw();
          FeatureRecipe::RawGroup g;
          if (r.signals_size() < 1) return Error(field + ".raw.signals", "is empty");
          if (auto s = ResolveSignals(r.signals(), field + ".raw.signals", true, &g.inputs, &g.lo,
                                      &g.hi);
              !s.ok()) {
            return s;
          }
          g.normalize = r.normalize();
          dense += g.inputs.size();
          raws.push_back(std::move(g));
          break;
        }
        case v1::FeatureSpec::KIND_NOT_SET:
          return Error(field, "no feature kind set (expected 'tiles', 'rbf', 'raw' or 'bias')");
      }
    }
    if (spec_.feature_table_size() != 0 && exact_tiles + dense > spec_.feature_table_size() &&
        dense >= spec_.feature_table_size()) {
      return Error("feature_table_size",
                   absl::StrCat(spec_.feature_table_size(), " leaves no room for hashed tiles: ",
                                dense, " entries are taken by RBF, raw and bias features"));
    }
    out_.recipe = std::make_shared<FeatureRecipe>(std::move(tiles), std::move(rbfs),
                                                  std::move(raws), bias, spec_.feature_table_size());
    return absl::OkStatus();
  }

  absl::Status CompileBehavior() {
    const v1::BehaviorSpec& b = spec_.behavior();
    if (!b.estimate()) {
      if (b.estimate_signals_size() > 0) {
        return Error("behavior.estimate_signals", "given, but behavior.estimate is false");
      }
      return absl::OkStatus();
    }
    if (spec_.actions_size() == 0) {
      return Error("behavior.estimate", "the pool declares no actions to estimate");
    }
    out_.estimate_behavior = true;
    const uint32_t cells = b.estimate_tiles_per_dim() == 0 ? 4 : b.estimate_tiles_per_dim();
    if (cells > 64) {
      return Error("behavior.estimate_tiles_per_dim", absl::StrCat(cells, " is outside 1..64"));
    }
    if (b.estimate_signals_size() > 4) {
      return Error("behavior.estimate_signals", "at most 4 signals are allowed");
    }
    TileCoder::Options opt;
    opt.tilings = 1;
    opt.tiles_per_dim = cells;
    if (auto s = ResolveSignals(b.estimate_signals(), "behavior.estimate_signals", false,
                                &out_.behavior_cell_inputs, &opt.lo, &opt.hi);
        !s.ok()) {
      return s;
    }
    out_.behavior_cells = std::make_shared<TileCoder>(std::move(opt));
    return absl::OkStatus();
  }

  absl::Status CompileProgress() {
    const v1::ProgressSpec& p = spec_.progress();
    if (p.decay() != 0.0 && !(p.decay() >= 0.5 && p.decay() < 1.0)) {
      return Error("progress.decay", absl::StrCat(p.decay(), " is outside [0.5, 1)"));
    }
    out_.progress_decay = p.decay() == 0.0 ? 0.999 : p.decay();
    if (p.verify_window() > 100000) {
      return Error("progress.verify_window", absl::StrCat(p.verify_window(), " exceeds 100000"));
    }
    if (p.verify_window() != 0) out_.verify_window = p.verify_window();
    if (p.verify_max_held() > 1000000) {
      return Error("progress.verify_max_held",
                   absl::StrCat(p.verify_max_held(), " exceeds 1000000"));
    }
    if (p.verify_max_held() != 0) out_.verify_max_held = p.verify_max_held();
    return absl::OkStatus();
  }

  absl::StatusOr<CompiledCondition> CompileCondition(const v1::Condition& c,
                                                     const std::string& field) {
    CompiledCondition out;
    auto it = signal_index_.find(c.signal());
    if (it == signal_index_.end() || it->second >= static_cast<size_t>(spec_.signals_size())) {
      return Error(field + ".signal", absl::StrCat("unknown signal '", c.signal(), "'"));
    }
    out.signal = it->second;
    if (c.op() == "<") {
      out.op = CompareOp::kLess;
    } else if (c.op() == "<=") {
      out.op = CompareOp::kLessEqual;
    } else if (c.op() == ">") {
      out.op = CompareOp::kGreater;
    } else if (c.op() == ">=") {
      out.op = CompareOp::kGreaterEqual;
    } else {
      return Error(field + ".op", absl::StrCat("'", c.op(), "' is not one of <, <=, >, >="));
    }
    if (!std::isfinite(c.threshold())) {
      return Error(field + ".threshold", "must be a finite number");
    }
    out.threshold = c.threshold();
    return out;
  }

  absl::StatusOr<uint32_t> ActionIndex(const std::string& name, const std::string& field) {
    auto it = action_index_.find(name);
    if (it == action_index_.end()) {
      return Error(field, absl::StrCat("unknown action '", name, "'"));
    }
    return static_cast<uint32_t>(it->second);
  }

  absl::Status CompileQuestions() {
    if (spec_.questions_size() == 0) {
      return Error("questions", "the pool asks no questions: declare at least one");
    }
    for (int i = 0; i < spec_.questions_size(); ++i) {
      const std::string& name = spec_.questions(i).name();
      if (!IsValidName(name, false)) {
        return Error(absl::StrCat("questions[", i, "]"),
                     absl::StrCat("name '", name, "' must be 1..128 letters, digits, '_' or '.'"));
      }
      if (!question_index_.emplace(name, i).second) {
        return Error(absl::StrCat("questions[", i, "] (", name, ")"),
                     "the name is used by another question");
      }
    }
    for (int t = 0; t < spec_.successor_tables_size(); ++t) {
      const std::string& name = spec_.successor_tables(t).name();
      const std::string field = absl::StrCat("successor_tables[", t, "]");
      if (!IsValidName(name, false)) {
        return Error(field, absl::StrCat("name '", name, "' must be 1..128 letters, digits, '_' or '.'"));
      }
      if (!table_index_.emplace(name, t).second) {
        return Error(field, absl::StrCat("table '", name, "' is declared twice"));
      }
      for (int k = 0; k < spec_.successor_tables(t).phi_size(); ++k) {
        if (question_index_.contains(absl::StrCat(name, ".phi", k))) {
          return Error(field, absl::StrCat("the name '", name, ".phi", k,
                                           "' of a table component is used by a question"));
        }
      }
    }
    for (int i = 0; i < spec_.questions_size(); ++i) {
      auto q = CompileQuestion(i);
      if (!q.ok()) return q.status();
      out_.questions.push_back(*std::move(q));
    }
    if (absl::Status s = CompileTables(); !s.ok()) return s;
    // Greedy targets must name control questions.
    for (size_t i = 0; i < out_.questions.size(); ++i) {
      const CompiledQuestion& q = out_.questions[i];
      if (q.policy.kind == PolicyKind::kGreedy && !out_.questions[q.policy.control_question].control) {
        return Error(absl::StrCat("questions (", q.name, ").policy.greedy"),
                     absl::StrCat("'", out_.questions[q.policy.control_question].name,
                                  "' is not a control question"));
      }
    }
    return absl::OkStatus();
  }

  absl::StatusOr<CompiledQuestion> CompileQuestion(int i) {
    const v1::QuestionSpec& q = spec_.questions(i);
    const std::string field = absl::StrCat("questions[", i, "] (", q.name(), ")");
    if (!q.successor_table().empty() || q.gpi_tables_size() > 0) {
      return CompileSuccessorQuestion(q, field);
    }
    return CompileQuestionSpec(q, field);
  }

  // A question answered from a successor table.
  absl::StatusOr<CompiledQuestion> CompileSuccessorQuestion(const v1::QuestionSpec& q,
                                                            const std::string& field) {
    std::vector<int> gpi;
    if (q.gpi_tables_size() > 0) {
      if (!q.successor_table().empty()) {
        return Error(field, "give successor_table or gpi_tables, not both");
      }
      for (int i = 0; i < q.gpi_tables_size(); ++i) {
        const std::string f = absl::StrCat(field, ".gpi_tables[", i, "]");
        auto t = table_index_.find(q.gpi_tables(i));
        if (t == table_index_.end()) {
          return Error(f, absl::StrCat("unknown successor table '", q.gpi_tables(i), "'"));
        }
        const v1::SuccessorTable& table = spec_.successor_tables(t->second);
        const v1::SuccessorTable& first = spec_.successor_tables(table_index_.at(q.gpi_tables(0)));
        if (table.learner() != v1::TREE_BACKUP) {
          return Error(f, absl::StrCat("table '", table.name(),
                                       "' must learn action values (learner TREE_BACKUP)"));
        }
        bool same_phi = table.phi_size() == first.phi_size() && table.gamma() == first.gamma();
        for (int k = 0; same_phi && k < table.phi_size(); ++k) {
          same_phi = table.phi(k).SerializeAsString() == first.phi(k).SerializeAsString();
        }
        if (!same_phi) {
          return Error(f, absl::StrCat("table '", table.name(), "' differs from '", first.name(),
                                       "' in phi or gamma"));
        }
        gpi.push_back(t->second);
      }
    }
    auto it = table_index_.find(gpi.empty() ? q.successor_table()
                                            : spec_.successor_tables(gpi[0]).name());
    if (it == table_index_.end()) {
      return Error(field + ".successor_table",
                   absl::StrCat("unknown successor table '", q.successor_table(), "'"));
    }
    const v1::SuccessorTable& table = spec_.successor_tables(it->second);
    if (q.gamma() != 0.0 && q.gamma() != table.gamma()) {
      return Error(field + ".gamma", absl::StrCat(q.gamma(), " differs from successor table '",
                                                  table.name(), "' (", table.gamma(), ")"));
    }
    if (q.has_policy() || q.terminate_when_size() > 0 || q.learner() != v1::LEARNER_UNSPECIFIED ||
        q.step_rule() != v1::STEP_RULE_UNSPECIFIED || q.control()) {
      return Error(field, "a successor-table question takes the table's policy, termination, "
                          "learner and step rule: leave them unset");
    }
    if (q.regression_step_size() != 0.0 &&
        !(q.regression_step_size() > 0.0 && q.regression_step_size() <= 1.0)) {
      return Error(field + ".regression_step_size",
                   absl::StrCat(q.regression_step_size(), " is outside (0, 1]"));
    }
    v1::QuestionSpec as_table = q;
    as_table.set_gamma(table.gamma());
    as_table.set_lambda(table.lambda());
    as_table.clear_successor_table();
    auto cq = CompileQuestionSpec(as_table, field);
    if (!cq.ok()) return cq.status();
    cq->successor = it->second;
    cq->gpi_tables = gpi;
    cq->regression_step_size = q.regression_step_size() == 0.0 ? 0.5 : q.regression_step_size();
    return cq;
  }

  // The tables' components become internal questions after the spec's questions.
  absl::Status CompileTables() {
    out_.num_visible_questions = out_.questions.size();
    for (int t = 0; t < spec_.successor_tables_size(); ++t) {
      const v1::SuccessorTable& table = spec_.successor_tables(t);
      const std::string field = absl::StrCat("successor_tables[", t, "] (", table.name(), ")");
      if (table.phi_size() < 1 || table.phi_size() > 64) {
        return Error(field + ".phi", absl::StrCat("has ", table.phi_size(),
                                                  " components; 1..64 are allowed"));
      }
      SuccessorTableSpec ts{table.name(), out_.questions.size(),
                            static_cast<size_t>(table.phi_size())};
      for (int k = 0; k < table.phi_size(); ++k) {
        const v1::Cumulant& phi = table.phi(k);
        if (phi.kind_case() != v1::Cumulant::kSignal &&
            phi.kind_case() != v1::Cumulant::kIndicator &&
            phi.kind_case() != v1::Cumulant::kConstant) {
          return Error(absl::StrCat(field, ".phi[", k, "]"),
                       "must be a signal, an indicator or a constant");
        }
        v1::QuestionSpec q;
        q.set_name(absl::StrCat(table.name(), ".phi", k));
        *q.mutable_cumulant() = phi;
        q.set_gamma(table.gamma());
        q.set_lambda(table.lambda());
        *q.mutable_terminate_when() = table.terminate_when();
        if (table.has_policy()) *q.mutable_policy() = table.policy();
        q.set_learner(table.learner());
        q.set_step_rule(table.step_rule());
        q.set_step_size(table.step_size());
        auto cq = CompileQuestionSpec(q, absl::StrCat(field, ".phi[", k, "]"));
        if (!cq.ok()) return cq.status();
        cq->internal = true;
        out_.questions.push_back(*std::move(cq));
      }
      out_.tables.push_back(std::move(ts));
    }
    // Successor questions depend on their table's components; nobody reads them.
    for (CompiledQuestion& q : out_.questions) {
      if (q.cumulant.kind == CumulantKind::kQuestion &&
          out_.questions[q.cumulant.question].successor >= 0) {
        return Error("questions (" + q.name + ").cumulant.question",
                     absl::StrCat("'", out_.questions[q.cumulant.question].name,
                                  "' is answered from a successor table and cannot be read"));
      }
    }
    return absl::OkStatus();
  }

  absl::StatusOr<CompiledQuestion> CompileQuestionSpec(const v1::QuestionSpec& q,
                                                       const std::string& field) {
    CompiledQuestion cq;
    cq.name = q.name();
    cq.control = q.control();
    std::string default_unit;
    switch (q.cumulant().kind_case()) {
      case v1::Cumulant::kSignal: {
        auto it = signal_index_.find(q.cumulant().signal());
        if (it == signal_index_.end() || it->second >= static_cast<size_t>(spec_.signals_size())) {
          return Error(field + ".cumulant.signal",
                       absl::StrCat("unknown signal '", q.cumulant().signal(), "'"));
        }
        cq.cumulant.kind = CumulantKind::kSignal;
        cq.cumulant.signal = it->second;
        default_unit = out_.signal_units[it->second];
        break;
      }
      case v1::Cumulant::kIndicator: {
        auto c = CompileCondition(q.cumulant().indicator(), field + ".cumulant.indicator");
        if (!c.ok()) return c.status();
        cq.cumulant.kind = CumulantKind::kIndicator;
        cq.cumulant.condition = *c;
        default_unit = "1";
        break;
      }
      case v1::Cumulant::kConstant:
        if (!std::isfinite(q.cumulant().constant())) {
          return Error(field + ".cumulant.constant", "must be a finite number");
        }
        cq.cumulant.kind = CumulantKind::kConstant;
        cq.cumulant.constant = q.cumulant().constant();
        break;
      case v1::Cumulant::kFramePeriod:
        if (!q.cumulant().frame_period()) {
          return Error(field + ".cumulant.frame_period", "must be true when given");
        }
        cq.cumulant.kind = CumulantKind::kFramePeriod;
        default_unit = "s";
        break;
      case v1::Cumulant::kQuestion: {
        auto it = question_index_.find(q.cumulant().question());
        if (it == question_index_.end()) {
          return Error(field + ".cumulant.question",
                       absl::StrCat("unknown question '", q.cumulant().question(), "'"));
        }
        cq.cumulant.kind = CumulantKind::kQuestion;
        cq.cumulant.question = static_cast<size_t>(it->second);
        break;
      }
      case v1::Cumulant::KIND_NOT_SET:
        return Error(field + ".cumulant",
                     "no cumulant set (expected signal, indicator, constant, frame_period or "
                     "question)");
    }
    if (!(q.gamma() >= 0.0 && q.gamma() <= 1.0)) {
      return Error(field + ".gamma", absl::StrCat(q.gamma(), " is outside [0, 1]"));
    }
    if (!(q.lambda() >= 0.0 && q.lambda() <= 1.0)) {
      return Error(field + ".lambda", absl::StrCat(q.lambda(), " is outside [0, 1]"));
    }
    cq.gamma = q.gamma();
    cq.lambda = q.lambda();
    for (int t = 0; t < q.terminate_when_size(); ++t) {
      auto c = CompileCondition(q.terminate_when(t), absl::StrCat(field, ".terminate_when[", t, "]"));
      if (!c.ok()) return c.status();
      cq.terminate_when.push_back(*c);
    }
    // Target policy.
    const v1::TargetPolicy& p = q.policy();
    const bool names_actions = p.kind_case() == v1::TargetPolicy::kAction ||
                               p.kind_case() == v1::TargetPolicy::kDistribution;
    if (names_actions && out_.actions.empty()) {
      return Error(field + ".policy", "needs actions: declare the pool's actions");
    }
    switch (p.kind_case()) {
      case v1::TargetPolicy::KIND_NOT_SET:
        cq.policy.kind = PolicyKind::kBehavior;
        break;
      case v1::TargetPolicy::kBehavior:
        cq.policy.kind = PolicyKind::kBehavior;
        break;
      case v1::TargetPolicy::kAction: {
        auto a = ActionIndex(p.action(), field + ".policy.action");
        if (!a.ok()) return a.status();
        cq.policy.kind = PolicyKind::kAction;
        cq.policy.action = *a;
        break;
      }
      case v1::TargetPolicy::kDistribution: {
        cq.policy.kind = PolicyKind::kDistribution;
        cq.policy.probabilities.assign(out_.actions.size(), 0.0);
        double sum = 0;
        for (const auto& [name, prob] : p.distribution().probabilities()) {
          auto a = ActionIndex(name, field + ".policy.distribution");
          if (!a.ok()) return a.status();
          if (!(prob >= 0.0 && prob <= 1.0)) {
            return Error(field + ".policy.distribution",
                         absl::StrCat("probability of '", name, "' is ", prob,
                                      ", outside [0, 1]"));
          }
          cq.policy.probabilities[*a] = prob;
          sum += prob;
        }
        if (std::fabs(sum - 1.0) > kProbabilityTolerance) {
          return Error(field + ".policy.distribution",
                       absl::StrCat("probabilities sum to ", sum, ", not 1"));
        }
        break;
      }
      case v1::TargetPolicy::kGreedy: {
        auto it = question_index_.find(p.greedy());
        if (it == question_index_.end()) {
          return Error(field + ".policy.greedy", absl::StrCat("unknown question '", p.greedy(), "'"));
        }
        cq.policy.kind = PolicyKind::kGreedy;
        cq.policy.control_question = static_cast<size_t>(it->second);
        break;
      }
    }
    const bool off_policy = cq.policy.kind != PolicyKind::kBehavior;
    // Learner.
    switch (q.learner()) {
      case v1::LEARNER_UNSPECIFIED:
      case v1::TD: cq.learner = LearnerKind::kTd; break;
      case v1::TRUE_ONLINE_TD: cq.learner = LearnerKind::kTrueOnlineTd; break;
      case v1::TDC: cq.learner = LearnerKind::kTdc; break;
      case v1::EMPHATIC_TD: cq.learner = LearnerKind::kEmphaticTd; break;
      case v1::TREE_BACKUP: cq.learner = LearnerKind::kTreeBackup; break;
      default:
        return Error(field + ".learner", absl::StrCat("unknown learner ", q.learner()));
    }
    if (cq.control) {
      if (q.learner() != v1::LEARNER_UNSPECIFIED) {
        return Error(field + ".learner",
                     "a control question learns by Q(lambda); leave the learner unset");
      }
      if (q.has_policy()) {
        return Error(field + ".policy",
                     "a control question's target is greedy with respect to itself; leave the "
                     "policy unset");
      }
      cq.learner = LearnerKind::kQLambda;
    }
    const bool action_valued =
        cq.learner == LearnerKind::kTreeBackup || cq.learner == LearnerKind::kQLambda;
    if (q.centered()) {
      if (action_valued) {
        return Error(field + ".centered", "centering needs state values (not a control or "
                                          "TREE_BACKUP question)");
      }
      if (!cq.terminate_when.empty() || cq.gamma >= 1.0) {
        return Error(field + ".centered", "centering needs a constant continuation gamma < 1 "
                                          "and no terminate_when");
      }
      cq.centered = true;
    }
    if ((off_policy || action_valued) && out_.actions.empty()) {
      return Error(field, "needs actions: declare the pool's actions");
    }
    if (cq.learner == LearnerKind::kTrueOnlineTd && off_policy) {
      return Error(field + ".learner", "TRUE_ONLINE_TD is on-policy only (policy must be the "
                                       "behavior)");
    }
    // Step sizes.
    const bool fixed_only = cq.learner == LearnerKind::kTrueOnlineTd || cq.learner == LearnerKind::kTdc;
    switch (q.step_rule()) {
      case v1::STEP_RULE_UNSPECIFIED:
        cq.step_rule = fixed_only ? StepRuleKind::kFixed : StepRuleKind::kAutostep;
        break;
      case v1::FIXED: cq.step_rule = StepRuleKind::kFixed; break;
      case v1::AUTOSTEP: cq.step_rule = StepRuleKind::kAutostep; break;
      case v1::TIDBD: cq.step_rule = StepRuleKind::kTidbd; break;
      case v1::SETTLING: cq.step_rule = StepRuleKind::kSettling; break;
      default:
        return Error(field + ".step_rule", absl::StrCat("unknown step rule ", q.step_rule()));
    }
    if (fixed_only && cq.step_rule != StepRuleKind::kFixed) {
      return Error(field + ".step_rule", "this learner supports only FIXED step sizes");
    }
    auto check_step = [&](double v, const char* name, double* out, double max = 1.0) -> absl::Status {
      if (v != 0.0 && !(v > 0.0 && v <= max)) {
        return Error(field + "." + name, absl::StrCat(v, " is outside (0, ", max, "]"));
      }
      *out = v == 0.0 ? kDefaultStepSize : v;
      return absl::OkStatus();
    };
    // Autostep's normalization keeps any initial step safe, so it may start large.
    const double max_step = cq.step_rule == StepRuleKind::kAutostep ? 100.0 : 1.0;
    if (auto s = check_step(q.step_size(), "step_size", &cq.step_size, max_step); !s.ok()) {
      return s;
    }
    if (auto s = check_step(q.secondary_step_size(), "secondary_step_size", &cq.secondary_step_size);
        !s.ok()) {
      return s;
    }
    if (q.secondary_step_size() == 0.0) cq.secondary_step_size = cq.step_size;
    if (auto s = check_step(q.meta_step_size(), "meta_step_size", &cq.meta_step_size); !s.ok()) {
      return s;
    }
    if (q.meta_step_size() == 0.0) cq.meta_step_size = kDefaultMetaStepSize;
    if (q.rho_clip() != 0.0 && !(q.rho_clip() >= 1.0 && std::isfinite(q.rho_clip()))) {
      return Error(field + ".rho_clip", absl::StrCat(q.rho_clip(), " must be >= 1 (or 0: none)"));
    }
    cq.rho_clip = q.rho_clip();
    if (q.unit().empty()) {
      cq.unit = default_unit;
    } else {
      cq.unit = q.unit();
    }
    return cq;
  }

  // Levels from question dependencies (cumulant reads, greedy targets); names a cycle.
  absl::Status OrderQuestions() {
    const size_t n = out_.questions.size();
    std::vector<int> state(n, 0);  // 0 new, 1 on the path, 2 done
    std::vector<size_t> path;
    std::function<absl::Status(size_t)> visit = [&](size_t i) -> absl::Status {
      if (state[i] == 2) return absl::OkStatus();
      if (state[i] == 1) {
        std::vector<std::string> names;
        bool on = false;
        for (size_t p : path) {
          on |= (p == i);
          if (on) names.push_back(out_.questions[p].name);
        }
        names.push_back(out_.questions[i].name);
        return Error("questions", absl::StrCat("cycle ", absl::StrJoin(names, " -> ")));
      }
      state[i] = 1;
      path.push_back(i);
      CompiledQuestion& q = out_.questions[i];
      int level = 0;
      std::vector<size_t> deps;
      if (q.cumulant.kind == CumulantKind::kQuestion) deps.push_back(q.cumulant.question);
      if (q.policy.kind == PolicyKind::kGreedy) deps.push_back(q.policy.control_question);
      if (q.successor >= 0) {
        std::vector<int> tables = q.gpi_tables;
        if (tables.empty()) tables.push_back(q.successor);
        for (int ti : tables) {
          const SuccessorTableSpec& t = out_.tables[static_cast<size_t>(ti)];
          for (size_t k = 0; k < t.count; ++k) deps.push_back(t.first + k);
        }
      }
      for (size_t d : deps) {
        if (absl::Status s = visit(d); !s.ok()) return s;
        level = std::max(level, out_.questions[d].level + 1);
      }
      q.level = level;
      path.pop_back();
      state[i] = 2;
      return absl::OkStatus();
    };
    for (size_t i = 0; i < n; ++i) {
      if (absl::Status s = visit(i); !s.ok()) return s;
    }
    return absl::OkStatus();
  }

  absl::Status FormBlocks() {
    int max_level = 0;
    for (const CompiledQuestion& q : out_.questions) max_level = std::max(max_level, q.level);
    for (int level = 0; level <= max_level; ++level) {
      for (size_t qi = 0; qi < out_.questions.size(); ++qi) {
        CompiledQuestion& q = out_.questions[qi];
        if (q.level != level) continue;
        if (q.successor >= 0) {
          q.block = std::numeric_limits<size_t>::max();
          continue;
        }
        const double shared = q.learner == LearnerKind::kTrueOnlineTd ? q.step_size : 0.0;
        size_t b = 0;
        for (; b < out_.blocks.size(); ++b) {
          const BlockSpec& k = out_.blocks[b];
          if (!q.control && k.level == level && k.policy == q.policy && k.gamma == q.gamma &&
              k.terminate_when == q.terminate_when && k.lambda == q.lambda &&
              k.learner == q.learner && k.step_rule == q.step_rule &&
              k.shared_step_size == shared && k.centered == q.centered) {
            break;
          }
        }
        if (b == out_.blocks.size()) {
          BlockSpec k;
          k.policy = q.policy;
          k.gamma = q.gamma;
          k.terminate_when = q.terminate_when;
          k.lambda = q.lambda;
          k.learner = q.learner;
          k.step_rule = q.step_rule;
          k.shared_step_size = shared;
          k.centered = q.centered;
          k.level = level;
          k.action_valued =
              q.learner == LearnerKind::kTreeBackup || q.learner == LearnerKind::kQLambda;
          k.progress_decay = out_.progress_decay;
          k.rupee = !spec_.progress().disable_rupee();
          out_.blocks.push_back(std::move(k));
          if (q.control) out_.blocks.back().questions.reserve(1);
        }
        q.block = b;
        q.index_in_block = out_.blocks[b].questions.size();
        out_.blocks[b].questions.push_back(qi);
        if (q.control) {
          // Control questions never share: mark the block so no later question joins it.
          out_.blocks[b].level = -1 - level;
        }
      }
    }
    for (BlockSpec& b : out_.blocks) {
      if (b.level < 0) b.level = -1 - b.level;
    }
    return absl::OkStatus();
  }

  const v1::PoolSpec& spec_;
  CompiledPoolSpec out_;
  absl::flat_hash_map<std::string, size_t> signal_index_;
  absl::flat_hash_map<std::string, int> action_index_;
  absl::flat_hash_map<std::string, int> question_index_;
  absl::flat_hash_map<std::string, int> table_index_;
};

}  // namespace

bool CompiledCondition::Holds(double value) const {
  switch (op) {
    case CompareOp::kLess: return value < threshold;
    case CompareOp::kLessEqual: return value <= threshold;
    case CompareOp::kGreater: return value > threshold;
    case CompareOp::kGreaterEqual: return value >= threshold;
  }
  return false;
}

size_t CompiledPoolSpec::num_extended_signals() const {
  return signal_names.size() + kNumClockSignals;
}

bool CompiledPoolSpec::needs_actions() const {
  for (const BlockSpec& b : blocks) {
    if (b.action_valued || b.policy.kind != PolicyKind::kBehavior) return true;
  }
  return false;
}

}  // namespace bellwether

namespace bellwether {

absl::StatusOr<CompiledPoolSpec> CompilePoolSpec(const v1::PoolSpec& spec) {
  return Compiler(spec).Run();
}

StateEstimate EstimateState(const CompiledPoolSpec& spec) {
  StateEstimate e;
  const uint64_t actions = std::max<uint64_t>(spec.actions.size(), 1);
  uint64_t blocks = 0;
  for (const BlockSpec& b : spec.blocks) {
    const uint64_t rows = uint64_t{spec.recipe->num_features()} * (b.action_valued ? actions : 1);
    const uint64_t cells = rows * b.questions.size();
    // Weights and their sound copy; TDC's secondary weights; per-weight step state; RUPEE.
    uint64_t arrays = 2;
    if (b.learner == LearnerKind::kTdc) ++arrays;
    if (b.step_rule == StepRuleKind::kAutostep) arrays += 3;
    if (b.step_rule == StepRuleKind::kTidbd) arrays += 2;
    if (b.step_rule == StepRuleKind::kSettling) arrays += 1;
    if (b.rupee) arrays += 2;
    blocks += cells * arrays * sizeof(float);
    // The guard's dirty-row bookkeeping: a bit per row and a list of written rows.
    blocks += (rows + 63) / 64 * 8 + uint64_t{DirtyListCapacity(static_cast<uint32_t>(rows))} * 4;
    e.per_stream_bytes += rows * sizeof(float);  // the block's dense trace
    // The lazy kernel of a per-stream FIXED TD block (BlockTraceState): 32 bytes of row
    // and heap state per row, two epochs of 129 running-sum vectors.
    if (!spec.pooled && b.learner == LearnerKind::kTd && b.step_rule == StepRuleKind::kFixed &&
        !b.action_valued && !b.rupee && b.questions.size() >= 32) {
      e.per_stream_bytes += rows * 32 + 2 * 129 * b.questions.size() * sizeof(double);
    }
  }
  for (const CompiledQuestion& q : spec.questions) {
    // Verifier rings: held predictions up to the horizon and the verified window.
    uint64_t horizon = 0;
    double d = 1.0;
    while (d >= 1e-3 && horizon < spec.verify_max_held) {
      d *= q.gamma;
      ++horizon;
    }
    e.per_stream_bytes += (horizon + 1) * 64 + spec.verify_window * 32;
  }
  if (spec.pooled) {
    e.shared_bytes += blocks;
  } else {
    e.per_stream_bytes += blocks;
  }
  return e;
}

}  // namespace bellwether
