// `bellwether stream`: send a CSV file's rows as frames of one stream, optionally paced
// (--rate) and following a growing file (--follow), with a progress display on stderr.
#include <fcntl.h>
#include <sys/stat.h>
#include <unistd.h>

#include <algorithm>
#include <cerrno>
#include <csignal>
#include <cstring>
#include <deque>
#include <iostream>
#include <istream>
#include <memory>
#include <streambuf>
#include <string>
#include <utility>
#include <vector>

#include "absl/strings/numbers.h"
#include "absl/strings/str_cat.h"
#include "absl/strings/str_format.h"
#include "absl/time/clock.h"
#include "absl/time/time.h"
#include "client/bellwether_client.h"
#include "client/cli/cli_common.h"
#include "client/cli/commands.h"
#include "core/io/csv_frame_reader.h"

namespace bellwether::cli {
namespace {

constexpr char kStreamHelp[] =
    "usage: bellwether stream --pool P --stream S [--rate N] [--follow] [--batch N] FILE.csv\n"
    "\n"
    "Sends a CSV file's rows as the frames of one stream (seq = the data row number). The\n"
    "header names the columns: `timestamp`, `action`, `behavior_prob` and `restart` are\n"
    "optional, every other column is a signal; an empty cell is a missing value.\n"
    "\n"
    "  --rate N     send at most N frames per second (default: as fast as the daemon takes\n"
    "               them)\n"
    "  --follow     at the end of the file keep waiting for new complete rows (checked\n"
    "               every 200 ms) until Ctrl-C, like a log tail; a partly written last row\n"
    "               waits for its newline\n"
    "  --batch N    frames per batch, 1..10000 (default 256)\n"
    "\n"
    "If the daemon restarts or the connection breaks, the command reconnects, learns the\n"
    "stream's durable seq and resends from there; frames the daemon already applied are\n"
    "skipped, never learned twice. Frames the daemon rejects are listed (the first five)\n"
    "and the rest are sent. On a terminal, stderr shows frames sent, the rate, the ETA\n"
    "and the rejected and duplicate counts, refreshed 4 times a second; otherwise a line\n"
    "every 5 s.\n"
    "\n"
    "exit: 0 all sent (or --follow stopped by Ctrl-C); 1 bad arguments or unreadable file;\n"
    "      2 server error; 3 partial (frames rejected, a bad row after frames were sent,\n"
    "      Ctrl-C before the end of the file without --follow, or the followed file was\n"
    "      truncated)\n"
    "\n"
    "examples:\n"
    "  bellwether stream --pool grid --stream uk ../shared/data/halfhourly-demand-2000.csv\n"
    "  bellwether stream --pool grid --stream uk --rate 50 --follow /var/log/meter.csv\n";

volatile std::sig_atomic_t g_interrupted = 0;

void OnInterrupt(int) {
  if (g_interrupted) _exit(130);  // a second Ctrl-C: stop at once
  g_interrupted = 1;
}

// A read-only view of a file as a stream of lines. With `follow`, only complete lines
// (ending in '\n') are handed out: at the current end of the file it reports EOF, and
// after the caller clears the istream's state, reading picks up what was appended.
// Without `follow`, a last line without a newline is handed out at the end.
class FileLineBuf : public std::streambuf {
 public:
  FileLineBuf(int fd, bool follow) : fd_(fd), follow_(follow) {}
  ~FileLineBuf() override {
    if (fd_ >= 0) close(fd_);
  }
  FileLineBuf(const FileLineBuf&) = delete;
  FileLineBuf& operator=(const FileLineBuf&) = delete;

  // Bytes handed out so far (the reader's position in the file).
  uint64_t consumed() const {
    return read_ - carry_.size() - static_cast<uint64_t>(egptr() - gptr());
  }
  // The file's current size, or -1.
  int64_t FileSize() const {
    struct stat st;
    if (fstat(fd_, &st) != 0 || !S_ISREG(st.st_mode)) return -1;
    return st.st_size;
  }
  // The file became shorter than what was already read (truncated or replaced).
  bool Truncated() const {
    const int64_t size = FileSize();
    return size >= 0 && static_cast<uint64_t>(size) < read_;
  }
  int error() const { return errno_; }

 protected:
  int_type underflow() override {
    if (gptr() < egptr()) return traits_type::to_int_type(*gptr());
    std::string data = std::move(carry_);
    carry_.clear();
    char chunk[1 << 16];
    while (true) {
      ssize_t n = read(fd_, chunk, sizeof(chunk));
      if (n < 0 && errno == EINTR) continue;
      if (n < 0) {
        errno_ = errno;
        n = 0;
      }
      read_ += static_cast<uint64_t>(n);
      data.append(chunk, static_cast<size_t>(n));
      if (!follow_) {
        if (n == 0 && data.empty()) return traits_type::eof();
        if (n == 0 || data.size() >= sizeof(chunk)) break;
        continue;
      }
      const size_t last_newline = data.rfind('\n');
      if (last_newline != std::string::npos) {
        carry_ = data.substr(last_newline + 1);
        data.resize(last_newline + 1);
        break;
      }
      if (n == 0) {  // no complete line yet: keep the partial one for later
        carry_ = std::move(data);
        return traits_type::eof();
      }
    }
    buffer_ = std::move(data);
    setg(buffer_.data(), buffer_.data(), buffer_.data() + buffer_.size());
    return traits_type::to_int_type(*gptr());
  }

 private:
  int fd_;
  bool follow_;
  std::string buffer_;  // what the get area points into
  std::string carry_;   // a partial last line (follow mode)
  uint64_t read_ = 0;   // bytes read from the file
  int errno_ = 0;
};

std::string Duration(double seconds) {
  if (!(seconds >= 0) || seconds > 1e7) return "--";
  const auto s = static_cast<int64_t>(seconds + 0.5);
  if (s >= 3600) return absl::StrFormat("%d:%02d:%02d", s / 3600, s / 60 % 60, s % 60);
  return absl::StrFormat("%d:%02d", s / 60, s % 60);
}

// The progress display: on a terminal one line on stderr redrawn ~4 times a second,
// otherwise a plain line every 5 s.
class ProgressDisplay {
 public:
  ProgressDisplay(const FileLineBuf* file, bool follow)
      : file_(file), follow_(follow), tty_(isatty(STDERR_FILENO) == 1) {
    start_ = last_ = absl::Now();
    window_.push_back({start_, 0});
  }

  struct Counts {
    uint64_t sent = 0, read = 0, rejected = 0, duplicates = 0, applied_seq = 0;
  };

  void MaybeShow(const Counts& c, bool waiting) {
    const absl::Time now = absl::Now();
    if (now - last_ < (tty_ ? absl::Milliseconds(250) : absl::Seconds(5))) return;
    last_ = now;
    window_.push_back({now, c.sent});
    while (window_.size() > 2 && now - window_[1].first >= absl::Seconds(3)) window_.pop_front();
    const double dt = absl::ToDoubleSeconds(now - window_.front().first);
    const double rate = dt > 0 ? static_cast<double>(c.sent - window_.front().second) / dt : 0;
    std::string line = absl::StrFormat("sent %d frames (applied seq %d)  %.0f frames/s", c.sent,
                                       c.applied_seq, rate);
    const int64_t size = file_->FileSize();
    const uint64_t at = file_->consumed();
    if (follow_) {
      if (waiting) absl::StrAppend(&line, "  waiting for new rows");
    } else if (size > 0 && c.read > 0) {
      const double fraction = std::min(1.0, static_cast<double>(at) / static_cast<double>(size));
      const double bytes_per_frame = static_cast<double>(at) / static_cast<double>(c.read);
      const double left =
          static_cast<double>(size - std::min<int64_t>(size, at)) / bytes_per_frame +
          static_cast<double>(c.read - c.sent);
      absl::StrAppend(&line, absl::StrFormat("  %.0f%%  ETA %s", 100 * fraction,
                                             rate > 0 ? Duration(left / rate) : "--"));
    }
    absl::StrAppend(&line, "  rejected ", c.rejected, "  duplicates ", c.duplicates);
    if (tty_) {
      std::cerr << "\r\033[K" << line << std::flush;
      shown_ = true;
    } else if (!waiting || c.sent != printed_sent_) {  // an idle tail prints nothing new
      std::cerr << "bellwether: stream: " << line << "\n" << std::flush;
      printed_sent_ = c.sent;
    }
  }

  // Clears the terminal line (before other output, and at the end).
  void Clear() {
    if (tty_ && shown_) std::cerr << "\r\033[K" << std::flush;
    shown_ = false;
  }

 private:
  const FileLineBuf* file_;
  bool follow_;
  bool tty_;
  bool shown_ = false;
  uint64_t printed_sent_ = ~uint64_t{0};
  absl::Time start_, last_;
  std::deque<std::pair<absl::Time, uint64_t>> window_;  // (time, frames sent)
};

}  // namespace

int Stream(const Args& args) {
  if (args.Has("help")) {
    std::cout << kStreamHelp;
    return kExitOk;
  }
  if (!args.Has("pool") || !args.Has("stream") || args.positional.size() != 1) {
    return UsageError("stream: expected --pool P --stream S FILE.csv");
  }
  const std::string pool = args.Flag("pool"), stream = args.Flag("stream");
  const std::string path = args.positional[0];
  int batch_size = 256;
  if (args.Has("batch")) {
    if (!absl::SimpleAtoi(args.Flag("batch"), &batch_size) || batch_size < 1 ||
        batch_size > 10000) {
      return UsageError("--batch: expected a number of frames in 1..10000");
    }
  }
  double rate = 0;  // 0: unpaced
  if (args.Has("rate")) {
    if (!absl::SimpleAtod(args.Flag("rate"), &rate) || !(rate > 0 && rate <= 1e6)) {
      return UsageError("--rate: expected frames per second in (0, 1000000]");
    }
  }
  const bool follow = args.Has("follow");

  const int fd = open(path.c_str(), O_RDONLY | O_CLOEXEC);
  if (fd < 0) {
    std::cerr << "bellwether: " << path << ": cannot open: " << std::strerror(errno) << "\n";
    return kExitUsage;
  }
  FileLineBuf file(fd, follow);
  auto owned_in = std::make_unique<std::istream>(&file);
  std::istream* in = owned_in.get();

  struct sigaction sa = {};
  sa.sa_handler = OnInterrupt;
  sigemptyset(&sa.sa_mask);
  sigaction(SIGINT, &sa, nullptr);
  sigaction(SIGTERM, &sa, nullptr);
  auto sleep_unless_interrupted = [](absl::Duration d) {
    const absl::Time until = absl::Now() + d;
    while (!g_interrupted && absl::Now() < until) {
      absl::SleepFor(std::min(until - absl::Now(), absl::Milliseconds(20)));
    }
  };
  if (follow) {  // the header may not be written yet
    while (!g_interrupted && in->rdbuf()->sgetc() == std::char_traits<char>::eof()) {
      sleep_unless_interrupted(absl::Milliseconds(200));
    }
    if (g_interrupted) return kExitOk;
  }
  auto reader = CsvFrameReader::FromStream(std::move(owned_in), path);
  if (!reader.ok()) {
    std::cerr << "bellwether: " << reader.status().message() << "\n";
    return kExitUsage;
  }

  auto client = ConnectClient(args);
  // Without this, a daemon that is not there would be retried by the resuming session
  // for half a minute.
  if (!client->WaitUntilReachable(absl::Seconds(5)).ok()) {
    return ServerError(absl::UnavailableError(
        absl::StrCat("cannot reach ", args.server, " within 5 s (is bellwetherd running?)")));
  }
  // Survives a daemon restart: resends what was not yet durable, skips what was applied.
  ResumingIngest session(client.get(), pool, stream, (*reader)->signal_columns());
  ProgressDisplay display(&file, follow);
  ProgressDisplay::Counts counts;
  uint64_t durable_seq = 0, ack_duplicates = 0;
  constexpr uint64_t kRejectionsShown = 5;
  v1::FrameBatch batch;
  auto update_counts = [&] { counts.duplicates = ack_duplicates + session.already_durable(); };
  auto flush = [&]() -> absl::Status {
    if (batch.frames_size() == 0) return absl::OkStatus();
    auto ack = session.Send(batch);
    if (!ack.ok()) return ack.status();
    counts.sent += static_cast<uint64_t>(batch.frames_size());
    counts.applied_seq = ack->applied_seq();
    durable_seq = ack->durable_seq();
    ack_duplicates += ack->duplicates();
    for (const v1::FrameRejection& r : ack->rejected()) {
      if (counts.rejected++ < kRejectionsShown) {
        display.Clear();
        std::cerr << "bellwether: rejected frame seq " << r.seq() << ": " << r.reason() << "\n";
      }
    }
    update_counts();
    batch.Clear();
    return absl::OkStatus();
  };
  auto server_error = [&](const absl::Status& s) {
    display.Clear();
    std::cerr << "bellwether: stopped after " << counts.sent << " frames (applied seq "
              << counts.applied_seq << ")\n";
    return ServerError(s);
  };

  absl::Time next_due = absl::Now();
  bool interrupted_early = false, truncated = false;
  while (true) {
    if (g_interrupted) {
      interrupted_early = !follow;
      break;
    }
    v1::Frame frame;
    auto more = (*reader)->Next(&frame);
    if (!more.ok()) {
      if (auto s = flush(); !s.ok()) return server_error(s);
      display.Clear();
      std::cerr << "bellwether: " << more.status().message() << "\n"
                << "bellwether: stopped after " << counts.sent << " frames (applied seq "
                << counts.applied_seq << ")\n";
      return counts.sent > 0 ? kExitPartial : kExitUsage;
    }
    if (!*more) {
      if (file.error() != 0) {
        if (auto s = flush(); !s.ok()) return server_error(s);
        display.Clear();
        std::cerr << "bellwether: " << path << ": read failed: " << std::strerror(file.error())
                  << "\n";
        return counts.sent > 0 ? kExitPartial : kExitUsage;
      }
      if (!follow) break;
      // Tail: send what we have, then wait for more complete rows.
      if (auto s = flush(); !s.ok()) return server_error(s);
      if (file.Truncated()) {
        display.Clear();
        std::cerr << "bellwether: " << path << " became shorter than what was already sent "
                  << "(truncated or replaced); stopping\n";
        truncated = true;
        break;
      }
      display.MaybeShow(counts, /*waiting=*/true);
      sleep_unless_interrupted(absl::Milliseconds(200));
      in->clear();
      continue;
    }
    ++counts.read;
    if (rate > 0) {
      // Each frame is due 1/rate after the one before: send what is ready, then wait.
      // After a stall (a reconnect, or waiting for rows with --follow) at most one
      // second's worth is caught up, so the rate holds as a cap.
      const absl::Time now = absl::Now();
      if (next_due < now - absl::Seconds(1)) next_due = now - absl::Seconds(1);
      if (next_due > now) {
        if (auto s = flush(); !s.ok()) return server_error(s);
        while (!g_interrupted && absl::Now() < next_due) {
          display.MaybeShow(counts, false);
          absl::SleepFor(std::min(next_due - absl::Now(), absl::Milliseconds(50)));
        }
      }
      next_due += absl::Seconds(1.0 / rate);
    }
    *batch.add_frames() = std::move(frame);
    if (batch.frames_size() >= batch_size) {
      if (auto s = flush(); !s.ok()) return server_error(s);
    }
    display.MaybeShow(counts, false);
  }
  if (auto s = flush(); !s.ok()) return server_error(s);
  if (auto s = session.Finish(); !s.ok()) return server_error(s);
  update_counts();
  display.Clear();
  if (session.reconnects() > 0) {
    std::cerr << "bellwether: reconnected " << session.reconnects()
              << " times and resent from the durable seq\n";
  }
  std::cout << "streamed " << counts.sent << " frames to " << pool << "/" << stream
            << " (applied seq " << counts.applied_seq;
  if (durable_seq > 0) std::cout << ", durable seq " << durable_seq;
  std::cout << ")\n";
  if (counts.duplicates > 0) {
    std::cout << counts.duplicates << " frames were already applied (seq at or below the "
              << "stream's) and were skipped\n";
  }
  if (counts.rejected > 0) {
    std::cerr << "bellwether: " << counts.rejected << " of " << counts.sent
              << " frames were rejected"
              << (counts.rejected > kRejectionsShown ? " (first 5 shown)" : "") << "\n";
    return kExitPartial;
  }
  if (truncated) return kExitPartial;
  if (interrupted_early) {
    std::cerr << "bellwether: interrupted before the end of " << path << "\n";
    return kExitPartial;
  }
  return kExitOk;
}

}  // namespace bellwether::cli
