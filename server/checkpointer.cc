#include "server/checkpointer.h"

#include <chrono>
#include <iostream>
#include <utility>

#include "absl/strings/str_format.h"
#include "absl/time/clock.h"
#include "server/state_dir.h"
#include "server/thread_priority.h"

namespace bellwether::server {

Checkpointer::Checkpointer(PoolRegistry* registry, Wal* wal,
                           const std::atomic<uint64_t>* frames_applied, Options options,
                           uint64_t loaded_start_lsn)
    : registry_(registry), wal_(wal), frames_applied_(frames_applied), options_(std::move(options)) {
  previous_start_lsn_ = loaded_start_lsn;
  frames_at_last_ = frames_applied_->load();
  thread_ = std::thread([this] {
    NameThisThread("bw-checkpoint");
    SetThisThreadsPriority(options_.priority);  // writing a checkpoint is background work
    Loop();
  });
}

Checkpointer::~Checkpointer() {
  {
    absl::MutexLock lock(&mu_);
    stop_ = true;
  }
  thread_.join();
}

void Checkpointer::Loop() {
  absl::Time last = absl::Now();
  absl::MutexLock lock(&mu_);
  while (!stop_) {
    mu_.AwaitWithTimeout(absl::Condition(&stop_), absl::Seconds(1));
    if (stop_) break;
    const uint64_t frames = frames_applied_->load() - frames_at_last_;
    if (absl::Now() - last < options_.interval && frames < options_.frames) continue;
    if (frames == 0 && absl::Now() - last < options_.interval * 12) continue;  // idle
    mu_.Unlock();
    auto done = CheckpointNow();
    if (!done.ok()) {
      std::cerr << "bellwetherd: checkpoint failed: " << done.status().message() << "\n";
    }
    mu_.Lock();
    last = absl::Now();
  }
}

absl::StatusOr<v1::CheckpointResponse> Checkpointer::CheckpointNow() {
  absl::MutexLock run(&run_mu_);
  const auto start = std::chrono::steady_clock::now();
  const uint64_t frames_before = frames_applied_->load();
  v1::Checkpoint c;
  c.set_format_version(kStateFormatVersion);
  c.set_created_unix_micros(absl::ToUnixMicros(absl::Now()));
  uint64_t start_lsn = 0;
  for (const auto& worker : registry_->AllForCheckpoint(&start_lsn)) {
    auto captured = worker->Capture();
    if (captured.ok()) {
      *c.add_pools() = *std::move(captured);
    } else if (captured.status().code() != absl::StatusCode::kNotFound) {
      return captured.status();  // a pool deleted meanwhile is simply left out
    }
  }
  c.set_start_lsn(start_lsn);
  auto bytes = WriteCheckpoint(options_.dir, c);
  if (!bytes.ok()) return bytes.status();
  // Durable. The log behind the PREVIOUS checkpoint can go (this one's fallback).
  wal_->TrimThrough(previous_start_lsn_);
  previous_start_lsn_ = start_lsn;
  frames_at_last_ = frames_before;
  v1::CheckpointResponse r;
  r.set_start_lsn(start_lsn);
  r.set_pools(static_cast<uint32_t>(c.pools_size()));
  r.set_bytes(*bytes);
  r.set_seconds(std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count());
  r.set_file(absl::StrFormat("%s/checkpoint-%020d.bwc", options_.dir, start_lsn));
  return r;
}

}  // namespace bellwether::server
