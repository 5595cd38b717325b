#include "core/pool_spec.h"

#include <cmath>
#include <utility>

#include "absl/container/flat_hash_map.h"
#include "absl/strings/match.h"
#include "absl/strings/str_cat.h"
#include "core/clock_signals.h"

namespace bellwether {
namespace {

constexpr size_t kMaxNameLength = 128;
constexpr uint32_t kMaxTableSize = 1u << 24;
constexpr uint64_t kMaxExactTiles = 1ull << 24;

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
    if (auto s = CompileTimeZone(); !s.ok()) return s;
    if (auto s = CompileSignals(); !s.ok()) return s;
    if (auto s = CompileFeatures(); !s.ok()) return s;
    if (auto s = CompileQuestions(); !s.ok()) return s;
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

  absl::Status CompileFeatures() {
    if (spec_.features_size() == 0) {
      return Error("features", "the recipe is empty: declare at least one feature");
    }
    if (spec_.feature_table_size() > kMaxTableSize) {
      return Error("feature_table_size",
                   absl::StrCat(spec_.feature_table_size(), " exceeds the maximum ", kMaxTableSize));
    }
    std::vector<FeatureRecipe::TileGroup> groups;
    bool bias = false;
    uint64_t exact_tiles = 0;
    for (int i = 0; i < spec_.features_size(); ++i) {
      const v1::FeatureSpec& f = spec_.features(i);
      const std::string field = absl::StrCat("features[", i, "]");
      switch (f.kind_case()) {
        case v1::FeatureSpec::kBias:
          if (bias) return Error(field, "bias is declared twice");
          bias = true;
          break;
        case v1::FeatureSpec::kTiles: {
          const v1::TileCoding& t = f.tiles();
          if (t.signals_size() < 1 || t.signals_size() > 8) {
            return Error(field + ".tiles.signals",
                         absl::StrCat("has ", t.signals_size(), " signals; 1..8 are allowed"));
          }
          if (t.tilings() < 1 || t.tilings() > 64) {
            return Error(field + ".tiles.tilings",
                         absl::StrCat(t.tilings(), " is outside 1..64"));
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
          for (int s = 0; s < t.signals_size(); ++s) {
            auto it = signal_index_.find(t.signals(s));
            if (it == signal_index_.end()) {
              return Error(absl::StrCat(field, ".tiles.signals[", s, "]"),
                           absl::StrCat("unknown signal '", t.signals(s), "'"));
            }
            const size_t idx = it->second;
            inputs.push_back(idx);
            if (idx < static_cast<size_t>(spec_.signals_size())) {
              opt.lo.push_back(spec_.signals(static_cast<int>(idx)).min());
              opt.hi.push_back(spec_.signals(static_cast<int>(idx)).max());
            } else {
              opt.lo.push_back(0.0);
              opt.hi.push_back(kClockSignalMax[idx - spec_.signals_size()]);
            }
          }
          TileCoder coder(std::move(opt));
          exact_tiles += coder.num_tiles();
          if (spec_.feature_table_size() == 0 && exact_tiles > kMaxExactTiles) {
            return Error(field + ".tiles",
                         absl::StrCat("the recipe needs ", exact_tiles,
                                      " tiles; set feature_table_size (at most ", kMaxTableSize,
                                      ") to hash them"));
          }
          groups.push_back({std::move(coder), std::move(inputs)});
          break;
        }
        case v1::FeatureSpec::KIND_NOT_SET:
          return Error(field, "no feature kind set (expected 'tiles' or 'bias')");
      }
    }
    out_.recipe = std::make_shared<FeatureRecipe>(std::move(groups), bias,
                                                  spec_.feature_table_size());
    return absl::OkStatus();
  }

  absl::Status CompileQuestions() {
    if (spec_.questions_size() == 0) {
      return Error("questions", "the pool asks no questions: declare at least one");
    }
    absl::flat_hash_map<std::string, int> names;
    for (int i = 0; i < spec_.questions_size(); ++i) {
      const v1::QuestionSpec& q = spec_.questions(i);
      std::string field = absl::StrCat("questions[", i, "]");
      if (!IsValidName(q.name(), false)) {
        return Error(field, absl::StrCat("name '", q.name(),
                                         "' must be 1..128 letters, digits, '_' or '.'"));
      }
      field += " (" + q.name() + ")";
      if (!names.emplace(q.name(), i).second) {
        return Error(field, "the name is used by another question");
      }
      CompiledQuestion cq;
      cq.name = q.name();
      switch (q.cumulant().kind_case()) {
        case v1::Cumulant::kSignal: {
          auto it = signal_index_.find(q.cumulant().signal());
          if (it == signal_index_.end() || it->second >= static_cast<size_t>(spec_.signals_size())) {
            return Error(field + ".cumulant.signal",
                         absl::StrCat("unknown signal '", q.cumulant().signal(), "'"));
          }
          cq.cumulant_signal = it->second;
          break;
        }
        case v1::Cumulant::KIND_NOT_SET:
          return Error(field + ".cumulant", "no cumulant set (expected 'signal')");
      }
      if (!(q.gamma() >= 0.0 && q.gamma() <= 1.0)) {
        return Error(field + ".gamma", absl::StrCat(q.gamma(), " is outside [0, 1]"));
      }
      if (!(q.lambda() >= 0.0 && q.lambda() <= 1.0)) {
        return Error(field + ".lambda", absl::StrCat(q.lambda(), " is outside [0, 1]"));
      }
      if (q.step_size() != 0.0 && !(q.step_size() > 0.0 && q.step_size() <= 1.0)) {
        return Error(field + ".step_size", absl::StrCat(q.step_size(), " is outside (0, 1]"));
      }
      cq.gamma = q.gamma();
      cq.lambda = q.lambda();
      cq.step_size = q.step_size() == 0.0 ? kDefaultStepSize : q.step_size();
      cq.unit = q.unit().empty() ? out_.signal_units[cq.cumulant_signal] : q.unit();
      // Group into blocks by (gamma, lambda).
      size_t b = 0;
      for (; b < out_.blocks.size(); ++b) {
        if (out_.blocks[b].gamma == cq.gamma && out_.blocks[b].lambda == cq.lambda) break;
      }
      if (b == out_.blocks.size()) out_.blocks.push_back({cq.gamma, cq.lambda, {}});
      cq.block = b;
      cq.index_in_block = out_.blocks[b].questions.size();
      out_.blocks[b].questions.push_back(out_.questions.size());
      out_.questions.push_back(std::move(cq));
    }
    return absl::OkStatus();
  }

  const v1::PoolSpec& spec_;
  CompiledPoolSpec out_;
  absl::flat_hash_map<std::string, size_t> signal_index_;
};

}  // namespace

size_t CompiledPoolSpec::num_extended_signals() const {
  return signal_names.size() + kNumClockSignals;
}

absl::StatusOr<CompiledPoolSpec> CompilePoolSpec(const v1::PoolSpec& spec) {
  return Compiler(spec).Run();
}

}  // namespace bellwether
