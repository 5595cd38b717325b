// Security of the real daemon: TLS and mutual TLS with throwaway certificates made by
// openssl in the test, bearer tokens with each scope (and wrong, missing, other-pool
// tokens), token reload on SIGHUP, and the loopback-only default without a token file.
#include <signal.h>

#include <cmath>
#include <fstream>
#include <sstream>
#include <string>
#include <thread>

#include "client/bellwether_client.h"
#include "core/io/spec_json.h"
#include "gmock/gmock.h"
#include "gtest/gtest.h"
#include "server/auth.h"
#include "tests/integration/daemon_process.h"
#include "tests/test_util.h"

namespace bellwether {
namespace {

using ::testing::HasSubstr;

std::string GridSpecPath() { return std::string(BW_TEST_DATA_DIR) + "/grid_pool.json"; }

std::string ReadAll(const std::string& path) {
  std::ifstream in(path, std::ios::binary);
  std::stringstream b;
  b << in.rdbuf();
  return b.str();
}

// A CA, a server certificate for 127.0.0.1/localhost and a client certificate, all
// signed by the CA, valid for a day.
struct Certs {
  std::string dir;
  bool ok = false;
  std::string ca() const { return dir + "/ca.pem"; }
  std::string server_cert() const { return dir + "/server.pem"; }
  std::string server_key() const { return dir + "/server.key"; }
  std::string client_cert() const { return dir + "/client.pem"; }
  std::string client_key() const { return dir + "/client.key"; }
};

Certs MakeCerts() {
  Certs c;
  c.dir = testing::MakeTempDir("certs");
  auto run = [&](std::vector<std::string> argv) {
    const auto r = testing::RunCommand(argv);
    EXPECT_EQ(r.exit_code, 0) << r.err;
    return r.exit_code == 0;
  };
  std::ofstream(c.dir + "/server.ext") << "subjectAltName=IP:127.0.0.1,DNS:localhost\n";
  std::ofstream(c.dir + "/client.ext") << "extendedKeyUsage=clientAuth\n";
  c.ok = run({"/usr/bin/openssl", "req", "-x509", "-newkey", "rsa:2048", "-nodes", "-keyout",
              c.dir + "/ca.key", "-out", c.ca(), "-days", "1", "-subj", "/CN=bellwether-test-ca"}) &&
         run({"/usr/bin/openssl", "req", "-newkey", "rsa:2048", "-nodes", "-keyout",
              c.server_key(), "-out", c.dir + "/server.csr", "-subj", "/CN=localhost"}) &&
         run({"/usr/bin/openssl", "x509", "-req", "-in", c.dir + "/server.csr", "-CA", c.ca(),
              "-CAkey", c.dir + "/ca.key", "-CAcreateserial", "-out", c.server_cert(), "-days",
              "1", "-extfile", c.dir + "/server.ext"}) &&
         run({"/usr/bin/openssl", "req", "-newkey", "rsa:2048", "-nodes", "-keyout",
              c.client_key(), "-out", c.dir + "/client.csr", "-subj", "/CN=bellwether-test-client"}) &&
         run({"/usr/bin/openssl", "x509", "-req", "-in", c.dir + "/client.csr", "-CA", c.ca(),
              "-CAkey", c.dir + "/ca.key", "-CAcreateserial", "-out", c.client_cert(), "-days",
              "1", "-extfile", c.dir + "/client.ext"});
  return c;
}

TEST(Security, TlsAndMutualTls) {
  const Certs certs = MakeCerts();
  ASSERT_TRUE(certs.ok);
  auto spec = ReadPoolSpecFile(GridSpecPath());
  ASSERT_TRUE(spec.ok());
  {
    testing::DaemonProcess daemon({"--tls-cert", certs.server_cert(), "--tls-key", certs.server_key()});
    ASSERT_THAT(daemon.address(), HasSubstr("127.0.0.1:"));
    ClientOptions tls;
    tls.tls = true;
    tls.tls_root_certs_pem = ReadAll(certs.ca());
    auto secure = Client::Connect(daemon.address(), tls);
    EXPECT_TRUE(secure->ApplyPool(*spec).ok());
    auto plain = Client::Connect(daemon.address());
    EXPECT_EQ(plain->ListPools(absl::Seconds(3)).status().code(), absl::StatusCode::kUnavailable);
    // A client that does not trust the CA refuses the server.
    ClientOptions untrusted = tls;
    untrusted.tls_root_certs_pem = ReadAll(certs.client_cert());
    EXPECT_FALSE(Client::Connect(daemon.address(), untrusted)->ListPools(absl::Seconds(3)).ok());
    // The CLI's TLS options.
    const auto r = testing::RunCommand(
        {BW_CLI_PATH, "--server", daemon.address(), "--tls-ca", certs.ca(), "pools"});
    EXPECT_EQ(r.exit_code, 0) << r.err;
    EXPECT_THAT(r.out, HasSubstr("grid"));
  }
  {
    testing::DaemonProcess daemon({"--tls-cert", certs.server_cert(), "--tls-key",
                                   certs.server_key(), "--tls-client-ca", certs.ca()});
    ASSERT_THAT(daemon.address(), HasSubstr("127.0.0.1:"));
    ClientOptions no_cert;
    no_cert.tls = true;
    no_cert.tls_root_certs_pem = ReadAll(certs.ca());
    EXPECT_FALSE(Client::Connect(daemon.address(), no_cert)->ListPools(absl::Seconds(3)).ok());
    ClientOptions with_cert = no_cert;
    with_cert.tls_client_cert_pem = ReadAll(certs.client_cert());
    with_cert.tls_client_key_pem = ReadAll(certs.client_key());
    EXPECT_TRUE(Client::Connect(daemon.address(), with_cert)->ApplyPool(*spec).ok());
    const auto r = testing::RunCommand({BW_CLI_PATH, "--server", daemon.address(), "--tls-ca",
                                        certs.ca(), "--tls-cert", certs.client_cert(),
                                        "--tls-key", certs.client_key(), "pools"});
    EXPECT_EQ(r.exit_code, 0) << r.err;
  }
}

TEST(Security, BearerTokensScopesPoolsAndReload) {
  const std::string dir = testing::MakeTempDir("tokens");
  const std::string file = dir + "/tokens";
  auto write_tokens = [&](bool with_reader) {
    std::ofstream out(file);
    out << "# name sha256 scopes [pools]\n"
        << "ops " << server::Sha256Hex("admin-secret") << " admin\n"
        << "meters " << server::Sha256Hex("ingest-secret") << " ingest,read grid\n";
    if (with_reader) out << "dash " << server::Sha256Hex("read-secret") << " read grid\n";
  };
  write_tokens(true);
  testing::DaemonProcess daemon({"--token-file", file});
  ASSERT_THAT(daemon.address(), HasSubstr("127.0.0.1:"));
  auto as = [&](const std::string& token) {
    ClientOptions o;
    o.bearer_token = token;
    return Client::Connect(daemon.address(), o);
  };
  auto spec = ReadPoolSpecFile(GridSpecPath());
  ASSERT_TRUE(spec.ok());
  v1::PoolSpec other = *spec;
  other.set_name("annex");

  auto anonymous = Client::Connect(daemon.address());
  EXPECT_EQ(anonymous->ApplyPool(*spec).status().code(), absl::StatusCode::kUnauthenticated);
  EXPECT_EQ(as("wrong")->ListPools().status().code(), absl::StatusCode::kUnauthenticated);
  auto admin = as("admin-secret"), meters = as("ingest-secret"), dash = as("read-secret");
  ASSERT_TRUE(admin->ApplyPool(*spec).ok());
  ASSERT_TRUE(admin->ApplyPool(other).ok());
  // read cannot apply; ingest cannot delete.
  auto denied = dash->ApplyPool(*spec);
  EXPECT_EQ(denied.status().code(), absl::StatusCode::kPermissionDenied);
  EXPECT_THAT(denied.status().message(), HasSubstr("lacks the admin scope"));
  EXPECT_EQ(meters->DeletePool("grid").code(), absl::StatusCode::kPermissionDenied);
  // ingest into its pool works; into another pool it does not.
  v1::FrameBatch batch;
  v1::Frame* f = batch.add_frames();
  f->set_seq(1);
  f->set_local_micros(1800LL * 1000000);
  f->add_values(25000);
  auto s = meters->OpenIngest("grid", "uk", {});
  ASSERT_TRUE(s.ok());
  EXPECT_TRUE((*s)->Send(batch).ok());
  auto s2 = meters->OpenIngest("annex", "uk", {});
  ASSERT_TRUE(s2.ok());
  EXPECT_EQ((*s2)->Send(batch).status().code(), absl::StatusCode::kPermissionDenied);
  auto s3 = dash->OpenIngest("grid", "uk", {});
  ASSERT_TRUE(s3.ok());
  EXPECT_EQ((*s3)->Send(batch).status().code(), absl::StatusCode::kPermissionDenied);
  // read sees its pool only.
  EXPECT_TRUE(dash->Predict("grid", "uk").ok());
  auto other_pool = dash->Predict("annex", "uk");
  EXPECT_EQ(other_pool.status().code(), absl::StatusCode::kPermissionDenied);
  EXPECT_THAT(other_pool.status().message(), HasSubstr("not allowed pool 'annex'"));
  auto listed = dash->ListPools();
  ASSERT_TRUE(listed.ok());
  ASSERT_EQ(listed->pools_size(), 1);
  EXPECT_EQ(listed->pools(0).name(), "grid");
  // The CLI with a token file.
  std::ofstream(dir + "/dash.token") << "read-secret\n";
  const auto r = testing::RunCommand({BW_CLI_PATH, "--server", daemon.address(), "--token-file",
                                      dir + "/dash.token", "predict", "--pool", "grid", "--stream",
                                      "uk"});
  EXPECT_EQ(r.exit_code, 0) << r.err;
  // Health needs no token.
  const auto h = testing::RunCommand({BW_CLI_PATH, "--server", daemon.address(), "health"});
  EXPECT_EQ(h.exit_code, 0) << h.err;

  // SIGHUP re-reads the file: the reader's token is gone.
  write_tokens(false);
  daemon.Signal(SIGHUP);
  absl::Status after = absl::OkStatus();
  for (int i = 0; i < 100 && after.ok(); ++i) {
    std::this_thread::sleep_for(std::chrono::milliseconds(20));
    after = dash->Predict("grid", "uk").status();
  }
  EXPECT_EQ(after.code(), absl::StatusCode::kUnauthenticated);
  EXPECT_TRUE(admin->ListPools().ok());
}

// Without a token file the daemon refuses a non-loopback address. (It exits while
// checking its flags, before binding anything.)
TEST(Security, NonLoopbackWithoutTokensIsRefused) {
  const auto r = testing::RunCommand({BW_DAEMON_PATH, "--listen", "0.0.0.0:0"});
  EXPECT_EQ(r.exit_code, 1);
  EXPECT_THAT(r.err, HasSubstr("not loopback"));
  EXPECT_THAT(r.err, HasSubstr("--token-file"));
  const auto h = testing::RunCommand(
      {BW_DAEMON_PATH, "--listen", "127.0.0.1:0", "--http", "0.0.0.0:0"});
  EXPECT_EQ(h.exit_code, 1);
  EXPECT_THAT(h.err, HasSubstr("--http-auth-file"));
  const std::string dir = testing::MakeTempDir("badtokens");
  std::ofstream(dir + "/t") << "name not-a-hash read\n";
  const auto b = testing::RunCommand(
      {BW_DAEMON_PATH, "--listen", "127.0.0.1:0", "--token-file", dir + "/t"});
  EXPECT_EQ(b.exit_code, 1);
  EXPECT_THAT(b.err, HasSubstr("line 1"));
}

// `n` half-hourly frames of the grid pool from seq `first`.
v1::FrameBatch BatchOf(uint64_t first, int n) {
  v1::FrameBatch b;
  for (int i = 0; i < n; ++i) {
    v1::Frame* f = b.add_frames();
    f->set_seq(first + static_cast<uint64_t>(i));
    f->set_local_micros(static_cast<int64_t>(first + static_cast<uint64_t>(i)) * 1800 * 1000000);
    f->add_values(25000 + i);
  }
  return b;
}

// Limits: each violation a clear error (naming the flag) and a refusal, learned state
// of existing streams unchanged.
TEST(Security, LimitsAreEnforcedWithClearErrors) {
  testing::DaemonProcess daemon({"--max-pools", "1", "--max-streams-per-pool", "2",
                                 "--max-batch-frames", "50", "--max-pool-mib", "64"});
  ASSERT_THAT(daemon.address(), HasSubstr("127.0.0.1:"));
  auto client = Client::Connect(daemon.address());
  auto spec = ReadPoolSpecFile(GridSpecPath());
  ASSERT_TRUE(spec.ok());
  ASSERT_TRUE(client->ApplyPool(*spec).ok());
  v1::PoolSpec second = *spec;
  second.set_name("second");
  auto too_many = client->ApplyPool(second);
  EXPECT_EQ(too_many.status().code(), absl::StatusCode::kResourceExhausted);
  EXPECT_THAT(too_many.status().message(), HasSubstr("--max-pools 1"));
  // A spec whose state cannot fit: 400 questions over a 65,536-entry table.
  v1::PoolSpec huge = *spec;
  huge.mutable_features(0)->mutable_tiles()->set_tiles_per_dim(4096);
  huge.set_feature_table_size(65536);
  for (int i = 0; i < 400; ++i) {
    v1::QuestionSpec* q = huge.add_questions();
    *q = spec->questions(0);
    q->set_name("q" + std::to_string(i));
  }
  auto big = client->ApplyPool(huge);
  EXPECT_EQ(big.status().code(), absl::StatusCode::kResourceExhausted) << big.status();
  EXPECT_THAT(big.status().message(), HasSubstr("MiB"));
  EXPECT_THAT(big.status().message(), HasSubstr("--max-pool-mib"));

  for (const char* stream : {"a", "b"}) {
    auto s = client->OpenIngest("grid", stream, {});
    ASSERT_TRUE(s.ok());
    ASSERT_TRUE((*s)->Send(BatchOf(1, 40)).ok());
  }
  auto before = client->Predict("grid", "a");
  ASSERT_TRUE(before.ok());
  auto third = client->OpenIngest("grid", "c", {});
  ASSERT_TRUE(third.ok());
  auto refused = (*third)->Send(BatchOf(1, 10));
  EXPECT_EQ(refused.status().code(), absl::StatusCode::kResourceExhausted);
  EXPECT_THAT(refused.status().message(), HasSubstr("--max-streams-per-pool 2"));
  auto big_batch = client->OpenIngest("grid", "a", {});
  ASSERT_TRUE(big_batch.ok());
  auto too_big = (*big_batch)->Send(BatchOf(41, 51));
  EXPECT_EQ(too_big.status().code(), absl::StatusCode::kInvalidArgument);
  EXPECT_THAT(too_big.status().message(), HasSubstr("batch.frames: 51 frames; at most 50"));
  auto after = client->Predict("grid", "a");
  ASSERT_TRUE(after.ok());
  EXPECT_EQ(after->SerializeAsString(), before->SerializeAsString()) << "state changed";
  EXPECT_EQ(client->Predict("grid", "c").status().code(), absl::StatusCode::kNotFound);
}

// The value of one series in the daemon's /metrics text (-1 if absent).
double MetricValue(const std::string& http, const std::string& series) {
  const auto r = testing::RunCommand(
      {"/usr/bin/python3", "-c",
       "import sys, urllib.request; sys.stdout.write(urllib.request.urlopen(sys.argv[1], "
       "timeout=10).read().decode())",
       "http://" + http + "/metrics"});
  EXPECT_EQ(r.exit_code, 0) << r.err;
  std::istringstream in(r.out);
  std::string line;
  while (std::getline(in, line)) {
    if (line.rfind(series + " ", 0) == 0) return std::stod(line.substr(series.size() + 1));
  }
  return -1;
}

// Hostile input over real gRPC: each case gets its documented answer and metric, and the
// answers and progress of an existing stream do not move.
TEST(Security, HostileInputIsRefusedAndLearnedStateIsIntact) {
  testing::DaemonProcess daemon({"--http", "127.0.0.1:0", "--max-streams-per-pool", "20"});
  ASSERT_THAT(daemon.address(), HasSubstr("127.0.0.1:"));
  auto client = Client::Connect(daemon.address());
  auto spec = ReadPoolSpecFile(GridSpecPath());
  ASSERT_TRUE(spec.ok());
  ASSERT_TRUE(client->ApplyPool(*spec).ok());
  auto frame = [](uint64_t seq, double v) {
    v1::Frame f;
    f.set_seq(seq);
    f.set_local_micros(static_cast<int64_t>(seq) * 1800 * 1000000);
    f.add_values(v);
    return f;
  };
  {
    auto s = client->OpenIngest("grid", "steady", {});
    ASSERT_TRUE(s.ok());
    v1::FrameBatch b;
    for (uint64_t i = 1; i <= 300; ++i) *b.add_frames() = frame(i, 25000 + 100.0 * (i % 48));
    ASSERT_TRUE((*s)->Send(b).ok());
  }
  auto steady = [&] {
    auto p = client->Progress("grid", "steady");
    EXPECT_TRUE(p.ok());
    return p.ok() ? p->current().SerializeAsString() : std::string();
  };
  const std::string before = steady();
  const std::string m = "{pool=\"grid\",reason=\"";

  // NaN and infinities: that frame rejected (reason values), the rest of the batch applied.
  auto hostile = client->OpenIngest("grid", "hostile", {});
  ASSERT_TRUE(hostile.ok());
  v1::FrameBatch b;
  *b.add_frames() = frame(1, 25000);
  *b.add_frames() = frame(2, std::nan(""));
  *b.add_frames() = frame(3, HUGE_VAL);
  *b.add_frames() = frame(4, -HUGE_VAL);
  *b.add_frames() = frame(5, 26000);
  auto ack = (*hostile)->Send(b);
  ASSERT_TRUE(ack.ok());
  EXPECT_EQ(ack->rejected_size(), 3);
  EXPECT_EQ(ack->applied_seq(), 5u);
  // A seq of 0, a wrong number of values: rejected (seq, values). A seq jump is accepted
  // (frames may be dropped upstream): the next frame simply follows.
  v1::FrameBatch c;
  *c.add_frames() = frame(0, 25000);
  v1::Frame two = frame(6, 1);
  two.add_values(2);
  *c.add_frames() = two;
  *c.add_frames() = frame(1000000, 25500);
  ack = (*hostile)->Send(c);
  ASSERT_TRUE(ack.ok());
  EXPECT_EQ(ack->rejected_size(), 2);
  EXPECT_EQ(ack->applied_seq(), 1000000u);
  // Timestamps far in the past and far in the future are accepted (history is replayed
  // routinely); clock features follow them.
  v1::FrameBatch d;
  v1::Frame past = frame(1000001, 25000);
  past.set_unix_micros(-int64_t{3000} * 365 * 86400 * 1000000);  // about 1030 BC
  v1::Frame future = frame(1000002, 25000);
  future.set_unix_micros(int64_t{9000} * 365 * 86400 * 1000000);  // about 10970 AD
  *d.add_frames() = past;
  *d.add_frames() = future;
  ack = (*hostile)->Send(d);
  ASSERT_TRUE(ack.ok()) << ack.status();
  // Huge but finite values are learned from on this stream only (per-stream learning);
  // the divergence guard keeps its answers finite.
  v1::FrameBatch e;
  *e.add_frames() = frame(1000003, 1e300);
  *e.add_frames() = frame(1000004, -1e300);
  ack = (*hostile)->Send(e);
  ASSERT_TRUE(ack.ok());
  auto h = client->Predict("grid", "hostile");
  ASSERT_TRUE(h.ok());
  EXPECT_TRUE(std::isfinite(h->predictions(0).value()));
  ASSERT_TRUE((*hostile)->Finish().ok());
  // A stream name with a control character: the open is refused.
  auto bad_name = client->OpenIngest("grid", std::string("evil\x01name"), {});
  ASSERT_TRUE(bad_name.ok());
  auto refused = (*bad_name)->Send(b);
  EXPECT_EQ(refused.status().code(), absl::StatusCode::kInvalidArgument);
  EXPECT_THAT(refused.status().message(), HasSubstr("control character"));
  // A cyclic spec (a question reading itself through another) is refused, naming it.
  v1::PoolSpec cyclic = *spec;
  cyclic.set_name("cyclic");
  cyclic.mutable_questions(0)->mutable_cumulant()->set_question("loop_b");
  v1::QuestionSpec* loop = cyclic.add_questions();
  *loop = spec->questions(0);
  loop->set_name("loop_b");
  loop->mutable_cumulant()->set_question(spec->questions(0).name());
  auto cyc = client->ApplyPool(cyclic);
  EXPECT_EQ(cyc.status().code(), absl::StatusCode::kInvalidArgument);
  EXPECT_THAT(cyc.status().message(), HasSubstr("cycle"));
  // A flood of new stream ids stops at the limit (20 streams; 2 exist).
  int refused_streams = 0;
  for (int i = 0; i < 40; ++i) {
    auto s = client->OpenIngest("grid", "flood-" + std::to_string(i), {});
    ASSERT_TRUE(s.ok());
    v1::FrameBatch one;
    *one.add_frames() = frame(1, 25000);
    if ((*s)->Send(one).status().code() == absl::StatusCode::kResourceExhausted) ++refused_streams;
  }
  EXPECT_EQ(refused_streams, 40 - 18);

  // Metrics count each kind.
  EXPECT_EQ(MetricValue(daemon.http_address(), "bellwether_frames_rejected_total" + m + "values\"}"), 4);
  EXPECT_EQ(MetricValue(daemon.http_address(), "bellwether_frames_rejected_total" + m + "seq\"}"), 1);
  EXPECT_EQ(MetricValue(daemon.http_address(),
                        "bellwether_ingest_batches_refused_total" + m + "stream_limit\"}"),
            40 - 18);
  // The existing stream's answers and progress did not move.
  EXPECT_TRUE(steady() == before);
}

// An HTTP GET of `url`, with basic auth when `user` is given: the status code, then the
// headers and body (urllib, so nothing of the daemon's code is on the client side).
std::string HttpGet(const std::string& url, const std::string& user = "",
                    const std::string& password = "") {
  const auto r = testing::RunCommand(
      {"/usr/bin/python3", "-c",
       "import base64, sys, urllib.request, urllib.error\n"
       "req = urllib.request.Request(sys.argv[1])\n"
       "if sys.argv[2]:\n"
       "    cred = base64.b64encode((sys.argv[2] + ':' + sys.argv[3]).encode()).decode()\n"
       "    req.add_header('Authorization', 'Basic ' + cred)\n"
       "try:\n"
       "    r = urllib.request.urlopen(req, timeout=10)\n"
       "    code, headers, body = r.status, r.headers, r.read()\n"
       "except urllib.error.HTTPError as e:\n"
       "    code, headers, body = e.code, e.headers, e.read()\n"
       "sys.stdout.write(str(code) + '\\n' + str(headers) + body.decode())\n",
       url, user, password});
  EXPECT_EQ(r.exit_code, 0) << r.err;
  return r.out;
}

double SeriesValue(const std::string& metrics_text, const std::string& series) {
  std::istringstream in(metrics_text);
  std::string line;
  while (std::getline(in, line)) {
    if (line.rfind(series + " ", 0) == 0) return std::stod(line.substr(series.size() + 1));
  }
  return -1;
}

// The limits on specs (questions, signals, feature table), on open ingest calls and on a
// stream's frame rate: each refused with a clear error naming the flag, and counted.
// And basic auth on the HTTP port, with its reload on SIGHUP.
TEST(Security, SpecIngestAndHttpLimits) {
  const std::string dir = testing::MakeTempDir("httpauth");
  // Passwords are hashed with SHA-256, like tokens (checked against openssl below).
  std::ofstream(dir + "/users") << "# metrics readers\nprom " << server::Sha256Hex("s3cret-prom")
                                << "\n";
  testing::DaemonProcess daemon(
      {"--http", "127.0.0.1:0", "--http-auth-file", dir + "/users", "--max-questions-per-pool",
       "3", "--max-signals-per-pool", "2", "--max-feature-table", "4096", "--max-ingest-calls",
       "2", "--max-stream-frames-per-second", "10"});
  ASSERT_THAT(daemon.address(), HasSubstr("127.0.0.1:"));
  const std::string metrics_url = "http://" + daemon.http_address() + "/metrics";
  auto client = Client::Connect(daemon.address());
  auto spec = ReadPoolSpecFile(GridSpecPath());
  ASSERT_TRUE(spec.ok());
  ASSERT_TRUE(client->ApplyPool(*spec).ok());

  v1::PoolSpec questions = *spec;
  for (int i = 0; i < 3; ++i) {
    v1::QuestionSpec* q = questions.add_questions();
    *q = spec->questions(0);
    q->set_name("extra" + std::to_string(i));
  }
  auto r = client->ApplyPool(questions);
  EXPECT_EQ(r.status().code(), absl::StatusCode::kResourceExhausted);
  EXPECT_THAT(r.status().message(),
              HasSubstr("questions: 4 questions; at most 3 per pool (--max-questions-per-pool)"));
  v1::PoolSpec signals = *spec;
  for (const char* name : {"s2", "s3"}) {
    v1::SignalSpec* sig = signals.add_signals();
    sig->set_name(name);
    sig->set_min(0);
    sig->set_max(1);
  }
  r = client->ApplyPool(signals);
  EXPECT_EQ(r.status().code(), absl::StatusCode::kResourceExhausted);
  EXPECT_THAT(r.status().message(), HasSubstr("signals: 3 signals; at most 2"));
  v1::PoolSpec table = *spec;  // 8 tilings of 1,000 tiles, each its own entry
  table.mutable_features(0)->mutable_tiles()->set_tiles_per_dim(1000);
  r = client->ApplyPool(table);
  EXPECT_EQ(r.status().code(), absl::StatusCode::kResourceExhausted);
  EXPECT_THAT(r.status().message(), HasSubstr("entries; at most 4096 (--max-feature-table)"));
  // The pool as it was is untouched by the refused updates.
  auto described = client->DescribePool("grid");
  ASSERT_TRUE(described.ok());
  EXPECT_EQ(described->spec().questions_size(), 1);

  // Frame rate: 10 frames/s with a one-second bucket. The first batch of 30 is admitted
  // (the bucket goes into debt), the next one is refused until the debt is paid.
  {
    auto fast = client->OpenIngest("grid", "fast", {});
    ASSERT_TRUE(fast.ok());
    ASSERT_TRUE((*fast)->Send(BatchOf(1, 30)).ok());
    auto refused = (*fast)->Send(BatchOf(31, 30));
    EXPECT_EQ(refused.status().code(), absl::StatusCode::kResourceExhausted);
    EXPECT_THAT(refused.status().message(),
                HasSubstr("faster than 10 frames/s (--max-stream-frames-per-second)"));
  }
  auto fast_state = client->Predict("grid", "fast");
  ASSERT_TRUE(fast_state.ok());
  EXPECT_EQ(fast_state->as_of_seq(), 30u) << "nothing of the refused batch applied";

  // Open ingest calls: two may be open; the third is refused at once.
  // (The closed call above ends on the daemon's side a moment after the client lets go,
  // so the second call may need a retry.)
  auto one = client->OpenIngest("grid", "one", {});
  ASSERT_TRUE(one.ok());
  ASSERT_TRUE((*one)->Send(BatchOf(1, 1)).ok());
  std::unique_ptr<IngestSession> two;
  for (int i = 0; i < 100 && two == nullptr; ++i) {
    auto opened = client->OpenIngest("grid", "two", {});
    ASSERT_TRUE(opened.ok());
    if ((*opened)->Send(BatchOf(1, 1)).ok()) {
      two = *std::move(opened);
    } else {
      std::this_thread::sleep_for(std::chrono::milliseconds(20));
    }
  }
  ASSERT_NE(two, nullptr);
  auto three = client->OpenIngest("grid", "three", {});
  absl::Status third = three.ok() ? (*three)->Send(BatchOf(1, 1)).status() : three.status();
  EXPECT_EQ(third.code(), absl::StatusCode::kResourceExhausted);
  EXPECT_THAT(third.message(), HasSubstr("--max-ingest-calls 2"));

  // Basic auth on the HTTP port: no credentials, a wrong password, an unknown user: 401
  // with a Basic challenge; the right password: the metrics, with each refusal counted.
  const std::string none = HttpGet(metrics_url);
  EXPECT_EQ(none.substr(0, 4), "401\n") << none;
  EXPECT_THAT(none, HasSubstr("WWW-Authenticate: Basic realm=\"bellwether\""));
  EXPECT_EQ(HttpGet(metrics_url, "prom", "wrong").substr(0, 4), "401\n");
  EXPECT_EQ(HttpGet(metrics_url, "nobody", "s3cret-prom").substr(0, 4), "401\n");
  const std::string ok = HttpGet(metrics_url, "prom", "s3cret-prom");
  ASSERT_EQ(ok.substr(0, 4), "200\n") << ok;
  EXPECT_EQ(SeriesValue(ok, "bellwether_limit_refusals_total{limit=\"questions\"}"), 1);
  EXPECT_EQ(SeriesValue(ok, "bellwether_limit_refusals_total{limit=\"signals\"}"), 1);
  EXPECT_EQ(SeriesValue(ok, "bellwether_limit_refusals_total{limit=\"feature_table\"}"), 1);
  EXPECT_GE(SeriesValue(ok, "bellwether_limit_refusals_total{limit=\"ingest_calls\"}"), 1);
  EXPECT_EQ(SeriesValue(ok, "bellwether_ingest_batches_refused_total{pool=\"grid\",reason=\"rate_limited\"}"), 1);
  EXPECT_EQ(SeriesValue(ok, "bellwether_auth_failures_total{reason=\"http_unauthorized\"}"), 3);

  // SIGHUP re-reads the users: the old password stops working, the new one works.
  std::ofstream(dir + "/users.new") << "prom " << server::Sha256Hex("rotated-pw") << "\n";
  ASSERT_EQ(std::rename((dir + "/users.new").c_str(), (dir + "/users").c_str()), 0);
  daemon.Signal(SIGHUP);
  bool rotated = false;
  for (int i = 0; i < 100 && !rotated; ++i) {
    rotated = HttpGet(metrics_url, "prom", "rotated-pw").substr(0, 4) == "200\n";
    if (!rotated) std::this_thread::sleep_for(std::chrono::milliseconds(50));
  }
  EXPECT_TRUE(rotated);
  EXPECT_EQ(HttpGet(metrics_url, "prom", "s3cret-prom").substr(0, 4), "401\n");
}

TEST(Security, TokenHashIsSha256) {
  // FIPS 180-2, Appendix B.1 test vector ("abc").
  EXPECT_EQ(server::Sha256Hex("abc"),
            "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad");
}

}  // namespace
}  // namespace bellwether
