#!/usr/bin/python3
"""The status page, end to end, in headless Chromium.

Daemon tests start bellwetherd with --http on 127.0.0.1 port 0, apply
deploy/examples/grid.json and stream the shared half-hourly demand data with the CLI, then
load http://HOST:PORT/?pool=grid&stream=uk in Chromium and check what the page drew
against the daemon's own JSON API: the number of verified points plotted, that both lines
are drawn through exactly those points (and follow the API's numbers), the current value,
the label, the advisory caution taken from the API; that an unknown stream shows an error
without breaking the page; that a stream with nothing verified yet says so. Screenshots go
to the artifact directory (wide and phone sizes) and are checked to be real images.

Fixture tests serve server/status_page/index.html with the JSON fixtures in
status_page_fixture/ (no daemon) and check the same hooks plus the "daemon down" state.

  /usr/bin/python3 tests/integration/status_page_test.py [--daemon PATH] [--cli PATH]
      [--spec FILE.json] [--csv FILE.csv] [--artifacts DIR] [unittest args]

Defaults: build/server/bellwetherd, build/client/bellwether, deploy/examples/grid.json,
../shared/data/halfhourly-demand-2000.csv, build/tests/artifacts (env BW_DAEMON, BW_CLI,
BW_ARTIFACT_DIR override). Everything listens on 127.0.0.1 only; every child process is
killed in a finally block, and a watchdog ends the run after WATCHDOG_SECONDS.
"""
import argparse
import html.parser
import json
import math
import os
import re
import shutil
import signal
import statistics
import struct
import subprocess
import sys
import tempfile
import threading
import time
import unittest
import urllib.error
import urllib.parse
import urllib.request

HERE = os.path.dirname(os.path.abspath(__file__))
REPO = os.path.abspath(os.path.join(HERE, "..", ".."))
FIXTURE_DIR = os.path.join(HERE, "status_page_fixture")
PAGE = os.path.join(REPO, "server", "status_page", "index.html")
WATCHDOG_SECONDS = 110
CHROMIUM_TIMEOUT = 40
# Chromium runs the page's scripts for this much virtual time (fetches pause it), long
# enough for the first fetches and render, short of many refreshes (every 5 s).
VIRTUAL_TIME_MS = 4000

ARGS = None
_children = []  # every Popen we started, killed at the end and by the watchdog
_children_lock = threading.Lock()


def _track(p):
    with _children_lock:
        _children.append(p)
    return p


def _kill(p):
    if p.poll() is not None:
        return
    try:
        os.killpg(p.pid, signal.SIGKILL)  # each child runs in its own session
    except (ProcessLookupError, PermissionError):
        pass
    try:
        p.kill()
    except ProcessLookupError:
        pass
    try:
        p.wait(timeout=5)
    except subprocess.TimeoutExpired:
        pass


def _kill_all():
    with _children_lock:
        ps = list(_children)
    for p in ps:
        _kill(p)


def _watchdog():
    sys.stderr.write(f"status_page_test: watchdog: still running after {WATCHDOG_SECONDS} s; "
                     "killing children\n")
    _kill_all()
    os._exit(2)


# ---- A small DOM from Chromium's --dump-dom output ----

VOID = {"area", "base", "br", "col", "embed", "hr", "img", "input", "link", "meta", "source",
        "track", "wbr"}


class Node:
    def __init__(self, tag, attrs, parent):
        self.tag, self.attrs, self.parent, self.children = tag, dict(attrs), parent, []

    def iter(self):
        yield self
        for c in self.children:
            if isinstance(c, Node):
                yield from c.iter()

    def text(self):
        return "".join(c if isinstance(c, str) else c.text() for c in self.children)

    def classes(self):
        return (self.attrs.get("class") or "").split()

    def find_all(self, tag=None, cls=None, **attrs):
        out = []
        for n in self.iter():
            if tag and n.tag != tag:
                continue
            if cls and cls not in n.classes():
                continue
            if any(n.attrs.get(k.replace("_", "-")) != v for k, v in attrs.items()):
                continue
            out.append(n)
        return out

    def by_id(self, ident):
        for n in self.iter():
            if n.attrs.get("id") == ident:
                return n
        return None


class _DomParser(html.parser.HTMLParser):
    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.root = Node("#document", {}, None)
        self.cur = self.root

    def handle_starttag(self, tag, attrs):
        n = Node(tag, attrs, self.cur)
        self.cur.children.append(n)
        if tag not in VOID:
            self.cur = n

    def handle_startendtag(self, tag, attrs):
        self.cur.children.append(Node(tag, attrs, self.cur))

    def handle_endtag(self, tag):
        n = self.cur
        while n is not None and n.tag != tag:
            n = n.parent
        if n is not None and n.parent is not None:
            self.cur = n.parent

    def handle_data(self, data):
        self.cur.children.append(data)


def parse_dom(text):
    p = _DomParser()
    p.feed(text)
    p.close()
    return p.root


# ---- Processes ----

def chromium_binary():
    for name in ("chromium", "chromium-browser"):
        path = shutil.which(name)
        if path:
            return path
    return None


def run_chromium(url, mode, out_png=None, size=(1280, 900), virtual_ms=VIRTUAL_TIME_MS):
    """Runs headless Chromium once: mode "dom" returns the DOM after the page's scripts ran,
    mode "png" writes a screenshot of `size` to out_png."""
    profile = tempfile.mkdtemp(prefix="bw-chromium-")
    args = [chromium_binary(), "--headless", "--no-sandbox", "--disable-gpu",
            "--hide-scrollbars", "--no-first-run", "--no-default-browser-check",
            "--disable-extensions", "--disable-background-networking", "--disable-sync",
            "--disable-component-update", "--disable-default-apps", "--mute-audio",
            "--enable-logging=stderr", "--v=0",
            "--user-data-dir=" + profile, f"--virtual-time-budget={virtual_ms}",
            f"--window-size={size[0]},{size[1]}"]
    args += ["--dump-dom"] if mode == "dom" else ["--screenshot=" + out_png]
    args.append(url)
    p = _track(subprocess.Popen(args, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                                stdin=subprocess.DEVNULL, start_new_session=True))
    try:
        out, err = p.communicate(timeout=CHROMIUM_TIMEOUT)
    except subprocess.TimeoutExpired:
        _kill(p)
        raise AssertionError(f"chromium did not finish within {CHROMIUM_TIMEOUT} s: {url}")
    finally:
        _kill(p)
        shutil.rmtree(profile, ignore_errors=True)
    err_text = err.decode(errors="replace")
    if p.returncode != 0:
        raise AssertionError(f"chromium exited {p.returncode} for {url}: {err_text[-2000:]}")
    # The page's scripts must not throw (Chromium logs uncaught errors as CONSOLE lines).
    uncaught = [line for line in err_text.splitlines() if ":CONSOLE" in line and "Uncaught" in line]
    if uncaught:
        raise AssertionError(f"script errors on {url}: {uncaught[:5]}")
    return out.decode("utf-8", errors="replace")


def phone_screenshot(url, out_png, size=(390, 844)):
    """A screenshot of `url` laid out at a phone's width. Headless Chromium lays pages out
    at least 500 px wide whatever the window, so the page is framed at the phone's size
    by a wrapper page served here (127.0.0.1, port 0) for the one run."""
    from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
    import html as html_mod
    wrapper = (f'<!doctype html><html><body style="margin:0"><iframe src="{html_mod.escape(url)}" '
               f'style="border:0;display:block;width:{size[0]}px;height:{size[1]}px">'
               '</iframe></body></html>').encode()

    class Wrapper(BaseHTTPRequestHandler):
        def log_message(self, fmt, *args):
            pass

        def do_GET(self):
            self.send_response(200)
            self.send_header("Content-Type", "text/html; charset=utf-8")
            self.send_header("Content-Length", str(len(wrapper)))
            self.end_headers()
            self.wfile.write(wrapper)

    srv = ThreadingHTTPServer(("127.0.0.1", 0), Wrapper)
    threading.Thread(target=srv.serve_forever, daemon=True).start()
    try:
        run_chromium(f"http://127.0.0.1:{srv.server_address[1]}/", "png", out_png=out_png,
                     size=size)
    finally:
        srv.shutdown()
        srv.server_close()


def http_get(base, path, timeout=10):
    """(status, content type, body bytes) of GET http://base/path."""
    try:
        with urllib.request.urlopen(f"http://{base}{path}", timeout=timeout) as r:
            return r.status, r.headers.get("Content-Type", ""), r.read()
    except urllib.error.HTTPError as e:
        return e.code, e.headers.get("Content-Type", ""), e.read()


def png_info(path):
    with open(path, "rb") as f:
        head = f.read(33)
    if head[:8] != b"\x89PNG\r\n\x1a\n" or head[12:16] != b"IHDR":
        return None
    w, h = struct.unpack(">II", head[16:24])
    return w, h, os.path.getsize(path)


def path_points(d):
    """Vertices of an SVG path made of absolute M/L commands."""
    return [(float(x), float(y)) for x, y in
            re.findall(r"[ML]\s*(-?\d+(?:\.\d+)?)[\s,]+(-?\d+(?:\.\d+)?)", d)]


def number(v, default=0.0):
    """A protobuf JSON number (64-bit integers arrive as strings; defaults are omitted)."""
    if v is None:
        return default
    return float(v)


# ---- Checks shared by the daemon and fixture tests ----

class PageChecks(unittest.TestCase):
    def assert_prediction_plot(self, dom, question, verified, unit=""):
        """The question's prediction plot drew exactly the API's verified points."""
        svgs = dom.find_all("svg", cls="bw-plot-predictions", data_question=question)
        self.assertEqual(len(svgs), 1, f"one prediction plot for {question}")
        svg = svgs[0]
        pts = [v for v in verified
               if math.isfinite(number(v.get("predicted"))) and
               math.isfinite(number(v.get("realized")))]
        n = len(pts)
        self.assertEqual(svg.attrs.get("data-points"), str(n))
        self.assertGreater(n, 0)
        paths = {p.attrs.get("data-series"): p for p in svg.find_all("path")
                 if "line" in p.classes() and p.attrs.get("data-series")}
        self.assertIn("predicted", paths)
        self.assertIn("realized", paths)
        frame = svg.find_all("rect", cls="frame")
        self.assertEqual(len(frame), 1, "the plot area is framed")
        fx, fy = float(frame[0].attrs["x"]), float(frame[0].attrs["y"])
        fw, fh = float(frame[0].attrs["width"]), float(frame[0].attrs["height"])
        pts.sort(key=lambda v: number(v.get("seq")))
        seqs = [number(v.get("seq")) for v in pts]
        all_y = []
        for series in ("predicted", "realized"):
            d = paths[series].attrs.get("d", "")
            self.assertTrue(d.strip(), f"{series} path has a d attribute")
            xy = path_points(d)
            self.assertEqual(len(xy), n, f"{series} line goes through every verified point")
            for x, y in xy:
                self.assertTrue(fx - 0.5 <= x <= fx + fw + 0.5 and fy - 0.5 <= y <= fy + fh + 0.5,
                                f"{series} point {(x, y)} inside the plot area")
            all_y += [y for _, y in xy]
            if n > 1:  # the x axis spans the points' seqs
                self.assertAlmostEqual(min(x for x, _ in xy), fx, delta=0.5)
                self.assertAlmostEqual(max(x for x, _ in xy), fx + fw, delta=0.5)
            values = [number(v.get(series)) for v in pts]
            # The drawn line follows the API's numbers: x grows with seq, y (downwards in
            # SVG) falls as the value rises. Linear maps, so the correlation is 1 up to
            # rounding to 0.1 px.
            if len(set(seqs)) > 1:
                self.assertGreater(statistics.correlation(seqs, [x for x, _ in xy]), 0.999)
            if len(set(values)) > 1:
                self.assertLess(statistics.correlation(values, [y for _, y in xy]), -0.999)
        if len(set(all_y)) > 1:  # the y axis is fitted to the data, not squashed
            self.assertGreater(max(all_y) - min(all_y), 0.5 * fh)
        # A legend names both lines; axes carry tick labels.
        texts = [t.text() for t in svg.find_all("text")]
        self.assertIn("predicted", texts)
        self.assertIn("realized", texts)
        self.assertGreaterEqual(sum(1 for t in texts if re.fullmatch(r"-?[\d.]+[kMG]?", t)), 4,
                                f"tick labels on the axes: {texts}")
        return svg

    def assert_question_card(self, dom, prediction):
        q = prediction["question"]
        cards = dom.find_all("article", cls="q", data_question=q)
        self.assertEqual(len(cards), 1)
        card = cards[0]
        value = card.find_all(cls="value")
        self.assertEqual(len(value), 1)
        self.assertAlmostEqual(float(value[0].attrs["data-value"]),
                               number(prediction.get("value")), places=6)
        if number(prediction.get("errorBand")) > 0:
            band = card.find_all(cls="band")
            self.assertEqual(float(band[0].attrs["data-band"]), number(prediction["errorBand"]))
            self.assertIn("\u00b1", band[0].text())
        label = prediction.get("label") or "none"
        badges = [b.attrs.get("data-label") for b in card.find_all("span", cls="badge")]
        self.assertIn(label, badges)
        if prediction.get("unit"):
            self.assertIn(prediction["unit"], card.text())
        # Verified count shown as text.
        count = int(number(prediction.get("verified", {}).get("count")))
        self.assertIn(f"{count:,}", card.text())
        return card

    def assert_caution(self, dom, caution, source):
        el = dom.by_id("bw-caution")
        self.assertIsNotNone(el)
        self.assertEqual(el.attrs.get("data-source"), source)
        self.assertIn(caution, " ".join(el.text().split()))
        self.assertIn("not a safety system", el.text())
        self.assertIn("licensed practice", el.text())

    def assert_png(self, path, size):
        info = png_info(path)
        self.assertIsNotNone(info, f"{path} is a PNG")
        self.assertEqual(info[:2], size)
        # A blank page of this size compresses to a few KB; the page's text, plots and
        # badges take far more.
        self.assertGreater(info[2], 20000, f"{path} is {info[2]} bytes")


# ---- Against the daemon ----

class DaemonStatusPageTest(PageChecks):
    @classmethod
    def setUpClass(cls):
        for path in (ARGS.daemon, ARGS.cli):
            if not os.access(path, os.X_OK):
                raise AssertionError(f"not built: {path} (cmake --build build)")
        if chromium_binary() is None:
            raise AssertionError("chromium is not installed (deploy/install-deps.sh)")
        cls.tmp = tempfile.mkdtemp(prefix="bw-status-page-")
        cls.daemon = None
        cls.daemon_err = None
        try:
            cls._start()
        except BaseException:
            cls._stop()
            raise

    @classmethod
    def _start(cls):
        cls.daemon_err = open(os.path.join(cls.tmp, "daemon.err"), "wb")
        cls.daemon = _track(subprocess.Popen(
            [ARGS.daemon, "--listen", "127.0.0.1:0", "--http", "127.0.0.1:0",
             "--state-dir", os.path.join(cls.tmp, "state")],
            stdout=subprocess.PIPE, stderr=cls.daemon_err,
            stdin=subprocess.DEVNULL, start_new_session=True, text=True))
        cls.grpc = cls.http = None
        lines = []

        def read():
            for line in cls.daemon.stdout:
                lines.append(line.strip())

        threading.Thread(target=read, daemon=True).start()
        deadline = time.monotonic() + 15
        while time.monotonic() < deadline and not (cls.grpc and cls.http):
            for line in list(lines):
                if line.startswith("listening on "):
                    cls.grpc = line[len("listening on "):]
                if line.startswith("http on "):
                    cls.http = line[len("http on "):]
            if cls.daemon.poll() is not None:
                break
            time.sleep(0.05)
        if not (cls.grpc and cls.http):
            with open(os.path.join(cls.tmp, "daemon.err"), errors="replace") as f:
                err = f.read()[-2000:]
            raise AssertionError(f"bellwetherd did not print both addresses: {lines} {err}")
        for addr in (cls.grpc, cls.http):
            assert addr.startswith("127.0.0.1:"), addr

        cls.cli([ "apply", ARGS.spec])
        cls.cli(["stream", "--pool", "grid", "--stream", "uk", ARGS.csv])
        # A second stream with only a few frames: answers, but nothing verified yet (a
        # return is verified once its remaining discount is below 1e-3, about 160 frames
        # at gamma 0.9583).
        short = os.path.join(cls.tmp, "short.csv")
        with open(ARGS.csv) as src, open(short, "w") as dst:
            for i, line in enumerate(src):
                if i > 20:
                    break
                dst.write(line)
        cls.cli(["stream", "--pool", "grid", "--stream", "uk-short", short])

    @classmethod
    def cli(cls, args):
        p = _track(subprocess.Popen([ARGS.cli, "--server", cls.grpc] + args,
                                    stdout=subprocess.PIPE, stderr=subprocess.STDOUT,
                                    stdin=subprocess.DEVNULL, start_new_session=True))
        try:
            out, _ = p.communicate(timeout=30)
        finally:
            _kill(p)
        if p.returncode != 0:
            raise AssertionError(f"bellwether {' '.join(args)} exited {p.returncode}: "
                                 f"{out.decode(errors='replace')}")

    @classmethod
    def _stop(cls):
        if cls.daemon is not None:
            if cls.daemon.poll() is None:
                try:
                    os.killpg(cls.daemon.pid, signal.SIGTERM)
                    cls.daemon.wait(timeout=10)
                except (subprocess.TimeoutExpired, ProcessLookupError):
                    pass
            _kill(cls.daemon)
            cls.daemon.stdout.close()
        if cls.daemon_err is not None:
            cls.daemon_err.close()
        shutil.rmtree(cls.tmp, ignore_errors=True)

    @classmethod
    def tearDownClass(cls):
        cls._stop()

    def api(self, path):
        status, ctype, body = http_get(self.http, path)
        self.assertEqual(status, 200, body)
        self.assertTrue(ctype.startswith("application/json"), ctype)
        return json.loads(body)

    def test_served_page_is_the_source_file(self):
        status, ctype, body = http_get(self.http, "/")
        self.assertEqual(status, 200)
        self.assertTrue(ctype.startswith("text/html"), ctype)
        with open(PAGE, "rb") as f:
            self.assertEqual(body, f.read(), "the embedded page differs from "
                             "server/status_page/index.html: rebuild bellwetherd")
        # Self-contained: nothing is loaded from another address.
        self.assertIsNone(re.search(rb"""(src|href)\s*=\s*["']?(https?:)?//""", body))

    def test_prediction_plot_against_the_api(self):
        overview = self.api("/api/overview")
        progress = self.api("/api/progress?pool=grid&stream=uk")
        dom = parse_dom(run_chromium(f"http://{self.http}/?pool=grid&stream=uk", "dom"))
        body = dom.find_all("body")[0]
        self.assertEqual(body.attrs.get("data-bw-ready"), "1")

        self.assert_caution(dom, overview["caution"], "api")
        self.assertIn(overview["version"], dom.by_id("bw-version").text())
        self.assertTrue(dom.by_id("bw-error").attrs.get("hidden") is not None,
                        "no error banner while the daemon answers")

        preds = progress["current"]["predictions"]
        self.assertEqual([p["question"] for p in preds], ["demand_next_12h"])
        self.assertTrue(progress.get("historyKept"))
        history = {h["question"]: h for h in progress["history"]}
        verified = history["demand_next_12h"].get("verified", [])
        # The demand data gives hundreds of verified predictions (bounded by the ring).
        self.assertGreaterEqual(len(verified), 100)
        self.assert_prediction_plot(dom, "demand_next_12h", verified)
        self.assert_question_card(dom, preds[0])

        prog = dom.find_all("svg", cls="bw-plot-progress", data_question="demand_next_12h")
        self.assertEqual(len(prog), 1)
        samples = history["demand_next_12h"].get("progress", [])
        self.assertEqual(prog[0].attrs.get("data-points"), str(len(samples)))
        self.assertGreater(len(samples), 0)
        drawn = [p for p in prog[0].find_all("path") if p.attrs.get("data-series")]
        self.assertEqual(len(drawn), 2, "verified RMSE and TD-error RMS lines")

        # The pools list: the pool, its question with a text label badge, both streams.
        pools = dom.by_id("bw-pools-body")
        self.assertEqual(len(pools.find_all("article", cls="pool", data_pool="grid")), 1)
        links = {a.attrs.get("data-stream"): a for a in pools.find_all("a")}
        self.assertEqual(set(links), {"uk", "uk-short"})
        self.assertEqual(links["uk"].attrs.get("aria-current"), "page")
        q_info = overview["pools"][0]["questions"][0]
        q_items = pools.find_all("li", data_question="demand_next_12h")
        self.assertEqual(len(q_items), 1)
        for label, key in (("learning", "streamsLearning"), ("settled", "streamsSettled"),
                           ("diverging", "streamsDiverging")):
            n = int(q_info.get(key, 0))
            if n:
                self.assertIn(f"{n} {label}", q_items[0].text())

    def test_stream_without_verified_predictions(self):
        progress = self.api("/api/progress?pool=grid&stream=uk-short")
        self.assertTrue(progress.get("historyKept"))
        for h in progress["history"]:
            self.assertEqual(h.get("verified", []), [], "nothing verified after 20 frames")
        dom = parse_dom(run_chromium(f"http://{self.http}/?pool=grid&stream=uk-short", "dom"))
        svg = dom.find_all("svg", cls="bw-plot-predictions", data_question="demand_next_12h")
        self.assertEqual(len(svg), 1)
        self.assertEqual(svg[0].attrs.get("data-points"), "0")
        self.assertIn("No verified predictions yet", dom.by_id("bw-detail").text())
        self.assertEqual([p for p in svg[0].find_all("path") if p.attrs.get("data-series")],
                         [], "no lines without data")
        self.assert_question_card(dom, progress["current"]["predictions"][0])

    def test_unknown_stream_shows_an_error(self):
        status, ctype, body = http_get(self.http, "/api/progress?pool=grid&stream=no-such")
        self.assertEqual(status, 404)
        self.assertTrue(ctype.startswith("text/plain"), ctype)
        dom = parse_dom(run_chromium(f"http://{self.http}/?pool=grid&stream=no-such", "dom"))
        err = dom.by_id("bw-detail-error")
        self.assertIsNotNone(err, "an error is shown for the unknown stream")
        self.assertEqual(err.attrs.get("data-status"), "404")
        self.assertIn("no-such", err.text())
        self.assertIn(body.decode().strip().rstrip("."), " ".join(err.text().split()))
        self.assertEqual(dom.find_all("svg", cls="bw-plot-predictions"), [])
        # The rest of the page still works: caution, pools list with the real streams.
        overview = self.api("/api/overview")
        self.assert_caution(dom, overview["caution"], "api")
        self.assertEqual(len(dom.by_id("bw-pools-body").find_all("a", data_stream="uk")), 1)

    def test_screenshots(self):
        os.makedirs(ARGS.artifacts, exist_ok=True)
        url = f"http://{self.http}/?pool=grid&stream=uk"
        wide = os.path.join(ARGS.artifacts, "status_page.png")
        phone = os.path.join(ARGS.artifacts, "status_page_phone.png")
        for out in (wide, phone):
            if os.path.exists(out):
                os.remove(out)
        run_chromium(url, "png", out_png=wide, size=(1280, 900))
        self.assert_png(wide, (1280, 900))
        phone_screenshot(url, phone, size=(390, 844))
        self.assert_png(phone, (390, 844))


# ---- Against the fixtures (no daemon) ----

class FixtureStatusPageTest(PageChecks):
    @classmethod
    def setUpClass(cls):
        if chromium_binary() is None:
            raise AssertionError("chromium is not installed (deploy/install-deps.sh)")
        sys.path.insert(0, FIXTURE_DIR)
        import serve  # status_page_fixture/serve.py
        cls.serve = serve
        cls.servers = []

    @classmethod
    def tearDownClass(cls):
        for s in cls.servers:
            s.shutdown()
            s.server_close()

    def start(self, **kw):
        srv = self.serve.start(0, PAGE, FIXTURE_DIR, **kw)
        self.servers.append(srv)
        threading.Thread(target=srv.serve_forever, daemon=True).start()
        return f"127.0.0.1:{srv.server_address[1]}"

    def fixture(self, *parts):
        with open(os.path.join(FIXTURE_DIR, "api", *parts)) as f:
            return json.load(f)

    def test_fixture_stream(self):
        base = self.start()
        overview = self.fixture("overview.json")
        progress = self.fixture("progress", "site-shuttles", "shuttle-b.json")
        dom = parse_dom(run_chromium(f"http://{base}/?pool=site-shuttles&stream=shuttle-b", "dom"))
        self.assert_caution(dom, overview["caution"], "api")
        history = {h["question"]: h for h in progress["history"]}
        for p in progress["current"]["predictions"]:
            self.assert_question_card(dom, p)
            verified = history.get(p["question"], {}).get("verified", [])
            if verified:
                self.assert_prediction_plot(dom, p["question"], verified)
            else:
                svg = dom.find_all("svg", cls="bw-plot-predictions", data_question=p["question"])
                self.assertEqual(svg[0].attrs.get("data-points"), "0")
        # Truncated returns are marked (hollow circles), one per truncated point.
        trunc = [v for v in history["seconds_to_charger"]["verified"] if v.get("truncated")]
        self.assertGreater(len(trunc), 0)
        svg = dom.find_all("svg", cls="bw-plot-predictions", data_question="seconds_to_charger")[0]
        self.assertEqual(len([c for c in svg.find_all("circle", cls="mark")]), len(trunc) + 1,
                         "one mark per truncated point plus the legend's")
        # A diverging question says so in words, not only in colour.
        card = dom.find_all("article", cls="q", data_question="seconds_to_charger")[0]
        self.assertIn("diverging", card.find_all("span", cls="badge")[0].text())
        # The greedy action of a control question is shown.
        self.assertIn("to_charger", dom.find_all("article", cls="q",
                                                 data_question="best_next_move")[0].text())

    def test_click_a_stream(self):
        # A harness page on the same origin frames the status page, clicks a stream in
        # the pools list, waits for the stream's plots and reports what it saw.
        harness = """<!doctype html><html><body>
<iframe id="f" src="/?pool=campus-energy&amp;stream=library" style="width:1280px;height:900px"></iframe>
<script>
const f = document.getElementById("f");
function report(v) { document.body.setAttribute("data-result", JSON.stringify(v)); }
function poll(cond, then, n) {
  n = n || 0;
  if (cond()) then(); else if (n < 60) setTimeout(() => poll(cond, then, n + 1), 50);
  else report({ error: "timeout" });
}
f.onload = () => {
  const d = f.contentDocument;
  const plotOf = (q) => d.querySelector('svg.bw-plot-predictions[data-question="' + q + '"]');
  poll(() => plotOf("energy_next_12h") && d.querySelector('a[data-stream="lab-west"]'), () => {
    const before = plotOf("energy_next_12h").getAttribute("data-points");
    d.querySelector('a[data-pool="campus-energy"][data-stream="lab-west"]').click();
    poll(() => d.querySelector(".detail-head h2").textContent.indexOf("lab-west") >= 0 &&
               plotOf("energy_next_12h"), () => {
      report({ before: before, search: f.contentWindow.location.search,
               points: plotOf("energy_next_12h").getAttribute("data-points"),
               value: d.querySelector('article.q[data-question="energy_next_12h"] .value')
                        .getAttribute("data-value"),
               current: d.querySelector('a[aria-current="page"]').getAttribute("data-stream") });
    });
  });
};
</script></body></html>"""
        base = self.start(extra={"/click-harness": harness})
        dom = parse_dom(run_chromium(f"http://{base}/click-harness", "dom"))
        result = json.loads(dom.find_all("body")[0].attrs.get("data-result") or "{}")
        lab = self.fixture("progress", "campus-energy", "lab-west.json")
        library = self.fixture("progress", "campus-energy", "library.json")
        self.assertEqual(result.get("before"), str(len(library["history"][0]["verified"])), result)
        self.assertEqual(result.get("search"), "?pool=campus-energy&stream=lab-west")
        self.assertEqual(result.get("current"), "lab-west")
        self.assertEqual(result.get("points"), str(len(lab["history"][0]["verified"])))
        lab_value = lab["current"]["predictions"][0]["value"]
        self.assertNotEqual(lab_value, library["current"]["predictions"][0]["value"])
        self.assertAlmostEqual(float(result.get("value", "nan")), lab_value, places=6)

    def test_fixture_no_history_kept(self):
        base = self.start()
        dom = parse_dom(run_chromium(
            f"http://{base}/?pool=campus-energy&stream=boiler-house", "dom"))
        self.assertIsNotNone(dom.by_id("bw-no-history"))
        for svg in dom.find_all("svg", cls="bw-plot-predictions"):
            self.assertEqual(svg.attrs.get("data-points"), "0")

    def test_daemon_unreachable(self):
        base = self.start(api_down="drop")
        dom = parse_dom(run_chromium(f"http://{base}/?pool=campus-energy&stream=library", "dom"))
        banner = dom.by_id("bw-error")
        self.assertIsNone(banner.attrs.get("hidden"), "the error banner is shown")
        self.assertIn("No figures from the Bellwether daemon", banner.text())
        self.assertEqual(dom.by_id("bw-conn").attrs.get("data-state"), "down")
        # The caution is on the page even when the daemon never answered.
        self.assert_caution(dom, "Predictions are advisory.", "page")
        self.assertEqual(dom.by_id("bw-detail-error").attrs.get("data-status"), "network")

    def test_daemon_stops_while_open(self):
        # The first refresh's two API calls are answered; later ones fail. Chromium runs
        # the page past its second refresh (at 5 s of virtual time). The page keeps the
        # figures it had, marks them stale and shows the banner.
        progress = self.fixture("progress", "campus-energy", "library.json")
        url = "/?pool=campus-energy&stream=library"
        dom = parse_dom(run_chromium(f"http://{self.start(api_fail_after=2)}{url}", "dom",
                                     virtual_ms=7000))
        self.assertIsNone(dom.by_id("bw-error").attrs.get("hidden"))
        self.assertIn("No figures from the Bellwether daemon", dom.by_id("bw-error").text())
        self.assertEqual(dom.by_id("bw-conn").attrs.get("data-state"), "down")
        self.assertEqual(dom.by_id("bw-detail-error").attrs.get("data-status"), "network")
        history = {h["question"]: h for h in progress["history"]}
        self.assert_prediction_plot(dom, "energy_next_12h", history["energy_next_12h"]["verified"])
        os.makedirs(ARGS.artifacts, exist_ok=True)
        out = os.path.join(ARGS.artifacts, "status_page_fixture_stale.png")
        run_chromium(f"http://{self.start(api_fail_after=2)}{url}", "png", out_png=out,
                     size=(1280, 900), virtual_ms=7000)
        self.assert_png(out, (1280, 900))


def main():
    global ARGS
    ap = argparse.ArgumentParser(add_help=False)
    ap.add_argument("--daemon", default=os.environ.get(
        "BW_DAEMON", os.path.join(REPO, "build", "server", "bellwetherd")))
    ap.add_argument("--cli", default=os.environ.get(
        "BW_CLI", os.path.join(REPO, "build", "client", "bellwether")))
    ap.add_argument("--spec", default=os.path.join(REPO, "deploy", "examples", "grid.json"))
    ap.add_argument("--csv", default=os.path.join(
        REPO, "..", "shared", "data", "halfhourly-demand-2000.csv"))
    ap.add_argument("--artifacts", default=os.environ.get(
        "BW_ARTIFACT_DIR", os.path.join(REPO, "build", "tests", "artifacts")))
    ARGS, rest = ap.parse_known_args()
    timer = threading.Timer(WATCHDOG_SECONDS, _watchdog)
    timer.daemon = True
    timer.start()
    try:
        prog = unittest.main(argv=[sys.argv[0]] + rest, exit=False, verbosity=2)
    finally:
        _kill_all()
        timer.cancel()
    return 0 if prog.result.wasSuccessful() else 1


if __name__ == "__main__":
    sys.exit(main())
