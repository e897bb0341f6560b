#!/usr/bin/env python3
"""A real Prometheus server scrapes Plumbline's /metrics (loopback only).

Starts a Plumbline HTTP API (the daemon, `plumbline serve`, on a config of its
own with the HTTP listener on a free port; or the API test server), feeds it readings through POST /v1/readings, starts Debian's
`prometheus` on a free loopback port with a temporary storage directory, a
1-second scrape interval and the example rules of deploy/prometheus, and checks:

  1. Prometheus reports the target up;
  2. a query through Prometheus' HTTP API (/api/v1/query) returns
     plumbline_readings_accepted_total with the number of readings fed;
  3. every example rule loads and evaluates without error (/api/v1/rules);
  4. `promtool check metrics` passes on the text Plumbline serves.

Prometheus' HTTP API and promtool are those of Prometheus 2.x (Debian 12's
prometheus package); the response shapes used here are from its documentation
("HTTP API": status, data.result[].value = [time, "value"]; from memory).

Usage:
  check_prometheus_scrape.py --prometheus PATH --promtool PATH --rules FILE
      (--plumbline PATH | --api-test-server PATH)
"""
import argparse
import json
import os
import re
import signal
import socket
import subprocess
import sys
import tempfile
import time
import urllib.error
import urllib.parse
import urllib.request

READINGS = 25  # fed through POST /v1/readings; the counter must show exactly this


def free_port():
    """A loopback port nobody listens on now (common practice, no source)."""
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def http(method, url, body=None, timeout=10):
    request = urllib.request.Request(url, data=body, method=method)
    with urllib.request.urlopen(request, timeout=timeout) as response:
        return response.status, response.headers, response.read()


def wait_until(what, predicate, timeout, log_files=()):
    deadline = time.monotonic() + timeout
    last_error = None
    while time.monotonic() < deadline:
        try:
            result = predicate()
            if result:
                return result
        except (OSError, urllib.error.URLError, ValueError, KeyError) as e:
            last_error = e
        time.sleep(0.2)
    for path in log_files:
        with open(path, errors="replace") as f:
            sys.stderr.write(f"--- {path} ---\n{f.read()[-4000:]}\n")
    sys.exit(f"FAIL: {what} within {timeout}s (last error: {last_error})")


def start_plumbline(args, workdir):
    """Starts the API under test; returns (process, "127.0.0.1:port", log path)."""
    log_path = os.path.join(workdir, "plumbline.log")
    log = open(log_path, "w")
    if args.api_test_server:
        process = subprocess.Popen([args.api_test_server, "--port", "0"],
                                   stdout=subprocess.PIPE, stderr=log, text=True)
        line = process.stdout.readline()
        match = re.match(r"listening (127\.0\.0\.1:\d+)", line)
        if not match:
            process.kill()
            sys.exit(f"FAIL: api_test_server printed {line!r}")
        return process, match.group(1), log_path
    config = os.path.join(workdir, "plumbline.yaml")
    with open(config, "w") as f:
        f.write(
            "listeners:\n"
            "  tcp: {enabled: false}\n"
            "  http: {address: 127.0.0.1, port: 0}\n"
            "storage: {directory: state}\n"
            "sinks: {stdout: false}\n"
            "series:\n"
            "  - match: \"coldstore/**\"\n"
            "    kind: gauge\n"
            "    seasons: []\n"
            "    warmup: 10\n")
    process = subprocess.Popen([args.plumbline, "serve", "--config", config],
                               stdout=log, stderr=log, cwd=workdir)

    def ready_line():
        if process.poll() is not None:
            raise ValueError(f"plumbline serve exited with {process.returncode}")
        with open(log_path) as f:
            match = re.search(r"msg=ready .*http=(127\.0\.0\.1:\d+)", f.read())
        return match.group(1) if match else None
    return process, wait_until("plumbline serve logs msg=ready", ready_line, 60, [log_path]), \
        log_path


def stop(process):
    if process.poll() is None:
        process.send_signal(signal.SIGTERM)
        try:
            process.wait(timeout=20)
        except subprocess.TimeoutExpired:
            process.kill()
            process.wait()
            return False
    return True


def main():
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--prometheus", required=True)
    parser.add_argument("--promtool", required=True)
    parser.add_argument("--rules", required=True)
    parser.add_argument("--api-test-server")
    parser.add_argument("--plumbline")
    args = parser.parse_args()
    for name in ("prometheus", "promtool", "api_test_server", "plumbline"):
        value = getattr(args, name)
        if value and os.sep in value:
            setattr(args, name, os.path.abspath(value))
    if bool(args.api_test_server) == bool(args.plumbline):
        parser.error("give one of --plumbline and --api-test-server")

    with tempfile.TemporaryDirectory(prefix="plumbline-prometheus-") as workdir:
        plumbline, target, plumbline_log = start_plumbline(args, workdir)
        prometheus = None
        try:
            base = f"http://{target}"
            wait_until("Plumbline answers /healthz",
                       lambda: http("GET", base + "/healthz")[0] == 200, 30, [plumbline_log])
            # Harbourside readings, one a minute, CSV and JSON mixed.
            lines = []
            for i in range(READINGS):
                stamp = f"2026-03-01T12:{i:02d}:00Z"
                value = -18.5 + 0.1 * (i % 3)
                if i % 2:
                    lines.append(f'{{"time": "{stamp}", "series": "coldstore/freezer-1/temp_c", '
                                 f'"value": {value}}}')
                else:
                    lines.append(f"{stamp},coldstore/freezer-1/temp_c,{value}")
            status, _, body = http("POST", base + "/v1/readings",
                                   ("\n".join(lines) + "\n").encode())
            receipt = json.loads(body)
            if status != 200 or receipt["accepted"] != READINGS:
                sys.exit(f"FAIL: POST /v1/readings answered {status} {receipt}")
            print(f"fed {READINGS} readings: {receipt}")

            # Prometheus, scraping every second, with the example rules.
            prometheus_port = free_port()
            rules = os.path.join(workdir, "plumbline-rules.yml")
            with open(args.rules) as f, open(rules, "w") as out:
                out.write(f.read())
            config = os.path.join(workdir, "prometheus.yml")
            with open(config, "w") as f:
                f.write(
                    "global:\n  scrape_interval: 1s\n  evaluation_interval: 1s\n"
                    "rule_files:\n  - plumbline-rules.yml\n"
                    "scrape_configs:\n  - job_name: plumbline\n    scrape_timeout: 1s\n"
                    f"    static_configs:\n      - targets: ['{target}']\n")
            prometheus_log = os.path.join(workdir, "prometheus.log")
            with open(prometheus_log, "w") as log:
                prometheus = subprocess.Popen(
                    [args.prometheus, f"--config.file={config}",
                     f"--storage.tsdb.path={os.path.join(workdir, 'tsdb')}",
                     f"--web.listen-address=127.0.0.1:{prometheus_port}",
                     "--log.level=warn"],
                    stdout=log, stderr=log, cwd=workdir)
            api = f"http://127.0.0.1:{prometheus_port}"
            wait_until("Prometheus ready",
                       lambda: http("GET", api + "/-/ready")[0] == 200, 60, [prometheus_log])

            def target_up():
                data = json.loads(http("GET", api + "/api/v1/targets")[2])["data"]
                for t in data["activeTargets"]:
                    if t["labels"].get("job") == "plumbline" and t["health"] == "up":
                        return t
                return None
            wait_until("Prometheus reports the Plumbline target up", target_up, 60,
                       [prometheus_log, plumbline_log])
            print("target up")

            def readings_counter():
                query = urllib.parse.urlencode({"query": "plumbline_readings_accepted_total"})
                answer = json.loads(http("GET", f"{api}/api/v1/query?{query}")[2])
                if answer["status"] != "success":
                    return None
                for row in answer["data"]["result"]:
                    if row["metric"].get("job") == "plumbline":
                        return float(row["value"][1])
                return None
            value = wait_until("the readings counter appears in Prometheus", readings_counter, 60,
                               [prometheus_log, plumbline_log])
            if value != READINGS:
                sys.exit(f"FAIL: Prometheus has plumbline_readings_accepted_total = {value}, "
                         f"expected {READINGS}")
            print(f"Prometheus query: plumbline_readings_accepted_total = {value:g}")

            def rules_evaluated():
                groups = json.loads(http("GET", api + "/api/v1/rules")[2])["data"]["groups"]
                rules = [r for g in groups for r in g["rules"]]
                if not rules or any(r.get("lastEvaluation", "").startswith("0001") for r in rules):
                    return None  # not all evaluated yet
                return rules
            rules = wait_until("every example rule evaluated", rules_evaluated, 60,
                               [prometheus_log])
            broken = [(r["name"], r.get("lastError")) for r in rules if r.get("health") != "ok"]
            if broken:
                sys.exit(f"FAIL: rules with errors: {broken}")
            print(f"{len(rules)} example rules evaluated without error")

            # The exposition text passes Prometheus' own linter.
            status, headers, text = http("GET", base + "/metrics")
            content_type = headers.get("Content-Type", "")
            if not content_type.startswith("text/plain; version=0.0.4"):
                sys.exit(f"FAIL: /metrics content type {content_type!r}")
            lint = subprocess.run([args.promtool, "check", "metrics"], input=text,
                                  capture_output=True)
            if lint.returncode != 0:
                sys.exit("FAIL: promtool check metrics:\n" + lint.stdout.decode() +
                         lint.stderr.decode())
            print(f"promtool check metrics: ok on {len(text)} bytes")
        finally:
            if prometheus is not None:
                stop(prometheus)
            clean = stop(plumbline)
        if not clean:
            sys.exit("FAIL: Plumbline did not stop within 20 s of SIGTERM")
        if plumbline.returncode != 0:
            sys.exit(f"FAIL: Plumbline exited with {plumbline.returncode} after SIGTERM")
    print("ok")


if __name__ == "__main__":
    main()
