#!/usr/bin/env python3
"""The operator pages in a real browser (headless Chromium, Debian's `chromium`).

  report  plumbline replay --report --truth on a fixture; the report, loaded from
          its file, shows one chart per series, as many reading dots as the data
          embedded for it, one alert marker per alert in the alerts file, the
          truth table with the hit count replay printed, and no console errors.
  status  plumbline serve on the fixture's config (ports 0), fed its readings over
          TCP; the status page at / lists every series with a state, and with
          #series=NAME draws as many dots as GET /v1/series/NAME has recent points
          and one alert marker per alert of those within the chart's span; no
          console errors.
  console the console check itself: a page that throws must be caught.

Chromium runs with --headless --no-sandbox and a fresh --user-data-dir; the DOM is
read with --dump-dom after --virtual-time-budget (scripts and fetches finish), and
console messages from --enable-logging=stderr. Screenshots are saved under
--artefacts. Standard library only.
"""

import argparse
import html.parser
import json
import os
import re
import shutil
import subprocess
import sys
import tempfile
import time

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import check_serve  # noqa: E402  (the daemon wrapper: ports from its ready line)

TIMEOUT = 120


def check(condition, message):
    if not condition:
        print("check_ui: FAIL: " + message, file=sys.stderr)
        sys.exit(1)


class Dom(html.parser.HTMLParser):
    """Counts elements by tag and class, and keeps each element's text by id."""

    def __init__(self, text):
        super().__init__()
        self.elements = []  # (tag, attrs dict)
        self.text_by_id = {}
        self._open_ids = []
        self.feed(text)

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        self.elements.append((tag, attrs))
        self._open_ids.append(attrs.get("id"))

    def handle_startendtag(self, tag, attrs):
        self.elements.append((tag, dict(attrs)))

    def handle_endtag(self, tag):
        if self._open_ids:
            self._open_ids.pop()

    def handle_data(self, data):
        for element_id in self._open_ids:
            if element_id:
                self.text_by_id[element_id] = self.text_by_id.get(element_id, "") + data

    def count(self, tag, css_class):
        return sum(1 for t, a in self.elements
                   if t == tag and css_class in (a.get("class") or "").split())


def chromium(browser, url, artefacts, name):
    """Loads url; returns (dom text, console lines). Saves NAME.png and NAME.html."""
    profile = tempfile.mkdtemp(prefix="plumbline-chromium-")
    common = [browser, "--headless", "--no-sandbox", "--disable-gpu", "--hide-scrollbars",
              "--user-data-dir=" + profile, "--virtual-time-budget=4000",
              "--window-size=1200,1800"]
    try:
        run = subprocess.run(common + ["--enable-logging=stderr", "--v=0", "--dump-dom", url],
                             capture_output=True, text=True, timeout=TIMEOUT)
        check(run.returncode == 0, "chromium --dump-dom %s: exit %d\n%s" % (
            url, run.returncode, run.stderr[-2000:]))
        subprocess.run(common + ["--screenshot=" + os.path.join(artefacts, name + ".png"), url],
                       capture_output=True, timeout=TIMEOUT)
    finally:
        shutil.rmtree(profile, ignore_errors=True)
    with open(os.path.join(artefacts, name + ".html"), "w", encoding="utf-8") as f:
        f.write(run.stdout)
    console = [line for line in run.stderr.splitlines() if re.search(r":CONSOLE[:(]", line)]
    return run.stdout, console


def console_errors(console):
    """Console lines that count as errors. Chromium logs console.error at INFO
    level like any other message, and the pages log nothing on purpose: so every
    console line counts."""
    return console


def scenario_console(args, tmp):
    page = os.path.join(tmp, "throws.html")
    with open(page, "w", encoding="utf-8") as f:
        f.write("<!doctype html><p id=x>ok</p><script>undefinedFunction();</script>")
    # (an uncaught exception is what a broken page script gives)
    _, console = chromium(args.chromium, "file://" + page, args.artefacts, "console_selfcheck")
    check(console_errors(console), "a page that throws left no console error: %s" % console)
    print("check_ui: console: a throwing page is caught (%d line)" % len(console_errors(console)))


def embedded_report_data(dom_text):
    match = re.search(r'<script id="report-data" type="application/json">(.*?)</script>',
                      dom_text, re.S)
    check(match is not None, "no report data in the report")
    return json.loads(match.group(1).replace("<\\/", "</"))


def scenario_report(args, tmp):
    report = os.path.join(args.artefacts, "report.html")
    alerts_path = os.path.join(tmp, "alerts.jsonl")
    run = subprocess.run(
        [args.plumbline, "replay", "--config", os.path.join(args.fixture, "plumbline.yaml"),
         "--input", os.path.join(args.fixture, "readings.csv"), "--alerts", alerts_path,
         "--report", report, "--truth", os.path.join(args.fixture, "truth.csv"), "--quiet"],
        capture_output=True, text=True, timeout=TIMEOUT)
    check(run.returncode == 0, "replay --report: exit %d\n%s" % (run.returncode, run.stderr))
    truth = re.search(r"truth +(\d+) labelled changes: (\d+) hit", run.stderr)
    check(truth is not None, "replay printed no truth line:\n" + run.stderr)
    with open(alerts_path, encoding="utf-8") as f:
        alerts = [json.loads(line) for line in f if line.strip()]

    dom_text, console = chromium(args.chromium, "file://" + report, args.artefacts, "report")
    dom = Dom(dom_text)
    data = embedded_report_data(dom_text)
    check(not console_errors(console), "console errors:\n" + "\n".join(console))
    check(dom.count("section", "series-chart") == len(data["series"]) == 5,
          "%d charts for %d series" % (dom.count("section", "series-chart"), len(data["series"])))
    shown = sum(s["shown"] for s in data["series"])
    check(dom.count("circle", "point") == shown,
          "%d reading dots, %d points in the data" % (dom.count("circle", "point"), shown))
    check(dom.count("path", "alert-mark") == len(alerts),
          "%d alert markers, %d alerts in %s" % (dom.count("path", "alert-mark"), len(alerts),
                                                  alerts_path))
    truth_rows = dom_text.split('id="truth-rows"')[1].split("</tbody>")[0]
    rows = truth_rows.count("<tr>")
    check(rows == int(truth.group(1)), "%d truth rows, replay scored %s" % (rows, truth.group(1)))
    hits = truth_rows.count('class="hit"')
    check(hits == int(truth.group(2)), "%d hits shown, replay counted %s" % (hits, truth.group(2)))
    print("check_ui: report: %d charts, %d dots, %d alert markers, %d of %d labels hit" % (
        len(data["series"]), shown, len(alerts), hits, rows))


def scenario_status(args, tmp):
    state = os.path.join(tmp, "state")
    config = os.path.join(tmp, "serve.yaml")
    check_serve.write_config(config, check_serve.profiles_text(
        os.path.join(args.fixture, "plumbline.yaml")), state)
    daemon = check_serve.Daemon(args.plumbline, config, tmp)
    try:
        with open(os.path.join(args.fixture, "readings.csv"), "rb") as f:
            readings = f.read()
        daemon.send_tcp(readings)
        expected = sum(1 for line in readings.splitlines()
                       if line and not line.startswith(b"time,"))
        daemon.wait_readings(expected)
        status, body = daemon.request("GET", "/v1/series?limit=100000")
        series = json.loads(body)["series"]
        check(len(series) == 5, "%d series" % len(series))
        base = "http://127.0.0.1:%d/" % daemon.http_port

        dom_text, console = chromium(args.chromium, base, args.artefacts, "status")
        dom = Dom(dom_text)
        check(not console_errors(console), "console errors:\n" + "\n".join(console))
        names = re.findall(r'<tr data-series="([^"]+)"', dom_text)
        check(sorted(names) == sorted(s["name"] for s in series),
              "listed %s, the API has %s" % (names, [s["name"] for s in series]))
        check(dom.count("span", "state") == len(series), "a state badge per series")

        # The chart of a series whose recent points (the default keeps 240)
        # hold one of its alerts, so that the alert markers are drawn.
        with open(os.path.join(args.fixture, "expect.json")) as f:
            counts = {s["name"]: s["readings"] for s in json.load(f)["series"]}
        chosen = None
        for s in series:
            status, body = daemon.request("GET", "/v1/series/" + s["name"])
            detail = json.loads(body)
            points = detail["recent_points"]
            if not points:
                continue
            first, last = points[0]["time"], points[-1]["time"]
            in_span = [a for a in detail["recent_alerts"]
                       if a["event"] == "alert" and first <= a["detected_at"] <= last]
            if in_span:
                chosen = s["name"]
                break
        check(chosen, "no series has an alert within its recent points")
        name = chosen
        check(len(points) == min(240, counts[name]),
              "%s: %d recent points, the default keeps 240 of its %d readings" % (
                  name, len(points), counts[name]))
        dom_text, console = chromium(args.chromium, base + "#series=" + name, args.artefacts,
                                     "status_series")
        dom = Dom(dom_text)
        check(not console_errors(console), "console errors:\n" + "\n".join(console))
        check(dom.count("circle", "point") == len(points),
              "%d dots, %d recent points" % (dom.count("circle", "point"), len(points)))
        # One band per unbroken run of two or more points with a forecast.
        runs, length = 0, 0
        for p in points + [{"forecast": None}]:
            if p["forecast"] is not None:
                length += 1
                continue
            runs += length > 1
            length = 0
        check(dom.count("polygon", "band") == runs,
              "%s: %d forecast bands drawn, %d runs of points with a forecast" % (
                  name, dom.count("polygon", "band"), runs))
        check(dom.count("path", "alert-mark") == len(in_span),
              "%d alert markers, %d alerts in the chart's span" % (
                  dom.count("path", "alert-mark"), len(in_span)))
        check(name in dom.text_by_id.get("detail-name", ""), "the detail names the series")
        print("check_ui: status: %d series listed; %s: %d dots, %d alert markers" % (
            len(names), name, len(points), len(in_span)))
    finally:
        daemon.stop()


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--plumbline", required=True)
    parser.add_argument("--fixture", required=True)
    parser.add_argument("--chromium", default=shutil.which("chromium") or "chromium")
    parser.add_argument("--artefacts", required=True, help="screenshots and DOM dumps go here")
    parser.add_argument("scenario", choices=["report", "status", "console"])
    args = parser.parse_args()
    check(shutil.which(args.chromium) is not None,
          "no %s: deploy/install-deps.sh installs it" % args.chromium)
    os.makedirs(args.artefacts, exist_ok=True)
    tmp = tempfile.mkdtemp(prefix="plumbline-ui-")
    try:
        {"report": scenario_report, "status": scenario_status,
         "console": scenario_console}[args.scenario](args, tmp)
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    main()
