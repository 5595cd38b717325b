// The `bellwether` CLI's read and stream commands against the real bellwetherd on
// 127.0.0.1 (port 0): watch, progress, health, predict / pools / describe with
// --output json (parsed back into the proto messages), stream with --rate and --follow,
// each command's --help and bad input, and a stream that rides through a SIGKILL and
// restart of the daemon, ending bit-identical to an in-process replay.
//
// Every child process is bounded: it gets a deadline, is killed past it, and dies with
// the test (PR_SET_PDEATHSIG).
#include <arpa/inet.h>
#include <fcntl.h>
#include <netinet/in.h>
#include <poll.h>
#include <signal.h>
#include <stdlib.h>
#include <sys/prctl.h>
#include <sys/socket.h>
#include <sys/wait.h>
#include <termios.h>
#include <unistd.h>

#include <algorithm>
#include <chrono>
#include <cstdio>
#include <cstring>
#include <fstream>
#include <functional>
#include <sstream>
#include <string>
#include <thread>
#include <vector>

#include "absl/strings/match.h"
#include "absl/strings/numbers.h"
#include "absl/strings/str_cat.h"
#include "absl/strings/str_join.h"
#include "absl/strings/str_split.h"
#include "absl/strings/string_view.h"
#include "absl/time/clock.h"
#include "absl/time/time.h"
#include "client/bellwether_client.h"
#include "core/io/csv_frame_reader.h"
#include "core/io/spec_json.h"
#include "core/pool.h"
#include "core/replay.h"
#include "gmock/gmock.h"
#include "google/protobuf/util/json_util.h"
#include "grpc/health/v1/health.pb.h"
#include "gtest/gtest.h"
#include "server/state_dir.h"
#include "tests/integration/daemon_process.h"
#include "tests/integration/learned_state.h"
#include "tests/test_util.h"

namespace bellwether {
namespace {

using ::testing::HasSubstr;
using ::testing::Not;

std::string GridSpecPath() {
  return std::string(BW_TEST_DATA_DIR) + "/../../deploy/examples/grid.json";
}
std::string DemandPath() { return std::string(BW_SHARED_DATA_DIR) + "/halfhourly-demand-2000.csv"; }
constexpr size_t kDemandRows = 2688;

std::string ReadText(const std::string& path) {
  std::ifstream in(path, std::ios::binary);
  std::stringstream s;
  s << in.rdbuf();
  return s.str();
}

// The demand CSV's header and data lines.
std::vector<std::string> DemandLines() {
  std::vector<std::string> lines = absl::StrSplit(ReadText(DemandPath()), '\n', absl::SkipEmpty());
  return lines;
}

// A child process running `argv`, its stdout and stderr in files, or (with `pty`) both on
// a pseudo-terminal, so the command sees a terminal. Killed when it outlives Wait's
// deadline, or the test.
class Child {
 public:
  explicit Child(std::vector<std::string> argv, bool pty = false) {
    dir_ = testing::MakeTempDir("child");
    out_path_ = dir_ + "/out";
    err_path_ = dir_ + "/err";
    std::string slave_name;
    if (pty) {
      master_ = posix_openpt(O_RDWR | O_NOCTTY);
      if (master_ < 0 || grantpt(master_) != 0 || unlockpt(master_) != 0) return;
      slave_name = ptsname(master_);
    }
    pid_ = fork();
    if (pid_ == 0) {
      prctl(PR_SET_PDEATHSIG, SIGKILL);
      if (pty) {
        setsid();
        const int slave = open(slave_name.c_str(), O_RDWR);
        struct termios t;
        if (tcgetattr(slave, &t) == 0) {
          cfmakeraw(&t);  // no "\n" -> "\r\n" translation
          tcsetattr(slave, TCSANOW, &t);
        }
        dup2(slave, 1);
        dup2(slave, 2);
      } else {
        const int out = open(out_path_.c_str(), O_WRONLY | O_CREAT | O_TRUNC, 0644);
        const int err = open(err_path_.c_str(), O_WRONLY | O_CREAT | O_TRUNC, 0644);
        dup2(out, 1);
        dup2(err, 2);
      }
      const int null = open("/dev/null", O_RDONLY);
      dup2(null, 0);
      std::vector<char*> args;
      for (std::string& a : argv) args.push_back(a.data());
      args.push_back(nullptr);
      execv(args[0], args.data());
      _exit(127);
    }
  }
  ~Child() {
    if (pid_ > 0 && !exited_) {
      kill(pid_, SIGKILL);
      waitpid(pid_, nullptr, 0);
    }
    if (master_ >= 0) close(master_);
  }
  Child(const Child&) = delete;
  Child& operator=(const Child&) = delete;

  void Signal(int sig) {
    if (pid_ > 0 && !exited_) kill(pid_, sig);
  }
  bool Running() {
    Poll(absl::ZeroDuration());
    return !exited_;
  }
  // Waits up to `timeout` for the child to exit (SIGKILL after it: timed_out() is then
  // true) and returns its exit code and output.
  testing::CommandResult Wait(absl::Duration timeout) {
    const absl::Time deadline = absl::Now() + timeout;
    while (!exited_ && absl::Now() < deadline) Poll(absl::Milliseconds(20));
    if (!exited_) {
      timed_out_ = true;
      kill(pid_, SIGKILL);
      int status = 0;
      waitpid(pid_, &status, 0);
      exited_ = true;
      code_ = 128 + SIGKILL;
    }
    DrainPty();
    testing::CommandResult r;
    r.exit_code = code_;
    r.out = master_ >= 0 ? pty_text_ : ReadText(out_path_);
    r.err = master_ >= 0 ? pty_text_ : ReadText(err_path_);
    return r;
  }
  bool timed_out() const { return timed_out_; }
  // What the child wrote so far (the terminal's text, or its stdout file).
  std::string OutSoFar() {
    Poll(absl::ZeroDuration());
    return master_ >= 0 ? pty_text_ : ReadText(out_path_);
  }
  std::string ErrSoFar() { return master_ >= 0 ? OutSoFar() : ReadText(err_path_); }

 private:
  void Poll(absl::Duration wait) {
    if (master_ >= 0) {
      struct pollfd p = {master_, POLLIN, 0};
      if (poll(&p, 1, static_cast<int>(absl::ToInt64Milliseconds(wait))) > 0) ReadPty();
    } else if (wait > absl::ZeroDuration()) {
      absl::SleepFor(wait);
    }
    if (exited_ || pid_ <= 0) return;
    int status = 0;
    if (waitpid(pid_, &status, WNOHANG) == pid_) {
      exited_ = true;
      code_ = WIFEXITED(status) ? WEXITSTATUS(status) : 128 + WTERMSIG(status);
    }
  }
  void ReadPty() {
    char buf[4096];
    const ssize_t n = read(master_, buf, sizeof(buf));
    if (n > 0) pty_text_.append(buf, static_cast<size_t>(n));
  }
  void DrainPty() {
    if (master_ < 0) return;
    while (true) {
      struct pollfd p = {master_, POLLIN, 0};
      if (poll(&p, 1, 50) <= 0) return;
      char buf[4096];
      const ssize_t n = read(master_, buf, sizeof(buf));
      if (n <= 0) return;  // EIO once the child's side closed
      pty_text_.append(buf, static_cast<size_t>(n));
    }
  }

  pid_t pid_ = -1;
  int master_ = -1;
  bool exited_ = false, timed_out_ = false;
  int code_ = -1;
  std::string dir_, out_path_, err_path_, pty_text_;
};

// Runs the CLI to completion within `timeout`.
testing::CommandResult Cli(const std::vector<std::string>& args,
                           absl::Duration timeout = absl::Seconds(60), bool* timed_out = nullptr) {
  std::vector<std::string> argv = {BW_CLI_PATH};
  argv.insert(argv.end(), args.begin(), args.end());
  Child child(argv);
  testing::CommandResult r = child.Wait(timeout);
  if (timed_out != nullptr) *timed_out = child.timed_out();
  return r;
}

// A 127.0.0.1 port nothing listens on (bound, then closed again).
int ClosedPort() {
  const int fd = socket(AF_INET, SOCK_STREAM, 0);
  sockaddr_in addr = {};
  addr.sin_family = AF_INET;
  addr.sin_addr.s_addr = htonl(INADDR_LOOPBACK);
  addr.sin_port = 0;
  socklen_t len = sizeof(addr);
  int port = 0;
  if (bind(fd, reinterpret_cast<sockaddr*>(&addr), sizeof(addr)) == 0 &&
      getsockname(fd, reinterpret_cast<sockaddr*>(&addr), &len) == 0) {
    port = ntohs(addr.sin_port);
  }
  close(fd);
  return port;
}

template <typename M>
M ParseJson(const std::string& line) {
  M m;
  const auto status = google::protobuf::util::JsonStringToMessage(line, &m);
  EXPECT_TRUE(status.ok()) << status.message() << " in: " << line;
  return m;
}

// Polls `done` every 20 ms up to `timeout`.
bool WaitFor(const std::function<bool()>& done, absl::Duration timeout) {
  const absl::Time deadline = absl::Now() + timeout;
  while (absl::Now() < deadline) {
    if (done()) return true;
    absl::SleepFor(absl::Milliseconds(20));
  }
  return done();
}

uint64_t LastSeq(Client& client, const std::string& pool = "grid") {
  auto d = client.DescribePool(pool, absl::Seconds(2));
  if (!d.ok() || d->streams_size() == 0) return 0;
  return d->streams(0).last_seq();
}

using testing::DaemonState;
using testing::DemandFrames;
using testing::ReferenceState;

// The last row's predictions of an in-process replay of `csv` (bellwether replay's engine).
std::vector<double> ReplayLastPredictions(const v1::PoolSpec& spec, const std::string& csv) {
  auto pool = Pool::Create(spec);
  EXPECT_TRUE(pool.ok());
  auto reader = CsvFrameReader::Open(csv);
  EXPECT_TRUE(reader.ok());
  std::vector<double> last;
  const absl::Status s =
      Replay(**pool, **reader, "uk", [&](const v1::Frame&, absl::Span<const double> p) {
        last.assign(p.begin(), p.end());
        return absl::OkStatus();
      });
  EXPECT_TRUE(s.ok()) << s;
  return last;
}

class CliTest : public ::testing::Test {
 protected:
  void SetUp() override {
    ASSERT_THAT(daemon_.address(), HasSubstr("127.0.0.1:")) << "daemon did not start";
    server_ = daemon_.address();
    client_ = Client::Connect(server_);
    auto spec = ReadPoolSpecFile(GridSpecPath());
    ASSERT_TRUE(spec.ok()) << spec.status();
    spec_ = *spec;
    ASSERT_TRUE(client_->ApplyPool(spec_).ok());
  }

  // Streams the first `rows` rows of the demand data through the CLI.
  void StreamDemand(size_t rows = kDemandRows) {
    std::string csv = DemandPath();
    if (rows < kDemandRows) {
      csv = testing::MakeTempDir("head") + "/head.csv";
      const std::vector<std::string> lines = DemandLines();
      std::ofstream out(csv);
      for (size_t i = 0; i <= rows; ++i) out << lines[i] << "\n";
    }
    const auto r = Cli({"--server", server_, "stream", "--pool", "grid", "--stream", "uk", csv});
    ASSERT_EQ(r.exit_code, 0) << r.err;
    ASSERT_THAT(r.out, HasSubstr(absl::StrCat("streamed ", rows, " frames to grid/uk")));
  }

  testing::DaemonProcess daemon_;  // declared first: stopped after the client goes
  std::string server_;
  std::unique_ptr<Client> client_;
  v1::PoolSpec spec_;
};

// ---------------------------------------------------------------------------------------
// --help, unknown flags, bad --output

TEST(CliHelp, EveryReadCommandHasItsOwnHelpWithAnExample) {
  for (const char* command :
       {"stream", "watch", "progress", "health", "predict", "pools", "describe"}) {
    const auto r = Cli({command, "--help"}, absl::Seconds(20));
    EXPECT_EQ(r.exit_code, 0) << command;
    EXPECT_THAT(r.out, HasSubstr(absl::StrCat("usage: bellwether ", command))) << command;
    EXPECT_THAT(r.out, HasSubstr("example")) << command;
  }
  // The general usage lists the new commands.
  const auto r = Cli({"--help"}, absl::Seconds(20));
  EXPECT_EQ(r.exit_code, 0);
  for (const char* command :
       {"watch --pool", "progress --pool", "health", "--follow", "--rate", "--output json"}) {
    EXPECT_THAT(r.out, HasSubstr(command));
  }
}

TEST(CliHelp, UnknownFlagsAndBadValuesAreUsageErrors) {
  // Nothing is contacted: these fail before any call (the server address is closed).
  const std::string server = absl::StrCat("127.0.0.1:", ClosedPort());
  const std::vector<std::vector<std::string>> cases = {
      {"watch", "--pool", "grid", "--stream", "uk", "--bogus", "1"},
      {"progress", "--pool", "grid", "--stream", "uk", "--bogus", "1"},
      {"health", "--bogus", "1"},
      {"predict", "--pool", "grid", "--stream", "uk", "--bogus", "1"},
      {"pools", "--bogus", "1"},
      {"describe", "--pool", "grid", "--bogus", "1"},
      {"stream", "--pool", "grid", "--stream", "uk", "--bogus", "1", DemandPath()},
  };
  for (const auto& c : cases) {
    std::vector<std::string> args = {"--server", server};
    args.insert(args.end(), c.begin(), c.end());
    const auto r = Cli(args, absl::Seconds(20));
    EXPECT_EQ(r.exit_code, 1) << c[0] << ": " << r.err;
    EXPECT_THAT(r.err, HasSubstr(c[0] + ": unknown flag --bogus"));
  }
  const std::vector<std::vector<std::string>> bad_values = {
      {"predict", "--pool", "grid", "--stream", "uk", "--output", "yaml"},
      {"watch", "--pool", "grid", "--stream", "uk", "--interval-ms", "5"},
      {"watch", "--pool", "grid", "--stream", "uk", "--count", "0"},
      {"watch", "--pool", "grid"},
      {"progress", "--stream", "uk"},
      {"stream", "--pool", "grid", "--stream", "uk", "--rate", "-3", DemandPath()},
      {"stream", "--pool", "grid", "--stream", "uk"},
      {"health", "--timeout-ms", "0"},
  };
  for (const auto& c : bad_values) {
    std::vector<std::string> args = {"--server", server};
    args.insert(args.end(), c.begin(), c.end());
    const auto r = Cli(args, absl::Seconds(20));
    EXPECT_EQ(r.exit_code, 1) << absl::StrJoin(c, " ") << ": " << r.err;
  }
}

// ---------------------------------------------------------------------------------------
// A daemon that is not there: a clear message naming UNAVAILABLE, exit 2, within a bound.

TEST(CliServerDown, EveryCommandFailsWithUnavailableWithinItsDeadline) {
  const std::string server = absl::StrCat("127.0.0.1:", ClosedPort());
  const std::vector<std::vector<std::string>> cases = {
      {"health"},
      {"pools"},
      {"describe", "--pool", "grid"},
      {"predict", "--pool", "grid", "--stream", "uk"},
      {"progress", "--pool", "grid", "--stream", "uk"},
      {"watch", "--pool", "grid", "--stream", "uk", "--count", "1"},
      {"stream", "--pool", "grid", "--stream", "uk", DemandPath()},
  };
  for (const auto& c : cases) {
    std::vector<std::string> args = {"--server", server};
    args.insert(args.end(), c.begin(), c.end());
    bool timed_out = false;
    // The bound: stream waits up to 5 s for the connection, the others fail fast.
    const auto r = Cli(args, absl::Seconds(30), &timed_out);
    EXPECT_FALSE(timed_out) << c[0] << " did not give up";
    EXPECT_EQ(r.exit_code, 2) << c[0] << ": " << r.err;
    EXPECT_THAT(r.err, HasSubstr("server error UNAVAILABLE")) << c[0];
  }
}

// ---------------------------------------------------------------------------------------
// health

TEST_F(CliTest, HealthSaysServingAndParsesAsJson) {
  auto r = Cli({"--server", server_, "health"}, absl::Seconds(20));
  EXPECT_EQ(r.exit_code, 0) << r.err;
  EXPECT_EQ(r.out, "SERVING\n");
  r = Cli({"--server", server_, "health", "--output", "json"}, absl::Seconds(20));
  EXPECT_EQ(r.exit_code, 0) << r.err;
  const auto h = ParseJson<grpc::health::v1::HealthCheckResponse>(r.out);
  EXPECT_EQ(h.status(), grpc::health::v1::HealthCheckResponse::SERVING);
  // A service the daemon does not know: the health service says NOT_FOUND.
  r = Cli({"--server", server_, "health", "--service", "no.such.Service"}, absl::Seconds(20));
  EXPECT_EQ(r.exit_code, 2);
  EXPECT_THAT(r.err, HasSubstr("NOT_FOUND"));
}

// ---------------------------------------------------------------------------------------
// predict, pools, describe, progress: text and --output json

TEST_F(CliTest, ReadCommandsPrintJsonThatParsesBackIntoTheirMessages) {
  ASSERT_NO_FATAL_FAILURE(StreamDemand());
  auto want = client_->Predict("grid", "uk");
  ASSERT_TRUE(want.ok());

  auto r =
      Cli({"--server", server_, "predict", "--pool", "grid", "--stream", "uk", "--output", "json"});
  ASSERT_EQ(r.exit_code, 0) << r.err;
  EXPECT_EQ(std::count(r.out.begin(), r.out.end(), '\n'), 1) << "one object, one line";
  const auto p = ParseJson<v1::StreamPredictions>(r.out);
  EXPECT_EQ(p.as_of_seq(), kDemandRows);
  ASSERT_EQ(p.predictions_size(), 1);
  EXPECT_EQ(p.predictions(0).question(), "demand_next_12h");
  EXPECT_EQ(p.predictions(0).unit(), "MW");
  // Protobuf's JSON doubles round-trip exactly.
  EXPECT_EQ(p.predictions(0).value(), want->predictions(0).value());
  EXPECT_EQ(p.predictions(0).verified().count(), want->predictions(0).verified().count());

  r = Cli({"--server", server_, "pools", "--output", "json"});
  ASSERT_EQ(r.exit_code, 0) << r.err;
  const auto pools = ParseJson<v1::ListPoolsResponse>(r.out);
  ASSERT_EQ(pools.pools_size(), 1);
  EXPECT_EQ(pools.pools(0).name(), "grid");
  EXPECT_EQ(pools.pools(0).streams(), 1u);
  EXPECT_EQ(pools.pools(0).questions(), 1u);

  r = Cli({"--server", server_, "describe", "--pool", "grid", "--output", "json"});
  ASSERT_EQ(r.exit_code, 0) << r.err;
  const auto d = ParseJson<v1::PoolDescription>(r.out);
  EXPECT_EQ(d.spec().name(), "grid");
  ASSERT_EQ(d.streams_size(), 1);
  EXPECT_EQ(d.streams(0).name(), "uk");
  EXPECT_EQ(d.streams(0).frames_applied(), kDemandRows);

  r = Cli(
      {"--server", server_, "progress", "--pool", "grid", "--stream", "uk", "--output", "json"});
  ASSERT_EQ(r.exit_code, 0) << r.err;
  const auto g = ParseJson<v1::ProgressResponse>(r.out);
  EXPECT_TRUE(g.history_kept());
  EXPECT_EQ(g.current().as_of_seq(), kDemandRows);
  ASSERT_EQ(g.history_size(), 1);
  EXPECT_GT(g.history(0).progress_size(), 2);
  EXPECT_EQ(g.current().predictions(0).progress().updates(),
            want->predictions(0).progress().updates());

  // The text forms.
  r = Cli({"--server", server_, "predict", "--pool", "grid", "--stream", "uk"});
  ASSERT_EQ(r.exit_code, 0) << r.err;
  EXPECT_THAT(r.out, HasSubstr("demand_next_12h"));
  EXPECT_THAT(r.out, HasSubstr("as of seq 2688"));
  r = Cli({"--server", server_, "pools"});
  ASSERT_EQ(r.exit_code, 0) << r.err;
  EXPECT_THAT(r.out, HasSubstr("grid"));
  r = Cli({"--server", server_, "describe", "--pool", "grid"});
  ASSERT_EQ(r.exit_code, 0) << r.err;
  EXPECT_THAT(r.out, HasSubstr("uk"));
  r = Cli({"--server", server_, "progress", "--pool", "grid", "--stream", "uk"});
  ASSERT_EQ(r.exit_code, 0) << r.err;
  for (const char* part :
       {"demand_next_12h", "updates", "TD error", "RUPEE", "UDE", "weight change", "step size",
        "verified", "NRMSE", "verified RMSE", "samples", "advisory"}) {
    EXPECT_THAT(r.out, HasSubstr(part));
  }
  EXPECT_THAT(r.out, HasSubstr(absl::StrCat("updates         ",
                                            want->predictions(0).progress().updates())));
  EXPECT_THAT(r.out, HasSubstr(want->predictions(0).progress().label()));
}

TEST_F(CliTest, UnknownPoolIsNotFoundWithExit2) {
  const std::vector<std::vector<std::string>> cases = {
      {"describe", "--pool", "nope"},
      {"predict", "--pool", "nope", "--stream", "uk"},
      {"progress", "--pool", "nope", "--stream", "uk"},
      {"watch", "--pool", "nope", "--stream", "uk", "--count", "1"},
      {"watch", "--pool", "grid", "--stream", "uk", "--questions", "nope", "--count", "1"},
      {"stream", "--pool", "nope", "--stream", "uk", DemandPath()},
  };
  for (const auto& c : cases) {
    std::vector<std::string> args = {"--server", server_};
    args.insert(args.end(), c.begin(), c.end());
    bool timed_out = false;
    const auto r = Cli(args, absl::Seconds(30), &timed_out);
    EXPECT_FALSE(timed_out) << c[0];
    EXPECT_EQ(r.exit_code, 2) << c[0] << ": " << r.err;
    EXPECT_THAT(r.err, HasSubstr("server error NOT_FOUND")) << c[0];
    EXPECT_THAT(r.err, HasSubstr("nope")) << c[0];
  }
  // A known pool, a stream without frames.
  const auto r = Cli({"--server", server_, "progress", "--pool", "grid", "--stream", "ghost"});
  EXPECT_EQ(r.exit_code, 2);
  EXPECT_THAT(r.err, HasSubstr("NOT_FOUND"));
  EXPECT_THAT(r.err, HasSubstr("ghost"));
}

// ---------------------------------------------------------------------------------------
// stream: bad input

TEST_F(CliTest, StreamNamesAMissingFileAndABadRow) {
  auto r = Cli({"--server", server_, "stream", "--pool", "grid", "--stream", "uk",
                "/nonexistent/meter.csv"});
  EXPECT_EQ(r.exit_code, 1);
  EXPECT_THAT(r.err, HasSubstr("/nonexistent/meter.csv: cannot open"));

  // A bad cell on line 5 (the 4th data row): the 3 rows before it are sent, exit 3.
  const std::string csv = testing::MakeTempDir("badrow") + "/bad.csv";
  {
    const std::vector<std::string> lines = DemandLines();
    std::ofstream out(csv);
    for (size_t i = 0; i <= 3; ++i) out << lines[i] << "\n";
    out << "2000-06-05T02:00:00,lots\n" << lines[5] << "\n";
  }
  r = Cli({"--server", server_, "stream", "--pool", "grid", "--stream", "uk", csv});
  EXPECT_EQ(r.exit_code, 3) << r.err;
  EXPECT_THAT(r.err, HasSubstr(csv + ":5: column 'demand_mw': 'lots' is not a number"));
  EXPECT_THAT(r.err, HasSubstr("stopped after 3 frames"));
  EXPECT_EQ(LastSeq(*client_), 3u);
}

// `apply` reports a malformed spec with the file and what the JSON parser says.
TEST_F(CliTest, ApplyNamesTheFileLineAndColumnOfABadSpec) {
  const std::string spec = testing::MakeTempDir("badspec") + "/bad.json";
  {
    std::ofstream out(spec);
    out << "{\"name\": \"grid2\",\n \"signals\": [\n  {\"name\": \"x\" \"unit\": \"MW\"}]}\n";
  }
  const auto r = Cli({"--server", server_, "apply", spec});
  EXPECT_EQ(r.exit_code, 1);
  EXPECT_THAT(r.err, HasSubstr(spec + ": pool spec JSON: line 3, column 16: expected ',' or "
                                      "'}' after a value"));
  auto pools = client_->ListPools();
  ASSERT_TRUE(pools.ok());
  EXPECT_EQ(pools->pools_size(), 1) << "nothing applied";
}

// ---------------------------------------------------------------------------------------
// watch while frames are streamed

TEST_F(CliTest, WatchSeesUpdatesWhileAStreamIsPacedThenStopsAtCount) {
  // The stream is paced to ~100 frames/s (about 27 s for the file); watch asks for an
  // update at most every 100 ms and stops after 2; then the stream is interrupted.
  Child stream({BW_CLI_PATH, "--server", server_, "stream", "--pool", "grid", "--stream", "uk",
                "--rate", "100", DemandPath()});
  const auto text = Cli({"--server", server_, "watch", "--pool", "grid", "--stream", "uk",
                         "--interval-ms", "100", "--count", "2"});
  EXPECT_EQ(text.exit_code, 0) << text.err;
  const std::vector<std::string> lines = absl::StrSplit(text.out, '\n', absl::SkipEmpty());
  ASSERT_EQ(lines.size(), 2u) << text.out;
  uint64_t previous = 0;
  for (const std::string& line : lines) {
    EXPECT_THAT(line, HasSubstr("grid/uk"));
    EXPECT_THAT(line, HasSubstr("demand_next_12h"));
    EXPECT_THAT(line, HasSubstr("MW"));
    const size_t at = line.find("  seq ");
    ASSERT_NE(at, std::string::npos) << line;
    uint64_t seq = 0;
    ASSERT_TRUE(absl::SimpleAtoi(line.substr(at + 6, line.find(' ', at + 6) - (at + 6)), &seq))
        << line;
    EXPECT_GT(seq, previous) << "each update is as of a later frame";
    previous = seq;
  }

  const auto json = Cli({"--server", server_, "watch", "--pool", "grid", "--stream", "uk",
                         "--interval-ms", "100", "--count", "3", "--output", "json"});
  EXPECT_EQ(json.exit_code, 0) << json.err;
  const std::vector<std::string> objects = absl::StrSplit(json.out, '\n', absl::SkipEmpty());
  ASSERT_EQ(objects.size(), 3u) << json.out;
  previous = 0;
  for (const std::string& o : objects) {
    const auto p = ParseJson<v1::StreamPredictions>(o);
    EXPECT_EQ(p.pool(), "grid");
    EXPECT_EQ(p.stream(), "uk");
    EXPECT_GT(p.as_of_seq(), previous);
    previous = p.as_of_seq();
    ASSERT_EQ(p.predictions_size(), 1);
    EXPECT_EQ(p.predictions(0).as_of_seq(), p.as_of_seq());
  }

  // Off a terminal, the stream prints a plain progress line every 5 s.
  ASSERT_TRUE(
      WaitFor([&] { return absl::StrContains(stream.ErrSoFar(), "bellwether: stream: sent"); },
              absl::Seconds(25)))
      << stream.ErrSoFar();
  EXPECT_THAT(stream.ErrSoFar(), HasSubstr("frames/s"));
  EXPECT_THAT(stream.ErrSoFar(), HasSubstr("ETA "));
  EXPECT_THAT(stream.ErrSoFar(), Not(HasSubstr("\033[K")));
  // Ctrl-C before the end of the file: what was read is sent, exit 3 (partial).
  ASSERT_TRUE(stream.Running()) << "the paced stream should still be running";
  stream.Signal(SIGINT);
  const auto s = stream.Wait(absl::Seconds(30));
  EXPECT_EQ(s.exit_code, 3) << s.err;
  EXPECT_THAT(s.err, HasSubstr("interrupted before the end of"));
  EXPECT_THAT(s.out, HasSubstr("streamed "));
  const uint64_t last = LastSeq(*client_);
  EXPECT_GT(last, 0u);
  EXPECT_LT(last, kDemandRows);
  EXPECT_THAT(s.out, HasSubstr(absl::StrCat("streamed ", last, " frames")));
}

TEST_F(CliTest, WatchOnATerminalRedrawsATableAndCtrlCEndsItWithExit0) {
  ASSERT_NO_FATAL_FAILURE(StreamDemand(200));
  Child watch({BW_CLI_PATH, "--server", server_, "watch", "--pool", "grid", "--stream", "uk",
               "--interval-ms", "100"},
              /*pty=*/true);
  // The current answers come first.
  ASSERT_TRUE(
      WaitFor([&] { return absl::StrContains(watch.OutSoFar(), "as of seq"); }, absl::Seconds(20)))
      << watch.OutSoFar();
  watch.Signal(SIGINT);
  const auto r = watch.Wait(absl::Seconds(20));
  EXPECT_FALSE(watch.timed_out());
  EXPECT_EQ(r.exit_code, 0) << r.out;
  EXPECT_THAT(r.out, HasSubstr("\033[H\033[2J")) << "clears and redraws";
  EXPECT_THAT(r.out, HasSubstr("stream uk"));
  EXPECT_THAT(r.out, HasSubstr("demand_next_12h"));
  EXPECT_THAT(r.out, HasSubstr("+/- "));
  EXPECT_THAT(r.out, HasSubstr("       200\n")) << "the as-of seq column";
}

// ---------------------------------------------------------------------------------------
// stream --follow and the progress display

TEST_F(CliTest, FollowSendsAppendedRowsOnlyOnceComplete) {
  const std::vector<std::string> lines = DemandLines();
  const std::string csv = testing::MakeTempDir("follow") + "/growing.csv";
  std::ofstream out(csv);
  for (size_t i = 0; i <= 100; ++i) out << lines[i] << "\n";
  out.flush();
  Child stream({BW_CLI_PATH, "--server", server_, "stream", "--pool", "grid", "--stream", "uk",
                "--follow", csv});
  ASSERT_TRUE(WaitFor([&] { return LastSeq(*client_) == 100; }, absl::Seconds(30)));
  // 50 more rows, and half of the next one: only the complete rows are sent.
  for (size_t i = 101; i <= 150; ++i) out << lines[i] << "\n";
  const std::string row151 = lines[151];
  const size_t half = row151.size() - 2;
  out << row151.substr(0, half);
  out.flush();
  ASSERT_TRUE(WaitFor([&] { return LastSeq(*client_) == 150; }, absl::Seconds(30)));
  absl::SleepFor(absl::Milliseconds(600));  // three polls of the file
  EXPECT_EQ(LastSeq(*client_), 150u) << "a partial row was sent";
  out << row151.substr(half) << "\n";
  out.flush();
  ASSERT_TRUE(WaitFor([&] { return LastSeq(*client_) == 151; }, absl::Seconds(30)));
  ASSERT_TRUE(stream.Running());
  stream.Signal(SIGINT);
  const auto r = stream.Wait(absl::Seconds(30));
  EXPECT_EQ(r.exit_code, 0) << r.err;
  EXPECT_THAT(r.out, HasSubstr("streamed 151 frames to grid/uk"));
  // Exactly the file's first 151 rows were learned, the split row whole.
  EXPECT_TRUE(DaemonState(*client_) == ReferenceState(spec_, DemandFrames(), 151));
}

TEST_F(CliTest, FollowStopsWhenTheFileIsTruncated) {
  const std::vector<std::string> lines = DemandLines();
  const std::string csv = testing::MakeTempDir("follow_trunc") + "/rotating.csv";
  {
    std::ofstream out(csv);
    for (size_t i = 0; i <= 10; ++i) out << lines[i] << "\n";
  }
  Child stream({BW_CLI_PATH, "--server", server_, "stream", "--pool", "grid", "--stream", "uk",
                "--follow", csv});
  ASSERT_TRUE(WaitFor([&] { return LastSeq(*client_) == 10; }, absl::Seconds(30)));
  { std::ofstream out(csv, std::ios::trunc); }  // rotated away under the tail
  const auto r = stream.Wait(absl::Seconds(30));
  EXPECT_FALSE(stream.timed_out());
  EXPECT_EQ(r.exit_code, 3) << r.err;
  EXPECT_THAT(r.err, HasSubstr("became shorter than what was already sent"));
  EXPECT_THAT(r.out, HasSubstr("streamed 10 frames"));
}

TEST_F(CliTest, StreamShowsProgressOnATerminal) {
  Child stream({BW_CLI_PATH, "--server", server_, "stream", "--pool", "grid", "--stream", "uk",
                "--rate", "1000", DemandPath()},
               /*pty=*/true);
  const auto r = stream.Wait(absl::Seconds(60));
  EXPECT_EQ(r.exit_code, 0) << r.out;
  EXPECT_THAT(r.out, HasSubstr("\r\033[K"));
  EXPECT_THAT(r.out, HasSubstr("frames/s"));
  EXPECT_THAT(r.out, HasSubstr("ETA "));
  EXPECT_THAT(r.out, HasSubstr("rejected 0  duplicates 0"));
  EXPECT_THAT(r.out, HasSubstr("streamed 2688 frames to grid/uk"));
  EXPECT_EQ(LastSeq(*client_), kDemandRows);
}

// ---------------------------------------------------------------------------------------
// The resume test: SIGKILL the daemon while `bellwether stream` runs, restart it on the
// same address and state directory; the CLI carries on and nothing is learned twice.

TEST(CliResume, StreamRidesThroughADaemonKillAndRestart) {
  const std::string dir = testing::MakeTempDir("cli_resume");
  auto spec = ReadPoolSpecFile(GridSpecPath());
  ASSERT_TRUE(spec.ok()) << spec.status();
  auto daemon = std::make_unique<testing::DaemonProcess>(std::vector<std::string>{}, dir);
  const std::string address = daemon->address();
  ASSERT_THAT(address, HasSubstr("127.0.0.1:"));
  {
    auto client = Client::Connect(address);
    ASSERT_TRUE(client->ApplyPool(*spec).ok());
  }
  // ~800 frames/s: about 3.4 s for the file.
  Child stream({BW_CLI_PATH, "--server", address, "stream", "--pool", "grid", "--stream", "uk",
                "--rate", "800", DemandPath()});
  uint64_t at_kill = 0;
  {
    auto client = Client::Connect(address);
    ASSERT_TRUE(WaitFor([&] { return (at_kill = LastSeq(*client)) >= 600; }, absl::Seconds(30)));
  }
  daemon->Kill();
  ASSERT_LT(at_kill, kDemandRows) << "the stream ended before the kill";
  ASSERT_TRUE(stream.Running()) << stream.ErrSoFar();
  // Hold the CLI (now retrying) while the daemon comes back, to read what it restored.
  stream.Signal(SIGSTOP);
  absl::SleepFor(absl::Milliseconds(300));
  // Restarted from this (the test's main) thread: the daemon dies with its creating thread.
  daemon =
      std::make_unique<testing::DaemonProcess>(std::vector<std::string>{"--listen", address}, dir);
  ASSERT_EQ(daemon->address(), address);
  auto client = Client::Connect(address);
  auto before = client->DescribePool("grid");
  ASSERT_TRUE(before.ok()) << before.status();
  ASSERT_EQ(before->streams_size(), 1);
  const uint64_t restored = before->streams(0).last_seq();
  // Every frame applied before the kill was in the log (written before it is applied).
  EXPECT_GE(restored, at_kill);
  stream.Signal(SIGCONT);

  const auto r = stream.Wait(absl::Seconds(90));
  EXPECT_FALSE(stream.timed_out());
  EXPECT_EQ(r.exit_code, 0) << r.err;
  EXPECT_THAT(r.err, HasSubstr("reconnected"));
  EXPECT_THAT(r.out, HasSubstr("applied seq 2688, durable seq 2688"));

  auto d = client->DescribePool("grid");
  ASSERT_TRUE(d.ok()) << d.status();
  ASSERT_EQ(d->streams_size(), 1);
  EXPECT_EQ(d->streams(0).last_seq(), kDemandRows);
  // Every frame applied exactly once across the restart: the ones the CLI resent that
  // the daemon already had were skipped as duplicates.
  EXPECT_EQ(d->streams(0).frames_applied(), kDemandRows)
      << "a frame was applied twice, or one was missed";
  EXPECT_EQ(d->streams(0).frames_rejected(), 0u);
  auto p = client->Predict("grid", "uk");
  ASSERT_TRUE(p.ok()) << p.status();
  EXPECT_EQ(p->as_of_seq(), kDemandRows);
  // Bit for bit what an in-process replay of the file answers after its last row.
  const std::vector<double> want = ReplayLastPredictions(*spec, DemandPath());
  ASSERT_EQ(want.size(), 1u);
  ASSERT_EQ(p->predictions_size(), 1);
  EXPECT_EQ(p->predictions(0).value(), want[0]);
  EXPECT_TRUE(DaemonState(*client) == ReferenceState(*spec, DemandFrames(), kDemandRows))
      << "the daemon's learned state differs from the reference replay";
}

// service.proto: StreamInfo.frames_applied counts the stream's frames across restarts
// (the count is part of the checkpointed and replayed state).
TEST(CliResume, FramesAppliedSurvivesARestart) {
  const std::string dir = testing::MakeTempDir("cli_count");
  auto spec = ReadPoolSpecFile(GridSpecPath());
  ASSERT_TRUE(spec.ok()) << spec.status();
  std::string address;
  {
    testing::DaemonProcess daemon({}, dir);
    address = daemon.address();
    auto client = Client::Connect(address);
    ASSERT_TRUE(client->ApplyPool(*spec).ok());
    const auto r =
        Cli({"--server", address, "stream", "--pool", "grid", "--stream", "uk", DemandPath()});
    ASSERT_EQ(r.exit_code, 0) << r.err;
    daemon.Kill();
  }
  testing::DaemonProcess again({"--listen", address}, dir);
  const auto r = Cli({"--server", address, "describe", "--pool", "grid", "--output", "json"});
  ASSERT_EQ(r.exit_code, 0) << r.err;
  const auto d = ParseJson<v1::PoolDescription>(r.out);
  ASSERT_EQ(d.streams_size(), 1);
  EXPECT_EQ(d.streams(0).last_seq(), kDemandRows);
  EXPECT_EQ(d.streams(0).frames_applied(), kDemandRows);
}

}  // namespace
}  // namespace bellwether
