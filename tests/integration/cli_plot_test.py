#!/usr/bin/python3
"""`bellwether replay --plot FILE.svg`: the SVG is well-formed, has one panel per question
with predicted and realized series, axes, a legend, the scored period and (probability
questions) a ten-bin calibration chart, and its numbers agree with returns this test
computes itself from the data.

Outside reference for the realized returns: the return of Sutton & Barto (2018),
Reinforcement Learning: An Introduction, 2nd ed., eq. 3.8, G_t = sum_k gamma^k R_{t+k+1},
with the episodic end of eq. 3.11 (the sum stops at the step that terminates), here with
the cumulant c in place of the reward. The engine verifies a prediction once the
remaining discount falls below 1e-3 (README, "verified error"), so for gamma < 1 the sum
runs over the first H terms, H the smallest k with gamma^k < 1e-3.

Usage: cli_plot_test.py --cli BELLWETHER --root SOURCE_DIR --shared SHARED_DATA_DIR
                        --artifacts DIR
"""
import argparse
import csv
import datetime
import json
import math
import os
import re
import shutil
import subprocess
import sys
import tempfile
import unittest
import xml.etree.ElementTree as ET

ARGS = None
NS = "{http://www.w3.org/2000/svg}"
TIMEOUT = 120
VERIFY_FLOOR = 1e-3      # README: verified once the remaining discount is below 1e-3
VERIFY_MAX_HELD = 10000  # README: progress.verifyMaxHeld default


def run_replay(spec, data, out, svg, *extra):
    cmd = [ARGS.cli, "replay", "--spec", spec, "--csv", data, "--out", out]
    if svg is not None:
        cmd += ["--plot", svg]
    cmd += list(extra)
    return subprocess.run(cmd, capture_output=True, text=True, timeout=TIMEOUT)


def read_csv(path):
    with open(path, newline="") as f:
        rows = list(csv.DictReader(f))
    return rows


def micros_of(ts):
    """The CSV reader's timestamp: Unix seconds, or ISO 8601 without an offset (wall-clock
    micros counted from 1970-01-01T00:00 of that clock)."""
    try:
        return round(float(ts) * 1e6)
    except ValueError:
        t = datetime.datetime.fromisoformat(ts)
        epoch = datetime.datetime(1970, 1, 1)
        d = t - epoch
        return (d.days * 86400 + d.seconds) * 1000000 + d.microseconds


def discounted_returns(c, gamma):
    """G_t (1-based rows t) = sum_{k<H} gamma^k c[t+k+1], for rows whose H terms are in the
    data; None elsewhere."""
    n = len(c)
    h = 0
    d = 1.0
    while d >= VERIFY_FLOOR and h < VERIFY_MAX_HELD:
        d *= gamma
        h += 1
    out = [None] * n
    for t in range(n):
        if t + h >= n:
            break
        g, d = 0.0, 1.0
        for k in range(h):
            g += d * c[t + k + 1]
            d *= gamma
        out[t] = g
    return out, h


def episodic_returns(c, terminal):
    """G_t = sum of c[t+1..T] where T is the first row after t with terminal[T] (gamma 1);
    None when no termination follows in the data (nor VERIFY_MAX_HELD steps)."""
    n = len(c)
    out = [None] * n
    for t in range(n):
        g = 0.0
        for k in range(1, min(n - t, VERIFY_MAX_HELD + 1)):
            g += c[t + k]
            if terminal[t + k] or k == VERIFY_MAX_HELD:
                out[t] = g
                break
    return out


def nrmse(pred, real):
    n = len(real)
    err = [p - r for p, r in zip(pred, real)]
    rmse = math.sqrt(sum(e * e for e in err) / n)
    mean = sum(real) / n
    sd = math.sqrt(sum((r - mean) ** 2 for r in real) / n)
    return rmse / sd


def path_vertices(d):
    return [(float(x), float(y)) for _, x, y in
            re.findall(r"([ML])\s*(-?[\d.]+)\s+(-?[\d.]+)", d)]


class Chart:
    """A time-series chart's pixel mapping, from its data-* attributes."""

    def __init__(self, g):
        self.x0 = float(g.get("data-x0"))
        self.x1 = float(g.get("data-x1"))
        self.left = int(g.get("data-left"))
        self.width = int(g.get("data-width"))
        self.y0 = float(g.get("data-y0"))
        self.y1 = float(g.get("data-y1"))
        self.top = int(g.get("data-top"))
        self.height = int(g.get("data-height"))
        self.kind = g.get("data-x-kind")

    def column(self, x):
        c = math.floor((x - self.x0) / (self.x1 - self.x0) * self.width)
        return min(max(c, 0), self.width - 1)

    def value(self, py):
        return self.y0 + (self.top + self.height - py) / self.height * (self.y1 - self.y0)

    def tolerance(self):  # half a rounding step of the path's 0.1 px coordinates
        return 0.06 * (self.y1 - self.y0) / self.height


def find_all(node, tag, cls=None):
    out = []
    for e in node.iter(NS + tag):
        if cls is None or cls in (e.get("class") or "").split():
            out.append(e)
    return out


def text_of(e):
    return "".join(e.itertext())


class PlotTest(unittest.TestCase):
    @classmethod
    def setUpClass(cls):
        cls.tmp = tempfile.mkdtemp(prefix="bw-plot-")
        os.makedirs(ARGS.artifacts, exist_ok=True)

    @classmethod
    def tearDownClass(cls):
        shutil.rmtree(cls.tmp, ignore_errors=True)

    def replay(self, name, spec, data, *extra):
        out = os.path.join(self.tmp, name + ".csv")
        svg = os.path.join(self.tmp, name + ".svg")
        r = run_replay(spec, data, out, svg, *extra)
        self.assertEqual(r.returncode, 0, r.stderr)
        self.assertIn("plot in " + svg, r.stdout)
        shutil.copy(svg, os.path.join(ARGS.artifacts, "replay-plot-" + name + ".svg"))
        with open(svg, encoding="utf-8") as f:
            text = f.read()
        root = ET.fromstring(text)  # well-formed XML
        self.assertEqual(root.tag, NS + "svg")
        return out, svg, text, root

    # --- checks shared by every plot ---------------------------------------------------

    def check_common(self, text, root, spec):
        questions = [q["name"] for q in spec["questions"]]
        # Self-contained: no scripts, no external references.
        self.assertNotIn("<script", text)
        self.assertIsNone(re.search(r"(href|src)\s*=\s*\"(?!#)", text))
        self.assertNotIn("@import", text)
        self.assertNotIn("http://", text.replace("http://www.w3.org/2000/svg", ""))
        self.assertNotIn("https://", text)
        self.assertIn("not a safety system", text)
        panels = find_all(root, "g", "panel")
        self.assertEqual([p.get("data-question") for p in panels], questions)
        for panel in panels:
            name = panel.get("data-question")
            title = find_all(panel, "text", "panel-title")
            self.assertEqual(len(title), 1)
            self.assertTrue(text_of(title[0]).startswith(name))
            self.assertIn("NRMSE", text_of(title[0]))
            # Two series paths, with points and a path.
            for series in ("predicted", "realized"):
                paths = [p for p in find_all(panel, "path", "series")
                         if p.get("data-series") == series]
                self.assertEqual(len(paths), 1, (name, series))
                self.assertGreater(int(paths[0].get("data-points")), 0, (name, series))
                self.assertTrue(paths[0].get("d", "").startswith("M"), (name, series))
            # Axes with tick labels.
            ts = find_all(panel, "g", "timeseries")
            self.assertEqual(len(ts), 1)
            for axis in ("x-axis", "y-axis"):
                labels = [text_of(t).strip() for a in find_all(ts[0], "g", axis)
                          for t in find_all(a, "text", "tick-label")]
                self.assertGreaterEqual(len([x for x in labels if x]), 3, (name, axis, labels))
                titles = [text_of(t) for a in find_all(ts[0], "g", axis)
                          for t in find_all(a, "text", "axis-title")]
                self.assertEqual(len(titles), 1, (name, axis))
            y_labels = [text_of(t) for a in find_all(ts[0], "g", "y-axis")
                        for t in find_all(a, "text", "tick-label")]
            y_values = [float(v.replace(",", "")) for v in y_labels]
            self.assertEqual(y_values, sorted(y_values))
            # A legend naming both series and the scored rows.
            legend = find_all(panel, "g", "legend")
            self.assertEqual(len(legend), 1)
            items = {i.get("data-series"): text_of(i) for i in find_all(legend[0], "g", "legend-item")}
            for key in ("predicted", "realized", "scored-period"):
                self.assertIn(key, items)
                self.assertTrue(items[key].strip())
            # The scored period.
            scored = find_all(ts[0], "rect", "scored-period")
            self.assertEqual(len(scored), 1)
            self.assertGreater(float(scored[0].get("width")), 0)
        return panels

    def check_series_values(self, chart, path, rows_x, values):
        """The path's vertices are each pixel column's minimum and maximum of `values`
        (rows with a value) at the chart's scale."""
        cols = {}
        for x, v in zip(rows_x, values):
            if v is None:
                continue
            c = chart.column(x)
            lo, hi = cols.get(c, (v, v))
            cols[c] = (min(lo, v), max(hi, v))
        seen = {}
        tol = chart.tolerance()
        for px, py in path_vertices(path.get("d")):
            c = math.floor(px - chart.left)
            self.assertIn(c, cols, "a vertex in a column without data")
            v = chart.value(py)
            lo, hi = cols[c]
            self.assertGreaterEqual(v, lo - tol)
            self.assertLessEqual(v, hi + tol)
            slo, shi = seen.get(c, (v, v))
            seen[c] = (min(slo, v), max(shi, v))
        self.assertEqual(set(seen), set(cols))
        for c, (lo, hi) in cols.items():
            self.assertAlmostEqual(seen[c][0], lo, delta=tol, msg=f"column {c} minimum")
            self.assertAlmostEqual(seen[c][1], hi, delta=tol, msg=f"column {c} maximum")

    def series(self, panel, name):
        return [p for p in find_all(panel, "path", "series") if p.get("data-series") == name][0]

    # --- (a) the grid example on the shared demand data --------------------------------

    def test_grid_demand(self):
        spec_path = os.path.join(ARGS.root, "deploy/examples/grid.json")
        data = os.path.join(ARGS.shared, "halfhourly-demand-2000.csv")
        with open(spec_path) as f:
            spec = json.load(f)
        out, _, text, root = self.replay("grid", spec_path, data, "--score-from-row", "673")
        (panel,) = self.check_common(text, root, spec)
        self.assertEqual(panel.get("data-kind"), "return")
        self.assertEqual(find_all(panel, "g", "calibration"), [])
        q = spec["questions"][0]
        gamma = q["gamma"]

        rows = read_csv(data)
        n = len(rows)
        demand = [float(r["demand_mw"]) for r in rows]
        micros = [micros_of(r["timestamp"]) for r in rows]
        real, h = discounted_returns(demand, gamma)
        pred = [float(r[q["name"]]) for r in read_csv(out)]
        self.assertEqual(len(pred), n)

        chart = Chart(find_all(panel, "g", "timeseries")[0])
        self.assertEqual(chart.kind, "time")
        xs = [m * 1e-6 for m in micros]
        self.assertEqual(chart.x0, xs[0])
        self.assertEqual(chart.x1, xs[-1])

        # Realized returns: which rows, their range, and every pixel column.
        realized = self.series(panel, "realized")
        verified = [t for t in range(n) if real[t] is not None]
        self.assertEqual(int(realized.get("data-points")), len(verified))
        self.assertEqual(int(realized.get("data-first-row")), 1)
        self.assertEqual(int(realized.get("data-last-row")), n - h)
        self.assertAlmostEqual(float(realized.get("data-min")), min(real[t] for t in verified),
                               delta=1e-9 * max(demand) / (1 - gamma))
        self.assertAlmostEqual(float(realized.get("data-max")), max(real[t] for t in verified),
                               delta=1e-9 * max(demand) / (1 - gamma))
        self.check_series_values(chart, realized, xs, real)

        predicted = self.series(panel, "predicted")
        self.assertEqual(int(predicted.get("data-points")), n)
        self.assertEqual(float(predicted.get("data-min")), min(pred))
        self.assertEqual(float(predicted.get("data-max")), max(pred))

        # Baselines: persistence c_t / (1 - gamma) on every row.
        pers = self.series(panel, "persistence")
        self.assertEqual(int(pers.get("data-points")), n)
        self.assertAlmostEqual(float(pers.get("data-max")), max(demand) / (1 - gamma), delta=1e-6)
        self.assertAlmostEqual(float(pers.get("data-min")), min(demand) / (1 - gamma), delta=1e-6)
        self.check_series_values(chart, pers, xs, [c / (1 - gamma) for c in demand])
        self.assertEqual(len([p for p in find_all(panel, "path", "series")
                              if p.get("data-series") == "last-week"]), 1)

        # The scored rows: from row 673, with a realized return and a last-week baseline
        # (the return realized at the row timed one week earlier).
        at_time = {m: t for t, m in enumerate(micros)}
        week = 7 * 86400 * 1000000
        scored = []
        for t in range(672, n):
            prev = at_time.get(micros[t] - week)
            if real[t] is not None and prev is not None and real[prev] is not None:
                scored.append(t)
        (marker,) = find_all(find_all(panel, "g", "timeseries")[0], "rect", "scored-period")
        self.assertEqual(int(marker.get("data-from-row")), 673)
        self.assertEqual(int(marker.get("data-to-row")), scored[-1] + 1)
        self.assertEqual(int(marker.get("data-rows")), len(scored))
        expected = nrmse([pred[t] for t in scored], [real[t] for t in scored])
        title = find_all(panel, "text", "panel-title")[0]
        self.assertAlmostEqual(float(title.get("data-nrmse")), expected, delta=1e-9)
        self.assertEqual(int(title.get("data-scored-rows")), len(scored))
        self.assertIn("NRMSE %.3f" % expected, text_of(title))
        # The y axis names the unit and the discount.
        y_title = text_of(find_all(find_all(panel, "g", "y-axis")[0], "text", "axis-title")[0])
        self.assertIn("MW", y_title)
        self.assertIn("gamma 0.9583", y_title)
        # Weekly date ticks on the time axis.
        x_labels = [text_of(t) for t in find_all(find_all(panel, "g", "x-axis")[0], "text",
                                                 "tick-label")]
        self.assertIn("12 Jun", x_labels)

    # --- (b) the robot recipe: probability questions ------------------------------------

    def test_robot_probabilities(self):
        spec_path = os.path.join(ARGS.root, "deploy/examples/recipes/robot-charging.json")
        data = os.path.join(ARGS.root, "deploy/examples/robot-fleet.csv")
        with open(spec_path) as f:
            spec = json.load(f)
        out, _, text, root = self.replay("robots", spec_path, data, "--summary")
        panels = self.check_common(text, root, spec)
        kinds = {p.get("data-question"): p.get("data-kind") for p in panels}
        self.assertEqual(kinds, {"seconds_to_charger": "return",
                                 "p_low_before_charger": "probability",
                                 "p_low_if_heading_back": "probability"})
        rows = read_csv(data)
        n = len(rows)
        micros = [micros_of(r["timestamp"]) for r in rows]
        battery = [float(r["battery_pct"]) for r in rows]
        at_charger = [float(r["at_charger"]) >= 1 for r in rows]
        low = [b < 10 for b in battery]
        preds = read_csv(out)
        xs = [m * 1e-6 for m in micros]

        by_name = {p.get("data-question"): p for p in panels}
        # Seconds to the charger: the frame periods summed until at_charger.
        period = [0.0] + [(micros[t] - micros[t - 1]) * 1e-6 for t in range(1, n)]
        secs = episodic_returns(period, at_charger)
        panel = by_name["seconds_to_charger"]
        chart = Chart(find_all(panel, "g", "timeseries")[0])
        self.assertEqual(chart.kind, "time")
        realized = self.series(panel, "realized")
        verified = [s for s in secs if s is not None]
        self.assertEqual(int(realized.get("data-points")), len(verified))
        self.assertAlmostEqual(float(realized.get("data-max")), max(verified), delta=1e-6)
        self.assertAlmostEqual(float(realized.get("data-min")), min(verified), delta=1e-6)
        self.check_series_values(chart, realized, xs, secs)
        self.assertEqual(find_all(panel, "g", "calibration"), [])

        # The probability of a low battery before the charger, under the behavior.
        prob = episodic_returns([1.0 if x else 0.0 for x in low],
                                [a or b for a, b in zip(low, at_charger)])
        panel = by_name["p_low_before_charger"]
        chart = Chart(find_all(panel, "g", "timeseries")[0])
        realized = self.series(panel, "realized")
        verified = [t for t in range(n) if prob[t] is not None]
        self.assertEqual(int(realized.get("data-points")), len(verified))
        self.assertEqual(float(realized.get("data-min")), 0.0)
        self.assertEqual(float(realized.get("data-max")), 1.0)
        self.check_series_values(chart, realized, xs, prob)
        pred = [float(r["p_low_before_charger"]) for r in preds]
        title = find_all(panel, "text", "panel-title")[0]
        expected = nrmse([pred[t] for t in verified], [prob[t] for t in verified])
        self.assertAlmostEqual(float(title.get("data-nrmse")), expected, delta=1e-9)
        self.assertEqual(int(title.get("data-scored-rows")), len(verified))
        # Calibration: ten bins of the clamped prediction, each bin's mean prediction
        # and observed frequency over the scored rows.
        (cal,) = find_all(panel, "g", "calibration")
        bins = find_all(cal, "g", "cal-bin")
        self.assertEqual(len(bins), 10)
        self.assertEqual(len(find_all(cal, "line", "diagonal")), 1)
        count = [0] * 10
        sum_p = [0.0] * 10
        sum_o = [0.0] * 10
        for t in verified:
            b = min(int(min(max(pred[t], 0.0), 1.0) * 10), 9)
            count[b] += 1
            sum_p[b] += pred[t]
            sum_o[b] += prob[t]
        for b, g in enumerate(bins):
            self.assertEqual(int(g.get("data-bin")), b)
            self.assertEqual(int(g.get("data-count")), count[b], f"bin {b}")
            if count[b]:
                self.assertAlmostEqual(float(g.get("data-mean-predicted")), sum_p[b] / count[b],
                                       delta=1e-9)
                self.assertAlmostEqual(float(g.get("data-observed")), sum_o[b] / count[b],
                                       delta=1e-9)
                self.assertEqual(len(find_all(g, "circle", "cal-point")), 1)
        self.assertGreater(sum(1 for c in count if c), 3)

        # The off-policy question: realized returns only where the robot headed back.
        panel = by_name["p_low_if_heading_back"]
        self.assertEqual(len(find_all(find_all(panel, "g", "calibration")[0], "g", "cal-bin")), 10)
        realized = self.series(panel, "realized")
        self.assertLess(int(realized.get("data-points")), len(verified))
        self.assertGreaterEqual(float(realized.get("data-min")), 0.0)
        self.assertLessEqual(float(realized.get("data-max")), 1.0)
        title = find_all(panel, "text", "panel-title")[0]
        self.assertGreater(int(title.get("data-scored-rows")), 0)

    # --- (c) a long series: min/max per pixel column keeps a spike, file stays small ----

    def test_long_series_keeps_spike(self):
        # An invented pumping station: 20,000 one-minute rows without timestamps (x is the
        # row number), power near 40 kW with one 900 kW surge.
        n, spike = 20000, 12345
        data = os.path.join(self.tmp, "pump.csv")
        power = []
        with open(data, "w") as f:
            f.write("pump_kw\n")
            for t in range(n):
                v = 40 + 8 * math.sin(2 * math.pi * t / 1440) + 3 * math.sin(t * 0.37)
                if t == spike:
                    v = 900.0
                power.append(round(v, 3))
                f.write(f"{power[-1]:.3f}\n")
        spec = {"name": "pumps",
                "signals": [{"name": "pump_kw", "unit": "kW", "min": 0, "max": 1000}],
                "features": [{"tiles": {"signals": ["pump_kw"], "tilings": 4, "tilesPerDim": 8}},
                             {"bias": {}}],
                "questions": [{"name": "power_next_10", "cumulant": {"signal": "pump_kw"},
                               "gamma": 0.9, "lambda": 0.9}]}
        spec_path = os.path.join(self.tmp, "pumps.json")
        with open(spec_path, "w") as f:
            json.dump(spec, f)
        _, svg, text, root = self.replay("pumps", spec_path, data)
        self.check_common(text, root, spec)
        self.assertLess(os.path.getsize(svg), 200_000)
        (panel,) = find_all(root, "g", "panel")
        chart = Chart(find_all(panel, "g", "timeseries")[0])
        self.assertEqual(chart.kind, "row")
        self.assertEqual((chart.x0, chart.x1), (1.0, float(n)))
        real, _ = discounted_returns(power, 0.9)
        realized = self.series(panel, "realized")
        vertices = path_vertices(realized.get("d"))
        self.assertLessEqual(len(vertices), 2 * chart.width + 2)
        self.assertEqual(int(realized.get("data-points")), sum(1 for r in real if r is not None))
        # The surge's return (row `spike`, 1-based, sees c = 900 next) is the top vertex.
        top = max(chart.value(py) for _, py in vertices)
        self.assertAlmostEqual(top, real[spike - 1], delta=chart.tolerance())
        self.assertGreater(top, 800)
        self.check_series_values(chart, realized, range(1, n + 1), real)

    # --- bad input -------------------------------------------------------------------

    def test_unwritable_plot_path(self):
        spec = os.path.join(ARGS.root, "deploy/examples/grid.json")
        data = os.path.join(ARGS.shared, "halfhourly-demand-2000.csv")
        out = os.path.join(self.tmp, "never.csv")
        for bad in (os.path.join(self.tmp, "no-such-dir", "p.svg"), self.tmp):
            r = run_replay(spec, data, out, bad)
            self.assertEqual(r.returncode, 1, r.stderr)
            self.assertIn("--plot " + bad, r.stderr)
            self.assertIn("cannot open for writing", r.stderr)
            self.assertFalse(os.path.exists(out), "nothing is replayed after a bad --plot")
        r = subprocess.run([ARGS.cli, "replay", "--spec", spec, "--csv", data, "--out", out,
                            "--plot="], capture_output=True, text=True, timeout=TIMEOUT)
        self.assertEqual(r.returncode, 1)
        self.assertIn("--plot", r.stderr)

    # --- a look in a real renderer (artifact for people; cheap) -------------------------

    @unittest.skipUnless(shutil.which("chromium"), "chromium not installed")
    def test_renders_in_chromium(self):
        spec = os.path.join(ARGS.root, "deploy/examples/recipes/robot-charging.json")
        data = os.path.join(ARGS.root, "deploy/examples/robot-fleet.csv")
        out = os.path.join(self.tmp, "render.csv")
        svg = os.path.join(self.tmp, "render.svg")
        self.assertEqual(run_replay(spec, data, out, svg).returncode, 0)
        png = os.path.join(ARGS.artifacts, "replay-plot-robots.png")
        if os.path.exists(png):
            os.remove(png)
        profile = tempfile.mkdtemp(prefix="bw-plot-chromium-")
        try:
            subprocess.run(["chromium", "--headless", "--no-sandbox", "--disable-gpu",
                            "--hide-scrollbars", f"--user-data-dir={profile}",
                            "--window-size=1200,1300", f"--screenshot={png}", "file://" + svg],
                           capture_output=True, timeout=90)
        finally:
            shutil.rmtree(profile, ignore_errors=True)
        self.assertTrue(os.path.exists(png))
        with open(png, "rb") as f:
            self.assertEqual(f.read(8), b"\x89PNG\r\n\x1a\n")
        self.assertGreater(os.path.getsize(png), 20_000)  # more than a blank page


if __name__ == "__main__":
    parser = argparse.ArgumentParser()
    parser.add_argument("--cli", required=True)
    parser.add_argument("--root", required=True)
    parser.add_argument("--shared", required=True)
    parser.add_argument("--artifacts", required=True)
    ARGS, rest = parser.parse_known_args()
    unittest.main(argv=[sys.argv[0]] + rest, verbosity=2)
