#!/usr/bin/python3
"""Integration: bellwetherd's Prometheus metrics, checked by Prometheus's own tools.

Two outside checks of GET /metrics on a real daemon fed real data (the shared half-hourly
demand file, 2688 rows, streamed with the `bellwether` CLI):

  * PromtoolLint: the exposition text passes `promtool check metrics` (Prometheus's
    parser and linter, Debian package `prometheus`), and a small parser of our own finds
    the series the daemon documents (server/daemon_metrics.h) with the values the data
    implies: 2688 frames received and applied, one stream, a positive verified RMSE, a
    consistent histogram; then the same file streamed again is skipped frame by frame
    (every seq is already applied) and counted as duplicates.
  * PrometheusScrape: a real Prometheus server (/usr/bin/prometheus) scrapes the daemon
    every second; its query API must return 2688 for bellwether_frames_applied_total
    {pool="grid"} and its targets API must report the target "up".

Usage:
  prometheus_test.py DAEMON_PATH CLI_PATH REPO_DIR [unittest args]

Every server listens on 127.0.0.1 only (the daemon on port 0; Prometheus cannot take
port 0, so a free port is found by binding 127.0.0.1:0 and closing it, retried once if
Prometheus then fails to bind). Every child gets a timeout and is stopped (SIGTERM, then
SIGKILL) in a finally block; a watchdog ends the whole run after RUN_LIMIT_S seconds.
"""

import ctypes
import json
import math
import os
import queue
import re
import shutil
import signal
import socket
import subprocess
import sys
import tempfile
import threading
import time
import unittest
import urllib.error
import urllib.parse
import urllib.request

RUN_LIMIT_S = 170.0  # the whole run (ctest's TIMEOUT is 180)
STARTUP_TIMEOUT_S = 15.0  # until the daemon prints both addresses
CLI_TIMEOUT_S = 60.0  # one CLI command
HTTP_TIMEOUT_S = 10.0  # one HTTP request
STOP_TIMEOUT_S = 10.0  # SIGTERM -> exit, before SIGKILL
PROM_READY_TIMEOUT_S = 30.0  # until Prometheus answers /-/ready
PROM_QUERY_TIMEOUT_S = 30.0  # until the scraped value shows in a query
PROM_TEST_LIMIT_S = 115.0  # the whole Prometheus test

POOL = "grid"
STREAM = "uk"
QUESTION = "demand_next_12h"
DATA_ROWS = 2688  # data rows of halfhourly-demand-2000.csv (lines minus the header)

PROMTOOL = "/usr/bin/promtool"
PROMETHEUS = "/usr/bin/prometheus"

# Filled in from argv before unittest runs.
ENV = {}

# Children still running, for the watchdog.
_CHILDREN = []
_CHILDREN_LOCK = threading.Lock()


def _die_with_parent():
    """In the child: SIGKILL it if this test process dies (Linux PR_SET_PDEATHSIG)."""
    try:
        libc = ctypes.CDLL("libc.so.6", use_errno=True)
        libc.prctl(1, signal.SIGKILL, 0, 0, 0)  # PR_SET_PDEATHSIG = 1
    except OSError:
        pass


def _register(proc):
    with _CHILDREN_LOCK:
        _CHILDREN.append(proc)


def _unregister(proc):
    with _CHILDREN_LOCK:
        if proc in _CHILDREN:
            _CHILDREN.remove(proc)


def _watchdog():
    sys.stderr.write("prometheus_test: run exceeded %.0f s; killing children\n" % RUN_LIMIT_S)
    with _CHILDREN_LOCK:
        for p in _CHILDREN:
            try:
                p.kill()
            except OSError:
                pass
    sys.stderr.flush()
    os._exit(1)


def stop_process(proc, timeout=STOP_TIMEOUT_S):
    """SIGTERM, then SIGKILL after `timeout`. Returns (exit code, how it stopped)."""
    try:
        if proc.poll() is not None:
            return proc.returncode, "had exited"
        proc.send_signal(signal.SIGTERM)
        try:
            return proc.wait(timeout=timeout), "SIGTERM"
        except subprocess.TimeoutExpired:
            proc.kill()
            return proc.wait(timeout=timeout), "SIGKILL after %.0f s" % timeout
    finally:
        _unregister(proc)


def tail(path, lines=40):
    try:
        with open(path, errors="replace") as f:
            return "".join(f.readlines()[-lines:])
    except OSError as e:
        return "(cannot read %s: %s)" % (path, e)


# ----------------------------------------------------------------------------- daemon


class Daemon:
    """bellwetherd on 127.0.0.1 port 0 for gRPC and HTTP."""

    def __init__(self, path, log_path):
        self.log_path = log_path
        self.log = open(log_path, "w")
        try:
            self.proc = subprocess.Popen(
                [path, "--listen", "127.0.0.1:0", "--http", "127.0.0.1:0"],
                stdout=subprocess.PIPE, stderr=self.log, text=True,
                preexec_fn=_die_with_parent)
        except OSError:
            self.log.close()
            raise
        _register(self.proc)
        self.lines = queue.Queue()
        self.drain = threading.Thread(target=self._drain, daemon=True)
        self.drain.start()
        self.grpc = None
        self.http = None
        deadline = time.monotonic() + STARTUP_TIMEOUT_S
        while self.grpc is None or self.http is None:
            left = deadline - time.monotonic()
            if left <= 0:
                self.stop()
                raise RuntimeError("bellwetherd printed no 'listening on' / 'http on' lines "
                                   "in %.0f s" % STARTUP_TIMEOUT_S)
            try:
                line = self.lines.get(timeout=left)
            except queue.Empty:
                continue
            if line is None:
                code = self.stop()[0]
                raise RuntimeError("bellwetherd exited (code %s) before listening; stderr:\n%s"
                                   % (code, tail(log_path)))
            if line.startswith("listening on "):
                self.grpc = line[len("listening on "):].strip()
            elif line.startswith("http on "):
                self.http = line[len("http on "):].strip()
        for addr in (self.grpc, self.http):
            if addr.rsplit(":", 1)[0] != "127.0.0.1":
                self.stop()
                raise RuntimeError("bellwetherd listens on %s, not 127.0.0.1" % addr)

    def _drain(self):
        for line in self.proc.stdout:
            self.lines.put(line)
        self.lines.put(None)

    def stop(self):
        result = stop_process(self.proc)
        self.drain.join(timeout=STOP_TIMEOUT_S)
        if not self.drain.is_alive():
            self.proc.stdout.close()
        self.log.close()
        return result


def run_cli(*args):
    """Runs the CLI against nothing but its arguments; returns (exit code, output)."""
    cmd = [ENV["cli"]] + list(args)
    p = subprocess.run(cmd, capture_output=True, text=True, timeout=CLI_TIMEOUT_S,
                       cwd=ENV["repo"])
    return p.returncode, (p.stdout + p.stderr).strip()


def feed_grid(test, daemon):
    """Applies deploy/examples/grid.json and streams the demand file as stream 'uk'."""
    rc, out = run_cli("--server", daemon.grpc, "apply",
                      os.path.join(ENV["repo"], "deploy", "examples", "grid.json"))
    test.assertEqual(rc, 0, "apply failed:\n" + out)
    rc, out = run_cli("--server", daemon.grpc, "stream", "--pool", POOL, "--stream", STREAM,
                      ENV["data"])
    test.assertEqual(rc, 0, "stream failed:\n" + out)
    print("  stream: " + out.splitlines()[-1])


def http_get(url):
    with urllib.request.urlopen(url, timeout=HTTP_TIMEOUT_S) as r:
        return r.status, r.headers.get("Content-Type", ""), r.read().decode("utf-8")


# ------------------------------------------------------------------ exposition parser

_NAME = re.compile(r"[a-zA-Z_:][a-zA-Z0-9_:]*")
_LABEL = re.compile(r"[a-zA-Z_][a-zA-Z0-9_]*")
_ESCAPES = {"\\": "\\", '"': '"', "n": "\n"}


class Exposition:
    """Prometheus text format 0.0.4, parsed: samples, HELP and TYPE per family."""

    def __init__(self, text):
        self.help = {}
        self.type = {}
        self.samples = []  # (name, {label: value}, float)
        seen = set()
        for lineno, line in enumerate(text.split("\n"), 1):
            where = "line %d: %r" % (lineno, line)
            if not line.strip():
                continue
            if line.startswith("#"):
                parts = line.split(None, 3)
                if len(parts) >= 3 and parts[1] in ("HELP", "TYPE"):
                    table = self.help if parts[1] == "HELP" else self.type
                    if parts[2] in table:
                        raise ValueError("second %s for %s, %s" % (parts[1], parts[2], where))
                    table[parts[2]] = parts[3] if len(parts) > 3 else ""
                continue
            name, labels, value = self._sample(line, where)
            key = (name, tuple(sorted(labels.items())))
            if key in seen:
                raise ValueError("duplicate series, " + where)
            seen.add(key)
            self.samples.append((name, labels, value))

    @staticmethod
    def _sample(line, where):
        m = _NAME.match(line)
        if not m:
            raise ValueError("no metric name, " + where)
        name, pos = m.group(), m.end()
        labels = {}
        if pos < len(line) and line[pos] == "{":
            pos += 1
            while True:
                if pos >= len(line):
                    raise ValueError("unterminated label set, " + where)
                if line[pos] == "}":
                    pos += 1
                    break
                lm = _LABEL.match(line, pos)
                if not lm or line[lm.end():lm.end() + 2] != '="':
                    raise ValueError("bad label at column %d, %s" % (pos, where))
                key, pos = lm.group(), lm.end() + 2
                value = []
                while True:
                    if pos >= len(line):
                        raise ValueError("unterminated label value, " + where)
                    c = line[pos]
                    if c == "\\":
                        if pos + 1 >= len(line) or line[pos + 1] not in _ESCAPES:
                            raise ValueError("bad escape, " + where)
                        value.append(_ESCAPES[line[pos + 1]])
                        pos += 2
                    elif c == '"':
                        pos += 1
                        break
                    else:
                        value.append(c)
                        pos += 1
                if key in labels:
                    raise ValueError("label %s twice, %s" % (key, where))
                labels[key] = "".join(value)
                if pos < len(line) and line[pos] == ",":
                    pos += 1
                elif pos >= len(line) or line[pos] != "}":
                    raise ValueError("expected , or } at column %d, %s" % (pos, where))
        rest = line[pos:].split()
        if not 1 <= len(rest) <= 2 or (pos < len(line) and line[pos] != " "):
            raise ValueError("expected ' VALUE [TIMESTAMP]', " + where)
        value = float(rest[0])  # accepts +Inf, -Inf, NaN
        if len(rest) == 2:
            int(rest[1])
        return name, labels, value

    def find(self, name, **labels):
        """Samples of `name` whose labels include `labels`."""
        return [(l, v) for n, l, v in self.samples
                if n == name and all(l.get(k) == x for k, x in labels.items())]

    def value(self, name, **labels):
        """The one sample of `name` matching `labels`; raises AssertionError otherwise."""
        found = self.find(name, **labels)
        if len(found) != 1:
            raise AssertionError("expected one %s%s, found %d: %s"
                                 % (name, labels, len(found), found))
        return found[0][1]

    def family_of(self, sample_name):
        for suffix in ("_bucket", "_count", "_sum"):
            base = sample_name[:-len(suffix)]
            if sample_name.endswith(suffix) and self.type.get(base) == "histogram":
                return base
        return sample_name


class ParserSelfTest(unittest.TestCase):
    """The parser refuses what is not the text format (so it cannot pass anything)."""

    def test_parses_and_refuses(self):
        e = Exposition('# HELP a_total x\n# TYPE a_total counter\n'
                       'a_total{p="q\\"r",s="t"} 3\nb +Inf 1700000000000\n')
        self.assertEqual(e.value("a_total", p='q"r'), 3.0)
        self.assertEqual(e.find("a_total")[0][0], {"p": 'q"r', "s": "t"})
        self.assertTrue(math.isinf(e.value("b")))
        for bad in ['a{p="q} 1', "a{p=q} 1", "a 1 2 3", "a{p=\"q\"}1", "1a 2", "a x",
                    'a{p="q"} 1\na{p="q"} 2']:
            with self.assertRaises(ValueError, msg=bad):
                Exposition(bad)


# ----------------------------------------------------------------------------- tests


class PromtoolLint(unittest.TestCase):

    def setUp(self):
        self.tmp = tempfile.mkdtemp(prefix="bw-prom-lint-")

    def tearDown(self):
        shutil.rmtree(self.tmp, ignore_errors=True)

    def scrape(self, daemon, label):
        status, ctype, text = http_get("http://%s/metrics" % daemon.http)
        self.assertEqual(status, 200)
        # The exposition text format's media type (Prometheus text format 0.0.4).
        self.assertTrue(ctype.startswith("text/plain") and "version=0.0.4" in ctype, ctype)
        with open(os.path.join(self.tmp, label + ".prom"), "w") as f:
            f.write(text)
        return text

    def promtool(self, text, label):
        p = subprocess.run([PROMTOOL, "check", "metrics"], input=text, capture_output=True,
                           text=True, timeout=30)
        out = (p.stdout + p.stderr).strip()
        print("  promtool check metrics (%s): exit %d, output: %s"
              % (label, p.returncode, out if out else "(none)"))
        self.assertEqual(p.returncode, 0, "promtool check metrics (%s) says:\n%s\n\ntext:\n%s"
                         % (label, out, text))

    def check_structure(self, e):
        """Every sample belongs to a family with HELP and TYPE; histograms are consistent."""
        for name, labels, value in e.samples:
            family = e.family_of(name)
            self.assertIn(family, e.type, "no TYPE for " + name)
            self.assertTrue(e.help.get(family), "no HELP text for " + family)
            self.assertTrue(family.startswith("bellwether_"), family)
            if e.type[family] == "counter":
                self.assertTrue(family.endswith("_total"), family)
                self.assertGreaterEqual(value, 0, name)
        for family, kind in e.type.items():
            if kind != "histogram":
                continue
            series = {}
            for labels, v in e.find(family + "_bucket"):
                rest = tuple(sorted((k, x) for k, x in labels.items() if k != "le"))
                series.setdefault(rest, []).append((float(labels["le"]), v))
            self.assertTrue(series, "histogram %s has no buckets" % family)
            for rest, buckets in series.items():
                buckets.sort()
                counts = [v for _, v in buckets]
                self.assertEqual(counts, sorted(counts), "%s%s buckets decrease" % (family, rest))
                self.assertTrue(math.isinf(buckets[-1][0]), "%s%s has no +Inf" % (family, rest))
                count = e.value(family + "_count", **dict(rest))
                self.assertEqual(buckets[-1][1], count, "%s%s: +Inf bucket != _count"
                                 % (family, rest))
                total = e.value(family + "_sum", **dict(rest))
                self.assertGreaterEqual(total, 0)
                if count == 0:
                    self.assertEqual(total, 0)

    def test_metrics_after_streaming_real_data(self):
        daemon = Daemon(ENV["daemon"], os.path.join(self.tmp, "daemon.log"))
        try:
            # Before any pool: only the daemon-wide series.
            e = Exposition(self.scrape(daemon, "empty"))
            self.check_structure(e)
            self.assertEqual(e.find("bellwether_frames_applied_total"), [])

            feed_grid(self, daemon)
            text = self.scrape(daemon, "streamed")
            self.promtool(text, "after streaming %d frames" % DATA_ROWS)
            e = Exposition(text)
            self.check_structure(e)

            build = e.find("bellwether_build_info")
            self.assertEqual(len(build), 1, build)
            self.assertEqual(build[0][1], 1.0)
            self.assertTrue(build[0][0].get("version"), "build_info has no version label")

            # Every data row of the file is one frame, received and applied.
            self.assertEqual(e.value("bellwether_frames_received_total", pool=POOL), DATA_ROWS)
            self.assertEqual(e.value("bellwether_frames_applied_total", pool=POOL), DATA_ROWS)
            # No frame was rejected (series for known reasons may exist at 0).
            self.assertEqual([v for _, v in e.find("bellwether_frames_rejected_total",
                                                   pool=POOL) if v != 0], [])
            self.assertEqual(e.value("bellwether_streams", pool=POOL), 1)
            self.assertEqual(e.value("bellwether_questions", pool=POOL), 1)
            self.assertEqual(e.value("bellwether_ingest_queue_depth", pool=POOL), 0)

            # The one (question, stream) pair carries exactly one progress label.
            labels = e.find("bellwether_pool_question_streams", pool=POOL)
            self.assertEqual(sorted(l["label"] for l, _ in labels),
                             ["diverging", "learning", "settled"])
            self.assertEqual(sum(v for _, v in labels), 1)
            q_labels = e.find("bellwether_question_streams", pool=POOL, question=QUESTION)
            self.assertEqual(sum(v for _, v in q_labels), 1)

            # Hundreds of predictions were verified: a positive, finite error in the
            # question's unit (the spec's signal unit, MW).
            rmse = e.value("bellwether_question_verified_rmse", pool=POOL, question=QUESTION)
            self.assertEqual(e.find("bellwether_question_verified_rmse")[0][0].get("unit"), "MW")
            self.assertTrue(0 < rmse < math.inf, rmse)
            nrmse = e.value("bellwether_question_verified_nrmse", pool=POOL, question=QUESTION)
            self.assertTrue(0 < nrmse < math.inf, nrmse)
            td = e.value("bellwether_question_td_error_rms", pool=POOL, question=QUESTION)
            self.assertTrue(0 < td < math.inf, td)
            print("  verified RMSE %.1f MW, NRMSE %.3f, TD-error RMS %.1f" % (rmse, nrmse, td))

            # The writer applied at least one batch, and timed it.
            self.assertEqual(e.type.get("bellwether_batch_apply_seconds"), "histogram")
            batches = e.value("bellwether_batch_apply_seconds_count", pool=POOL)
            self.assertGreater(batches, 0)
            self.assertLessEqual(batches, DATA_ROWS)
            self.assertGreater(e.value("bellwether_batch_apply_seconds_sum", pool=POOL), 0)
            print("  %d frame batches applied" % batches)

            # The same file again (a producer resending): every seq is already applied, so
            # every frame is a duplicate, skipped and counted, not rejected (exit 0).
            rc, out = run_cli("--server", daemon.grpc, "stream", "--pool", POOL,
                              "--stream", STREAM, ENV["data"])
            self.assertEqual(rc, 0, "re-stream should skip duplicates (exit 0):\n" + out)
            text = self.scrape(daemon, "duplicates")
            self.promtool(text, "after %d duplicate frames" % DATA_ROWS)
            e = Exposition(text)
            self.check_structure(e)
            self.assertEqual(e.value("bellwether_frames_duplicate_total", pool=POOL), DATA_ROWS)
            self.assertEqual([l["reason"] for l, v in e.find("bellwether_frames_rejected_total",
                                                             pool=POOL) if v != 0], [])
            self.assertEqual(e.value("bellwether_frames_received_total", pool=POOL),
                             2 * DATA_ROWS)
            self.assertEqual(e.value("bellwether_frames_applied_total", pool=POOL), DATA_ROWS)
            self.assertEqual(e.value("bellwether_streams", pool=POOL), 1)

            # A partial overlap counts frame by frame: a new stream gets the first 100
            # rows, then the whole file (100 duplicates, the rest applied).
            head = os.path.join(self.tmp, "head.csv")
            with open(ENV["data"]) as src, open(head, "w") as dst:
                for _ in range(101):
                    dst.write(src.readline())
            rc, out = run_cli("--server", daemon.grpc, "stream", "--pool", POOL,
                              "--stream", "uk-2", head)
            self.assertEqual(rc, 0, out)
            rc, out = run_cli("--server", daemon.grpc, "stream", "--pool", POOL,
                              "--stream", "uk-2", ENV["data"])
            self.assertEqual(rc, 0, out)
            e = Exposition(self.scrape(daemon, "overlap"))
            self.check_structure(e)
            self.assertEqual(e.value("bellwether_frames_duplicate_total", pool=POOL),
                             DATA_ROWS + 100)
            self.assertEqual(e.value("bellwether_frames_applied_total", pool=POOL),
                             2 * DATA_ROWS)
            self.assertEqual(e.value("bellwether_frames_received_total", pool=POOL),
                             3 * DATA_ROWS + 100)
            self.assertEqual(e.value("bellwether_streams", pool=POOL), 2)
            self.assertEqual(sum(v for _, v in e.find("bellwether_question_streams",
                                                      pool=POOL, question=QUESTION)), 2)
        finally:
            code, how = daemon.stop()
            print("  bellwetherd stopped: %s, exit %s" % (how, code))


class PrometheusScrape(unittest.TestCase):

    def setUp(self):
        self.tmp = tempfile.mkdtemp(prefix="bw-prom-scrape-")

    def tearDown(self):
        shutil.rmtree(self.tmp, ignore_errors=True)

    @staticmethod
    def free_port():
        s = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
        try:
            s.bind(("127.0.0.1", 0))
            return s.getsockname()[1]
        finally:
            s.close()

    def start_prometheus(self, target, attempt):
        """Starts Prometheus on a free 127.0.0.1 port; returns (proc, base URL, log path),
        or None if it could not bind its port."""
        port = self.free_port()
        config = os.path.join(self.tmp, "prometheus.yml")
        with open(config, "w") as f:
            f.write("global:\n"
                    "  scrape_interval: 1s\n"
                    "  scrape_timeout: 1s\n"
                    "  evaluation_interval: 1s\n"
                    "scrape_configs:\n"
                    "  - job_name: bellwether\n"
                    "    static_configs:\n"
                    "      - targets: ['%s']\n" % target)
        log_path = os.path.join(self.tmp, "prometheus-%d.log" % attempt)
        log = open(log_path, "w")
        data = os.path.join(self.tmp, "data-%d" % attempt)
        proc = subprocess.Popen(
            [PROMETHEUS, "--config.file=" + config, "--storage.tsdb.path=" + data,
             "--web.listen-address=127.0.0.1:%d" % port, "--log.level=info"],
            stdout=log, stderr=subprocess.STDOUT, preexec_fn=_die_with_parent,
            cwd=self.tmp)
        log.close()
        _register(proc)
        base = "http://127.0.0.1:%d" % port
        deadline = time.monotonic() + PROM_READY_TIMEOUT_S
        while time.monotonic() < deadline:
            if proc.poll() is not None:
                if "address already in use" in tail(log_path, 200):
                    return None
                raise RuntimeError("prometheus exited (code %s):\n%s"
                                   % (proc.returncode, tail(log_path)))
            try:
                status, _, _ = http_get(base + "/-/ready")
                if status == 200:
                    return proc, base, log_path
            except (urllib.error.URLError, ConnectionError, socket.timeout):
                pass
            time.sleep(0.25)
        stop_process(proc)
        raise RuntimeError("prometheus not ready in %.0f s:\n%s"
                           % (PROM_READY_TIMEOUT_S, tail(log_path)))

    def api(self, base, path, **params):
        url = base + path + ("?" + urllib.parse.urlencode(params) if params else "")
        status, _, body = http_get(url)
        self.assertEqual(status, 200, url)
        reply = json.loads(body)
        self.assertEqual(reply.get("status"), "success", body)
        return reply["data"]

    def test_prometheus_scrapes_daemon(self):
        started = time.monotonic()
        daemon = Daemon(ENV["daemon"], os.path.join(self.tmp, "daemon.log"))
        prom = None
        log_path = None
        try:
            feed_grid(self, daemon)
            for attempt in (1, 2):  # a second try if the free port was taken meanwhile
                prom = self.start_prometheus(daemon.http, attempt)
                if prom is not None:
                    break
                print("  prometheus could not bind its port; retrying with another")
            self.assertIsNotNone(prom, "prometheus could not bind a port twice")
            proc, base, log_path = prom
            print("  prometheus ready at %s after %.1f s" % (base, time.monotonic() - started))

            query = 'bellwether_frames_applied_total{pool="%s"}' % POOL
            deadline = time.monotonic() + PROM_QUERY_TIMEOUT_S
            result = []
            while True:
                data = self.api(base, "/api/v1/query", query="bellwether_frames_applied_total")
                self.assertEqual(data["resultType"], "vector")
                result = [r for r in data["result"] if r["metric"].get("pool") == POOL]
                if result or time.monotonic() > deadline:
                    break
                time.sleep(0.5)
            if not result:
                targets = self.api(base, "/api/v1/targets")["activeTargets"]
                self.fail("no %s from prometheus in %.0f s: %s; targets: %s"
                          % (query, PROM_QUERY_TIMEOUT_S, data,
                             [(t["scrapeUrl"], t["health"], t.get("lastError"),
                               t.get("lastScrape"), t.get("lastScrapeDuration"))
                              for t in targets]))
            self.assertEqual(len(result), 1, result)
            self.assertEqual(result[0]["metric"].get("job"), "bellwether")
            self.assertEqual(result[0]["metric"].get("instance"), daemon.http)
            self.assertEqual(float(result[0]["value"][1]), DATA_ROWS)
            print("  prometheus: %s = %s after %.1f s"
                  % (query, result[0]["value"][1], time.monotonic() - started))

            # The histogram survives ingestion: PromQL can take a quantile of it.
            data = self.api(base, "/api/v1/query", query=(
                'histogram_quantile(0.5, bellwether_batch_apply_seconds_bucket{pool="%s"})'
                % POOL))
            self.assertEqual(len(data["result"]), 1, data)
            median = float(data["result"][0]["value"][1])
            self.assertTrue(0 < median <= 2.5, median)
            print("  prometheus: median batch apply time bucket estimate %.6f s" % median)

            data = self.api(base, "/api/v1/targets")
            targets = [t for t in data["activeTargets"]
                       if t["labels"].get("instance") == daemon.http]
            self.assertEqual(len(targets), 1, data)
            t = targets[0]
            self.assertEqual(t["health"], "up", "target %s: %s" % (t["scrapeUrl"],
                                                                    t.get("lastError")))
            self.assertEqual(t["scrapeUrl"], "http://%s/metrics" % daemon.http)
            self.assertEqual(t.get("lastError", ""), "")
            print("  prometheus target %s: %s" % (t["scrapeUrl"], t["health"]))
            self.assertLess(time.monotonic() - started, PROM_TEST_LIMIT_S)
        except BaseException:
            if log_path is not None:
                print("--- prometheus log (tail) ---\n" + tail(log_path))
            print("--- bellwetherd log (tail) ---\n" + tail(daemon.log_path))
            raise
        finally:
            if prom is not None:
                code, how = stop_process(prom[0])
                print("  prometheus stopped: %s, exit %s" % (how, code))
            code, how = daemon.stop()
            print("  bellwetherd stopped: %s, exit %s" % (how, code))


def main():
    args = sys.argv[1:]
    if len(args) < 3:
        sys.stderr.write(__doc__)
        return 2
    ENV["daemon"], ENV["cli"], repo = args[:3]
    ENV["repo"] = os.path.abspath(repo)
    ENV["data"] = os.path.normpath(os.path.join(ENV["repo"], "..", "shared", "data",
                                                "halfhourly-demand-2000.csv"))
    for what in ("daemon", "cli", "data"):
        if not os.path.exists(ENV[what]):
            sys.stderr.write("prometheus_test: %s not found: %s\n" % (what, ENV[what]))
            return 2
    for tool in (PROMTOOL, PROMETHEUS):
        if not os.access(tool, os.X_OK):
            sys.stderr.write("prometheus_test: %s missing (Debian package prometheus)\n" % tool)
            return 2
    with open(ENV["data"]) as f:
        rows = sum(1 for line in f if line.strip()) - 1
    if rows != DATA_ROWS:
        sys.stderr.write("prometheus_test: %s has %d data rows, expected %d\n"
                         % (ENV["data"], rows, DATA_ROWS))
        return 2
    watchdog = threading.Timer(RUN_LIMIT_S, _watchdog)
    watchdog.daemon = True
    watchdog.start()
    try:
        program = unittest.main(argv=[sys.argv[0]] + args[3:], exit=False, verbosity=2)
    finally:
        watchdog.cancel()
    return 0 if program.result.wasSuccessful() else 1


if __name__ == "__main__":
    sys.exit(main())
