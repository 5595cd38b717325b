// bellwether: the command-line client. Predictions are advisory; Bellwether is not a
// safety system.
#include <unistd.h>

#include <csignal>
#include <cstdio>
#include <fstream>
#include <iostream>
#include <map>
#include <string>
#include <thread>
#include <vector>

#include "absl/strings/numbers.h"
#include "absl/strings/str_cat.h"
#include "absl/strings/str_format.h"
#include "absl/time/clock.h"
#include "client/bellwether_client.h"
#include "client/cli/campus_sim.h"
#include "client/cli/cli_common.h"
#include "client/cli/commands.h"
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
    "  predict --pool P --stream S          print a stream's current answers\n"
    "  pools                                list the daemon's pools\n"
    "  describe --pool P                    a pool's streams and questions\n"
    "  delete --pool P                      delete a pool and everything it learned\n"
    "  checkpoint                           ask the daemon to write a checkpoint now\n"
    "  replay --spec F.json --csv F.csv --out PRED.csv\n"
    "                                       run a spec over history in-process (no server);\n"
    "                                       PRED.csv has each row's predictions;\n"
    "                                       --summary [--score-from-row N] prints each\n"
    "                                       question's verified error beside persistence\n"
    "                                       and last-week baselines on the same rows\n"
    "  demo [--rate N] [--steps N]          apply the demo pool and stream a simulated campus\n"
    "\n"
    "options:\n"
    "  --server HOST:PORT   daemon address (default 127.0.0.1:50151)\n"
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
  auto client = Client::Connect(args.server);
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

int Stream(const Args& args) {
  const auto pool = args.flags.find("pool"), stream = args.flags.find("stream");
  if (pool == args.flags.end() || stream == args.flags.end() || args.positional.size() != 1) {
    return UsageError("stream: expected --pool P --stream S FILE.csv");
  }
  int batch_size = 256;
  if (auto it = args.flags.find("batch"); it != args.flags.end()) {
    if (!absl::SimpleAtoi(it->second, &batch_size) || batch_size < 1 || batch_size > 10000) {
      return UsageError("--batch: expected a number of frames in 1..10000");
    }
  }
  auto reader = CsvFrameReader::Open(args.positional[0]);
  if (!reader.ok()) return UsageError(std::string(reader.status().message()));
  auto client = Client::Connect(args.server);
  // Survives a daemon restart: resends what was not yet durable, skips what was applied.
  ResumingIngest session(client.get(), pool->second, stream->second,
                         (*reader)->signal_columns());
  v1::FrameBatch batch;
  uint64_t sent = 0, applied_seq = 0, durable_seq = 0, rejected = 0, duplicates = 0;
  constexpr uint64_t kRejectionsShown = 5;
  auto flush = [&]() -> absl::Status {
    if (batch.frames_size() == 0) return absl::OkStatus();
    auto ack = session.Send(batch);
    if (!ack.ok()) return ack.status();
    sent += static_cast<uint64_t>(batch.frames_size());
    applied_seq = ack->applied_seq();
    durable_seq = ack->durable_seq();
    duplicates += ack->duplicates();
    for (const v1::FrameRejection& r : ack->rejected()) {
      if (rejected++ < kRejectionsShown) {
        std::cerr << "bellwether: rejected frame seq " << r.seq() << ": " << r.reason() << "\n";
      }
    }
    batch.Clear();
    return absl::OkStatus();
  };
  while (true) {
    v1::Frame frame;
    auto more = (*reader)->Next(&frame);
    if (!more.ok()) {
      if (auto s = flush(); !s.ok()) return ServerError(s);
      std::cerr << "bellwether: " << more.status().message() << "\n"
                << "bellwether: stopped after " << sent << " frames (applied seq " << applied_seq
                << ")\n";
      return kExitPartial;
    }
    if (!*more) break;
    *batch.add_frames() = std::move(frame);
    if (batch.frames_size() >= batch_size) {
      if (auto s = flush(); !s.ok()) return ServerError(s);
    }
  }
  if (auto s = flush(); !s.ok()) return ServerError(s);
  if (auto s = session.Finish(); !s.ok()) return ServerError(s);
  if (session.reconnects() > 0) {
    std::cerr << "bellwether: reconnected " << session.reconnects()
              << " times and resent from the durable seq\n";
  }
  std::cout << "streamed " << sent << " frames to " << pool->second << "/" << stream->second
            << " (applied seq " << applied_seq;
  if (durable_seq > 0) std::cout << ", durable seq " << durable_seq;
  std::cout << ")\n";
  duplicates += session.already_durable();
  if (duplicates > 0) {
    std::cout << duplicates << " frames were already applied (seq at or below the stream's) "
              << "and were skipped\n";
  }
  if (rejected > 0) {
    std::cerr << "bellwether: " << rejected << " of " << sent << " frames were rejected"
              << (rejected > kRejectionsShown ? " (first 5 shown)" : "") << "\n";
    return kExitPartial;
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

int Predict(const Args& args) {
  const auto pool = args.flags.find("pool"), stream = args.flags.find("stream");
  if (pool == args.flags.end() || stream == args.flags.end()) {
    return UsageError("predict: expected --pool P --stream S");
  }
  auto client = Client::Connect(args.server);
  auto p = client->Predict(pool->second, stream->second);
  if (!p.ok()) return ServerError(p.status());
  PrintPredictions(*p);
  std::cout << "(advisory; not a safety system)\n";
  return kExitOk;
}

int Pools(const Args& args) {
  auto client = Client::Connect(args.server);
  auto list = client->ListPools();
  if (!list.ok()) return ServerError(list.status());
  std::cout << absl::StrFormat("%-32s %8s %10s %11s\n", "pool", "streams", "questions",
                               "generation");
  for (const v1::PoolSummary& p : list->pools()) {
    std::cout << absl::StrFormat("%-32s %8d %10d %11d\n", p.name(), p.streams(), p.questions(),
                                 p.generation());
  }
  return kExitOk;
}

int Describe(const Args& args) {
  const auto pool = args.flags.find("pool");
  if (pool == args.flags.end()) return UsageError("describe: expected --pool P");
  auto client = Client::Connect(args.server);
  auto d = client->DescribePool(pool->second);
  if (!d.ok()) return ServerError(d.status());
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
  auto client = Client::Connect(args.server);
  if (auto s = client->DeletePool(pool->second); !s.ok()) return ServerError(s);
  std::cout << "pool " << pool->second << " deleted\n";
  return kExitOk;
}

int CheckpointNow(const Args& args) {
  auto client = Client::Connect(args.server);
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
  std::ofstream file(out->second);
  if (!file) return UsageError(absl::StrCat(out->second, ": cannot open for writing"));
  std::unique_ptr<ReplaySummary> scorer;
  if (summary) {
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
        if (scorer) scorer->OnRow(frame);
        file << frame.seq();
        for (double v : predictions) file << absl::StrFormat(",%.17g", v);
        file << "\n";
        return absl::OkStatus();
      },
      &rows);
  file.close();
  if (!s.ok()) {
    std::cerr << "bellwether: replay: " << csv->second << ": " << s.message() << "\n";
    return kExitUsage;
  }
  if (!file) return UsageError(absl::StrCat(out->second, ": write failed"));
  std::cout << "replayed " << rows << " rows; predictions in " << out->second << "\n";
  if (scorer) scorer->Print(std::cout);
  return kExitOk;
}

volatile std::sig_atomic_t g_stop = 0;

int Demo(const Args& args) {
  double rate = 200;  // frames per second per building
  int64_t steps = -1;  // unlimited
  if (auto it = args.flags.find("rate"); it != args.flags.end()) {
    if (!absl::SimpleAtod(it->second, &rate) || !(rate > 0 && rate <= 100000)) {
      return UsageError("--rate: expected frames per second in (0, 100000]");
    }
  }
  if (auto it = args.flags.find("steps"); it != args.flags.end()) {
    if (!absl::SimpleAtoi(it->second, &steps) || steps < 1) {
      return UsageError("--steps: expected a positive number of simulated steps");
    }
  }
  std::signal(SIGINT, [](int) { g_stop = 1; });
  std::signal(SIGTERM, [](int) { g_stop = 1; });
  auto client = Client::Connect(args.server);
  if (auto s = client->WaitUntilReachable(absl::Seconds(10)); !s.ok()) return ServerError(s);
  const v1::PoolSpec spec = CampusSim::PoolSpec();
  if (auto applied = client->ApplyPool(spec); !applied.ok()) return ServerError(applied.status());
  CampusSim sim;
  std::vector<std::unique_ptr<IngestSession>> sessions;
  std::vector<std::string> columns;
  for (const auto& s : spec.signals()) columns.push_back(s.name());
  for (const std::string& b : sim.buildings()) {
    auto session = client->OpenIngest(spec.name(), b, columns);
    if (!session.ok()) return ServerError(session.status());
    sessions.push_back(std::move(*session));
  }
  std::cout << "Demo: the Alder Point campus (invented), three buildings, a frame every 15\n"
               "simulated minutes. Questions: energy over the next ~12 hours and next hour\n"
               "(discounted sums, kWh). 'verified' compares each past prediction with what\n"
               "the building then actually used.\n"
            << kCaution << std::endl;
  const int per_batch = 16;
  std::vector<v1::FrameBatch> batches(sim.buildings().size());
  std::vector<v1::Frame> frames;
  absl::Time next_print = absl::Now();
  const absl::Time start = absl::Now();
  int64_t done = 0;
  while (!g_stop && (steps < 0 || done < steps)) {
    for (int k = 0; k < per_batch && (steps < 0 || done < steps); ++k, ++done) {
      sim.Step(&frames);
      for (size_t b = 0; b < frames.size(); ++b) *batches[b].add_frames() = frames[b];
    }
    for (size_t b = 0; b < batches.size(); ++b) {
      auto ack = sessions[b]->Send(batches[b]);
      if (!ack.ok()) return ServerError(ack.status());
      batches[b].Clear();
    }
    if (absl::Now() >= next_print || (steps >= 0 && done >= steps)) {
      next_print = absl::Now() + absl::Seconds(2);
      std::cout << absl::StrFormat("\n[campus clock %s]  %d frames per building\n",
                                   sim.ClockText(), done);
      std::cout << absl::StrFormat("%-10s %-18s %14s %22s\n", "building", "question",
                                   "prediction", "verified RMSE (n)");
      for (const std::string& b : sim.buildings()) {
        auto p = client->Predict(spec.name(), b);
        if (!p.ok()) return ServerError(p.status());
        for (const v1::Prediction& q : p->predictions()) {
          std::cout << absl::StrFormat("%-10s %-18s %10.1f %-3s %12.1f (%d)\n", b, q.question(),
                                       q.value(), q.unit(), q.verified().rmse(),
                                       q.verified().count());
        }
      }
      std::cout.flush();
    }
    // Pace: `rate` steps per second.
    const absl::Time due = start + absl::Seconds(static_cast<double>(done) / rate);
    if (due > absl::Now()) absl::SleepFor(due - absl::Now());
  }
  for (auto& s : sessions) {
    if (auto st = s->Finish(); !st.ok() && !g_stop) return ServerError(st);
  }
  std::cout << "\ndemo stopped after " << done << " steps per building\n";
  return kExitOk;
}

int Main(int argc, char** argv) {
  Args args;
  std::string error;
  if (!ParseArgs(argc, argv, &args, &error)) return UsageError(error);
  if (args.command.empty() || args.command == "help" || args.flags.count("help")) {
    std::cout << kUsage << kCaution;
    return args.command.empty() && !args.flags.count("help") ? kExitUsage : kExitOk;
  }
  std::string bad;
  if (args.command == "apply") {
    if (!OnlyFlags(args, {"dry-run"}, &bad)) return UsageError("apply: unknown flag --" + bad);
    return Apply(args);
  }
  if (args.command == "stream") {
    if (!OnlyFlags(args, {"pool", "stream", "batch"}, &bad)) {
      return UsageError("stream: unknown flag --" + bad);
    }
    return Stream(args);
  }
  if (args.command == "predict") {
    if (!OnlyFlags(args, {"pool", "stream"}, &bad)) {
      return UsageError("predict: unknown flag --" + bad);
    }
    return Predict(args);
  }
  if (args.command == "pools") {
    if (!OnlyFlags(args, {}, &bad)) return UsageError("pools: unknown flag --" + bad);
    return Pools(args);
  }
  if (args.command == "describe" || args.command == "delete") {
    if (!OnlyFlags(args, {"pool"}, &bad)) {
      return UsageError(args.command + ": unknown flag --" + bad);
    }
    return args.command == "describe" ? Describe(args) : Delete(args);
  }
  if (args.command == "checkpoint") {
    if (!OnlyFlags(args, {}, &bad)) return UsageError("checkpoint: unknown flag --" + bad);
    return CheckpointNow(args);
  }
  if (args.command == "replay") {
    if (!OnlyFlags(args, {"spec", "csv", "out", "summary", "score-from-row"}, &bad)) {
      return UsageError("replay: unknown flag --" + bad);
    }
    return Replay(args);
  }
  if (args.command == "demo") {
    if (!OnlyFlags(args, {"rate", "steps"}, &bad)) return UsageError("demo: unknown flag --" + bad);
    return Demo(args);
  }
  return UsageError("unknown command '" + args.command + "'");
}

}  // namespace
}  // namespace bellwether::cli

int main(int argc, char** argv) { return bellwether::cli::Main(argc, argv); }
