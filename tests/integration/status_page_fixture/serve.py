#!/usr/bin/python3
"""Serves the status page with fixture answers, for developing it without the daemon.

  /usr/bin/python3 tests/integration/status_page_fixture/serve.py [--port 0] [--api-down 503|drop]

Listens on 127.0.0.1 only and prints `http on 127.0.0.1:PORT`. Routes, as the daemon's:
  /                       server/status_page/index.html (read fresh on every request)
  /api/overview           api/overview.json
  /api/progress?pool=P&stream=S
                          api/progress/P/S.json; 404 with a plain-text body when unknown,
                          400 when pool or stream is missing
  /metrics                a few lines of Prometheus text
With --api-down 503 every /api/ path answers 503 (as a daemon going away might); with
--api-down drop it closes the connection without an answer (as a dead daemon would look).
With --api-fail-after N the first N /api/ requests are answered and later ones dropped (a
daemon that stopped while the page was open).
"""
import argparse
import os
import sys
import urllib.parse
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer

HERE = os.path.dirname(os.path.abspath(__file__))
REPO = os.path.abspath(os.path.join(HERE, "..", "..", ".."))
DEFAULT_PAGE = os.path.join(REPO, "server", "status_page", "index.html")


def progress_files(fixture_dir):
    """{(pool, stream): path} for every fixture progress file (no path from a request is
    ever joined onto the file system)."""
    out = {}
    root = os.path.join(fixture_dir, "api", "progress")
    for pool in sorted(os.listdir(root)):
        for name in sorted(os.listdir(os.path.join(root, pool))):
            if name.endswith(".json"):
                out[(pool, name[:-5])] = os.path.join(root, pool, name)
    return out


def make_handler(page, fixture_dir, api_down=None, api_fail_after=None, extra=None):
    files = progress_files(fixture_dir)
    extra = extra or {}
    api_calls = [0]
    overview = os.path.join(fixture_dir, "api", "overview.json")

    class Handler(BaseHTTPRequestHandler):
        def log_message(self, fmt, *args):  # quiet
            pass

        def send(self, code, body, ctype):
            data = body if isinstance(body, bytes) else body.encode()
            self.send_response(code)
            self.send_header("Content-Type", ctype)
            self.send_header("Content-Length", str(len(data)))
            self.send_header("Cache-Control", "no-store")
            self.end_headers()
            self.wfile.write(data)

        def do_GET(self):
            url = urllib.parse.urlsplit(self.path)
            q = urllib.parse.parse_qs(url.query)
            text = "text/plain; charset=utf-8"
            if url.path in extra:
                return self.send(200, extra[url.path], "text/html; charset=utf-8")
            if url.path in ("/", "/index.html"):
                with open(page, "rb") as f:
                    return self.send(200, f.read(), "text/html; charset=utf-8")
            if url.path.startswith("/api/"):
                api_calls[0] += 1
                if api_fail_after is not None and api_calls[0] > api_fail_after:
                    self.close_connection = True
                    return None
            if url.path.startswith("/api/") and api_down == "drop":
                self.close_connection = True
                return None
            if url.path.startswith("/api/") and api_down:
                return self.send(503, "daemon is shutting down\n", text)
            if url.path == "/api/overview":
                with open(overview, "rb") as f:
                    return self.send(200, f.read(), "application/json")
            if url.path == "/api/progress":
                pool = q.get("pool", [""])[0]
                stream = q.get("stream", [""])[0]
                if not pool or not stream:
                    return self.send(400, "progress: pool and stream are required\n", text)
                path = files.get((pool, stream))
                if path is None:
                    if not any(p == pool for p, _ in files):
                        return self.send(404, f"pool {pool}: not found\n", text)
                    return self.send(404, f"pool {pool}: stream {stream}: not found\n", text)
                with open(path, "rb") as f:
                    return self.send(200, f.read(), "application/json")
            if url.path == "/metrics":
                return self.send(200, "# fixture server: no metrics\nbellwether_up 1\n",
                                 "text/plain; version=0.0.4")
            return self.send(404, "not found\n", text)

    return Handler


def start(port=0, page=DEFAULT_PAGE, fixture_dir=HERE, api_down=None, api_fail_after=None,
          extra=None):
    """Returns a ThreadingHTTPServer bound to 127.0.0.1 (serve_forever not yet called).
    `extra` maps further paths to HTML bodies (a test's harness page, same origin)."""
    return ThreadingHTTPServer(("127.0.0.1", port),
                               make_handler(page, fixture_dir, api_down, api_fail_after, extra))


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--port", type=int, default=0)
    ap.add_argument("--page", default=DEFAULT_PAGE)
    ap.add_argument("--fixture", default=HERE)
    ap.add_argument("--api-down", choices=["503", "drop"])
    ap.add_argument("--api-fail-after", type=int)
    a = ap.parse_args()
    srv = start(a.port, a.page, a.fixture, a.api_down, a.api_fail_after)
    print(f"http on 127.0.0.1:{srv.server_address[1]}", flush=True)
    try:
        srv.serve_forever()
    except KeyboardInterrupt:
        pass
    return 0


if __name__ == "__main__":
    sys.exit(main())
