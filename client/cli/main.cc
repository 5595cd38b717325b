// bellwether: the command-line client. Predictions are advisory; Bellwether is not a
// safety system.
#include <unistd.h>

#include <algorithm>
#include <cerrno>
#include <csignal>
#include <cstdio>
#include <cstring>
#include <fstream>
#include <iostream>
#include <map>
#include <string>
#include <thread>
#include <vector>

#include "absl/strings/match.h"
#include "absl/strings/numbers.h"
#include "absl/strings/str_cat.h"
#include "absl/strings/str_format.h"
#include "absl/strings/str_join.h"
#include "absl/time/clock.h"
#include "client/bellwether_client.h"
#include "client/cli/campus_sim.h"
#include "client/cli/cli_common.h"
#include "client/cli/commands.h"
#include "client/cli/replay_plot.h"
#include "client/cli/replay_summary.h"
#include "core/io/csv_frame_reader.h"
#include "core/io/spec_json.h"
#include "core/pool.h"
#include "core/replay.h"

namespace bellwether::cli {
namespace {

constexpr char kUsage[] =
    "usage: bellwether [--server HOST:PORT] COMMAND [ARGS]\n"
    "\n"
    "Learns forward-looking predictions about every asset you stream, and serves them.\n"
    "\n"
    "commands:\n"
    "  apply FILE.json [--dry-run]          create or update a pool from a JSON spec\n"
    "                                       (unchanged questions keep what they learned;\n"
    "                                       --dry-run shows what would change)\n"
    "  stream --pool P --stream S FILE.csv  send a CSV file's rows as frames of one stream\n"
    "         [--rate N] [--follow]         (paced to N frames/s; keep tailing a growing file)\n"
    "  predict --pool P --stream S          print a stream's current answers\n"
    "  watch --pool P --stream S            follow a stream's answers as they change\n"
    "        [--questions A,B] [--interval-ms N] [--count N]\n"
    "  progress --pool P --stream S         how each question is learning, with a chart\n"
    "                                       of its recent verified RMSE\n"
    "  health                               the daemon's gRPC health: SERVING (exit 0) or\n"
    "                                       NOT_SERVING (exit 2)\n"
    "  pools                                list the daemon's pools\n"
    "  describe --pool P                    a pool's streams and questions\n"
    "  delete --pool P                      delete a pool and everything it learned\n"
    "  checkpoint                           ask the daemon to write a checkpoint now\n"
    "  replay --spec F.json --csv F.csv --out PRED.csv\n"
    "                                       run a spec over history in-process (no server);\n"
    "                                       PRED.csv has each row's predictions;\n"
    "                                       --summary [--score-from-row N] prints each\n"
    "                                       question's verified error beside persistence\n"
    "                                       and last-week baselines on the same rows;\n"
    "                                       --plot FILE.svg draws each question's predictions\n"
    "                                       against its realized returns (calibration too)\n"
    "  demo [--rate N] [--steps N]          stream the simulated campus (buildings and delivery\n"
    "       [--status-url URL]              robots) and show answers beside their verified error\n"
    "\n"
    "options:\n"
    "  --server HOST:PORT   daemon address (default 127.0.0.1:50151)\n"
    "  --tls-ca FILE        connect with TLS, trusting this PEM CA (--tls-server-name NAME\n"
    "                       to check another name); --tls-cert/--tls-key FILE: mutual TLS\n"
    "  --token-file FILE    bearer token for a daemon with --token-file (or set\n"
    "                       BELLWETHER_TOKEN)\n"
    "  --output json        predict, watch, progress, pools, describe and health print\n"
    "                       protobuf JSON, one object per line\n"
    "  COMMAND --help       a command's own help (stream, watch, progress, health,\n"
    "                       predict, pools, describe)\n"
    "\n"
    "examples:\n"
    "  bellwether apply deploy/examples/grid.json\n"
    "  bellwether stream --pool grid --stream uk ../shared/data/halfhourly-demand-2000.csv\n"
    "  bellwether predict --pool grid --stream uk\n"
    "  bellwether replay --spec deploy/examples/grid.json --csv demand.csv --out pred.csv\n"
    "\n"
    "exit codes: 0 ok, 1 usage or local input error, 2 server error (gRPC status named),\n"
    "            3 partial (some frames were rejected)\n"
    "\n";

int Apply(const Args& args) {
  if (args.positional.size() != 1) return UsageError("apply: expected one FILE.json");
  const bool dry_run = args.flags.count("dry-run") > 0;
  auto spec = ReadPoolSpecFile(args.positional[0]);
  if (!spec.ok()) return UsageError(std::string(spec.status().message()));
  auto client = ConnectClient(args);
  auto applied = client->ApplyPool(*spec, dry_run);
  if (!applied.ok()) return ServerError(applied.status());
  const char* would = dry_run ? "would be " : "";
  if (applied->created()) {
    std::cout << "pool " << spec->name() << " " << would << "created: "
              << spec->questions_size() << " questions\n";
  } else if (!applied->updated()) {
    std::cout << "pool " << spec->name() << " unchanged (same spec)\n";
  } else {
    std::cout << "pool " << spec->name() << " " << would << "updated"
              << (applied->recipe_changed()
                      ? " (signals, features, actions or tables changed: all questions start "
                        "fresh)"
                      : "")
              << "\n";
    auto list = [](const char* what, const google::protobuf::RepeatedPtrField<std::string>& names) {
      if (names.empty()) return;
      std::cout << "  " << what << ":";
      for (const std::string& n : names) std::cout << " " << n;
      std::cout << "\n";
    };
    list("added", applied->added());
    list("changed (start fresh)", applied->changed());
    list("retired", applied->retired());
    list("unchanged (keep what they learned)", applied->unchanged());
  }
  return kExitOk;
}

void PrintPredictions(const v1::StreamPredictions& p) {
  std::cout << absl::StrFormat("pool %s  stream %s  as of seq %d\n", p.pool(), p.stream(),
                               p.as_of_seq());
  std::cout << absl::StrFormat("%-24s %16s %-8s %14s %8s %10s  %s\n", "question", "answer",
                               "unit", "verified RMSE", "NRMSE", "verified n", "progress");
  for (const v1::Prediction& q : p.predictions()) {
    std::string answer = absl::StrFormat("%16.4f", q.value());
    if (!q.greedy_action().empty()) answer += " (" + q.greedy_action() + ")";
    std::cout << absl::StrFormat("%-24s %16s %-8s %14.4f %8.3f %10d  %s\n", q.question(), answer,
                                 q.unit(), q.verified().rmse(), q.verified().nrmse(),
                                 q.verified().count(), q.progress().label());
  }
}

constexpr char kPredictHelp[] =
    "usage: bellwether predict --pool P --stream S [--output text|json]\n"
    "\n"
    "Prints a stream's current answers: each question's value and unit, its verified RMSE\n"
    "and NRMSE, how many predictions were verified, and its progress label.\n"
    "--output json prints the StreamPredictions (protobuf JSON mapping) on one line.\n"
    "\n"
    "example:\n"
    "  bellwether predict --pool grid --stream uk --output json\n";

int Predict(const Args& args) {
  if (args.Has("help")) {
    std::cout << kPredictHelp;
    return kExitOk;
  }
  const auto pool = args.flags.find("pool"), stream = args.flags.find("stream");
  if (pool == args.flags.end() || stream == args.flags.end()) {
    return UsageError("predict: expected --pool P --stream S");
  }
  bool json = false;
  if (int code = CheckOutput(args, &json); code != kExitOk) return code;
  auto client = ConnectClient(args);
  auto p = client->Predict(pool->second, stream->second);
  if (!p.ok()) return ServerError(p.status());
  if (json) {
    PrintJsonLine(*p);
    return kExitOk;
  }
  PrintPredictions(*p);
  std::cout << "(advisory; not a safety system)\n";
  return kExitOk;
}

constexpr char kPoolsHelp[] =
    "usage: bellwether pools [--output text|json]\n"
    "\n"
    "Lists the daemon's pools in name order with their stream and question counts and\n"
    "spec generation. --output json prints the ListPoolsResponse on one line.\n"
    "\n"
    "example:\n"
    "  bellwether --server 127.0.0.1:50151 pools\n";

int Pools(const Args& args) {
  if (args.Has("help")) {
    std::cout << kPoolsHelp;
    return kExitOk;
  }
  if (!args.positional.empty()) return UsageError("pools: takes no arguments");
  bool json = false;
  if (int code = CheckOutput(args, &json); code != kExitOk) return code;
  auto client = ConnectClient(args);
  auto list = client->ListPools();
  if (!list.ok()) return ServerError(list.status());
  if (json) {
    PrintJsonLine(*list);
    return kExitOk;
  }
  std::cout << absl::StrFormat("%-32s %8s %10s %11s\n", "pool", "streams", "questions",
                               "generation");
  for (const v1::PoolSummary& p : list->pools()) {
    std::cout << absl::StrFormat("%-32s %8d %10d %11d\n", p.name(), p.streams(), p.questions(),
                                 p.generation());
  }
  return kExitOk;
}

constexpr char kDescribeHelp[] =
    "usage: bellwether describe --pool P [--output text|json]\n"
    "\n"
    "A pool's generation and queue depth, its questions (how many streams are learning,\n"
    "settled or diverging on each) and its streams (last seq, frames applied and\n"
    "rejected). --output json prints the PoolDescription, spec included, on one line.\n"
    "\n"
    "example:\n"
    "  bellwether describe --pool grid\n";

int Describe(const Args& args) {
  if (args.Has("help")) {
    std::cout << kDescribeHelp;
    return kExitOk;
  }
  const auto pool = args.flags.find("pool");
  if (pool == args.flags.end()) return UsageError("describe: expected --pool P");
  bool json = false;
  if (int code = CheckOutput(args, &json); code != kExitOk) return code;
  auto client = ConnectClient(args);
  auto d = client->DescribePool(pool->second);
  if (!d.ok()) return ServerError(d.status());
  if (json) {
    PrintJsonLine(*d);
    return kExitOk;
  }
  std::cout << absl::StrFormat("pool %s  generation %d  queue %d batches\n", d->spec().name(),
                               d->generation(), d->queue_depth());
  std::cout << absl::StrFormat("\n%-32s %-10s %9s %8s %10s\n", "question", "unit", "learning",
                               "settled", "diverging");
  for (const v1::QuestionInfo& q : d->questions()) {
    std::cout << absl::StrFormat("%-32s %-10s %9d %8d %10d\n", q.name(), q.unit(),
                                 q.streams_learning(), q.streams_settled(), q.streams_diverging());
  }
  std::cout << absl::StrFormat("\n%-32s %12s %14s %15s\n", "stream", "last seq", "frames applied",
                               "frames rejected");
  for (const v1::StreamInfo& s : d->streams()) {
    std::cout << absl::StrFormat("%-32s %12d %14d %15d\n", s.name(), s.last_seq(),
                                 s.frames_applied(), s.frames_rejected());
  }
  return kExitOk;
}

int Delete(const Args& args) {
  const auto pool = args.flags.find("pool");
  if (pool == args.flags.end()) return UsageError("delete: expected --pool P");
  auto client = ConnectClient(args);
  if (auto s = client->DeletePool(pool->second); !s.ok()) return ServerError(s);
  std::cout << "pool " << pool->second << " deleted\n";
  return kExitOk;
}

int CheckpointNow(const Args& args) {
  auto client = ConnectClient(args);
  auto done = client->Checkpoint();
  if (!done.ok()) return ServerError(done.status());
  std::cout << absl::StrFormat("checkpoint %s: %d pools, %d bytes, %.3f s\n", done->file(),
                               done->pools(), done->bytes(), done->seconds());
  return kExitOk;
}

int Replay(const Args& args) {
  const auto spec_flag = args.flags.find("spec"), csv = args.flags.find("csv"),
             out = args.flags.find("out");
  if (spec_flag == args.flags.end() || csv == args.flags.end() || out == args.flags.end()) {
    return UsageError("replay: expected --spec F.json --csv F.csv --out PRED.csv");
  }
  const bool summary = args.flags.count("summary") > 0;
  const bool plot = args.Has("plot");
  if (plot && args.Flag("plot").empty()) return UsageError("--plot: expected FILE.svg");
  uint64_t score_from = 1;
  if (auto it = args.flags.find("score-from-row"); it != args.flags.end()) {
    if (!absl::SimpleAtoi(it->second, &score_from) || score_from < 1) {
      return UsageError("--score-from-row: expected a row number >= 1");
    }
  }
  auto spec = ReadPoolSpecFile(spec_flag->second);
  if (!spec.ok()) return UsageError(std::string(spec.status().message()));
  auto pool = Pool::Create(*spec);
  if (!pool.ok()) return UsageError(std::string(pool.status().message()));
  auto reader = CsvFrameReader::Open(csv->second);
  if (!reader.ok()) return UsageError(std::string(reader.status().message()));
  std::ofstream plot_file;
  if (plot) {  // checked before replaying: a bad path fails at once
    plot_file.open(args.Flag("plot"));
    if (!plot_file) {
      std::cerr << "bellwether: replay: --plot " << args.Flag("plot")
                << ": cannot open for writing (" << std::strerror(errno) << ")\n";
      return kExitUsage;
    }
  }
  std::ofstream file(out->second);
  if (!file) return UsageError(absl::StrCat(out->second, ": cannot open for writing"));
  std::unique_ptr<ReplaySummary> scorer;
  if (summary || plot) {
    scorer = std::make_unique<ReplaySummary>(**pool, score_from);
    scorer->SetColumns((*reader)->signal_columns());
  }
  file << "row";
  for (size_t q = 0; q < (*pool)->spec().num_visible_questions; ++q) {
    file << "," << (*pool)->spec().questions[q].name;
  }
  file << "\n";
  uint64_t rows = 0;
  const absl::Status s = bellwether::Replay(
      **pool, **reader, "replay",
      [&](const v1::Frame& frame, absl::Span<const double> predictions) {
        if (scorer) scorer->OnRow(frame, predictions);
        file << frame.seq();
        for (double v : predictions) file << absl::StrFormat(",%.17g", v);
        file << "\n";
        return absl::OkStatus();
      },
      &rows);
  file.close();
  if (!s.ok()) {
    std::cerr << "bellwether: replay: " << csv->second << ": " << s.message() << "\n";
    if (plot) std::remove(args.Flag("plot").c_str());  // no half-made plot
    return kExitUsage;
  }
  if (!file) return UsageError(absl::StrCat(out->second, ": write failed"));
  std::cout << "replayed " << rows << " rows; predictions in " << out->second << "\n";
  if (summary) scorer->Print(std::cout);
  if (plot) {
    plot_file << RenderReplayPlot(*scorer, {spec_flag->second, csv->second});
    plot_file.close();
    if (!plot_file) {
      std::cerr << "bellwether: replay: --plot " << args.Flag("plot") << ": write failed\n";
      return kExitUsage;
    }
    std::cout << "plot in " << args.Flag("plot") << "\n";
  }
  return kExitOk;
}

volatile std::sig_atomic_t g_stop = 0;

constexpr char kDemoHelp[] =
    "usage: bellwether demo [--rate N] [--steps N] [--status-url URL]\n"
    "\n"
    "Streams the invented Alder Point campus (a simulation of our own, not real data) to\n"
    "the daemon, and every few seconds prints each pool's answers beside their verified\n"
    "RMSE (past answers compared with what then happened), which shrinks as it learns:\n"
    "  alder-point-buildings  library, lab and residence, a frame every 15 simulated\n"
    "                         minutes (weather, occupancy, zone temperature, setpoint\n"
    "                         actions, metered energy): energy over the next ~12 hours\n"
    "                         and the next hour (discounted sums, kWh)\n"
    "  alder-point-robots     four delivery robots, a frame about every 30 simulated\n"
    "                         seconds (battery, distance to the charger, load; drive,\n"
    "                         to_charger, charge, park): seconds until each must recharge\n"
    "                         (battery under 10 % or docked), and the chance it reaches\n"
    "                         its charger before the battery falls under 10 %, as it\n"
    "                         usually behaves and if sent straight back (off-policy)\n"
    "The demo's two pools are deleted and created afresh when it starts.\n"
    "\n"
    "  --rate N         simulation steps per second (default 150; 0: as fast as the\n"
    "                   daemon takes them); a step is one frame of every building and robot\n"
    "  --steps N        stop after N steps (default: run until Ctrl-C)\n"
    "  --status-url U   the daemon's status page (bellwetherd --http), printed with links\n"
    "\n"
    "example:\n"
    "  bellwether --server 127.0.0.1:50151 demo --status-url http://127.0.0.1:9464/\n";

// One pool of the demo as shown: its streams, sessions, the frames last sent, and the
// first verified RMSE shown per (stream, question), so the shrinking is visible.
struct DemoPool {
  std::string title, noun, clock;
  v1::PoolSpec spec;
  std::vector<std::string> streams;
  std::vector<std::unique_ptr<IngestSession>> sessions;
  std::vector<v1::FrameBatch> batches;
  std::vector<v1::Frame> last;  // per stream, the last frame sent
  std::map<std::string, double> first_rmse;
};

std::string DemoValue(double v, const std::string& unit) {
  if (unit == "s") return absl::StrFormat("%8.0f s", v);
  if (unit == "probability") return absl::StrFormat("%8.2f", v);
  return absl::StrFormat("%8.1f %s", v, unit);
}

std::string DemoRmse(double v, const std::string& unit) {
  if (unit == "s") return absl::StrFormat("%.0f", v);
  if (unit == "probability") return absl::StrFormat("%.3f", v);
  return absl::StrFormat("%.1f", v);
}

// Prints a pool's table; false (with the status in *error) if a Predict failed.
bool PrintDemoPool(Client& client, DemoPool& pool, int64_t steps, absl::Status* error) {
  constexpr uint64_t kFirstAfter = 20;  // "first" RMSE: once this many were verified
  std::cout << absl::StrFormat("\n%s (pool %s)  %s  %d frames each\n", pool.title, pool.spec.name(),
                               pool.clock, steps);
  std::cout << absl::StrFormat("%-10s %-13s %-24s %14s  %-22s %7s  %s\n", pool.noun, "state",
                               "question", "answer", "verified RMSE (first)", "n", "label");
  for (size_t i = 0; i < pool.streams.size(); ++i) {
    auto p = client.Predict(pool.spec.name(), pool.streams[i]);
    if (!p.ok()) {
      *error = p.status();
      return false;
    }
    const v1::Frame& f = pool.last[i];
    std::string state;
    if (pool.noun == "robot" && f.values_size() >= 3) {
      state = f.values(2) >= 1 ? absl::StrFormat("%3.0f%% docked", f.values(0))
                               : absl::StrFormat("%3.0f%% %4.0f m", f.values(0), f.values(1));
    } else if (f.values_size() >= 3) {
      state = absl::StrFormat("zone %.1f C", f.values(2));
    }
    bool first_row = true;
    for (const v1::Prediction& q : p->predictions()) {
      const std::string key = pool.streams[i] + "/" + q.question();
      std::string rmse = "-";
      if (q.verified().count() > 0) {
        rmse = DemoRmse(q.verified().rmse(), q.unit());
        if (q.verified().count() >= kFirstAfter) {
          auto [it, inserted] = pool.first_rmse.emplace(key, q.verified().rmse());
          (void)inserted;
          rmse += " (" + DemoRmse(it->second, q.unit()) + ")";
        }
        if (q.unit() != "s" && q.unit() != "probability") rmse += " " + q.unit();
      }
      std::cout << absl::StrFormat("%-10s %-13s %-24s %14s  %-22s %7d  %s\n",
                                   first_row ? pool.streams[i] : "", first_row ? state : "",
                                   q.question(), DemoValue(q.value(), q.unit()), rmse,
                                   q.verified().count(), q.label());
      first_row = false;
    }
  }
  return true;
}

int Demo(const Args& args) {
  if (args.Has("help")) {
    std::cout << kDemoHelp << "\n" << kCaution;
    return kExitOk;
  }
  if (!args.positional.empty()) return UsageError("demo: takes no arguments");
  double rate = 150;   // simulation steps per second; 0 = unpaced
  int64_t steps = -1;  // unlimited
  if (auto it = args.flags.find("rate"); it != args.flags.end()) {
    if (!absl::SimpleAtod(it->second, &rate) || !(rate >= 0 && rate <= 100000)) {
      return UsageError("--rate: expected steps per second in [0, 100000] (0: unpaced)");
    }
  }
  if (auto it = args.flags.find("steps"); it != args.flags.end()) {
    if (!absl::SimpleAtoi(it->second, &steps) || steps < 1) {
      return UsageError("--steps: expected a positive number of simulated steps");
    }
  }
  std::string status_url = args.Flag("status-url");
  if (!status_url.empty() && !absl::StartsWith(status_url, "http://") &&
      !absl::StartsWith(status_url, "https://")) {
    return UsageError("--status-url: expected an http:// URL");
  }
  while (!status_url.empty() && status_url.back() == '/') status_url.pop_back();
  std::signal(SIGINT, [](int) { g_stop = 1; });
  std::signal(SIGTERM, [](int) { g_stop = 1; });
  auto client = ConnectClient(args);
  if (auto s = client->WaitUntilReachable(absl::Seconds(10)); !s.ok()) return ServerError(s);

  CampusBuildings buildings;
  DeliveryRobots robots;
  DemoPool pools[2];
  pools[0].title = "Buildings";
  pools[0].noun = "building";
  pools[0].spec = CampusBuildings::PoolSpec();
  pools[0].streams = buildings.names();
  pools[1].title = "Delivery robots";
  pools[1].noun = "robot";
  pools[1].spec = DeliveryRobots::PoolSpec();
  pools[1].streams = robots.names();
  for (DemoPool& pool : pools) {
    // A fresh start: what an earlier run learned would hide the learning curve.
    if (auto s = client->DeletePool(pool.spec.name()); !s.ok() && !absl::IsNotFound(s)) {
      return ServerError(s);
    }
    if (auto applied = client->ApplyPool(pool.spec); !applied.ok()) {
      return ServerError(applied.status());
    }
    std::vector<std::string> columns;
    for (const auto& s : pool.spec.signals()) columns.push_back(s.name());
    for (const std::string& name : pool.streams) {
      auto session = client->OpenIngest(pool.spec.name(), name, columns);
      if (!session.ok()) return ServerError(session.status());
      pool.sessions.push_back(std::move(*session));
    }
    pool.batches.resize(pool.streams.size());
    pool.last.resize(pool.streams.size());
  }
  std::cout
      << "Demo: the Alder Point campus, an invented scenario (a simulation, not real data).\n"
         "  Buildings: library, lab, residence; a frame every 15 simulated minutes.\n"
         "    energy_next_12h, energy_next_hour: energy over the next ~12 h / 1 h (kWh,\n"
         "    discounted sums)\n"
         "  Delivery robots: "
      << absl::StrJoin(robots.names(), ", ")
      << "; a frame about every 30 simulated s.\n"
         "    seconds_until_recharge: until the battery falls under 10 % or it is docked\n"
         "    p_reach_charger: the chance it reaches its charger before the battery falls\n"
         "      under 10 %, as it usually behaves; p_reach_charger_if_sent: if sent straight\n"
         "      back (learned off-policy from its usual behavior)\n"
         "  'verified RMSE' compares past answers with what then happened; (first) is the\n"
         "  first one shown with at least 20 verified.\n";
  if (!status_url.empty()) {
    std::cout << "status page: " << status_url << "/  (a robot: " << status_url
              << "/?pool=" << DeliveryRobots::kPool << "&stream=" << robots.names()[0] << ")\n";
  }
  std::cout << kCaution << std::endl;

  // Frames per Send: about ten sends a second when paced.
  const int per_batch = rate > 0 ? std::clamp(static_cast<int>(rate / 10), 1, 256) : 256;
  constexpr absl::Duration kPrintEvery = absl::Seconds(5);
  std::vector<v1::Frame> frames;
  absl::Time next_print = absl::Now();
  const absl::Time start = absl::Now();
  int64_t done = 0;
  uint64_t rejected = 0;
  while (!g_stop && (steps < 0 || done < steps)) {
    for (int k = 0; k < per_batch && (steps < 0 || done < steps); ++k, ++done) {
      buildings.Step(&frames);
      for (size_t b = 0; b < frames.size(); ++b) *pools[0].batches[b].add_frames() = frames[b];
      robots.Step(&frames);
      for (size_t r = 0; r < frames.size(); ++r) *pools[1].batches[r].add_frames() = frames[r];
    }
    for (DemoPool& pool : pools) {
      for (size_t i = 0; i < pool.batches.size(); ++i) {
        if (pool.batches[i].frames_size() == 0) continue;
        auto ack = pool.sessions[i]->Send(pool.batches[i]);
        if (!ack.ok()) {
          if (g_stop) break;
          return ServerError(ack.status());
        }
        for (const v1::FrameRejection& r : ack->rejected()) {
          if (rejected++ < 5) {
            std::cerr << "bellwether: demo: " << pool.streams[i] << ": rejected frame seq "
                      << r.seq() << ": " << r.reason() << "\n";
          }
        }
        pool.last[i] = pool.batches[i].frames(pool.batches[i].frames_size() - 1);
        pool.batches[i].Clear();
      }
    }
    const bool last_round = g_stop || (steps >= 0 && done >= steps);
    if (absl::Now() >= next_print || last_round) {
      next_print = absl::Now() + kPrintEvery;
      pools[0].clock = "campus clock " + buildings.ClockText();
      pools[1].clock = "robot clock " + robots.ClockText();
      std::cout << absl::StrFormat("\n=== %d steps, %.0f s ===", done,
                                   absl::ToDoubleSeconds(absl::Now() - start));
      for (DemoPool& pool : pools) {
        absl::Status error;
        if (!PrintDemoPool(*client, pool, done, &error)) return ServerError(error);
      }
      std::cout.flush();
    }
    // Pace: `rate` steps per second.
    if (rate > 0) {
      const absl::Time due = start + absl::Seconds(static_cast<double>(done) / rate);
      if (due > absl::Now()) absl::SleepFor(due - absl::Now());
    }
  }
  for (DemoPool& pool : pools) {
    for (auto& s : pool.sessions) {
      if (auto st = s->Finish(); !st.ok() && !g_stop) return ServerError(st);
    }
  }
  std::cout << "\ndemo stopped after " << done << " steps (frames per building and robot)";
  if (robots.carried_back() > 0) {
    std::cout << "; robots carried back flat: " << robots.carried_back();
  }
  std::cout << "\n";
  if (rejected > 0) {
    std::cerr << "bellwether: demo: the daemon rejected " << rejected << " frames\n";
    return kExitPartial;
  }
  return kExitOk;
}

int Main(int argc, char** argv) {
  Args args;
  std::string error;
  if (!ParseArgs(argc, argv, &args, &error)) return UsageError(error);
  std::string bad;
  // Read and stream commands: each prints its own --help.
  auto run = [&](int (*command)(const Args&), std::initializer_list<const char*> flags) {
    if (!OnlyFlags(args, flags, &bad)) return UsageError(args.command + ": unknown flag --" + bad);
    return command(args);
  };
  if (args.command == "stream") return run(Stream, {"pool", "stream", "batch", "rate", "follow"});
  if (args.command == "watch") {
    return run(Watch, {"pool", "stream", "questions", "interval-ms", "count", "output"});
  }
  if (args.command == "progress") return run(Progress, {"pool", "stream", "output"});
  if (args.command == "health") return run(Health, {"service", "timeout-ms", "output"});
  if (args.command == "predict") return run(Predict, {"pool", "stream", "output"});
  if (args.command == "pools") return run(Pools, {"output"});
  if (args.command == "describe") return run(Describe, {"pool", "output"});
  if (args.command == "demo") return run(Demo, {"rate", "steps", "status-url"});
  if (args.command.empty() || args.command == "help" || args.flags.count("help")) {
    std::cout << kUsage << kCaution;
    return args.command.empty() && !args.flags.count("help") ? kExitUsage : kExitOk;
  }
  if (args.command == "apply") {
    if (!OnlyFlags(args, {"dry-run"}, &bad)) return UsageError("apply: unknown flag --" + bad);
    return Apply(args);
  }
  if (args.command == "delete") {
    if (!OnlyFlags(args, {"pool"}, &bad)) return UsageError("delete: unknown flag --" + bad);
    return Delete(args);
  }
  if (args.command == "checkpoint") {
    if (!OnlyFlags(args, {}, &bad)) return UsageError("checkpoint: unknown flag --" + bad);
    return CheckpointNow(args);
  }
  if (args.command == "replay") {
    if (!OnlyFlags(args, {"spec", "csv", "out", "summary", "score-from-row", "plot"}, &bad)) {
      return UsageError("replay: unknown flag --" + bad);
    }
    return Replay(args);
  }
  return UsageError("unknown command '" + args.command + "'");
}

}  // namespace
}  // namespace bellwether::cli

int main(int argc, char** argv) { return bellwether::cli::Main(argc, argv); }
