#!/usr/bin/env python3
"""End-to-end checks of `plumbline serve` on loopback, against `plumbline replay`
on the same fixture (DESIGN.md: "replay ... must give the same alerts as live
ingestion of the same data"). Standard library only.

usage: check_serve.py --plumbline BIN --fixture DIR SCENARIO

Scenarios:
  tcp       the fixture over one TCP connection: the alert log holds the same
            alerts as replay's (same ids, same change_at; order may differ
            between shards)
  http      the same through POST /v1/readings in chunks; the receipts add up,
            and a body with bad lines names them by line number
  file      the same through the file follower, the file growing while followed
  webhook   a receiver inside this script that is down for the first seconds
            receives every alert exactly as the alert log has it
  sighup    an invalid config on SIGHUP is refused (the daemon keeps running and
            logs why); a valid one with one profile changed keeps the state of
            the other series, whose alerts then still equal replay's
  sigterm   SIGTERM while readings pour in: exit status 0 within the shutdown
            timeout, the stages logged in order

The daemon listens on port 0 (the kernel picks free ports); the script reads
the chosen ports from the daemon's "ready" log line.
"""

import argparse
import atexit
import http.client
import http.server
import json
import os
import re
import shutil
import signal
import socket
import subprocess
import sys
import tempfile
import threading
import time

TIMEOUT = 120  # seconds for any one wait; each scenario takes a few seconds


class Failure(Exception):
    pass


def check(condition, message):
    if not condition:
        raise Failure(message)


def replay(plumbline, config, readings, tmp):
    alerts = os.path.join(tmp, "replay-alerts.jsonl")
    result = subprocess.run([plumbline, "replay", "--config", config, "--input", readings,
                             "--alerts", alerts, "--quiet"],
                            capture_output=True, text=True, timeout=600)
    check(result.returncode == 0, "replay failed: " + result.stderr[-2000:])
    accepted = int(re.search(r"readings\s+(\d+) accepted", result.stderr).group(1))
    return load_alerts(alerts), accepted


def load_alerts(path):
    if not os.path.exists(path):
        return []
    with open(path, encoding="utf-8") as f:
        return [json.loads(line) for line in f if line.strip()]


def keys(alerts, series=None):
    return sorted((a["id"], a["change_at"], a["detected_at"]) for a in alerts
                  if series is None or a["series"] in series)


def profiles_text(fixture_config):
    """The fixture's config without comments, to extend with service sections."""
    with open(fixture_config, encoding="utf-8") as f:
        return "".join(line for line in f if not line.lstrip().startswith("#"))


def write_config(path, profiles, state, extra=""):
    with open(path, "w", encoding="utf-8") as f:
        f.write(profiles)
        f.write("listeners:\n  tcp: {port: 0}\n  http: {port: 0}\n")
        # Two shards: by name alone they would split the demo's door openings
        # from pallets shipped, their covariate; serve keeps them on one shard
        # (daemon/covariate_groups.h), so the alerts still equal replay's.
        f.write("shards: 2\n")
        f.write("storage:\n  directory: %s\n" % state)
        f.write("shutdown_timeout: 20s\n")
        f.write("sinks:\n  stdout: false\n")
        f.write(extra)


def run_scenario(tool, description, scenarios, argv):
    """The main of a check script whose scenarios take (args, tmp): runs the one
    named on the command line in a fresh temporary folder, kept when it fails or
    with --keep. Returns the exit status."""
    parser = argparse.ArgumentParser(description=description)
    parser.add_argument("--plumbline", required=True)
    parser.add_argument("--keep", action="store_true", help="keep the temporary folder")
    parser.add_argument("scenario", choices=sorted(scenarios))
    args = parser.parse_args(argv)
    tmp = tempfile.mkdtemp(prefix="plumbline-%s-" % tool)
    try:
        scenarios[args.scenario](args, tmp)
    except Failure as failure:
        print("check_%s: %s: FAILED: %s" % (tool, args.scenario, failure))
        print("check_%s: logs kept in %s" % (tool, tmp))
        return 1
    if args.keep:
        print("check_%s: kept %s" % (tool, tmp))
    else:
        shutil.rmtree(tmp, ignore_errors=True)
    return 0

# Daemons started and not yet stopped. A check that fails part way (a
# Failure, any exception, sys.exit) never reaches its stop(); these are killed
# when the script exits, so no daemon outlives its test.
_RUNNING = set()


@atexit.register
def _kill_leftover_daemons():
    for process in list(_RUNNING):
        if process.poll() is None:
            process.kill()
            process.wait()
    _RUNNING.clear()


class Daemon:
    def __init__(self, plumbline, config, tmp, name="serve"):
        self.log_path = os.path.join(tmp, name + ".log")
        self.log = open(self.log_path, "w", encoding="utf-8")
        self.process = subprocess.Popen([plumbline, "serve", "--config", config],
                                        stdout=subprocess.DEVNULL, stderr=self.log)
        _RUNNING.add(self.process)
        deadline = time.time() + TIMEOUT
        while True:
            match = re.search(r"msg=ready tcp=([\d.]+):(\d+) http=([\d.]+):(\d+)", self.text())
            if match:
                self.tcp_port = int(match.group(2))
                self.http_port = int(match.group(4))
                break
            check(self.process.poll() is None, "daemon exited at start:\n" + self.text())
            check(time.time() < deadline, "daemon not ready:\n" + self.text())
            time.sleep(0.05)

    def text(self):
        if not self.log.closed:
            self.log.flush()
        with open(self.log_path, encoding="utf-8") as f:
            return f.read()

    def request(self, method, path, body=None):
        connection = http.client.HTTPConnection("127.0.0.1", self.http_port, timeout=TIMEOUT)
        connection.request(method, path, body=body)
        response = connection.getresponse()
        data = response.read()
        connection.close()
        return response.status, data

    def readings(self):
        status, data = self.request("GET", "/v1/series?limit=100000")
        check(status == 200, "GET /v1/series: %d %s" % (status, data[:200]))
        return sum(s["readings"] for s in json.loads(data)["series"])

    def wait_readings(self, count):
        deadline = time.time() + TIMEOUT
        while self.readings() < count:
            check(time.time() < deadline, "only %d of %d readings arrived" % (
                self.readings(), count))
            time.sleep(0.1)
        check(self.readings() == count, "%d readings, expected %d" % (self.readings(), count))

    def send_tcp(self, data):
        with socket.create_connection(("127.0.0.1", self.tcp_port)) as s:
            s.sendall(data)

    def signal(self, number):
        self.process.send_signal(number)

    def stop(self):
        started = time.time()
        self.process.send_signal(signal.SIGTERM)
        code = self.process.wait(timeout=TIMEOUT)
        _RUNNING.discard(self.process)
        seconds = time.time() - started
        self.log.close()
        check(code == 0, "daemon exit status %d:\n%s" % (code, self.text()[-3000:]))
        return seconds


def read_bytes(path):
    with open(path, "rb") as f:
        return f.read()


def split_lines(data, parts):
    """The data cut into `parts` pieces at line ends."""
    lines = data.splitlines(keepends=True)
    size = (len(lines) + parts - 1) // parts
    return [b"".join(lines[i:i + size]) for i in range(0, len(lines), size)]


# ---- scenarios ----

def scenario_tcp(args, tmp, expected, accepted):
    state = os.path.join(tmp, "state")
    config = os.path.join(tmp, "serve.yaml")
    write_config(config, args.profiles, state)
    daemon = Daemon(args.plumbline, config, tmp)
    started = time.time()
    daemon.send_tcp(read_bytes(args.readings))
    daemon.wait_readings(accepted)
    ingest_seconds = time.time() - started
    shutdown = daemon.stop()
    got = load_alerts(os.path.join(state, "alerts.jsonl"))
    check(keys(got) == keys(expected), "alert sets differ: %d served vs %d replayed\n%s" % (
        len(got), len(expected), diff(got, expected)))
    print("check_serve: tcp: %d readings in %.2f s (%.0f readings/s incl. polling), "
          "%d alerts equal replay's; shutdown %.2f s" % (
              accepted, ingest_seconds, accepted / ingest_seconds, len(got), shutdown))


def scenario_http(args, tmp, expected, accepted):
    state = os.path.join(tmp, "state")
    config = os.path.join(tmp, "serve.yaml")
    write_config(config, args.profiles, state)
    daemon = Daemon(args.plumbline, config, tmp)
    total_accepted = 0
    for chunk in split_lines(read_bytes(args.readings), 12):
        status, data = daemon.request("POST", "/v1/readings", chunk)
        check(status == 200, "POST /v1/readings: %d %s" % (status, data[:300]))
        receipt = json.loads(data)
        check(receipt["rejected"] == 0, "rejected lines: %s" % data[:500])
        total_accepted += receipt["accepted"]
    check(total_accepted == accepted, "receipts accept %d, replay %d" % (
        total_accepted, accepted))
    # Verdicts are in when POST answers: the series already hold every reading.
    check(daemon.readings() == accepted, "readings not all judged when POST answered")
    # Line 1 is taken: after the freezer's last reading, before the fixture's
    # end, so it moves no clock past any deadline replay did not pass.
    bad = (b"2026-04-30T23:59:30Z,coldstore/freezer-1/temp_c,-19.5\n"
           b"yesterday,coldstore/freezer-1/temp_c,1\n"
           b"2026-04-30T23:59:40Z,coldstore/freezer-1/temp_c,NaN\n"
           b"2026-04-30T23:59:50Z,office/kettle/temp_c,90\n"
           b"2026-04-01T00:00:00Z,coldstore/freezer-1/temp_c,-19\n")
    status, data = daemon.request("POST", "/v1/readings", bad)
    receipt = json.loads(data)
    check(status == 200 and receipt["accepted"] == 1 and receipt["rejected"] == 4,
          "receipt for bad lines: %s" % data)
    check([(e["line"], e["reason"]) for e in receipt["errors"]] ==
          [(2, "bad_time"), (3, "non_finite_value"), (4, "no_profile"), (5, "late")],
          "errors by line: %s" % data)
    daemon.stop()
    got = load_alerts(os.path.join(state, "alerts.jsonl"))
    check(keys(got) == keys(expected), "alert sets differ: %d served vs %d replayed\n%s" % (
        len(got), len(expected), diff(got, expected)))
    print("check_serve: http: 12 bodies, %d readings accepted; bad lines reported by "
          "number; %d alerts equal replay's" % (total_accepted, len(got)))


def scenario_file(args, tmp, expected, accepted):
    state = os.path.join(tmp, "state")
    config = os.path.join(tmp, "serve.yaml")
    followed = os.path.join(tmp, "incoming.csv")
    halves = split_lines(read_bytes(args.readings), 2)
    with open(followed, "wb") as f:
        f.write(halves[0])
    write_config(config, args.profiles, state,
                 "inputs:\n  files:\n    - {path: %s, poll_interval: 20ms}\n" % followed)
    daemon = Daemon(args.plumbline, config, tmp)
    time.sleep(0.3)
    with open(followed, "ab") as f:  # the file grows while followed
        f.write(halves[1])
    daemon.wait_readings(accepted)
    daemon.stop()
    got = load_alerts(os.path.join(state, "alerts.jsonl"))
    check(keys(got) == keys(expected), "alert sets differ: %d served vs %d replayed\n%s" % (
        len(got), len(expected), diff(got, expected)))
    offsets = [n for n in os.listdir(state) if n.startswith("follow-")]
    check(len(offsets) == 1, "no saved follow offset in %s" % os.listdir(state))
    with open(os.path.join(state, offsets[0]), encoding="utf-8") as f:
        saved = int(f.read().split()[-1])
    check(saved == os.path.getsize(followed), "saved offset %d, file size %d" % (
        saved, os.path.getsize(followed)))
    print("check_serve: file: followed while growing; %d alerts equal replay's; offset "
          "saved at the end of the file" % len(got))


class Receiver:
    """An HTTP server that records POSTed bodies; started later than the daemon."""

    def __init__(self, port):
        self.bodies = []
        self.lock = threading.Lock()
        receiver = self

        class Handler(http.server.BaseHTTPRequestHandler):
            def do_POST(self):
                length = int(self.headers.get("Content-Length", 0))
                body = self.rfile.read(length)
                with receiver.lock:
                    receiver.bodies.append(body.decode("utf-8"))
                self.send_response(204)
                self.end_headers()

            def log_message(self, *args):
                pass

        self.server = http.server.ThreadingHTTPServer(("127.0.0.1", port), Handler)
        self.thread = threading.Thread(target=self.server.serve_forever, daemon=True)
        self.thread.start()

    def received(self):
        with self.lock:
            return [json.loads(b) for b in self.bodies]

    def close(self):
        self.server.shutdown()
        self.server.server_close()


def free_port():
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def scenario_webhook(args, tmp, expected, accepted):
    state = os.path.join(tmp, "state")
    config = os.path.join(tmp, "serve.yaml")
    port = free_port()  # nothing listens there yet: the receiver is down
    write_config(config, args.profiles, state,
                 "  webhook:\n    url: http://127.0.0.1:%d/plumbline/alerts\n"
                 "    attempts: 50\n    backoff: 100ms\n    backoff_max: 400ms\n"
                 "    timeout: 2s\n" % port)
    daemon = Daemon(args.plumbline, config, tmp)
    daemon.send_tcp(read_bytes(args.readings))
    daemon.wait_readings(accepted)
    time.sleep(1.0)  # alerts raised while the receiver is down are being retried
    check("webhook delivery failed; retrying" in daemon.text(),
          "no failed delivery while the receiver was down")
    receiver = Receiver(port)
    deadline = time.time() + TIMEOUT
    while len(receiver.received()) < len(expected):
        check(time.time() < deadline, "receiver got %d of %d alerts" % (
            len(receiver.received()), len(expected)))
        time.sleep(0.1)
    daemon.stop()
    receiver.close()
    got = receiver.received()
    logged = load_alerts(os.path.join(state, "alerts.jsonl"))
    check(got == logged, "webhook bodies differ from the alert log")
    check(keys(got) == keys(expected), "webhook alerts differ from replay's")
    check(not os.path.exists(os.path.join(state, "webhook-dead-letter.jsonl")),
          "alerts were dead-lettered")
    print("check_serve: webhook: receiver down for the first %d alerts' first tries, then "
          "received all %d, in the alert log's order" % (len(expected), len(got)))


def scenario_sighup(args, tmp, expected, accepted):
    state = os.path.join(tmp, "state")
    config = os.path.join(tmp, "serve.yaml")
    write_config(config, args.profiles, state)
    daemon = Daemon(args.plumbline, config, tmp)
    halves = split_lines(read_bytes(args.readings), 2)
    first_count = len(halves[0].splitlines()) - 1  # without the header
    daemon.send_tcp(halves[0])
    daemon.wait_readings(first_count)

    # An invalid config is refused; the old one stays.
    with open(config, "w", encoding="utf-8") as f:
        f.write("series:\n  - match: \"coldstore/**\"\n    kind: gauge\n    arl0: 1\n"
                "shards: -4\n")
    daemon.signal(signal.SIGHUP)
    deadline = time.time() + TIMEOUT
    while "config refused" not in daemon.text():
        check(time.time() < deadline, "no log line refusing the invalid config")
        time.sleep(0.05)
    check(daemon.process.poll() is None, "daemon died on an invalid config")
    check("arl0 must be in" in daemon.text(), "the refusal does not say why")

    # A valid one: the pallets profile gets a new arl0 (its series keeps its
    # model, with new detectors), the four others keep everything.
    # (the pallets profile is the last with arl0 10000; door openings share it)
    at = args.profiles.rfind("arl0: 10000 ")
    changed = (args.profiles[:at] + "arl0: 20000" + args.profiles[at + len("arl0: 10000"):]
               if at >= 0 else args.profiles)
    check(changed != args.profiles, "fixture config has no 'arl0: 10000' to change")
    write_config(config, changed, state)
    daemon.signal(signal.SIGHUP)
    deadline = time.time() + TIMEOUT
    while "config reloaded" not in daemon.text():
        check(time.time() < deadline, "no log line for the reload")
        time.sleep(0.05)
    line = [l for l in daemon.text().splitlines() if "config reloaded" in l][0]
    check("series_kept=4" in line and "series_retuned=1" in line and
          "series_restarted=0" in line, "reload: " + line)
    daemon.send_tcp(halves[1])
    daemon.wait_readings(accepted)
    daemon.stop()
    kept = {"coldstore/freezer-1/temp_c", "coldstore/compressor-2/power_kw",
            "coldstore/dock/door_openings", "coldstore/main/energy_kwh"}
    got = load_alerts(os.path.join(state, "alerts.jsonl"))
    check(keys(got, kept) == keys(expected, kept),
          "series kept across the reload no longer match replay:\n" + diff(
              [a for a in got if a["series"] in kept],
              [a for a in expected if a["series"] in kept]))
    print("check_serve: sighup: invalid config refused with its reason; reload kept 4 "
          "series (their %d alerts equal replay's) and retuned 1" % len(keys(got, kept)))


def scenario_sigterm(args, tmp, expected, accepted):
    state = os.path.join(tmp, "state")
    config = os.path.join(tmp, "serve.yaml")
    write_config(config, args.profiles, state)
    daemon = Daemon(args.plumbline, config, tmp)
    data = read_bytes(args.readings)
    sender = threading.Thread(target=lambda: send_quietly(daemon.tcp_port, data))
    sender.start()
    time.sleep(0.1)  # readings are pouring in
    seconds = daemon.stop()
    sender.join()
    text = daemon.text()
    stages = ["shutdown asked", "stopping the HTTP server", "stopping inputs",
              "draining shard queues", "flushing sinks", "msg=stopped", "msg=exiting"]
    positions = [text.find(s) for s in stages]
    check(all(p >= 0 for p in positions) and positions == sorted(positions),
          "stages missing or out of order:\n" + text[-3000:])
    check(seconds < 20, "shutdown took %.1f s" % seconds)
    # What was taken in was processed: every alert in the log is one replay has.
    got = load_alerts(os.path.join(state, "alerts.jsonl"))
    expected_keys = set(keys(expected))
    check(all(k in expected_keys for k in keys(got)), "an alert replay does not have")
    print("check_serve: sigterm: sent 0.1 s into the feed, stopped in %.2f s with exit status 0, stages "
          "in order, %d alerts all replay's" % (seconds, len(got)))


def send_quietly(port, data):
    try:
        with socket.create_connection(("127.0.0.1", port)) as s:
            s.sendall(data)
    except OSError:
        pass  # the daemon closed the connection while shutting down


def diff(got, expected):
    a, b = set(keys(got)), set(keys(expected))
    lines = ["  only served:   %s" % (k,) for k in sorted(a - b)[:10]]
    lines += ["  only replayed: %s" % (k,) for k in sorted(b - a)[:10]]
    return "\n".join(lines)


SCENARIOS = {"tcp": scenario_tcp, "http": scenario_http, "file": scenario_file,
             "webhook": scenario_webhook, "sighup": scenario_sighup,
             "sigterm": scenario_sigterm}


def main(argv):
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--plumbline", required=True)
    parser.add_argument("--fixture", required=True)
    parser.add_argument("--keep", action="store_true", help="keep the temporary folder")
    parser.add_argument("scenario", choices=sorted(SCENARIOS))
    args = parser.parse_args(argv)
    with open(os.path.join(args.fixture, "expect.json"), encoding="utf-8") as f:
        spec = json.load(f)
    args.config = os.path.join(args.fixture, spec["config"])
    check(len(spec["inputs"]) == 1, "one input file expected")
    args.readings = os.path.join(args.fixture, spec["inputs"][0])
    args.profiles = profiles_text(args.config)
    tmp = tempfile.mkdtemp(prefix="plumbline-serve-")
    try:
        expected, accepted = replay(args.plumbline, args.config, args.readings, tmp)
        SCENARIOS[args.scenario](args, tmp, expected, accepted)
    except Failure as failure:
        print("check_serve: %s: FAILED: %s" % (args.scenario, failure))
        print("check_serve: logs kept in %s" % tmp)
        return 1
    if args.keep:
        print("check_serve: kept %s" % tmp)
    else:
        shutil.rmtree(tmp, ignore_errors=True)
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
