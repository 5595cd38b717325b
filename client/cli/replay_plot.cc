#include "client/cli/replay_plot.h"

#include <algorithm>
#include <array>
#include <cmath>
#include <cstdint>
#include <limits>
#include <string>
#include <vector>

#include "absl/strings/str_cat.h"
#include "absl/strings/str_format.h"
#include "absl/strings/str_join.h"
#include "absl/time/time.h"
#include "core/pool_spec.h"

// Machine-readable attributes (used by tests/integration/cli_plot_test.py):
//   svg:             data-rows, data-questions, data-score-from-row
//   g.panel:         data-question, data-kind ("return" or "probability")
//   text.panel-title data-nrmse, data-scored-rows (the question's verified score)
//   g.timeseries:    data-x-kind ("time" or "row"), data-x0, data-x1 (x domain: row
//                    numbers, or seconds since 1970-01-01 of the rows' clock), data-left,
//                    data-width (pixels: row r lies in pixel column
//                    floor((x_r - x0) / (x1 - x0) * width), clamped, drawn at
//                    left + column + 0.5), data-y0, data-y1 (y domain, bottom to top),
//                    data-top, data-height
//   path.series:     data-series, data-points (raw points drawn), data-min, data-max,
//                    data-first-row, data-last-row
//   rect.scored-period: data-from-row, data-to-row, data-rows
//   g.cal-bin:       data-bin, data-lower, data-count, data-mean-predicted,
//                    data-observed
namespace bellwether::cli {
namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();

// Page geometry (pixels).
constexpr int kWidth = 1200;
constexpr int kPanelX = 16;
constexpr int kPanelWidth = kWidth - 2 * kPanelX;
constexpr int kHeaderHeight = 108;
constexpr int kPanelGap = 14;
constexpr int kPlotTop = 96;  // within a panel
constexpr int kPlotHeight = 220;
constexpr int kPanelHeight = kPlotTop + kPlotHeight + 52;
constexpr int kPlotLeft = kPanelX + 92;
constexpr int kPlotRightPad = 22;
constexpr int kCalSide = kPlotHeight;  // the calibration chart is square
constexpr int kCalGap = 84;            // between the time series and the calibration chart
constexpr int kFooterHeight = 62;

// Our palette (the status page's): ink, muted text, rules, series.
constexpr char kInk[] = "#1d232d";
constexpr char kMuted[] = "#5d6573";
constexpr char kRule[] = "#d8d2c3";
constexpr char kGrid[] = "#e6e1d4";
constexpr char kPanelBg[] = "#fffdf7";
constexpr char kPageBg[] = "#f3f1ea";
constexpr char kPred[] = "#2b56a8";
constexpr char kReal[] = "#a8461d";
constexpr char kBrass[] = "#c8892b";
constexpr char kPersistence[] = "#8a8f98";
constexpr char kLastWeek[] = "#3d7d4c";

std::string Esc(absl::string_view s) {
  std::string out;
  out.reserve(s.size());
  for (char c : s) {
    switch (c) {
      case '&':
        out += "&amp;";
        break;
      case '<':
        out += "&lt;";
        break;
      case '>':
        out += "&gt;";
        break;
      case '"':
        out += "&quot;";
        break;
      case '\'':
        out += "&apos;";
        break;
      default:
        out += c;
    }
  }
  return out;
}

// Pixel coordinates: one decimal is plenty.
std::string Px(double v) { return absl::StrFormat("%.1f", v); }

// A value for a data-* attribute: round-trips a double.
std::string Num(double v) { return absl::StrFormat("%.17g", v); }

// `v` with `decimals` decimals and thousands separators (1,234,567.5).
std::string FormatNumber(double v, int decimals) {
  std::string s = absl::StrFormat("%.*f", decimals, v);
  if (s == "-0" || s.rfind("-0.", 0) == 0) {
    bool zero = true;
    for (char c : s) zero &= (c == '-' || c == '0' || c == '.');
    if (zero) s.erase(0, 1);
  }
  const size_t start = (s[0] == '-') ? 1 : 0;
  size_t end = s.find('.');
  if (end == std::string::npos) end = s.size();
  if (end - start >= 4) {
    for (size_t i = end; i > start + 3; i -= 3) s.insert(i - 3, ",");
  }
  return s;
}

std::string FormatCount(uint64_t n) { return FormatNumber(static_cast<double>(n), 0); }

// A value in a sentence: about four significant digits, separators for large values.
std::string FormatValue(double v) {
  const double a = std::fabs(v);
  if (a >= 1000) return FormatNumber(v, 0);
  if (a >= 100) return FormatNumber(v, 1);
  if (a >= 1) return FormatNumber(v, 2);
  return absl::StrFormat("%.3g", v);
}

// 1, 2 or 5 times a power of ten, about range / target.
double NiceStep(double range, double target) {
  if (!(range > 0) || !(target > 0)) return 1.0;
  const double raw = range / target;
  const double mag = std::pow(10.0, std::floor(std::log10(raw)));
  const double norm = raw / mag;
  const double f = norm < 1.5 ? 1 : norm < 3 ? 2 : norm < 7 ? 5 : 10;
  return f * mag;
}

int DecimalsFor(double step) {
  return std::max(0, static_cast<int>(std::ceil(-std::log10(step) - 1e-9)));
}

struct Tick {
  double value;
  std::string label;
  bool major = false;  // e.g. a day boundary on an hourly axis
};

struct LinearScale {
  double d0 = 0, d1 = 1;  // domain
  double p0 = 0, p1 = 1;  // pixels
  double Map(double v) const { return p0 + (v - d0) / (d1 - d0) * (p1 - p0); }
};

// Nice bounds and ticks covering [lo, hi].
LinearScale NiceY(double lo, double hi, double top, double bottom, std::vector<Tick>* ticks) {
  if (!std::isfinite(lo) || !std::isfinite(hi)) lo = 0, hi = 1;
  if (hi - lo <= 0) {
    const double pad = std::max(std::fabs(lo) * 0.05, 1e-9);
    lo -= pad;
    hi += pad;
  }
  const double step = NiceStep(hi - lo, 5);
  LinearScale s;
  s.d0 = std::floor(lo / step + 1e-9) * step;
  s.d1 = std::ceil(hi / step - 1e-9) * step;
  s.p0 = bottom;
  s.p1 = top;
  const int decimals = DecimalsFor(step);
  for (int k = 0;; ++k) {
    const double v = s.d0 + k * step;
    if (v > s.d1 + step * 1e-6) break;
    ticks->push_back({v, FormatNumber(v, decimals)});
  }
  return s;
}

std::vector<Tick> RowTicks(double first, double last, int max_ticks) {
  std::vector<Tick> out;
  const double step = std::max(1.0, NiceStep(last - first, max_ticks));
  for (double v = std::ceil(first / step) * step; v <= last + 1e-9; v += step) {
    out.push_back({v, FormatNumber(v, 0)});
  }
  return out;
}

constexpr std::array<const char*, 12> kMonths = {"Jan", "Feb", "Mar", "Apr", "May", "Jun",
                                                 "Jul", "Aug", "Sep", "Oct", "Nov", "Dec"};

std::string DayLabel(const absl::CivilSecond& c, bool with_year) {
  std::string s = absl::StrCat(c.day(), " ", kMonths[static_cast<size_t>(c.month() - 1)]);
  if (with_year) absl::StrAppend(&s, " ", c.year());
  return s;
}

// Ticks at round civil times of `zone` within [t0, t1] (seconds since the epoch).
std::vector<Tick> TimeTicks(double t0, double t1, const absl::TimeZone& zone, int max_ticks) {
  std::vector<Tick> out;
  const double span = std::max(t1 - t0, 1.0);
  constexpr std::array<int64_t, 21> kSteps = {1,     2,     5,     10,    15,     30,     60,
                                              120,   300,   600,   900,   1800,   3600,   7200,
                                              10800, 21600, 43200, 86400, 172800, 604800, 1209600};
  int64_t step = 0;
  for (int64_t s : kSteps) {
    if (span / static_cast<double>(s) <= max_ticks) {
      step = s;
      break;
    }
  }
  const absl::Time start = absl::FromUnixMicros(static_cast<int64_t>(std::floor(t0 * 1e6)));
  const absl::Time end = absl::FromUnixMicros(static_cast<int64_t>(std::ceil(t1 * 1e6)));
  const absl::CivilSecond c0 = absl::ToCivilSecond(start, zone);
  bool first = true;
  auto add = [&](const absl::CivilSecond& c, const std::string& label, bool major) {
    const absl::Time t = absl::FromCivil(c, zone);
    if (t < start || t > end) return;
    out.push_back({absl::ToUnixMicros(t) * 1e-6, label, major});
    first = false;
  };
  if (step == 0) {  // months or years
    const double months_span = span / (30.44 * 86400);
    int months = 1;
    for (int m : {1, 2, 3, 6, 12, 24, 60, 120}) {
      months = m;
      if (months_span / m <= max_ticks) break;
    }
    absl::CivilMonth m(c0);
    const int64_t index = m.year() * 12 + (m.month() - 1);
    m -= index % months;
    for (int guard = 0; guard < 1000; ++guard, m += months) {
      const absl::CivilSecond c(m);
      if (absl::FromCivil(c, zone) > end) break;
      add(c,
          months >= 12 ? absl::StrCat(c.year())
                       : absl::StrCat(kMonths[static_cast<size_t>(c.month() - 1)], " ", c.year()),
          c.month() == 1);
    }
    return out;
  }
  if (step >= 86400) {
    const int64_t days = step / 86400;
    absl::CivilDay d(c0);
    if (days == 7 || days == 14) {
      while (absl::GetWeekday(d) != absl::Weekday::monday) --d;  // weeks start on Monday
    } else {
      d -= (d - absl::CivilDay(1970, 1, 1)) % days;
    }
    for (int guard = 0; guard < 1000; ++guard, d += days) {
      const absl::CivilSecond c(d);
      if (absl::FromCivil(c, zone) > end) break;
      add(c, DayLabel(c, first || (c.month() == 1 && c.day() <= days)), false);
    }
    return out;
  }
  const absl::CivilSecond day_start = absl::CivilSecond(absl::CivilDay(c0));
  absl::CivilSecond c = day_start + ((c0 - day_start) / step) * step;
  for (int guard = 0; guard < 2000; ++guard, c += step) {
    if (absl::FromCivil(c, zone) > end) break;
    const bool midnight = c.hour() == 0 && c.minute() == 0 && c.second() == 0;
    std::string label = midnight || first ? DayLabel(c, first) : "";
    if (!midnight) {
      if (!label.empty()) label += " ";
      label += step < 60 ? absl::StrFormat("%02d:%02d:%02d", c.hour(), c.minute(), c.second())
                         : absl::StrFormat("%02d:%02d", c.hour(), c.minute());
    }
    add(c, label, midnight);
  }
  return out;
}

// One series reduced to at most two vertices (its minimum and maximum, in row order) per
// pixel column; a missing value or a gap in the rows starts a new subpath.
struct SeriesPath {
  std::string d;
  size_t points = 0;
  double min = std::numeric_limits<double>::infinity();
  double max = -std::numeric_limits<double>::infinity();
  size_t first_row = 0, last_row = 0;  // 1-based
};

SeriesPath BuildPath(const std::vector<double>& values, const std::vector<int>& column, double left,
                     const LinearScale& y) {
  SeriesPath out;
  bool open = false;  // a subpath is open
  int vertices_in_subpath = 0;
  double last_x = 0, last_y = 0;
  bool has = false;  // bucket holds points
  int col = -1;
  double bmin = 0, bmax = 0;
  size_t bmin_i = 0, bmax_i = 0;
  auto vertex = [&](double px, double py) {
    absl::StrAppend(&out.d, open ? "L" : "M", Px(px), " ", Px(py));
    open = true;
    ++vertices_in_subpath;
    last_x = px;
    last_y = py;
  };
  auto close_subpath = [&]() {
    // A lone vertex draws nothing: give it a short stroke within its pixel column.
    if (open && vertices_in_subpath == 1) {
      absl::StrAppend(&out.d, "L", Px(last_x + 0.4), " ", Px(last_y));
    }
    open = false;
    vertices_in_subpath = 0;
  };
  auto flush = [&]() {
    if (!has) return;
    const double px = left + col + 0.5;
    if (bmin == bmax) {
      vertex(px, y.Map(bmin));
    } else if (bmin_i < bmax_i) {
      vertex(px, y.Map(bmin));
      vertex(px, y.Map(bmax));
    } else {
      vertex(px, y.Map(bmax));
      vertex(px, y.Map(bmin));
    }
    has = false;
  };
  size_t prev = std::numeric_limits<size_t>::max();
  for (size_t i = 0; i < values.size(); ++i) {
    const double v = values[i];
    if (!std::isfinite(v)) continue;
    ++out.points;
    out.min = std::min(out.min, v);
    out.max = std::max(out.max, v);
    if (out.first_row == 0) out.first_row = i + 1;
    out.last_row = i + 1;
    const bool gap = prev != std::numeric_limits<size_t>::max() && i != prev + 1;
    if (has && (column[i] != col || gap)) flush();
    if (gap) close_subpath();
    if (!has) {
      has = true;
      col = column[i];
      bmin = bmax = v;
      bmin_i = bmax_i = i;
    } else {
      if (v < bmin) bmin = v, bmin_i = i;
      if (v > bmax) bmax = v, bmax_i = i;
    }
    prev = i;
  }
  flush();
  close_subpath();
  if (out.points == 0) out.min = out.max = 0;
  return out;
}

std::string OpText(CompareOp op) {
  switch (op) {
    case CompareOp::kLess:
      return "<";
    case CompareOp::kLessEqual:
      return "<=";
    case CompareOp::kGreater:
      return ">";
    case CompareOp::kGreaterEqual:
      return ">=";
  }
  return "?";
}

std::string ConditionText(const CompiledCondition& c, const CompiledPoolSpec& spec) {
  const std::string& name =
      c.signal < spec.signal_names.size() ? spec.signal_names[c.signal] : "signal";
  return absl::StrCat(name, " ", OpText(c.op), " ", absl::StrFormat("%g", c.threshold));
}

bool IsProbability(const CompiledQuestion& q) {
  // The engine's test for a probability question (core/pool.cc, calibration).
  return q.cumulant.kind == CumulantKind::kIndicator && q.gamma == 1.0 && !q.terminate_when.empty();
}

std::string CumulantText(const CompiledQuestion& q, const CompiledPoolSpec& spec) {
  switch (q.cumulant.kind) {
    case CumulantKind::kSignal:
      return q.cumulant.signal < spec.signal_names.size() ? spec.signal_names[q.cumulant.signal]
                                                          : "a signal";
    case CumulantKind::kIndicator:
      return absl::StrCat("[", ConditionText(q.cumulant.condition, spec), "]");
    case CumulantKind::kConstant:
      return absl::StrFormat("the constant %g", q.cumulant.constant);
    case CumulantKind::kFramePeriod:
      return "the frame period";
    case CumulantKind::kQuestion:
      return absl::StrCat("question ", q.cumulant.question < spec.questions.size()
                                           ? spec.questions[q.cumulant.question].name
                                           : "?");
  }
  return "the cumulant";
}

std::string TerminationText(const CompiledQuestion& q, const CompiledPoolSpec& spec) {
  std::vector<std::string> parts;
  for (const CompiledCondition& c : q.terminate_when) parts.push_back(ConditionText(c, spec));
  return absl::StrJoin(parts, " or ");
}

// The y axis: the question's unit and what kind of sum it is.
std::string YAxisTitle(const CompiledQuestion& q) {
  if (IsProbability(q)) return "probability";
  const std::string unit = q.unit.empty() ? "1" : q.unit;
  if (q.gamma == 1.0) return absl::StrCat(unit, " (sum until termination)");
  return absl::StrCat(unit, absl::StrFormat(" (discounted sum, gamma %g)", q.gamma));
}

// One sentence: what the question asks.
std::string QuestionText(const CompiledQuestion& q, const CompiledPoolSpec& spec) {
  std::string s;
  if (IsProbability(q)) {
    s = absl::StrCat("probability that ", ConditionText(q.cumulant.condition, spec),
                     " happens before the return ends (", TerminationText(q, spec), ")");
  } else if (q.gamma == 1.0) {
    s = absl::StrCat("sum of ", CumulantText(q, spec), " until ", TerminationText(q, spec));
  } else {
    s = absl::StrCat(
        "discounted sum of ", CumulantText(q, spec),
        absl::StrFormat(", gamma %g (about %.0f rows ahead)", q.gamma, 1.0 / (1.0 - q.gamma)));
    if (!q.terminate_when.empty()) absl::StrAppend(&s, ", until ", TerminationText(q, spec));
  }
  if (q.policy.kind != PolicyKind::kBehavior) {
    std::string target = "another policy";
    if (q.policy.kind == PolicyKind::kAction && q.policy.action < spec.actions.size()) {
      target = absl::StrCat("always ", spec.actions[q.policy.action]);
    } else if (q.policy.kind == PolicyKind::kGreedy) {
      target = "greedy on a control question";
    } else if (q.policy.kind == PolicyKind::kDistribution) {
      target = "a fixed action distribution";
    }
    absl::StrAppend(&s, "; off-policy (target: ", target,
                    "): realized returns exist only where the behavior followed it");
  }
  if (!q.gpi_tables.empty()) absl::StrAppend(&s, "; GPI answers are not verified");
  return s;
}

struct Calibration {
  std::array<uint64_t, 10> count{};
  std::array<double, 10> sum_predicted{}, sum_observed{};
};

Calibration Calibrate(const ReplaySummary::QuestionSeries& s) {
  Calibration c;
  for (size_t i = 0; i < s.scored.size(); ++i) {
    if (!s.scored[i] || !std::isfinite(s.predicted[i])) continue;
    // Binned as the engine bins (core/progress/return_verifier.cc): clamped to [0, 1].
    const double p = std::clamp(s.predicted[i], 0.0, 1.0);
    const size_t b = std::min<size_t>(static_cast<size_t>(p * 10), 9);
    ++c.count[b];
    c.sum_predicted[b] += s.predicted[i];
    c.sum_observed[b] += s.realized[i];
  }
  return c;
}

class Writer {
 public:
  explicit Writer(const ReplaySummary& summary) : summary_(summary) {}

  std::string Render(const ReplayPlotSource& source) {
    const CompiledPoolSpec& spec = summary_.pool().spec();
    const size_t nq = spec.num_visible_questions;
    const size_t rows = summary_.rows();
    const int height =
        kHeaderHeight + static_cast<int>(nq) * (kPanelHeight + kPanelGap) + kFooterHeight;
    SetUpX();
    absl::StrAppend(
        &svg_, "<?xml version=\"1.0\" encoding=\"UTF-8\"?>\n",
        absl::StrFormat("<svg xmlns=\"http://www.w3.org/2000/svg\" width=\"%d\" height=\"%d\" "
                        "viewBox=\"0 0 %d %d\" class=\"bw-replay-plot\" data-rows=\"%d\" "
                        "data-questions=\"%d\" data-score-from-row=\"%d\" "
                        "font-family=\"'DejaVu Sans', 'Liberation Sans', Arial, "
                        "sans-serif\">\n",
                        kWidth, height, kWidth, height, rows, nq, summary_.score_from_row()));
    absl::StrAppend(&svg_, "<title>Bellwether replay: pool ", Esc(spec.proto.name()),
                    "</title>\n<desc>Each question's predictions against its realized returns "
                    "over the replayed rows. Predictions are advisory; Bellwether is not a "
                    "safety system.</desc>\n");
    absl::StrAppend(&svg_, "<style>\n", Style(), "</style>\n");
    absl::StrAppend(&svg_, absl::StrFormat("<rect class=\"page\" x=\"0\" y=\"0\" width=\"%d\" "
                                           "height=\"%d\" fill=\"%s\"/>\n",
                                           kWidth, height, kPageBg));
    Header(source, nq, rows);
    for (size_t q = 0; q < nq; ++q) {
      Panel(q, kHeaderHeight + static_cast<int>(q) * (kPanelHeight + kPanelGap));
    }
    Footer(height - kFooterHeight);
    absl::StrAppend(&svg_, "</svg>\n");
    return std::move(svg_);
  }

 private:
  static std::string Style() {
    return absl::StrCat(
        "text { fill: ", kInk, "; font-size: 12px; }\n", ".muted { fill: ", kMuted, "; }\n",
        ".h1 { font-size: 20px; font-weight: bold; }\n",
        ".panel-title { font-size: 15px; font-weight: bold; }\n",
        ".panel-title .score { font-weight: bold; fill: ", kPred, "; }\n",
        ".small { font-size: 11px; }\n", ".tick-label { font-size: 11px; fill: ", kMuted, "; }\n",
        ".tick-label.major { fill: ", kInk, "; font-weight: bold; }\n",
        ".axis-title { font-size: 11.5px; fill: ", kInk, "; }\n", ".grid line { stroke: ", kGrid,
        "; stroke-width: 1; }\n", ".axis-line { stroke: ", kMuted, "; stroke-width: 1; }\n",
        ".series { fill: none; stroke-linejoin: round; stroke-linecap: round; }\n",
        ".series.predicted { stroke: ", kPred, "; stroke-width: 1.3; }\n",
        ".series.realized { stroke: ", kReal, "; stroke-width: 1.3; }\n",
        ".series.persistence { stroke: ", kPersistence,
        "; stroke-width: 0.7; stroke-opacity: 0.55; }\n", ".series.last-week { stroke: ", kLastWeek,
        "; stroke-width: 0.8; stroke-opacity: 0.85; }\n", ".series.sparse { stroke-width: 3; }\n",
        ".off-scale-note { font-size: 11px; fill: ", kMuted, "; }\n",
        ".scored-period { fill: ", kBrass, "; fill-opacity: 0.13; }\n",
        ".scored-edge { stroke: ", kBrass, "; stroke-width: 1.2; stroke-dasharray: 4 3; }\n",
        ".scored-label { font-size: 11px; fill: #8a5a12; }\n", ".diagonal { stroke: ", kMuted,
        "; stroke-width: 1; stroke-dasharray: 5 4; }\n", ".cal-line { fill: none; stroke: ", kReal,
        "; stroke-width: 1.2; }\n", ".cal-point { fill: ", kReal, "; stroke: ", kPanelBg,
        "; stroke-width: 1.2; }\n", ".cal-bar { fill: ", kRule, "; fill-opacity: 0.75; }\n");
  }

  // The x axis every time-series chart shares: timestamps when every row has one of the
  // same kind, in non-decreasing order, else row numbers.
  void SetUpX() {
    const size_t n = summary_.rows();
    x_.assign(n, 0.0);
    const auto kind = summary_.time_kind();
    bool use_time = kind != ReplaySummary::TimeKind::kNone && n >= 2;
    if (use_time) {
      const auto& times = summary_.row_times();
      for (size_t i = 0; i < n; ++i) {
        x_[i] = static_cast<double>(*times[i]) * 1e-6;
        if (i > 0 && x_[i] < x_[i - 1]) use_time = false;
      }
      if (use_time && !(x_[n - 1] > x_[0])) use_time = false;
    }
    x_is_time_ = use_time;
    if (!use_time) {
      for (size_t i = 0; i < n; ++i) x_[i] = static_cast<double>(i + 1);
    }
    x0_ = n > 0 ? x_[0] : 1;
    x1_ = n > 0 ? x_[n - 1] : 1;
    if (!(x1_ > x0_)) x1_ = x0_ + 1;
    // Absolute times are shown in the pool's zone; wall-clock times as recorded.
    const std::string& zone_name = summary_.pool().spec().proto.time_zone().empty()
                                       ? std::string("UTC")
                                       : summary_.pool().spec().proto.time_zone();
    if (!x_is_time_) {
      x_title_ = "row";
    } else if (kind == ReplaySummary::TimeKind::kUnix) {
      zone_ = summary_.pool().spec().time_zone;
      x_title_ = absl::StrCat("time (", zone_name, ")");
    } else {
      zone_ = absl::UTCTimeZone();
      x_title_ = absl::StrCat("wall-clock time as recorded (pool zone ", zone_name, ")");
    }
  }

  std::vector<int> Columns(int width) const {
    std::vector<int> col(x_.size());
    for (size_t i = 0; i < x_.size(); ++i) {
      const double f = (x_[i] - x0_) / (x1_ - x0_);
      col[i] = std::clamp(static_cast<int>(std::floor(f * width)), 0, width - 1);
    }
    return col;
  }

  void Header(const ReplayPlotSource& source, size_t nq, size_t rows) {
    const CompiledPoolSpec& spec = summary_.pool().spec();
    absl::StrAppend(&svg_, "<g class=\"header\">\n");
    absl::StrAppend(&svg_, absl::StrFormat("<text class=\"h1\" x=\"%d\" y=\"34\">Bellwether "
                                           "replay · pool %s</text>\n",
                                           kPanelX, Esc(spec.proto.name())));
    absl::StrAppend(
        &svg_,
        absl::StrFormat("<text class=\"muted\" x=\"%d\" y=\"58\">spec %s · data %s · %s rows · "
                        "%d question%s · scored from row %s</text>\n",
                        kPanelX, Esc(source.spec_path), Esc(source.csv_path), FormatCount(rows), nq,
                        nq == 1 ? "" : "s", FormatCount(summary_.score_from_row())));
    absl::StrAppend(
        &svg_,
        absl::StrFormat(
            "<text class=\"muted\" x=\"%d\" y=\"76\">Each panel: the prediction made at each "
            "row (before learning from anything later) against the return then realized. "
            "Shaded: the rows scored.</text>\n"
            "<text class=\"muted\" x=\"%d\" y=\"92\">Titles give the verified NRMSE of the "
            "scored rows: RMSE over the standard deviation of their realized returns (below 1 "
            "beats predicting their mean).</text>\n",
            kPanelX, kPanelX));
    absl::StrAppend(&svg_, "</g>\n");
  }

  void Footer(int y) {
    absl::StrAppend(
        &svg_,
        absl::StrFormat(
            "<g class=\"caution\"><rect x=\"%d\" y=\"%d\" width=\"%d\" height=\"40\" rx=\"4\" "
            "fill=\"#fbf0d2\" stroke=\"#9a6a00\" stroke-width=\"1\"/>"
            "<text x=\"%d\" y=\"%d\"><tspan font-weight=\"bold\">Caution.</tspan> Predictions "
            "are advisory. Bellwether is not a safety system: building-control and "
            "vehicle-charging decisions follow local codes and licensed practice.</text></g>\n",
            kPanelX, y + 8, kPanelWidth, kPanelX + 12, y + 32));
  }

  // A legend entry: a swatch and its label; returns the next entry's x.
  int LegendItem(int x, int y, const std::string& series, const std::string& swatch,
                 const std::string& label) {
    absl::StrAppend(&svg_, absl::StrFormat("<g class=\"legend-item\" data-series=\"%s\">%s"
                                           "<text class=\"small\" x=\"%d\" y=\"%d\">%s</text>"
                                           "</g>",
                                           series, swatch, x + 26, y + 4, Esc(label)));
    return x + 26 + static_cast<int>(label.size()) * 6 + 22;
  }

  void Panel(size_t q, int top) {
    const CompiledPoolSpec& spec = summary_.pool().spec();
    const CompiledQuestion& cq = spec.questions[q];
    const ReplaySummary::QuestionSeries s = summary_.Series(q);
    const ReplaySummary::QuestionScore& score = s.score;
    const bool probability = IsProbability(cq);
    const std::string unit = cq.unit.empty() || cq.unit == "1" ? "" : " " + cq.unit;

    absl::StrAppend(&svg_,
                    absl::StrFormat("<g class=\"panel\" id=\"panel-%d\" "
                                    "data-question=\"%s\" data-kind=\"%s\">\n",
                                    q, Esc(cq.name), probability ? "probability" : "return"));
    absl::StrAppend(&svg_,
                    absl::StrFormat("<rect class=\"panel-bg\" x=\"%d\" y=\"%d\" "
                                    "width=\"%d\" height=\"%d\" rx=\"6\" fill=\"%s\" "
                                    "stroke=\"%s\"/>\n",
                                    kPanelX, top, kPanelWidth, kPanelHeight, kPanelBg, kRule));
    // Title: the name and the verified NRMSE of the scored rows.
    const int tx = kPanelX + 14;
    std::string headline = score.learned.n > 0
                               ? absl::StrFormat("verified NRMSE %.3f", score.learned.nrmse)
                               : std::string("no verified predictions in the scored rows");
    absl::StrAppend(&svg_, absl::StrFormat("<text class=\"panel-title\" x=\"%d\" y=\"%d\" "
                                           "data-nrmse=\"%s\" data-scored-rows=\"%d\">%s "
                                           "<tspan class=\"score\">— %s</tspan></text>\n",
                                           tx, top + 26, Num(score.learned.nrmse), score.learned.n,
                                           Esc(cq.name), headline));
    absl::StrAppend(&svg_, absl::StrFormat("<text class=\"muted small\" x=\"%d\" y=\"%d\">"
                                           "%s</text>\n",
                                           tx, top + 45, Esc(QuestionText(cq, spec))));
    // Detail: the score and the baselines on the same rows.
    size_t first_scored = 0, last_scored = 0;
    for (size_t i = 0; i < s.scored.size(); ++i) {
      if (!s.scored[i]) continue;
      if (first_scored == 0) first_scored = i + 1;
      last_scored = i + 1;
    }
    std::string detail;
    if (score.learned.n > 0) {
      detail = absl::StrCat("RMSE ", FormatValue(score.learned.rmse), unit, ", bias ",
                            score.learned.bias >= 0 ? "+" : "", FormatValue(score.learned.bias),
                            unit, " on ", FormatCount(score.learned.n), " scored rows (rows ",
                            FormatCount(first_scored), "–", FormatCount(last_scored), ")");
      std::vector<std::string> base;
      if (score.has_persistence) {
        base.push_back(absl::StrFormat("persistence %.3f", score.persistence.nrmse));
      }
      if (score.has_last_week) {
        base.push_back(absl::StrFormat("last week %.3f", score.last_week.nrmse));
      }
      if (!base.empty()) {
        absl::StrAppend(&detail,
                        " · baselines' NRMSE on the same rows: ", absl::StrJoin(base, ", "));
      }
    } else {
      detail = absl::StrFormat(
          "nothing scored from row %s: no prediction there has a realized "
          "return yet",
          FormatCount(summary_.score_from_row()));
    }
    absl::StrAppend(&svg_, absl::StrFormat("<text class=\"small\" x=\"%d\" y=\"%d\">%s</text>\n",
                                           tx, top + 63, Esc(detail)));

    // Legend.
    const int ly = top + 80;
    absl::StrAppend(&svg_, "<g class=\"legend\">");
    auto line_swatch = [&](int x, const char* cls) {
      return absl::StrFormat(
          "<line class=\"series %s\" x1=\"%d\" y1=\"%d\" x2=\"%d\" "
          "y2=\"%d\" style=\"stroke-width: 2.5; stroke-opacity: 1\"/>",
          cls, x, ly, x + 20, ly);
    };
    int lx = tx;
    lx = LegendItem(lx, ly, "predicted", line_swatch(lx, "predicted"),
                    "predicted (made at the row)");
    lx = LegendItem(lx, ly, "realized", line_swatch(lx, "realized"),
                    "realized return (what then happened)");
    const bool draw_persistence = score.has_persistence;
    bool draw_last_week = false;
    for (double v : s.last_week) draw_last_week |= std::isfinite(v);
    if (draw_persistence) {
      lx =
          LegendItem(lx, ly, "persistence", line_swatch(lx, "persistence"), "persistence baseline");
    }
    if (draw_last_week) {
      lx = LegendItem(lx, ly, "last-week", line_swatch(lx, "last-week"), "last-week baseline");
    }
    lx = LegendItem(lx, ly, "scored-period",
                    absl::StrFormat("<rect class=\"scored-period\" x=\"%d\" y=\"%d\" "
                                    "width=\"20\" height=\"12\" stroke=\"%s\" "
                                    "stroke-width=\"0.8\"/>",
                                    lx, ly - 6, kBrass),
                    "scored rows");
    absl::StrAppend(&svg_, "</g>\n");

    // Time series.
    const int left = kPlotLeft;
    const int right = probability ? kPanelX + kPanelWidth - kPlotRightPad - kCalSide - kCalGap
                                  : kPanelX + kPanelWidth - kPlotRightPad;
    const int width = right - left;
    const int ptop = top + kPlotTop, pbottom = ptop + kPlotHeight;
    double lo = std::numeric_limits<double>::infinity(), hi = -lo;
    auto extend = [&](const std::vector<double>& v) {
      for (double x : v) {
        if (std::isfinite(x)) lo = std::min(lo, x), hi = std::max(hi, x);
      }
    };
    // Predictions made before the scored rows (the warm-up) do not stretch the scale: a
    // first answer far off would flatten everything else. Those off the scale are counted
    // in a note on the chart.
    const size_t warm_end = first_scored > 0 ? first_scored - 1 : 0;  // rows [0, warm_end)
    extend(std::vector<double>(s.predicted.begin() + static_cast<ptrdiff_t>(warm_end),
                               s.predicted.end()));
    extend(s.realized);
    if (draw_persistence) extend(s.persistence);
    if (draw_last_week) extend(s.last_week);
    if (probability) lo = std::min(lo, 0.0), hi = std::max(hi, 1.0);
    std::vector<Tick> yticks;
    const LinearScale y = NiceY(lo, hi, ptop, pbottom, &yticks);
    size_t above = 0, below = 0;
    double warm_min = std::numeric_limits<double>::infinity(), warm_max = -warm_min;
    for (size_t i = 0; i < warm_end; ++i) {
      const double v = s.predicted[i];
      if (!std::isfinite(v)) continue;
      if (v > y.d1) ++above, warm_max = std::max(warm_max, v);
      if (v < y.d0) ++below, warm_min = std::min(warm_min, v);
    }
    LinearScale x;
    x.d0 = x0_;
    x.d1 = x1_;
    x.p0 = left;
    x.p1 = right;

    absl::StrAppend(
        &svg_, absl::StrFormat("<g class=\"chart timeseries\" data-x-kind=\"%s\" data-x0=\"%s\" "
                               "data-x1=\"%s\" data-left=\"%d\" data-width=\"%d\" data-y0=\"%s\" "
                               "data-y1=\"%s\" data-top=\"%d\" data-height=\"%d\">\n",
                               x_is_time_ ? "time" : "row", Num(x0_), Num(x1_), left, width,
                               Num(y.d0), Num(y.d1), ptop, kPlotHeight));
    absl::StrAppend(&svg_, absl::StrFormat("<clipPath id=\"clip-%d\"><rect x=\"%d\" y=\"%d\" "
                                           "width=\"%d\" height=\"%d\"/></clipPath>\n",
                                           q, left, ptop - 2, width, kPlotHeight + 4));
    absl::StrAppend(&svg_, absl::StrFormat("<rect class=\"plot-bg\" x=\"%d\" y=\"%d\" "
                                           "width=\"%d\" height=\"%d\" fill=\"#ffffff\"/>\n",
                                           left, ptop, width, kPlotHeight));
    // The scored rows.
    {
      const size_t from = first_scored > 0 ? first_scored : summary_.score_from_row();
      const size_t to = first_scored > 0 ? last_scored : x_.size();
      double a = from >= 1 && from <= x_.size() ? x.Map(x_[from - 1]) : right;
      double b = to >= 1 && to <= x_.size() ? x.Map(x_[to - 1]) : right;
      const double l = left, r = right;
      a = std::clamp(a, l, r);
      b = std::clamp(std::max(b, a + 1), l, r);
      absl::StrAppend(
          &svg_,
          absl::StrFormat("<rect class=\"scored-period\" data-from-row=\"%d\" data-to-row=\"%d\" "
                          "data-rows=\"%d\" x=\"%s\" y=\"%d\" width=\"%s\" height=\"%d\">"
                          "<title>scored rows %s–%s</title></rect>\n",
                          from, to, score.learned.n, Px(a), ptop, Px(b - a), kPlotHeight,
                          FormatCount(from), FormatCount(to)));
      absl::StrAppend(&svg_, absl::StrFormat("<line class=\"scored-edge\" x1=\"%s\" y1=\"%d\" "
                                             "x2=\"%s\" y2=\"%d\"/>\n",
                                             Px(a), ptop, Px(a), pbottom));
      const bool room_right = right - a > 120;
      absl::StrAppend(&svg_, absl::StrFormat("<text class=\"scored-label\" x=\"%s\" y=\"%d\" "
                                             "text-anchor=\"%s\">scored from row %s</text>\n",
                                             Px(room_right ? a + 5 : a - 5), ptop + 13,
                                             room_right ? "start" : "end", FormatCount(from)));
    }
    // Grid and axes.
    const std::vector<Tick> xticks = x_is_time_
                                         ? TimeTicks(x0_, x1_, zone_, std::max(2, width / 95))
                                         : RowTicks(x0_, x1_, std::max(2, width / 80));
    absl::StrAppend(&svg_, "<g class=\"grid\">");
    for (const Tick& t : yticks) {
      absl::StrAppend(&svg_, absl::StrFormat("<line x1=\"%d\" y1=\"%s\" x2=\"%d\" y2=\"%s\"/>",
                                             left, Px(y.Map(t.value)), right, Px(y.Map(t.value))));
    }
    for (const Tick& t : xticks) {
      absl::StrAppend(&svg_,
                      absl::StrFormat("<line x1=\"%s\" y1=\"%d\" x2=\"%s\" y2=\"%d\"/>",
                                      Px(x.Map(t.value)), ptop, Px(x.Map(t.value)), pbottom));
    }
    absl::StrAppend(&svg_, "</g>\n");
    // Series: baselines under, predictions on top.
    const std::vector<int> column = Columns(width);
    absl::StrAppend(&svg_, absl::StrFormat("<g clip-path=\"url(#clip-%d)\">\n", q));
    auto series = [&](const std::vector<double>& v, const char* cls, const char* label) {
      const SeriesPath p = BuildPath(v, column, left, y);
      // A series present on few rows (off-policy returns) is drawn thicker so its short
      // runs show.
      const bool sparse = p.points > 0 && p.points * 5 < v.size();
      absl::StrAppend(
          &svg_,
          absl::StrFormat("<path class=\"series %s%s\" data-series=\"%s\" data-points=\"%d\" "
                          "data-min=\"%s\" data-max=\"%s\" data-first-row=\"%d\" "
                          "data-last-row=\"%d\" d=\"%s\"><title>%s</title></path>\n",
                          cls, sparse ? " sparse" : "", cls, p.points, Num(p.min), Num(p.max),
                          p.first_row, p.last_row, p.d, label));
    };
    if (draw_persistence) series(s.persistence, "persistence", "persistence baseline");
    if (draw_last_week) series(s.last_week, "last-week", "last-week baseline");
    series(s.realized, "realized", "realized return");
    series(s.predicted, "predicted", "predicted");
    absl::StrAppend(&svg_, "</g>\n");
    if (above + below > 0) {
      std::vector<std::string> parts;
      if (above > 0) {
        parts.push_back(
            absl::StrCat("▲ ", FormatCount(above), " above (max ", FormatValue(warm_max), ")"));
      }
      if (below > 0) {
        parts.push_back(
            absl::StrCat("▼ ", FormatCount(below), " below (min ", FormatValue(warm_min), ")"));
      }
      absl::StrAppend(
          &svg_,
          absl::StrFormat("<text class=\"off-scale-note\" data-above=\"%d\" data-below=\"%d\" "
                          "x=\"%d\" y=\"%d\">warm-up predictions off the scale: %s</text>\n",
                          above, below, left + 6, pbottom - 7, Esc(absl::StrJoin(parts, ", "))));
    }
    // Y axis.
    absl::StrAppend(&svg_, "<g class=\"axis y-axis\">");
    absl::StrAppend(&svg_, absl::StrFormat("<line class=\"axis-line\" x1=\"%d\" y1=\"%d\" "
                                           "x2=\"%d\" y2=\"%d\"/>",
                                           left, ptop, left, pbottom));
    for (const Tick& t : yticks) {
      const double py = y.Map(t.value);
      absl::StrAppend(
          &svg_, absl::StrFormat("<g class=\"tick\"><line class=\"axis-line\" "
                                 "x1=\"%d\" y1=\"%s\" x2=\"%d\" y2=\"%s\"/>"
                                 "<text class=\"tick-label\" x=\"%d\" y=\"%s\" "
                                 "text-anchor=\"end\">%s</text></g>",
                                 left - 4, Px(py), left, Px(py), left - 7, Px(py + 4), t.label));
    }
    const int ymid = (ptop + pbottom) / 2;
    absl::StrAppend(&svg_,
                    absl::StrFormat("<text class=\"axis-title\" x=\"%d\" y=\"%d\" "
                                    "text-anchor=\"middle\" transform=\"rotate(-90 %d "
                                    "%d)\">%s</text>",
                                    kPanelX + 18, ymid, kPanelX + 18, ymid, Esc(YAxisTitle(cq))));
    absl::StrAppend(&svg_, "</g>\n");
    // X axis.
    absl::StrAppend(&svg_, "<g class=\"axis x-axis\">");
    absl::StrAppend(&svg_, absl::StrFormat("<line class=\"axis-line\" x1=\"%d\" y1=\"%d\" "
                                           "x2=\"%d\" y2=\"%d\"/>",
                                           left, pbottom, right, pbottom));
    for (const Tick& t : xticks) {
      const double px = x.Map(t.value);
      absl::StrAppend(&svg_,
                      absl::StrFormat("<g class=\"tick\"><line class=\"axis-line\" "
                                      "x1=\"%s\" y1=\"%d\" x2=\"%s\" y2=\"%d\"/>"
                                      "<text class=\"tick-label%s\" x=\"%s\" y=\"%d\" "
                                      "text-anchor=\"middle\">%s</text></g>",
                                      Px(px), pbottom, Px(px), pbottom + 4, t.major ? " major" : "",
                                      Px(px), pbottom + 17, Esc(t.label)));
    }
    absl::StrAppend(&svg_, absl::StrFormat("<text class=\"axis-title\" x=\"%d\" y=\"%d\" "
                                           "text-anchor=\"middle\">%s</text>",
                                           (left + right) / 2, pbottom + 38, Esc(x_title_)));
    absl::StrAppend(&svg_, "</g>\n</g>\n");

    if (probability) CalibrationChart(s, right + kCalGap, ptop);
    absl::StrAppend(&svg_, "</g>\n");
  }

  void CalibrationChart(const ReplaySummary::QuestionSeries& s, int left, int top) {
    const Calibration c = Calibrate(s);
    const int side = kCalSide, bottom = top + side, right = left + side;
    const LinearScale x{0, 1, static_cast<double>(left), static_cast<double>(right)};
    const LinearScale y{0, 1, static_cast<double>(bottom), static_cast<double>(top)};
    uint64_t max_count = 0, total = 0;
    for (uint64_t n : c.count) max_count = std::max(max_count, n), total += n;
    absl::StrAppend(&svg_, absl::StrFormat("<g class=\"chart calibration\" data-bins=\"10\" "
                                           "data-rows=\"%d\" data-left=\"%d\" data-top=\"%d\" "
                                           "data-size=\"%d\">\n",
                                           total, left, top, side));
    absl::StrAppend(&svg_, absl::StrFormat("<text class=\"small\" x=\"%d\" y=\"%d\" "
                                           "font-weight=\"bold\">calibration of the scored "
                                           "rows</text>",
                                           left, top - 8));
    absl::StrAppend(&svg_, absl::StrFormat("<rect class=\"plot-bg\" x=\"%d\" y=\"%d\" "
                                           "width=\"%d\" height=\"%d\" fill=\"#ffffff\"/>\n",
                                           left, top, side, side));
    absl::StrAppend(&svg_, "<g class=\"grid\">");
    for (int k = 0; k <= 5; ++k) {
      const double v = 0.2 * k;
      absl::StrAppend(&svg_, absl::StrFormat("<line x1=\"%d\" y1=\"%s\" x2=\"%d\" y2=\"%s\"/>"
                                             "<line x1=\"%s\" y1=\"%d\" x2=\"%s\" y2=\"%d\"/>",
                                             left, Px(y.Map(v)), right, Px(y.Map(v)), Px(x.Map(v)),
                                             top, Px(x.Map(v)), bottom));
    }
    absl::StrAppend(&svg_, "</g>\n");
    std::array<double, 10> mean_p, observed;
    std::string line;  // joins the bins' points, in bin order
    for (size_t b = 0; b < 10; ++b) {
      const uint64_t n = c.count[b];
      mean_p[b] = n > 0 ? c.sum_predicted[b] / static_cast<double>(n) : kNaN;
      observed[b] = n > 0 ? c.sum_observed[b] / static_cast<double>(n) : kNaN;
      if (n > 0) {
        absl::StrAppend(&line, line.empty() ? "M" : "L", Px(x.Map(std::clamp(mean_p[b], 0.0, 1.0))),
                        " ", Px(y.Map(std::clamp(observed[b], 0.0, 1.0))));
      }
    }
    absl::StrAppend(&svg_, absl::StrFormat("<line class=\"diagonal\" x1=\"%d\" y1=\"%d\" "
                                           "x2=\"%d\" y2=\"%d\"/>",
                                           left, bottom, right, top));
    absl::StrAppend(&svg_, absl::StrFormat("<text class=\"tick-label\" x=\"%s\" y=\"%s\" "
                                           "transform=\"rotate(-45 %s %s)\" "
                                           "text-anchor=\"middle\">perfectly calibrated</text>\n",
                                           Px(x.Map(0.62) - 7), Px(y.Map(0.62) - 7),
                                           Px(x.Map(0.62) - 7), Px(y.Map(0.62) - 7)));
    if (!line.empty()) absl::StrAppend(&svg_, "<path class=\"cal-line\" d=\"", line, "\"/>\n");
    // Each bin: its rows as a bar along the bottom (a quarter of the height at most), and
    // its mean prediction against its observed frequency as a point.
    absl::StrAppend(&svg_, "<g class=\"cal-bins\">\n");
    for (size_t b = 0; b < 10; ++b) {
      const double lower = 0.1 * static_cast<double>(b);
      const uint64_t n = c.count[b];
      absl::StrAppend(
          &svg_,
          absl::StrFormat("<g class=\"cal-bin\" data-bin=\"%d\" data-lower=\"%.1f\" "
                          "data-count=\"%d\" data-mean-predicted=\"%s\" data-observed=\"%s\">",
                          b, lower, n, n > 0 ? Num(mean_p[b]) : "", n > 0 ? Num(observed[b]) : ""));
      const double bar = max_count > 0
                             ? 0.25 * side * static_cast<double>(n) / static_cast<double>(max_count)
                             : 0.0;
      absl::StrAppend(&svg_, absl::StrFormat("<rect class=\"cal-bar\" x=\"%s\" y=\"%s\" "
                                             "width=\"%s\" height=\"%s\"/>",
                                             Px(x.Map(lower) + 1), Px(bottom - bar),
                                             Px(side / 10.0 - 2), Px(bar)));
      if (n > 0) {
        const double r =
            2.5 + 4.5 * std::sqrt(static_cast<double>(n) / static_cast<double>(max_count));
        absl::StrAppend(
            &svg_, absl::StrFormat("<circle class=\"cal-point\" cx=\"%s\" cy=\"%s\" r=\"%s\">"
                                   "<title>predicted %.1f–%.1f: %s rows, mean prediction %.3f, "
                                   "observed %.3f</title></circle>",
                                   Px(x.Map(std::clamp(mean_p[b], 0.0, 1.0))),
                                   Px(y.Map(std::clamp(observed[b], 0.0, 1.0))), Px(r), lower,
                                   lower + 0.1, FormatCount(n), mean_p[b], observed[b]));
      }
      absl::StrAppend(&svg_, "</g>\n");
    }
    absl::StrAppend(&svg_, "</g>\n");
    // Axes.
    absl::StrAppend(&svg_, "<g class=\"axis x-axis\">");
    absl::StrAppend(&svg_, absl::StrFormat("<line class=\"axis-line\" x1=\"%d\" y1=\"%d\" "
                                           "x2=\"%d\" y2=\"%d\"/>",
                                           left, bottom, right, bottom));
    for (int k = 0; k <= 5; ++k) {
      const double v = 0.2 * k;
      absl::StrAppend(&svg_, absl::StrFormat("<g class=\"tick\"><text class=\"tick-label\" "
                                             "x=\"%s\" y=\"%d\" text-anchor=\"middle\">%s"
                                             "</text></g>",
                                             Px(x.Map(v)), bottom + 17, FormatNumber(v, 1)));
    }
    absl::StrAppend(&svg_, absl::StrFormat("<text class=\"axis-title\" x=\"%d\" y=\"%d\" "
                                           "text-anchor=\"middle\">predicted probability (bars: "
                                           "rows per bin)</text></g>\n",
                                           (left + right) / 2, bottom + 38));
    absl::StrAppend(&svg_, "<g class=\"axis y-axis\">");
    absl::StrAppend(&svg_, absl::StrFormat("<line class=\"axis-line\" x1=\"%d\" y1=\"%d\" "
                                           "x2=\"%d\" y2=\"%d\"/>",
                                           left, top, left, bottom));
    for (int k = 0; k <= 5; ++k) {
      const double v = 0.2 * k;
      absl::StrAppend(&svg_, absl::StrFormat("<g class=\"tick\"><text class=\"tick-label\" "
                                             "x=\"%d\" y=\"%s\" text-anchor=\"end\">%s</text>"
                                             "</g>",
                                             left - 6, Px(y.Map(v) + 4), FormatNumber(v, 1)));
    }
    const int ymid = (top + bottom) / 2;
    absl::StrAppend(&svg_, absl::StrFormat("<text class=\"axis-title\" x=\"%d\" y=\"%d\" "
                                           "text-anchor=\"middle\" transform=\"rotate(-90 %d "
                                           "%d)\">observed frequency</text></g>\n",
                                           left - 34, ymid, left - 34, ymid));
    absl::StrAppend(&svg_, "</g>\n");
  }

  const ReplaySummary& summary_;
  std::string svg_;
  std::vector<double> x_;  // each row's x value
  bool x_is_time_ = false;
  double x0_ = 0, x1_ = 1;
  absl::TimeZone zone_ = absl::UTCTimeZone();
  std::string x_title_;
};

}  // namespace

std::string RenderReplayPlot(const ReplaySummary& summary, const ReplayPlotSource& source) {
  return Writer(summary).Render(source);
}

}  // namespace bellwether::cli
