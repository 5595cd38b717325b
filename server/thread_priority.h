// Scheduling priority of the daemon's background threads.
//
// Learning and checkpointing are throughput work; answering Predict and acknowledging
// ingest is latency work on the gRPC threads. Background threads lower their own
// priority so that, when every core is busy, the scheduler runs a waking RPC thread
// first.
#ifndef BELLWETHER_SERVER_THREAD_PRIORITY_H_
#define BELLWETHER_SERVER_THREAD_PRIORITY_H_

#include <string>

#include "absl/strings/string_view.h"

namespace bellwether::server {

enum class BackgroundPriority {
  // SCHED_IDLE (Linux): the thread runs only on CPU time no normal thread wants, and a
  // waking normal thread (an RPC) takes its core at once. Within a container or a
  // systemd service with its own CPU cgroup that means "after this daemon's own RPCs";
  // on a host shared with other busy processes in the same cgroup, learning waits for
  // them too (use kLow there).
  kIdle,
  // nice +10: RPC threads get about nine tenths of a contended core, and learning still
  // gets its share beside other processes; a waking RPC may wait up to a scheduler
  // slice (about a millisecond or two).
  kLow,
  // Unchanged (tests and in-process callers).
  kNormal,
};

// Flag syntax: "idle", "low" or "normal".
bool AbslParseFlag(absl::string_view text, BackgroundPriority* priority, std::string* error);
std::string AbslUnparseFlag(BackgroundPriority priority);

// Names the calling thread (at most 15 characters show), so `top -H` and perf tell the
// daemon's threads apart; a thread otherwise inherits its creator's name.
void NameThisThread(const char* name);

// Applies `priority` to the calling thread. Best effort: on failure only the scheduling
// differs.
void SetThisThreadsPriority(BackgroundPriority priority);

}  // namespace bellwether::server

#endif  // BELLWETHER_SERVER_THREAD_PRIORITY_H_
