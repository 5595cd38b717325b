// Writes the generated part of the fuzz seed corpus (tests/fuzz/corpus/): serialized
// frame batches, CSV text for the kitchen pool, pool states, a checkpoint file and a
// write-ahead log segment. The state files are made the way bellwetherd makes them:
// records appended with Wal::Append, pools recovered with Recover, checkpoints written
// with WriteCheckpoint (server/wal.h, server/state_dir.h). Run by hand when a format
// changes:
//   build-fuzz/tests/fuzz/make_fuzz_corpus tests/fuzz/corpus
// (the copied seeds, spec files and the first lines of CSV files, are copied by
// tests/fuzz/make_corpus.sh, which calls this).
#include <unistd.h>

#include <cmath>
#include <cstdio>
#include <filesystem>
#include <fstream>
#include <limits>
#include <sstream>
#include <string>
#include <vector>

#include "absl/strings/str_cat.h"
#include "bellwether/v1/frame.pb.h"
#include "bellwether/v1/state.pb.h"
#include "core/frame_input.h"
#include "core/pool.h"
#include "server/state_dir.h"
#include "server/wal.h"
#include "tests/chain_spec.h"
#include "tests/fuzz/fuzz_pools.h"

namespace {

using namespace bellwether;
namespace fs = std::filesystem;

void Write(const fs::path& path, const std::string& bytes) {
  fs::create_directories(path.parent_path());
  std::ofstream out(path, std::ios::binary | std::ios::trunc);
  out << bytes;
  if (!out) fuzz::Broken("cannot write " + path.string());
}

std::string ReadAll(const fs::path& path) {
  std::ifstream in(path, std::ios::binary);
  std::stringstream b;
  b << in.rdbuf();
  return b.str();
}

constexpr int64_t kStartMicros = int64_t{1767600000} * 1000000;  // 2026-01-05T08:00Z

// `n` kitchen frames (level, temp, done) from seq `first`, 15 minutes apart: the level
// rises and falls, the temperature crosses zero, `done` every 8th frame, actions
// alternating with their probabilities, a restart at frame 10.
v1::FrameBatch KitchenFrames(uint64_t first, int n, bool local_time = false) {
  v1::FrameBatch batch;
  for (int i = 0; i < n; ++i) {
    v1::Frame* f = batch.add_frames();
    f->set_seq(first + static_cast<uint64_t>(i));
    const int64_t t = kStartMicros + i * int64_t{900} * 1000000;
    if (local_time) {
      f->set_local_micros(t);
    } else {
      f->set_unix_micros(t);
    }
    f->add_values(5 + 4 * std::sin(i / 3.0));
    f->add_values(-4 + i * 0.7);
    f->add_values(i % 8 == 7 ? 1 : 0);
    f->set_action(static_cast<uint32_t>(i % 2));
    f->set_behavior_prob(i % 2 == 0 ? 0.6 : 0.4);
    if (i == 10) f->set_restart(true);
  }
  return batch;
}

void FrameBatchSeeds(const fs::path& dir) {
  Write(dir / "kitchen-24-frames.pb", KitchenFrames(1, 24).SerializeAsString());
  Write(dir / "kitchen-local-time.pb", KitchenFrames(1, 12, true).SerializeAsString());
  // Missing values, no timestamps, no actions, both streams (odd and even seqs).
  v1::FrameBatch sparse;
  for (int i = 0; i < 10; ++i) {
    v1::Frame* f = sparse.add_frames();
    f->set_seq(static_cast<uint64_t>(i + 1));
    f->add_values(i);
    f->add_values(10 - i);
    f->add_values(0);
    if (i % 3 == 0) f->add_missing(static_cast<uint32_t>(i % 3));
    if (i % 4 == 1) f->add_missing(2);
  }
  Write(dir / "missing-values.pb", sparse.SerializeAsString());
  // Frames the validation refuses: seq 0, NaN, a missing index out of range, a
  // probability above 1, a value count that does not match, an unknown action, a seq
  // that goes back.
  v1::FrameBatch bad = KitchenFrames(5, 2);
  v1::Frame* f = bad.add_frames();
  f->set_seq(0);
  f->add_values(1);
  f->add_values(1);
  f->add_values(0);
  f = bad.add_frames();
  f->set_seq(9);
  f->add_values(std::numeric_limits<double>::quiet_NaN());
  f->add_values(1);
  f->add_values(0);
  f = bad.add_frames();
  f->set_seq(10);
  f->add_values(1);
  f->add_values(1);
  f->add_values(0);
  f->add_missing(7);
  f = bad.add_frames();
  f->set_seq(11);
  f->add_values(1);
  f->add_values(1);
  f->add_values(0);
  f->set_action(1);
  f->set_behavior_prob(1.5);
  f = bad.add_frames();
  f->set_seq(12);
  f->add_values(1);
  f = bad.add_frames();
  f->set_seq(13);
  f->add_values(1);
  f->add_values(1);
  f->add_values(0);
  f->set_action(9);
  f = bad.add_frames();
  f->set_seq(2);
  f->add_values(1);
  f->add_values(1);
  f->add_values(0);
  Write(dir / "refused-frames.pb", bad.SerializeAsString());
  Write(dir / "empty-batch.pb", "");
}

void CsvSeeds(const fs::path& dir) {
  std::string text = "timestamp,level,temp,done,action,behavior_prob,restart\n";
  for (int i = 0; i < 12; ++i) {
    absl::StrAppend(&text, "2026-01-05T", 10 + i / 4, ":", (i % 4) * 15 == 0 ? "00" : absl::StrCat((i % 4) * 15),
                    ":00,", 5 + i % 3, ".5,", -3 + i, ",", i % 8 == 7 ? 1 : 0, ",", i % 2, ",",
                    i % 2 == 0 ? "0.6" : "0.4", ",", i == 6 ? "true" : "0", "\n");
  }
  Write(dir / "kitchen-local-time.csv", text);
  // Offsets, Unix seconds, a space separator, empty cells (missing values).
  Write(dir / "kitchen-mixed-times.csv",
        "level,temp,done,timestamp\n"
        "1,2,0,2026-03-29T01:30:00+01:00\n"
        "2,,0,2026-03-29 02:30:00\n"
        "3,4,1,1774748000\n"
        ",5,0,1774749800.5\n"
        "4,6,0,2026-03-29T05:00:00Z\n");
  // Errors: a cell that is not a number, too many cells, a bad timestamp.
  Write(dir / "kitchen-bad-rows.csv",
        "level,temp,done,timestamp\n"
        "1,2,0,2026-01-05T00:00:00\n"
        "x,2,0,2026-01-05T00:15:00\n"
        "1,2,0,4,5\n"
        "1,2,0,2026-13-45T99:00:00\n");
}

// A state directory made as the daemon makes one: the kitchen pool and the chain pool
// created, batches logged, a checkpoint of the recovered pools, more batches. Returns
// the directory.
fs::path MakeStateDir(const fs::path& work) {
  fs::remove_all(work);
  fs::create_directories(work);
  const std::string dir = work.string();
  if (auto s = server::PrepareStateDir(dir); !s.ok()) fuzz::Broken(s.ToString());
  server::Wal::Options o;
  o.dir = dir;
  o.sync = server::Wal::Sync::kNone;
  auto wal = server::Wal::Open(o, 1);
  if (!wal.ok()) fuzz::Broken(wal.status().ToString());
  auto append = [&](v1::WalRecord r) {
    if (auto lsn = (*wal)->Append(r); !lsn.ok()) fuzz::Broken(lsn.status().ToString());
  };
  v1::WalRecord apply;
  *apply.mutable_apply() = fuzz::KitchenSpec(false);
  append(apply);
  *apply.mutable_apply() = testing::OneHotChainSpec(4, 0.9, 0.5, 0.1);
  append(apply);
  auto batch = [&](const std::string& pool, const std::string& stream, v1::FrameBatch frames,
                   std::vector<std::string> columns) {
    v1::WalRecord r;
    r.mutable_batch()->set_pool(pool);
    r.mutable_batch()->set_stream(stream);
    for (auto& c : columns) r.mutable_batch()->add_columns(c);
    *r.mutable_batch()->mutable_batch() = std::move(frames);
    append(r);
  };
  batch("fuzz-kitchen", "north", KitchenFrames(1, 6), {});
  v1::FrameBatch chain;
  for (int i = 0; i < 5; ++i) {
    v1::Frame* f = chain.add_frames();
    f->set_seq(static_cast<uint64_t>(i + 1));
    f->add_values(i % 4 + 0.5);
    f->add_values(i % 3 == 0 ? 1 : 0);
  }
  batch("chain", "s", chain, {});
  auto recovered = server::Recover(dir);
  if (!recovered.ok()) fuzz::Broken(recovered.status().ToString());
  v1::Checkpoint c;
  c.set_format_version(server::kStateFormatVersion);
  c.set_created_unix_micros(kStartMicros);
  c.set_start_lsn((*wal)->last_lsn());
  for (auto& [name, p] : recovered->pools) {
    v1::PoolCheckpoint* pc = c.add_pools();
    *pc->mutable_spec() = p.pool->spec().proto;
    pc->set_generation(p.generation);
    pc->set_wal_lsn(p.last_lsn);
    p.pool->SaveState(pc->mutable_state());
  }
  if (auto w = server::WriteCheckpoint(dir, c); !w.ok()) fuzz::Broken(w.status().ToString());
  // After the checkpoint: a column order of its own, a spec change, a deleted pool.
  batch("fuzz-kitchen", "north", KitchenFrames(7, 3), {});
  v1::FrameBatch two_columns;
  for (int i = 0; i < 3; ++i) {
    v1::Frame* f = two_columns.add_frames();
    f->set_seq(static_cast<uint64_t>(i + 1));
    f->add_values(10 - i);
    f->add_values(3 + i);
  }
  batch("fuzz-kitchen", "south", two_columns, {"temp", "level"});
  v1::PoolSpec changed = fuzz::KitchenSpec(false);
  changed.mutable_questions(0)->set_gamma(0.8);
  *apply.mutable_apply() = changed;
  append(apply);
  v1::WalRecord del;
  del.set_delete_pool("chain");
  append(del);
  wal->reset();
  return work;
}

void StateSeeds(const fs::path& corpus, const fs::path& work) {
  const fs::path state = MakeStateDir(work);
  for (const auto& e : fs::directory_iterator(state)) {
    const std::string name = e.path().filename().string();
    if (name.rfind("checkpoint-", 0) == 0) {
      const std::string bytes = ReadAll(e.path());
      Write(corpus / "checkpoint" / "daemon-checkpoint.bwc", bytes);
      // The same checkpoint with the small chain pool only: a short seed.
      auto decoded = server::DecodeCheckpoint(bytes);
      if (!decoded.ok()) fuzz::Broken(decoded.status().ToString());
      v1::Checkpoint chain_only = *decoded;
      chain_only.clear_pools();
      for (const v1::PoolCheckpoint& pc : decoded->pools()) {
        if (pc.spec().name() == "chain") *chain_only.add_pools() = pc;
      }
      auto encoded = server::EncodeCheckpoint(chain_only);
      if (!encoded.ok()) fuzz::Broken(encoded.status().ToString());
      Write(corpus / "checkpoint" / "chain-checkpoint.bwc", *encoded);
    } else if (name.rfind("wal-", 0) == 0) {
      Write(corpus / "wal" / "daemon-log.log", ReadAll(e.path()));
    }
  }
  // Raw pool states: the kitchen pool per stream and pooled, after frames of two
  // streams, and one of a pool that has seen nothing.
  for (bool pooled : {false, true}) {
    auto pool = Pool::Create(fuzz::KitchenSpec(pooled));
    if (!pool.ok()) fuzz::Broken(pool.status().ToString());
    std::string empty;
    (*pool)->SaveState(&empty);
    auto map = ColumnMap::Create((*pool)->spec().signal_names, {});
    std::vector<double> buffer;
    FrameInput in;
    const v1::FrameBatch frames = KitchenFrames(1, 14);
    for (const char* stream : {"a", "b"}) {
      for (const v1::Frame& f : frames.frames()) {
        if (!FrameFromProto(f, *map, &buffer, &in).ok() || !(*pool)->Apply(stream, in).ok()) {
          fuzz::Broken("kitchen frames refused");
        }
      }
    }
    std::string learned;
    (*pool)->SaveState(&learned);
    const std::string kind = pooled ? "pooled" : "per-stream";
    Write(corpus / "checkpoint" / ("pool-state-" + kind + ".bin"), learned);
    Write(corpus / "checkpoint" / ("pool-state-" + kind + "-empty.bin"), empty);
  }
  fs::remove_all(work);
}

}  // namespace

int main(int argc, char** argv) {
  if (argc != 2) {
    std::fprintf(stderr, "usage: %s CORPUS_DIR\n", argv[0]);
    return 1;
  }
  const fs::path corpus = argv[1];
  FrameBatchSeeds(corpus / "frame_batch");
  CsvSeeds(corpus / "csv_reader");
  Write(corpus / "spec_json" / "kitchen.json", fuzz::kKitchenSpecJson);
  StateSeeds(corpus, fs::temp_directory_path() / absl::StrCat("bellwether-make-corpus-", getpid()));
  std::printf("seeds written under %s\n", corpus.string().c_str());
  return 0;
}
