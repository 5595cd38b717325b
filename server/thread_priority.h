// Scheduling priority of the daemon's background threads.
//
// Learning and checkpointing are throughput work; answering Predict and acknowledging
// ingest is latency work on the gRPC threads. Background threads raise their own nice
// value so that, when every core is busy, the scheduler runs a waking RPC thread first.
#ifndef BELLWETHER_SERVER_THREAD_PRIORITY_H_
#define BELLWETHER_SERVER_THREAD_PRIORITY_H_

namespace bellwether::server {

// The nice value the daemon's background threads add to their own (Linux: per thread).
inline constexpr int kBackgroundNice = 10;

// Adds `nice` (> 0) to the calling thread's nice value. Best effort: on failure only the
// scheduling differs. No-op for nice <= 0.
void LowerThisThreadsPriority(int nice);

}  // namespace bellwether::server

#endif  // BELLWETHER_SERVER_THREAD_PRIORITY_H_
