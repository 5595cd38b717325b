// Comparing what the daemon learned with an in-process replay, bit for bit: the demand
// CSV's frames, a reference pool fed them, and the daemon's state of pool `grid` read back
// from a checkpoint it writes on request. Shared by the durability and CLI tests.
#ifndef BELLWETHER_TESTS_INTEGRATION_LEARNED_STATE_H_
#define BELLWETHER_TESTS_INTEGRATION_LEARNED_STATE_H_

#include <fstream>
#include <sstream>
#include <string>
#include <vector>

#include "client/bellwether_client.h"
#include "core/frame_input.h"
#include "core/io/csv_frame_reader.h"
#include "core/pool.h"
#include "gtest/gtest.h"
#include "server/state_dir.h"

namespace bellwether::testing {

inline std::string DemandCsvPath() {
  return std::string(BW_SHARED_DATA_DIR) + "/halfhourly-demand-2000.csv";
}

// The frames of the demand CSV, as the CLI reads them.
inline std::vector<v1::Frame> DemandFrames() {
  std::vector<v1::Frame> out;
  auto reader = CsvFrameReader::Open(DemandCsvPath());
  EXPECT_TRUE(reader.ok());
  if (!reader.ok()) return out;
  v1::Frame f;
  while (true) {
    auto more = (*reader)->Next(&f);
    if (!more.ok() || !*more) break;
    out.push_back(f);
  }
  return out;
}

// The state a pool made from `spec` holds after the first `count` of `frames` (column
// demand_mw) on stream "uk": what the daemon should hold.
inline std::string ReferenceState(const v1::PoolSpec& spec, const std::vector<v1::Frame>& frames,
                                  size_t count) {
  auto pool = Pool::Create(spec);
  EXPECT_TRUE(pool.ok());
  if (!pool.ok()) return "";
  auto columns = ColumnMap::Create((*pool)->spec().signal_names, {"demand_mw"});
  EXPECT_TRUE(columns.ok());
  std::vector<double> buffer;
  FrameInput input;
  for (size_t i = 0; i < count; ++i) {
    EXPECT_TRUE(FrameFromProto(frames[i], *columns, &buffer, &input).ok());
    EXPECT_TRUE((*pool)->Apply("uk", input).ok());
  }
  std::string state;
  (*pool)->SaveState(&state);
  return state;
}

// The daemon's learned state of pool `grid`, read back from a checkpoint it writes now.
inline std::string DaemonState(Client& client) {
  auto done = client.Checkpoint();
  EXPECT_TRUE(done.ok()) << done.status();
  if (!done.ok()) return "";
  std::ifstream in(done->file(), std::ios::binary);
  std::stringstream buf;
  buf << in.rdbuf();
  auto c = server::DecodeCheckpoint(buf.str());
  EXPECT_TRUE(c.ok()) << c.status();
  if (!c.ok()) return "";
  for (const v1::PoolCheckpoint& p : c->pools()) {
    if (p.spec().name() == "grid") return p.state();
  }
  ADD_FAILURE() << "pool grid not in the checkpoint";
  return "";
}

}  // namespace bellwether::testing

#endif  // BELLWETHER_TESTS_INTEGRATION_LEARNED_STATE_H_
