#!/usr/bin/python3
"""Integration: drive a real bellwetherd from Python over gRPC.

Proves the repository's proto works for another language: the Python stubs are
generated at test time from proto/bellwether/v1/*.proto (Debian's python3-grpc-tools,
or Debian's protoc with grpc_python_plugin when that bundled compiler is too old for the
proto; see generate_stubs), and the calls go through Debian's python3-grpcio.

Usage:
  python_client_test.py [DAEMON_PATH [PROTO_DIR]]
DAEMON_PATH defaults to $BW_DAEMON_PATH; PROTO_DIR to <repo>/proto beside this file.

The daemon listens on 127.0.0.1 port 0 only. The whole run is bounded (a watchdog ends
it after RUN_LIMIT_S seconds), every RPC has a deadline, and the daemon is stopped
(SIGTERM, then SIGKILL) in a finally block. Exit code 0 only if every check passed.

The scenario is invented: a pump station ("pump-station-7") reporting its flow (m3/h)
and discharge pressure (bar) every step.
"""

import ctypes
import glob
import importlib
import math
import os
import queue
import shutil
import signal
import subprocess
import sys
import tempfile
import threading
import time
import unittest

RUN_LIMIT_S = 60.0  # the whole test
RPC_TIMEOUT_S = 10.0  # every RPC (for Ingest: the whole call)
STARTUP_TIMEOUT_S = 15.0  # until the daemon prints its address
STOP_TIMEOUT_S = 10.0  # SIGTERM -> exit, before SIGKILL

HERE = os.path.dirname(os.path.abspath(__file__))
DEFAULT_PROTO_DIR = os.path.normpath(os.path.join(HERE, "..", "..", "proto"))

# The standard gRPC health checking protocol (grpc.health.v1), written out here because
# Debian 12 packages no Python grpc_health module.
HEALTH_PROTO = """syntax = "proto3";

package grpc.health.v1;

message HealthCheckRequest {
  string service = 1;
}

message HealthCheckResponse {
  enum ServingStatus {
    UNKNOWN = 0;
    SERVING = 1;
    NOT_SERVING = 2;
    SERVICE_UNKNOWN = 3;
  }
  ServingStatus status = 1;
}

service Health {
  rpc Check(HealthCheckRequest) returns (HealthCheckResponse);
  rpc Watch(HealthCheckRequest) returns (stream HealthCheckResponse);
}
"""

POOL = "pump-station-7"
CALIB_POOL = "pump-station-7-calibration"
BAD_POOL = "pump-station-7-bad-gamma"

FLOW_MAX = 400.0  # declared range of the flow signal, m3/h
GAMMA = 0.9


def flow_at(seq):
    """Invented flow pattern: a daily cycle of 24 steps between 120 and 280 m3/h."""
    return 200.0 + 80.0 * math.sin(2.0 * math.pi * seq / 24.0)


def pressure_at(seq):
    return 4.0 + 1.5 * math.cos(2.0 * math.pi * seq / 24.0)


# Filled in by setUpModule.
ENV = {}
NOTES = []


# ----------------------------------------------------------------------------- stubs


def _run(cmd, cwd):
    p = subprocess.run(cmd, cwd=cwd, capture_output=True, text=True, timeout=30)
    return p.returncode, (p.stdout + p.stderr).strip()


def _protoc_grpc_tools(include_dirs, out_dir, files, cwd):
    cmd = [sys.executable, "-m", "grpc_tools.protoc"]
    cmd += ["-I" + d for d in include_dirs]
    cmd += ["--python_out=" + out_dir, "--grpc_python_out=" + out_dir] + files
    return _run(cmd, cwd)


def _protoc_debian(include_dirs, out_dir, files, cwd):
    cmd = ["/usr/bin/protoc", "--plugin=protoc-gen-grpc_python=/usr/bin/grpc_python_plugin"]
    cmd += ["-I" + d for d in include_dirs]
    cmd += ["--python_out=" + out_dir, "--grpc_python_out=" + out_dir] + files
    return _run(cmd, cwd)


def _grpc_tools_version():
    rc, out = _run([sys.executable, "-m", "grpc_tools.protoc", "--version"], cwd="/")
    return out if rc == 0 else "unknown"


def generate(include_dir, out_dir, files, what):
    """Generates Python message and service stubs; returns the generator used.

    First choice: python3-grpc-tools (python3 -m grpc_tools.protoc). Debian 12 ships
    grpcio-tools 1.14.1, whose bundled compiler is libprotoc 3.5.1; it rejects proto3
    `optional` fields (frame.proto has two). Then Debian's own protoc (protobuf-compiler
    3.21, the version the C++ build uses) with grpc_python_plugin (protobuf-compiler-grpc
    1.51, the version of python3-grpcio) generates the same modules.
    """
    rc, out = _protoc_grpc_tools([include_dir], out_dir, files, include_dir)
    if rc == 0:
        return "grpc_tools.protoc (%s)" % _grpc_tools_version()
    first_error = out
    rc2, out2 = _protoc_debian([include_dir], out_dir, files, include_dir)
    if rc2 != 0:
        raise RuntimeError(
            "cannot generate %s stubs.\n  grpc_tools.protoc: %s\n  /usr/bin/protoc: %s"
            % (what, first_error, out2))
    NOTES.append(
        "%s: python3 -m grpc_tools.protoc (%s) failed:\n      %s\n"
        "    generated with /usr/bin/protoc + /usr/bin/grpc_python_plugin instead"
        % (what, _grpc_tools_version(), first_error.replace("\n", "\n      ")))
    return "/usr/bin/protoc + grpc_python_plugin"


def generate_stubs(proto_dir, out_dir):
    os.makedirs(out_dir)
    files = sorted(os.path.relpath(p, proto_dir)
                   for p in glob.glob(os.path.join(proto_dir, "bellwether", "v1", "*.proto")))
    if not files:
        raise RuntimeError("no .proto files under %s/bellwether/v1" % proto_dir)
    used = {"bellwether.v1": generate(proto_dir, out_dir, files, "bellwether/v1/*.proto")}

    sys.path.insert(0, out_dir)
    try:
        health_pb2 = importlib.import_module("grpc_health.v1.health_pb2")
        health_pb2_grpc = importlib.import_module("grpc_health.v1.health_pb2_grpc")
        used["grpc.health.v1"] = "the grpc_health package"
    except ImportError:
        health_dir = os.path.join(out_dir, "health_src")
        os.makedirs(health_dir)
        with open(os.path.join(health_dir, "bw_health_probe.proto"), "w") as f:
            f.write(HEALTH_PROTO)
        used["grpc.health.v1"] = generate(health_dir, out_dir, ["bw_health_probe.proto"],
                                          "health.proto")
        health_pb2 = importlib.import_module("bw_health_probe_pb2")
        health_pb2_grpc = importlib.import_module("bw_health_probe_pb2_grpc")

    mods = {
        "pool": importlib.import_module("bellwether.v1.pool_pb2"),
        "frame": importlib.import_module("bellwether.v1.frame_pb2"),
        "service": importlib.import_module("bellwether.v1.service_pb2"),
        "service_grpc": importlib.import_module("bellwether.v1.service_pb2_grpc"),
        "health": health_pb2,
        "health_grpc": health_pb2_grpc,
    }
    return mods, used


# ----------------------------------------------------------------------------- daemon


def _die_with_parent():
    # PR_SET_PDEATHSIG = 1: the daemon gets SIGKILL if this test process dies.
    try:
        ctypes.CDLL("libc.so.6", use_errno=True).prctl(1, signal.SIGKILL)
    except OSError:
        pass


class Daemon:
    def __init__(self, path, log_path):
        self.log = open(log_path, "w+")
        self.proc = subprocess.Popen(
            [path, "--listen", "127.0.0.1:0"], stdout=subprocess.PIPE,
            stderr=self.log, text=True, preexec_fn=_die_with_parent)
        self.lines = queue.Queue()
        threading.Thread(target=self._drain, daemon=True).start()
        self.address = None
        deadline = time.monotonic() + STARTUP_TIMEOUT_S
        while self.address is None:
            left = deadline - time.monotonic()
            if left <= 0:
                raise RuntimeError("bellwetherd printed no 'listening on' line in %.0f s"
                                   % STARTUP_TIMEOUT_S)
            try:
                line = self.lines.get(timeout=left)
            except queue.Empty:
                continue
            if line is None:
                raise RuntimeError("bellwetherd exited (code %s) before listening; stderr:\n%s"
                                   % (self.proc.wait(timeout=5), self.stderr()))
            if line.startswith("listening on "):
                self.address = line[len("listening on "):].strip()
        host = self.address.rsplit(":", 1)[0]
        if host != "127.0.0.1":
            raise RuntimeError("bellwetherd listens on %s, not 127.0.0.1" % self.address)

    def _drain(self):
        for line in self.proc.stdout:
            self.lines.put(line)
        self.lines.put(None)

    def stderr(self):
        self.log.flush()
        self.log.seek(0)
        return self.log.read()

    def stop(self):
        """SIGTERM, then SIGKILL after STOP_TIMEOUT_S. Returns (exit code, how)."""
        if self.proc.poll() is not None:
            return self.proc.returncode, "had already exited"
        self.proc.send_signal(signal.SIGTERM)
        try:
            return self.proc.wait(timeout=STOP_TIMEOUT_S), "SIGTERM"
        except subprocess.TimeoutExpired:
            self.proc.kill()
            return self.proc.wait(timeout=STOP_TIMEOUT_S), "SIGKILL after SIGTERM timed out"


# ----------------------------------------------------------------------------- specs


def main_pool_spec(pb, extra_question=False):
    """The pump station: flow and pressure, tile coding on flow, a bias feature, and one
    question, "discounted_flow": the discounted sum of future flow, gamma 0.9, lambda 0.5."""
    spec = pb.PoolSpec(name=POOL)
    spec.signals.add(name="flow", unit="m3/h", min=0.0, max=FLOW_MAX)
    spec.signals.add(name="pressure", unit="bar", min=0.0, max=10.0)
    spec.features.add(tiles=pb.TileCoding(signals=["flow"], tilings=4, tiles_per_dim=8))
    spec.features.add(bias=pb.BiasFeature())
    spec.questions.add(name="discounted_flow", cumulant=pb.Cumulant(signal="flow"),
                       gamma=GAMMA, **{"lambda": 0.5})
    if extra_question:
        spec.questions.add(name="flow_next", cumulant=pb.Cumulant(signal="flow"), gamma=0.0)
    return spec


CALIB_C = 2.5  # the constant cumulant
CALIB_STEP = 0.5


def calibration_pool_spec(pb):
    """A single always-active bias feature and a constant cumulant, FIXED steps."""
    spec = pb.PoolSpec(name=CALIB_POOL)
    spec.signals.add(name="flow", unit="m3/h", min=0.0, max=FLOW_MAX)
    spec.features.add(bias=pb.BiasFeature())
    spec.questions.add(name="constant_reference", cumulant=pb.Cumulant(constant=CALIB_C),
                       gamma=GAMMA, step_rule=pb.FIXED, step_size=CALIB_STEP, unit="units",
                       **{"lambda": 0.5})
    return spec


# ----------------------------------------------------------------------------- ingest


class IngestCall:
    """A bidi Ingest call driven one batch at a time: send a request, read its answer."""

    _END = object()

    def __init__(self, stub, svc, pool, stream):
        self.svc = svc
        self.requests = queue.Queue()
        self.requests.put(svc.IngestRequest(open=svc.IngestOpen(pool=pool, stream=stream)))
        self.responses = stub.Ingest(self._iter(), timeout=RPC_TIMEOUT_S)

    def _iter(self):
        while True:
            r = self.requests.get()
            if r is self._END:
                return
            yield r

    def send(self, frames):
        """Sends one batch and returns its IngestResponse (raises grpc.RpcError)."""
        batch = self.svc.IngestRequest()
        batch.batch.frames.extend(frames)
        self.requests.put(batch)
        return next(self.responses)

    def close(self):
        self.requests.put(self._END)
        try:
            for _ in self.responses:
                pass
        except Exception:  # the call may already have ended with an error
            pass


def frame(fpb, seq, values):
    return fpb.Frame(seq=seq, values=values)


def pump_frame(fpb, seq):
    return frame(fpb, seq, [flow_at(seq), pressure_at(seq)])


# ----------------------------------------------------------------------------- tests


def setUpModule():
    ENV["tmp"] = tempfile.mkdtemp(prefix="bw_pyclient_")
    mods, used = generate_stubs(ENV["proto_dir"], os.path.join(ENV["tmp"], "stubs"))
    ENV.update(mods)
    ENV["generators"] = used
    import grpc  # python3-grpcio
    ENV["grpc"] = grpc
    ENV["daemon"] = Daemon(ENV["daemon_path"], os.path.join(ENV["tmp"], "bellwetherd.log"))
    ENV["channel"] = grpc.insecure_channel(ENV["daemon"].address)
    grpc.channel_ready_future(ENV["channel"]).result(timeout=RPC_TIMEOUT_S)
    ENV["stub"] = mods["service_grpc"].BellwetherStub(ENV["channel"])
    ENV["health_stub"] = mods["health_grpc"].HealthStub(ENV["channel"])


def tearDownModule():
    if "channel" in ENV:
        ENV["channel"].close()


class PythonClientTest(unittest.TestCase):
    """Methods run in name order; later ones create what they need if it is missing."""

    def setUp(self):
        self.grpc = ENV["grpc"]
        self.pb = ENV["pool"]
        self.fpb = ENV["frame"]
        self.svc = ENV["service"]
        self.stub = ENV["stub"]

    def ensure_pool(self, spec):
        self.stub.ApplyPool(self.svc.ApplyPoolRequest(spec=spec), timeout=RPC_TIMEOUT_S)

    def assertStatus(self, err, code, mention=None):
        self.assertEqual(err.code(), code, "status %s: %s" % (err.code(), err.details()))
        if mention is not None:
            self.assertIn(mention, err.details() or "",
                          "the error details should name `%s`" % mention)

    def test_01_health_serving(self):
        h = ENV["health"]
        resp = ENV["health_stub"].Check(h.HealthCheckRequest(service=""),
                                        timeout=RPC_TIMEOUT_S)
        self.assertEqual(resp.status, h.HealthCheckResponse.SERVING)

    def test_02_apply_pool_creates(self):
        resp = self.stub.ApplyPool(self.svc.ApplyPoolRequest(spec=main_pool_spec(self.pb)),
                                   timeout=RPC_TIMEOUT_S)
        self.assertTrue(resp.created, str(resp))
        self.assertFalse(resp.updated, str(resp))
        self.assertEqual(list(resp.added), ["discounted_flow"])
        # Applying the same spec again changes nothing.
        again = self.stub.ApplyPool(self.svc.ApplyPoolRequest(spec=main_pool_spec(self.pb)),
                                    timeout=RPC_TIMEOUT_S)
        self.assertFalse(again.created, str(again))
        self.assertFalse(again.updated, str(again))
        self.assertEqual(list(again.unchanged), ["discounted_flow"])

    def test_03_apply_pool_dry_run_reports_added_question(self):
        self.ensure_pool(main_pool_spec(self.pb))
        resp = self.stub.ApplyPool(
            self.svc.ApplyPoolRequest(spec=main_pool_spec(self.pb, extra_question=True),
                                      dry_run=True),
            timeout=RPC_TIMEOUT_S)
        self.assertFalse(resp.created, str(resp))
        self.assertTrue(resp.updated, str(resp))
        self.assertEqual(list(resp.added), ["flow_next"])
        self.assertEqual(list(resp.unchanged), ["discounted_flow"])
        self.assertEqual(list(resp.changed), [])
        self.assertEqual(list(resp.retired), [])
        self.assertFalse(resp.recipe_changed, str(resp))
        # (That the dry run changed nothing is checked in test_04: Predict answers only
        # the one question of the applied spec.)

    def test_04_ingest_then_predict(self):
        self.ensure_pool(main_pool_spec(self.pb))
        call = IngestCall(self.stub, self.svc, POOL, "station-north")
        batches, per_batch = 8, 60  # 480 frames: 20 cycles of the 24-step flow pattern
        seq = 0
        try:
            for b in range(batches):
                frames = [pump_frame(self.fpb, seq + 1 + i) for i in range(per_batch)]
                seq += per_batch
                resp = call.send(frames)
                self.assertEqual(resp.applied_seq, seq, "batch %d: %s" % (b, resp))
                self.assertEqual(resp.frames_applied, seq, "batch %d: %s" % (b, resp))
                self.assertEqual(len(resp.rejected), 0, "batch %d: %s" % (b, resp))
        finally:
            call.close()

        out = self.stub.Predict(self.svc.PredictRequest(pool=POOL, stream="station-north"),
                                timeout=RPC_TIMEOUT_S)
        self.assertEqual(out.pool, POOL)
        self.assertEqual(out.stream, "station-north")
        self.assertEqual(out.as_of_seq, seq)
        # One answer per question of the applied spec (the dry run added none).
        self.assertEqual([p.question for p in out.predictions], ["discounted_flow"])
        p = out.predictions[0]
        self.assertTrue(math.isfinite(p.value), str(p))
        self.assertEqual(p.unit, "m3/h")  # the cumulant signal's unit
        self.assertEqual(p.as_of_seq, seq)
        # A discounted sum of flows that stay in the declared range [0, 400] lies in
        # [0, 400 / (1 - gamma)] (geometric series); a finite answer outside it is wrong.
        self.assertGreaterEqual(p.value, 0.0, str(p))
        self.assertLessEqual(p.value, FLOW_MAX / (1.0 - GAMMA), str(p))
        # Tighter: the flows actually sent stay in [120, 280], so every true discounted
        # value lies in [1200, 2800]; allow 10 % for the approximation.
        self.assertGreaterEqual(p.value, 0.9 * 120.0 / (1.0 - GAMMA), str(p))
        self.assertLessEqual(p.value, 1.1 * 280.0 / (1.0 - GAMMA), str(p))

    def test_05_constant_cumulant_matches_closed_form(self):
        # Outside check: a constant cumulant c on every step, continuation gamma, a single
        # always-active (bias) feature. The discounted value is the geometric series
        # c + gamma c + gamma^2 c + ... = c / (1 - gamma) (Sutton & Barto 2018,
        # Reinforcement Learning: An Introduction, 2nd ed., Ch. 3 returns and Ch. 9/10
        # discounted value of a constant reward), which is also the TD fixed point here:
        # E[delta x] = c + gamma w - w = 0 gives w = c / (1 - gamma). FIXED steps of 0.5
        # with lambda 0.5 shrink the error by about 1 - 0.5 (1 - 0.9) / (1 - 0.45) = 0.91
        # per frame, so 400 frames settle far inside 1 %.
        resp = self.stub.ApplyPool(
            self.svc.ApplyPoolRequest(spec=calibration_pool_spec(self.pb)),
            timeout=RPC_TIMEOUT_S)
        self.assertTrue(resp.created or not resp.updated, str(resp))
        call = IngestCall(self.stub, self.svc, CALIB_POOL, "calibration")
        seq = 0
        try:
            for _ in range(4):
                frames = [frame(self.fpb, seq + 1 + i, [flow_at(seq + 1 + i)])
                          for i in range(100)]
                seq += 100
                r = call.send(frames)
                self.assertEqual(r.applied_seq, seq, str(r))
        finally:
            call.close()
        out = self.stub.Predict(self.svc.PredictRequest(pool=CALIB_POOL, stream="calibration"),
                                timeout=RPC_TIMEOUT_S)
        self.assertEqual(out.as_of_seq, seq)
        self.assertEqual(len(out.predictions), 1, str(out))
        p = out.predictions[0]
        expected = CALIB_C / (1.0 - GAMMA)  # 25
        self.assertEqual(p.unit, "units")
        self.assertTrue(math.isfinite(p.value), str(p))
        self.assertLessEqual(abs(p.value - expected), 0.01 * expected,
                             "constant_reference = %r, closed form c/(1-gamma) = %r"
                             % (p.value, expected))

    def test_06_bad_gamma_is_invalid_argument(self):
        spec = main_pool_spec(self.pb)
        spec.name = BAD_POOL
        spec.questions[0].gamma = 1.5
        with self.assertRaises(self.grpc.RpcError) as cm:
            self.stub.ApplyPool(self.svc.ApplyPoolRequest(spec=spec), timeout=RPC_TIMEOUT_S)
        self.assertStatus(cm.exception, self.grpc.StatusCode.INVALID_ARGUMENT, "gamma")
        # Nothing was created: ingesting into that pool finds no pool.
        call = IngestCall(self.stub, self.svc, BAD_POOL, "s")
        try:
            with self.assertRaises(self.grpc.RpcError) as cm2:
                call.send([pump_frame(self.fpb, 1)])
            self.assertStatus(cm2.exception, self.grpc.StatusCode.NOT_FOUND)
        finally:
            call.close()

    def test_07_predict_unknown_pool_is_not_found(self):
        with self.assertRaises(self.grpc.RpcError) as cm:
            self.stub.Predict(self.svc.PredictRequest(pool="no-such-pump-station",
                                                      stream="station-north"),
                              timeout=RPC_TIMEOUT_S)
        self.assertStatus(cm.exception, self.grpc.StatusCode.NOT_FOUND)

    def test_08_bad_frame_rejected_rest_applied(self):
        # A bad frame is rejected alone (seq and a reason naming the field); the batch's
        # other frames are applied and the call goes on (service.proto, Ingest).
        self.ensure_pool(main_pool_spec(self.pb))
        call = IngestCall(self.stub, self.svc, POOL, "station-south")
        try:
            frames = [
                pump_frame(self.fpb, 1),
                pump_frame(self.fpb, 2),
                pump_frame(self.fpb, 2),                 # index 2: a duplicate (skipped)
                frame(self.fpb, 3, [flow_at(3)]),        # index 3: one value, two signals
                pump_frame(self.fpb, 4),
            ]
            try:
                r = call.send(frames)
            except self.grpc.RpcError as e:
                self.fail("the daemon ended the Ingest call on a bad frame instead of "
                          "rejecting it alone: %s: %s" % (e.code(), e.details()))
            rejected = [(x.seq, x.index, x.reason) for x in r.rejected]
            self.assertEqual([(s, i) for s, i, _ in rejected], [(3, 3)], str(r))
            self.assertIn("values", rejected[0][2],
                          "reason should name `values`: %r" % rejected[0][2])
            self.assertEqual(r.duplicates, 1, str(r))  # resent seq 2: skipped, counted
            self.assertEqual(r.applied_seq, 4, str(r))
            self.assertEqual(r.frames_applied, 3, str(r))  # seqs 1, 2 and 4
            # The call is still open: the next batch is applied.
            r2 = call.send([pump_frame(self.fpb, 5)])
            self.assertEqual(r2.applied_seq, 5, str(r2))
            self.assertEqual(r2.frames_applied, 4, str(r2))
            self.assertEqual(len(r2.rejected), 0, str(r2))
        finally:
            call.close()
        out = self.stub.Predict(self.svc.PredictRequest(pool=POOL, stream="station-south"),
                                timeout=RPC_TIMEOUT_S)
        self.assertEqual(out.as_of_seq, 5)


# ----------------------------------------------------------------------------- runner


class SummaryResult(unittest.TextTestResult):
    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        self.outcomes = []  # (name, "PASS"/"FAIL"/"ERROR"/"SKIP", detail)

    @staticmethod
    def _name(test):
        return getattr(test, "_testMethodName", str(test))

    @staticmethod
    def _last_line(err):
        text = str(err[1]) if err[1] is not None else err[0].__name__
        lines = [l for l in text.strip().splitlines() if l.strip()]
        return (err[0].__name__ + ": " + lines[0]) if lines else err[0].__name__

    def addSuccess(self, test):
        super().addSuccess(test)
        self.outcomes.append((self._name(test), "PASS", ""))

    def addFailure(self, test, err):
        super().addFailure(test, err)
        self.outcomes.append((self._name(test), "FAIL", self._last_line(err)))

    def addError(self, test, err):
        super().addError(test, err)
        self.outcomes.append((self._name(test), "ERROR", self._last_line(err)))

    def addSkip(self, test, reason):
        super().addSkip(test, reason)
        self.outcomes.append((self._name(test), "SKIP", reason))


def _watchdog():
    sys.stdout.write("\nFAIL: PythonClient exceeded %.0f s; killing bellwetherd\n" % RUN_LIMIT_S)
    sys.stdout.flush()
    d = ENV.get("daemon")
    if d is not None and d.proc.poll() is None:
        d.proc.kill()
    if "tmp" in ENV:
        shutil.rmtree(ENV["tmp"], ignore_errors=True)
    os._exit(1)


def main():
    args = sys.argv[1:]
    ENV["daemon_path"] = args[0] if args else os.environ.get("BW_DAEMON_PATH", "")
    ENV["proto_dir"] = os.path.abspath(args[1] if len(args) > 1 else DEFAULT_PROTO_DIR)
    if not ENV["daemon_path"] or not os.access(ENV["daemon_path"], os.X_OK):
        print("FAIL: no bellwetherd binary (pass its path or set BW_DAEMON_PATH): %r"
              % ENV["daemon_path"])
        return 2

    timer = threading.Timer(RUN_LIMIT_S, _watchdog)
    timer.daemon = True
    timer.start()
    result = None
    shutdown = None
    try:
        suite = unittest.defaultTestLoader.loadTestsFromTestCase(PythonClientTest)
        runner = unittest.TextTestRunner(stream=sys.stdout, verbosity=2,
                                         resultclass=SummaryResult)
        result = runner.run(suite)
    finally:
        d = ENV.get("daemon")
        if d is not None:
            code, how = d.stop()
            shutdown = (code, how)
            if result is None or not result.wasSuccessful() or code != 0:
                print("---- bellwetherd stderr ----\n" + d.stderr().rstrip() + "\n----")
        timer.cancel()
        if "tmp" in ENV:
            shutil.rmtree(ENV["tmp"], ignore_errors=True)

    # (A module-level setup failure is reported by addError under its own name.)
    outcomes = list(result.outcomes)
    if shutdown is not None:
        code, how = shutdown
        outcomes.append(("daemon_stops_on_sigterm", "PASS" if (code == 0 and how == "SIGTERM")
                         else "FAIL", "" if code == 0 else "exit %s (%s)" % (code, how)))

    print("\n==== PythonClient summary ====")
    if ENV.get("generators"):
        for pkg, gen in sorted(ENV["generators"].items()):
            print("stubs %-15s generated by %s" % (pkg, gen))
    for note in NOTES:
        print("NOTE " + note)
    for name, verdict, detail in outcomes:
        print("%-5s %s%s" % (verdict, name, (" -- " + detail) if detail else ""))
    passed = sum(1 for _, v, _ in outcomes if v == "PASS")
    ok = bool(outcomes) and passed == len(outcomes) and result.wasSuccessful()
    print("%s: %d of %d checks passed" % ("PASS" if ok else "FAIL", passed, len(outcomes)))
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
