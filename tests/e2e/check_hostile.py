#!/usr/bin/env python3
"""End-to-end checks of `plumbline serve` against hostile input, overload and
unauthorised clients. Standard library only.

usage: check_hostile.py --plumbline BIN SCENARIO

Scenarios:
  hostile   one TCP connection sends every kind of bad line (README "Hostile
            input") between good ones: each is refused and counted by reason
            on /metrics, the connection stays open and the good series takes
            every good reading; a flood of new series beyond max_series is
            refused while the existing series keeps working; an idle
            connection is closed and counted; a slow sender holds up nobody;
            an oversized HTTP body is 413 and a malformed request 400
  overload  one shard, a 1 MiB ingest budget and BOCPD on every series, fed by
            TCP senders and HTTP posters that offer far more than the shard
            can process: HTTP gets 503 with Retry-After, TCP reads pause, the
            budget gauge never exceeds the budget, the daemon's peak memory
            stays bounded, and every reading that was taken is processed.
            Prints the figures (offered and processed rates, peak RSS)
  access    listeners bind to loopback by default; with a token, HTTP without
            `Authorization: Bearer` is 401 (but /healthz), TCP without the
            token line is closed, the token never appears in the log
"""

import http.client
import os
import re
import socket
import sys
import threading
import time

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from check_serve import Daemon, check, run_scenario  # noqa: E402

TIMEOUT = 120
TOKEN = "harbourside-e2e-5b1c"


def write_config(path, state, extra):
    with open(path, "w", encoding="utf-8") as f:
        f.write("listeners:\n  tcp: {port: 0, idle_timeout: 1s, max_line_bytes: 1024}\n")
        f.write("  http: {port: 0, max_body_bytes: 65536}\n")
        f.write("storage:\n  directory: %s\n" % state)
        f.write("shutdown_timeout: 20s\n")
        f.write("sinks:\n  stdout: false\n")
        f.write(extra)


def request(port, method, path, body=None, headers=None):
    connection = http.client.HTTPConnection("127.0.0.1", port, timeout=TIMEOUT)
    connection.request(method, path, body=body, headers=headers or {})
    response = connection.getresponse()
    data = response.read()
    connection.close()
    return response.status, dict(response.getheaders()), data


def metrics(daemon, headers=None):
    status, _, data = request(daemon.http_port, "GET", "/metrics", headers=headers)
    check(status == 200, "GET /metrics: %d" % status)
    values = {}
    for line in data.decode().splitlines():
        if line and not line.startswith("#"):
            name, _, value = line.rpartition(" ")
            values[name] = float(value)
    return values


def metric(values, name):
    return values.get(name, 0.0)


def wait_until(what, condition):
    deadline = time.time() + TIMEOUT
    while not condition():
        check(time.time() < deadline, "timed out waiting for " + what)
        time.sleep(0.05)


def csv(series, start, count, step=60):
    base = 1772323200  # 2026-03-01T00:00:00Z
    return "".join("%d,%s,%d\n" % (base + step * (start + i), series, (start + i) % 7)
                   for i in range(count)).encode()


def server_closes(sock, seconds):
    sock.settimeout(seconds)
    try:
        return sock.recv(1) == b""
    except ConnectionResetError:
        return True
    except socket.timeout:
        return False


# Every bad line of README "Hostile input", with the reason it is counted under.
BAD_LINES = [
    (b'"2026-03-01T00:00:00Z,coldstore/freezer-1/temp_c,1\n', "malformed"),
    (b'{"time": 1772323200, "series": "x", "value": [\n', "malformed"),
    (b"1772323200,coldstore/freezer-1/temp_c\n", "wrong_field_count"),
    (b"1772323200,a,b,1\n", "wrong_field_count"),
    (b'{"time": 1772323200, "value": 1}\n', "missing_field"),
    (b'{"time": 1, "time": 2, "series": "x", "value": 1}\n', "duplicate_field"),
    (b"yesterday,coldstore/freezer-1/temp_c,1\n", "bad_time"),
    (b"2026-02-30T00:00:00Z,coldstore/freezer-1/temp_c,1\n", "bad_time"),
    (b"1772323200,coldstore/freezer-1/temp_c,warm\n", "bad_value"),
    (b"1772323200,coldstore/freezer-1/temp_c,NaN\n", "non_finite_value"),
    (b"1772323200,coldstore/freezer-1/temp_c,inf\n", "non_finite_value"),
    (b"1772323200,coldstore/freezer-1/temp_c,1e999\n", "non_finite_value"),
    (b"99999999999999,coldstore/freezer-1/temp_c,1\n", "time_out_of_range"),
    (b"2100-01-01T00:00:00Z,coldstore/freezer-1/temp_c,1\n", "time_in_future"),
    (b"1772323200,coldstore/\xff\xfe/temp_c,1\n", "bad_series_name"),
    (b"1772323200,coldstore/\x1b[2J/temp_c,1\n", "bad_series_name"),
    (b"1772323200," + b"s" * 300 + b",1\n", "series_name_too_long"),
    (b"1772323200,coldstore/freezer-1/temp_c," + b"1" * 2000 + b"\n", "line_too_long"),
]


def scenario_hostile(args, tmp):
    state = os.path.join(tmp, "state")
    config = os.path.join(tmp, "plumbline.yaml")
    write_config(config, state, 'series:\n  - match: "**"\n    seasons: []\n    warmup: 5\n'
                 "shards: 1\nmax_series: 20\n")  # one shard: the limit is per shard
    daemon = Daemon(args.plumbline, config, tmp)
    good = "coldstore/freezer-1/temp_c"
    expected = {}
    for _, reason in BAD_LINES:
        expected[reason] = expected.get(reason, 0) + 1

    with socket.create_connection(("127.0.0.1", daemon.tcp_port)) as conn:
        conn.sendall(csv(good, 0, 10))
        for line, _ in BAD_LINES:
            conn.sendall(line)
        conn.sendall(csv(good, 10, 10))
        wait_until("20 good readings", lambda: daemon.readings() == 20)
        values = metrics(daemon)
        for reason, count in sorted(expected.items()):
            got = metric(values, 'plumbline_readings_rejected_total{reason="%s"}' % reason)
            check(got == count, "%s: %d refused, expected %d" % (reason, got, count))

        # A flood of new series: 20 series at most; the first ones are admitted,
        # the rest refused, and the existing series keeps taking readings.
        flood = b"".join(csv("flood/%03d" % i, 0, 1) for i in range(100))
        conn.sendall(flood + csv(good, 20, 10))
        wait_until("the flood judged", lambda: metric(
            metrics(daemon), 'plumbline_readings_rejected_total{reason="too_many_series"}') > 0)
        wait_until("the good series after the flood", lambda: daemon.readings() == 30 + 19)
        values = metrics(daemon)
        refused = metric(values, 'plumbline_readings_rejected_total{reason="too_many_series"}')
        check(refused == 81, "too_many_series: %d, expected 81" % refused)
        # The same connection still works: it was never closed.
        conn.sendall(csv(good, 30, 5))
        wait_until("readings on the same connection", lambda: daemon.readings() == 35 + 19)

    # A slow sender holds half a line while another connection gets through.
    with socket.create_connection(("127.0.0.1", daemon.tcp_port)) as slow:
        line = csv(good, 35, 1)
        slow.sendall(line[:8])
        with socket.create_connection(("127.0.0.1", daemon.tcp_port)) as fast:
            fast.sendall(csv("flood/000", 1, 5))
        wait_until("the fast sender's readings", lambda: daemon.readings() == 40 + 19)
        time.sleep(0.3)
        slow.sendall(line[8:])
        wait_until("the slow sender's reading", lambda: daemon.readings() == 41 + 19)

    # An idle connection is closed after idle_timeout (1 s) and counted.
    with socket.create_connection(("127.0.0.1", daemon.tcp_port)) as idle:
        check(server_closes(idle, 10), "idle connection not closed")
    wait_until("the idle close counted", lambda: metric(
        metrics(daemon), 'plumbline_connections_dropped_total{input="tcp",reason="idle_timeout"}')
        >= 1)

    # An acknowledged stream may not take a name the daemon gives its own inputs
    # (a followed file's), or it could move that file's durable offset; its
    # reading is not taken.
    with socket.create_connection(("127.0.0.1", daemon.tcp_port)) as spoof:
        spoof.sendall(b"ack file:2049:131:0:/var/log/readings.csv\n" + csv(good, 45, 1))
        check(server_closes(spoof, 10), "reserved stream name not refused")
    wait_until("the reserved stream name counted", lambda: metric(
        metrics(daemon),
        'plumbline_connections_dropped_total{input="tcp",reason="bad_stream_name"}') == 1)

    # HTTP: a body over max_body_bytes is 413; a malformed request 400.
    status, _, _ = request(daemon.http_port, "POST", "/v1/readings", body=csv(good, 50, 5000))
    check(status == 413, "oversized body: %d, expected 413" % status)
    with socket.create_connection(("127.0.0.1", daemon.http_port)) as raw:
        raw.sendall(b"GARBAGE / NOT-HTTP\r\n\r\n")
        raw.settimeout(10)
        answer = raw.recv(4096)
    check(answer.startswith(b"HTTP/1.1 400"), "malformed request: %r" % answer[:40])
    values = metrics(daemon)
    for code in ("413", "400"):
        counted = sum(v for k, v in values.items()
                      if k.startswith('plumbline_http_requests_total{code="%s"' % code))
        check(counted == 1, "%s counted %d times, expected once" % (code, counted))
    # Nothing above hurt the good series: every good reading was taken.
    check(daemon.readings() == 41 + 19, "readings lost")
    daemon.stop()
    print("check_hostile: hostile: %d kinds of bad line refused and counted, flood of 100 "
          "series capped at 20, idle, slow, reserved stream name, 413 and 400 handled"
          % len(expected))


def rss_kib(pid, field):
    with open("/proc/%d/status" % pid, encoding="ascii") as f:
        for line in f:
            if line.startswith(field + ":"):
                return int(line.split()[1])
    return 0


def scenario_overload(args, tmp):
    budget = 1 << 20  # the smallest allowed: a few dozen batches
    state = os.path.join(tmp, "state")
    config = os.path.join(tmp, "plumbline.yaml")
    write_config(config, state,
                 # A heavy model (about 140 coefficients, four detectors), so
                 # that the offered load is many times what one shard processes.
                 'series:\n  - match: "**"\n    seasons: [1d, 7d, 30d]\n'
                 "    harmonics: [24, 24, 24]\n    warmup: 20\n"
                 "    detectors: [cusum, page-hinkley, bocpd, ewma]\n"
                 "shards: 1\nqueue_batches: 1024\ningest_memory_bytes: %d\n" % budget)
    daemon = Daemon(args.plumbline, config, tmp)
    baseline = rss_kib(daemon.process.pid, "VmRSS")
    # Each TCP sender offers its whole stream at once; the HTTP posters keep
    # posting (a refused body is posted again) until the TCP streams are in
    # and a body has been refused (or 10 s have passed).
    tcp_lines = 60000
    streams = [csv("tcp%d/load" % k, 0, tcp_lines, step=30) for k in range(2)]
    stop = threading.Event()
    lock = threading.Lock()
    totals = {"http_taken": 0, "http_offered": 0, "http_503": 0, "retry_after": True,
              "budget_max": 0.0}

    def tcp_sender(k):
        with socket.create_connection(("127.0.0.1", daemon.tcp_port)) as s:
            s.sendall(streams[k])

    def http_poster(k):
        sent = 0
        while not stop.is_set():
            body = csv("http%d/load" % k, sent, 2000, step=30)
            status, headers, _ = request(daemon.http_port, "POST", "/v1/readings", body=body)
            with lock:
                totals["http_offered"] += 2000
                if status == 503:
                    totals["http_503"] += 1
                    totals["retry_after"] &= "Retry-After" in headers
                else:
                    check(status == 200, "POST under load: %d" % status)
                    totals["http_taken"] += 2000
            if status == 200:
                sent += 2000  # a refused body is sent again, as a client would

    def watcher():
        while not stop.is_set():
            held = metric(metrics(daemon), "plumbline_ingest_memory_bytes")
            with lock:
                totals["budget_max"] = max(totals["budget_max"], held)
            time.sleep(0.05)

    senders = [threading.Thread(target=tcp_sender, args=(k,)) for k in range(2)]
    others = [threading.Thread(target=http_poster, args=(k,)) for k in range(4)]
    others.append(threading.Thread(target=watcher))
    started = time.time()
    for t in senders + others:
        t.start()
    for t in senders:
        t.join(TIMEOUT)
    check(not any(t.is_alive() for t in senders), "TCP senders stuck")
    # The senders' streams may sit in the sockets' buffers within
    # milliseconds, before a poster has asked twice; the posters keep on
    # until one is refused (which the checks below require) or 10 s pass.
    deadline = time.time() + 10
    while time.time() < deadline:
        with lock:
            if totals["http_503"] > 0:
                break
        time.sleep(0.01)
    stop.set()
    offering = time.time() - started
    for t in others:
        t.join(TIMEOUT)
    taken = 2 * tcp_lines + totals["http_taken"]
    wait_until("every reading taken to be processed",
               lambda: metric(metrics(daemon), "plumbline_readings_accepted_total") >= taken)
    seconds = time.time() - started
    values = metrics(daemon)
    accepted = metric(values, "plumbline_readings_accepted_total")
    check(daemon.process.poll() is None, "daemon died under load")
    check(accepted == taken, "processed %d readings, %d were taken" % (accepted, taken))
    check(totals["http_503"] > 0, "no HTTP 503 under overload")
    check(totals["retry_after"], "a 503 without Retry-After")
    check(metric(values, 'plumbline_ingest_overloaded_total{input="tcp"}') > 0,
          "TCP reads never paused")
    check(totals["budget_max"] <= budget, "ingest memory %d over the budget %d" % (
        totals["budget_max"], budget))
    peak = rss_kib(daemon.process.pid, "VmHWM")
    # The bound is raised for the AddressSanitizer build, whose shadow memory
    # and quarantine of freed blocks (256 MiB by default) count in RSS.
    peak_mib = int(os.environ.get("PLUMBLINE_E2E_PEAK_RSS_MIB", "256"))
    check(peak < peak_mib * 1024, "peak RSS %d KiB, over %d MiB" % (peak, peak_mib))
    rate = accepted / seconds
    offered = 2 * tcp_lines + totals["http_offered"]
    check(offered / offering > rate, "offered no more than the shard processes")
    daemon.stop()
    print("check_hostile: overload: %d readings offered in %.1f s (%d over TCP at once, "
          "%d HTTP bodies refused 503): %.0f/s offered, %.1fx the %.0f/s processed; %d taken, "
          "all processed, in %.1f s; ingest memory peak %d of %d bytes; RSS %d KiB at start, "
          "peak %d KiB" % (
              offered, offering, 2 * tcp_lines, totals["http_503"], offered / offering,
              offered / offering / rate, rate, taken, seconds, totals["budget_max"], budget,
              baseline, peak))


def scenario_access(args, tmp):
    state = os.path.join(tmp, "state")
    config = os.path.join(tmp, "plumbline.yaml")
    write_config(config, state, 'series:\n  - match: "**"\n    seasons: []\n'
                 "access:\n  token_env: PLUMBLINE_E2E_TOKEN\n")
    os.environ["PLUMBLINE_E2E_TOKEN"] = TOKEN
    daemon = Daemon(args.plumbline, config, tmp)
    check(re.search(r"msg=ready tcp=127\.0\.0\.1:\d+ http=127\.0\.0\.1:\d+", daemon.text()),
          "listeners not on loopback by default")
    bearer = {"Authorization": "Bearer " + TOKEN}
    status, headers, _ = request(daemon.http_port, "GET", "/v1/series")
    check(status == 401 and headers.get("WWW-Authenticate") == "Bearer",
          "no token: %d, expected 401" % status)
    status, _, _ = request(daemon.http_port, "POST", "/v1/readings", body=csv("a", 0, 3),
                           headers={"Authorization": "Bearer wrong"})
    check(status == 401, "wrong token: %d, expected 401" % status)
    status, _, _ = request(daemon.http_port, "GET", "/healthz")
    check(status == 200, "/healthz needs no token: %d" % status)
    status, _, _ = request(daemon.http_port, "POST", "/v1/readings", body=csv("a", 0, 3),
                           headers=bearer)
    check(status == 200, "right token: %d" % status)

    with socket.create_connection(("127.0.0.1", daemon.tcp_port)) as s:
        s.sendall(csv("b", 0, 3))  # no token line
        check(server_closes(s, 10), "TCP without a token not closed")
    with socket.create_connection(("127.0.0.1", daemon.tcp_port)) as s:
        s.sendall(("token %s\n" % TOKEN).encode() + csv("c", 0, 4))
    values = {}

    def readings():
        nonlocal values
        values = metrics(daemon, headers=bearer)
        return metric(values, "plumbline_readings_accepted_total")
    wait_until("the authorised readings", lambda: readings() == 7)
    check(metric(values, 'plumbline_connections_dropped_total{input="tcp",'
                         'reason="unauthorized"}') == 1, "unauthorised TCP not counted")
    daemon.stop()
    check(TOKEN not in daemon.text(), "the token appears in the log")
    print("check_hostile: access: loopback by default; 401 without the bearer token; TCP "
          "without the token line closed; the token never logged")


SCENARIOS = {"hostile": scenario_hostile, "overload": scenario_overload,
             "access": scenario_access}


def main(argv):
    return run_scenario("hostile", __doc__.split("\n")[0], SCENARIOS, argv)


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
