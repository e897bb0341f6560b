#!/usr/bin/env python3
"""End-to-end checks of the daemon's context and forecast routes on synthetic
readings (seeded, made here; Harbourside names). Standard library only; the
daemon helpers come from check_serve.py.

usage: check_context.py --plumbline BIN SCENARIO

Scenarios:
  annotations  POST /v1/annotations on live series: a maintenance window holds
               the alerts inside it back as `suppressed` events (in /v1/alerts,
               not in the alert log); one with learn: false keeps a serviced
               sensor's readings out of the model (no event, forecast stays at
               the old level); a planned change re-baselines a series (retrain
               event from its time, nothing paged). Bad bodies are 400 with
               line:column, a taken id 409, a config annotation cannot be
               deleted (409 saying why); API annotations survive a restart and
               a deletion does too. Every alert carries a severity.
  forecast     GET /v1/series/{name}/forecast: predicted value, interval and the
               next reading's time on a steady series; 400 for a time before the
               last reading, 404 for an unknown series; `plumbline forecast`
               over the same readings gives the same numbers.
"""

import calendar
import time
import json
import math
import os
import random
import subprocess
import sys
import urllib.parse

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from check_serve import Daemon, check, run_scenario, write_config  # noqa: E402

START = 1772323200  # 2026-03-01T00:00:00Z
STEP = 600          # one reading every 10 minutes
NOISE = 0.5
PROFILES = """series:
  - match: "coldstore/**"
    kind: gauge
    seasons: [1d]
    warmup: 48
    arl0: 5000
    shift: 1.0
annotations:
  - id: defrost-schedule
    kind: planned-change
    match: "coldstore/freezer-9/*"
    at: 2026-04-01T00:00:00Z
"""
A = "coldstore/freezer-1/temp_c"      # steps up inside a window that lets it learn
B = "coldstore/freezer-2/temp_c"      # serviced: off by +6 inside a learn: false window
C = "coldstore/compressor-2/power_kw"  # a planned change at its step


def rfc3339(t):
    return time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime(t))


def parse_time(text):
    """RFC 3339 UTC (as the daemon writes it) -> epoch seconds."""
    whole, _, fraction = text.rstrip("Z").partition(".")
    seconds = calendar.timegm(time.strptime(whole, "%Y-%m-%dT%H:%M:%S"))
    return seconds + (float("0." + fraction) if fraction else 0.0)


def value(rng, t, level):
    return level + math.sin(2 * math.pi * ((t - START) % 86400) / 86400) + rng.gauss(0, NOISE)


def readings(first, last, shifts, seed):
    """CSV lines for A, B, C at indexes [first, last); shifts(name, t) adds to the level."""
    rng = random.Random(seed)
    lines = []
    for i in range(first, last):
        t = START + i * STEP
        for name, level in ((A, -18.0), (B, -20.0), (C, 12.0)):
            lines.append("%s,%s,%.4f" % (rfc3339(t), name, value(rng, t, level + shifts(name, t))))
    return ("\n".join(lines) + "\n").encode()


def post(daemon, path, body):
    status, data = daemon.request("POST", path, body=body)
    return status, json.loads(data) if data else None


def get_json(daemon, path):
    status, data = daemon.request("GET", path)
    check(status == 200, "GET %s: %d %s" % (path, status, data[:300]))
    return json.loads(data)


def ingest(daemon, body):
    status, receipt = post(daemon, "/v1/readings", body)
    check(status == 200 and receipt["rejected"] == 0, "ingest: %d %s" % (status, receipt))


def alert_log(state):
    path = os.path.join(state, "alerts.jsonl")
    if not os.path.exists(path):
        return []
    with open(path, encoding="utf-8") as f:
        return [json.loads(line) for line in f if line.strip()]


def scenario_annotations(args, tmp):
    state = os.path.join(tmp, "state")
    config = os.path.join(tmp, "plumbline.yaml")
    write_config(config, PROFILES, state)
    daemon = Daemon(args.plumbline, config, tmp)
    day = 144
    window_a = START + 2 * day * STEP             # A steps up here, for good
    window_b = (START + 2 * day * STEP + 3600, START + 2 * day * STEP + 4 * 3600)
    change_c = START + 2 * day * STEP + 2 * 3600

    def shifts(name, t):
        if name == A and t >= window_a:
            return 6 * NOISE * 2
        if name == B and window_b[0] <= t < window_b[1]:
            return 6.0
        if name == C and t >= change_c:
            return 4.0
        return 0.0

    # Two days of history: the series exist before the annotations come.
    ingest(daemon, readings(0, 2 * day, shifts, 1))
    listed = get_json(daemon, "/v1/annotations")
    check(listed["count"] == 1 and listed["annotations"][0]["source"] == "config",
          "config annotation not listed: %s" % listed)

    status, body = post(daemon, "/v1/annotations", json.dumps({
        "kind": "maintenance", "match": A, "from": rfc3339(window_a - 1800),
        "to": rfc3339(window_a + 2 * day * STEP), "note": "door seal replaced"}).encode())
    check(status == 201 and body["id"].startswith("maintenance-") and body["source"] == "api",
          "create maintenance: %d %s" % (status, body))
    held_by = body["id"]
    status, body = post(daemon, "/v1/annotations", json.dumps({
        "id": "sensor-service", "kind": "maintenance", "match": B,
        "from": rfc3339(window_b[0]), "to": rfc3339(window_b[1]), "learn": False}).encode())
    check(status == 201 and body["learn"] is False, "create learn:false: %d %s" % (status, body))
    status, body = post(daemon, "/v1/annotations", json.dumps({
        "id": "compressor-upgrade", "kind": "planned-change", "match": "coldstore/compressor-*/*",
        "at": rfc3339(change_c), "direction": "up", "within": "1h"}).encode())
    check(status == 201 and body["direction"] == "up", "create planned: %d %s" % (status, body))

    status, body = post(daemon, "/v1/annotations", b'{"kind": "maintenance", "match": "x",'
                        b' "from": "2026-03-02T00:00:00Z", "to": "yesterday"}')
    check(status == 400 and "request body:1:" in body["error"] and "to" in body["error"],
          "bad time not refused with its position: %d %s" % (status, body))
    status, body = post(daemon, "/v1/annotations", b'{"kind": "planned-change", "at": 5, "colour": 1}')
    check(status == 400 and "colour" in body["error"], "unknown key: %d %s" % (status, body))
    status, body = post(daemon, "/v1/annotations", json.dumps({
        "id": "sensor-service", "kind": "planned-change", "at": rfc3339(change_c)}).encode())
    check(status == 409 and "exists" in body["error"], "taken id: %d %s" % (status, body))
    status, data = daemon.request("DELETE", "/v1/annotations/defrost-schedule")
    check(status == 409 and b"config file" in data, "config delete: %d %s" % (status, data))
    status, data = daemon.request("DELETE", "/v1/annotations/no-such-thing")
    check(status == 404, "unknown delete: %d %s" % (status, data))
    listed = get_json(daemon, "/v1/annotations")
    check(listed["count"] == 4, "four annotations expected: %s" % listed)

    # The rest of the readings, over the windows and the change.
    ingest(daemon, readings(2 * day, 4 * day, shifts, 2))
    # Alerts reach /v1/alerts through the dispatcher after the readings were
    # judged: wait (bounded) for the ones expected, A's and C's.
    deadline = time.time() + 60
    while True:
        events = get_json(daemon, "/v1/alerts?since=2026-03-01T00:00:00Z")["alerts"]
        if (any(e["series"] == C and e["event"] == "retrain" for e in events) and
                any(e["series"] == A and e["event"] == "suppressed" for e in events)) or \
                time.time() > deadline:
            break
        time.sleep(0.1)
    suppressed = [e for e in events if e["event"] == "suppressed" and e["series"] == A]
    check(suppressed and all(e["suppressed_by"] == held_by for e in suppressed),
          "A's step inside its window was not held back: %s" % events)
    check(not [e for e in events if e["event"] == "alert" and e["series"] == A],
          "A alerted inside its window: %s" % events)
    check(not [e for e in events if e["series"] == B and e["event"] in ("alert", "suppressed")],
          "B's serviced readings reached the model: %s" % [e for e in events if e["series"] == B])
    c_events = [e for e in events if e["series"] == C]
    check(any(e["event"] == "retrain" and e["change_at"] == rfc3339(change_c) for e in c_events),
          "C did not re-baseline at its planned change: %s" % c_events)
    check(all(e.get("severity") == "record" for e in c_events if e["event"] == "alert"),
          "an alert at C's planned change was sent above record: %s" % c_events)
    for e in events:
        check(e.get("severity") in ("record", "notify", "page"), "no severity: %s" % e)
    logged = alert_log(state)
    check(not [a for a in logged if a["series"] == A], "suppressed events reached the log")
    forecast = get_json(daemon, "/v1/series/%s/forecast" % urllib.parse.quote(B, safe=""))
    level = forecast["forecasts"][0]
    check(abs(level["value"] - (-20.0)) < 2.5,
          "B's model learned the serviced readings: forecast %s" % level)
    daemon.stop()

    saved = os.path.join(state, "annotations.json")
    check(os.path.exists(saved), "no annotations.json in the state directory")
    daemon = Daemon(args.plumbline, config, tmp, "restart")
    listed = get_json(daemon, "/v1/annotations")
    ids = sorted(a["id"] for a in listed["annotations"] if a["source"] == "api")
    check(ids == sorted([held_by, "sensor-service", "compressor-upgrade"]),
          "API annotations lost in a restart: %s" % listed)
    status, data = daemon.request("DELETE", "/v1/annotations/sensor-service")
    check(status == 200 and json.loads(data)["deleted"] == "sensor-service",
          "delete: %d %s" % (status, data))
    daemon.stop()
    daemon = Daemon(args.plumbline, config, tmp, "restart2")
    listed = get_json(daemon, "/v1/annotations")
    check("sensor-service" not in [a["id"] for a in listed["annotations"]] and
          listed["count"] == 3, "a deletion did not survive a restart: %s" % listed)
    daemon.stop()
    print("check_context: annotations: %d suppressed events for A, none for B, C re-baselined; "
          "400/409/404 answers; kept across two restarts" % len(suppressed))


def scenario_forecast(args, tmp):
    state = os.path.join(tmp, "state")
    config = os.path.join(tmp, "plumbline.yaml")
    write_config(config, PROFILES, state)
    data = readings(0, 3 * 144, lambda name, t: 0.0, 3)
    with open(os.path.join(tmp, "readings.csv"), "wb") as f:
        f.write(b"time,series,value\n" + data)
    daemon = Daemon(args.plumbline, config, tmp)
    ingest(daemon, data)
    last = START + (3 * 144 - 1) * STEP
    at = [last + 3600, last + 6 * 3600]
    name = urllib.parse.quote(B, safe="")
    query = "at=%s&level=0.8" % ",".join(rfc3339(t) for t in at)
    got = get_json(daemon, "/v1/series/%s/forecast?%s" % (name, query))
    check(len(got["forecasts"]) == 2, "two forecasts expected: %s" % got)
    for f, t in zip(got["forecasts"], at):
        truth = -20.0 + math.sin(2 * math.pi * ((t - START) % 86400) / 86400)
        check(f["at"] == rfc3339(t) and f["level"] == 0.8, "forecast fields: %s" % f)
        check(f["low"] < f["value"] < f["high"], "interval does not hold the value: %s" % f)
        check(abs(f["value"] - truth) < 3 * NOISE, "forecast %s far from the truth %.2f" % (f, truth))
        check(0.3 < f["sd"] < 1.0, "predictive sd %s for noise sd %.1f" % (f["sd"], NOISE))
    nxt = got["next_reading"]
    check(nxt["last"] == rfc3339(last), "next_reading.last: %s" % nxt)
    # Regular readings: about one spacing on. The arrival model's daily shape,
    # learned from three days, is not quite flat, so operational time runs a
    # little unevenly: within 30%.
    gap = parse_time(nxt["expected"]) - last
    check(0.7 * STEP < gap < 1.3 * STEP, "next reading not about 10 minutes on: %s" % nxt)
    check([q["probability"] for q in nxt["quantiles"]] == [0.1, 0.5, 0.9], "quantiles: %s" % nxt)
    status, data = daemon.request(
        "GET", "/v1/series/%s/forecast?at=%s" % (name, rfc3339(last - 3600)))
    check(status == 400, "a time in the past: %d %s" % (status, data))
    status, data = daemon.request("GET", "/v1/series/coldstore%2Fnone/forecast")
    check(status == 404, "unknown series: %d %s" % (status, data))
    status, data = daemon.request("POST", "/v1/series/%s/forecast" % name)
    check(status == 405, "POST forecast: %d" % status)
    daemon.stop()
    cli = subprocess.run(
        [args.plumbline, "forecast", "--config", config, "--input",
         os.path.join(tmp, "readings.csv"), "--series", B, "--at", rfc3339(at[0]),
         "--at", rfc3339(at[1]), "--level", "0.8", "--json"],
        capture_output=True, text=True, timeout=300)
    check(cli.returncode == 0, "plumbline forecast failed: %s" % cli.stderr[-2000:])
    offline = json.loads(cli.stdout)
    for live, replayed in zip(got["forecasts"], offline["forecasts"]):
        for key in ("value", "low", "high"):
            check(abs(live[key] - replayed[key]) < 1e-6 * max(1.0, abs(live[key])),
                  "serve and forecast differ: %s vs %s" % (live, replayed))
    print("check_context: forecast: value %.3f in [%.3f, %.3f] at +1 h; next reading %s; "
          "the CLI agrees" % (got["forecasts"][0]["value"], got["forecasts"][0]["low"],
                              got["forecasts"][0]["high"], nxt["expected"]))


SCENARIOS = {"annotations": scenario_annotations, "forecast": scenario_forecast}


def main(argv):
    return run_scenario("context", __doc__.split("\n")[0], SCENARIOS, argv)


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
