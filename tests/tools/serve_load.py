#!/usr/bin/env python3
"""Measures `plumbline serve` under load (a measurement, not a test): the demo
fixture copied for SITES sites (series renamed site-NN/coldstore/...), each
site sent over its own TCP connection in time order, as fast as the daemon
takes it. Prints sustained ingest throughput (readings/s from the first byte
sent until every reading is accepted), the daemon's peak resident memory, and
the time SIGTERM takes. Standard library only.

usage: serve_load.py --plumbline BIN --fixture replay-fixtures/harbourside
                     [--sites 20] [--shards 2]
"""

import argparse
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
import urllib.request


def main(argv):
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--plumbline", required=True)
    parser.add_argument("--fixture", required=True)
    parser.add_argument("--sites", type=int, default=20)
    parser.add_argument("--shards", type=int, default=2)
    args = parser.parse_args(argv)

    with open(os.path.join(args.fixture, "plumbline.yaml"), encoding="utf-8") as f:
        profiles = "".join(l for l in f if not l.lstrip().startswith("#"))
    profiles = profiles.replace('match: "coldstore/', 'match: "*/coldstore/')
    with open(os.path.join(args.fixture, "readings.csv"), "rb") as f:
        lines = [l for l in f.read().splitlines(keepends=True) if not l.startswith(b"time,")]
    payloads = []
    for site in range(args.sites):
        prefix = b"site-%02d/" % site
        payloads.append(b"".join(l.replace(b",coldstore/", b"," + prefix + b"coldstore/", 1)
                                 for l in lines))
    total = len(lines) * args.sites

    tmp = tempfile.mkdtemp(prefix="plumbline-load-")
    config = os.path.join(tmp, "load.yaml")
    with open(config, "w", encoding="utf-8") as f:
        f.write(profiles)
        f.write("listeners:\n  tcp: {port: 0}\n  http: {port: 0}\n")
        f.write("shards: %d\nstorage:\n  directory: %s\nsinks:\n  stdout: false\n" % (
            args.shards, os.path.join(tmp, "state")))
    log = open(os.path.join(tmp, "serve.log"), "w+", encoding="utf-8")
    daemon = subprocess.Popen([args.plumbline, "serve", "--config", config],
                              stdout=subprocess.DEVNULL, stderr=log)
    while True:
        log.seek(0)
        match = re.search(r"msg=ready tcp=[\d.]+:(\d+) http=[\d.]+:(\d+)", log.read())
        if match:
            tcp_port, http_port = int(match.group(1)), int(match.group(2))
            break
        if daemon.poll() is not None:
            sys.exit("daemon exited at start")
        time.sleep(0.05)

    def accepted():
        with urllib.request.urlopen("http://127.0.0.1:%d/metrics" % http_port) as r:
            text = r.read().decode()
        m = re.search(r"^plumbline_readings_accepted_total (\S+)$", text, re.M)
        return int(float(m.group(1))) if m else 0

    peak_kib = [0]

    def watch_memory():
        while daemon.poll() is None:
            try:
                with open("/proc/%d/status" % daemon.pid) as f:
                    rss = int(re.search(r"VmRSS:\s+(\d+)", f.read()).group(1))
                peak_kib[0] = max(peak_kib[0], rss)
            except (OSError, AttributeError):
                pass
            time.sleep(0.05)

    threading.Thread(target=watch_memory, daemon=True).start()
    started = time.time()
    senders = []
    for payload in payloads:
        def send(data=payload):
            with socket.create_connection(("127.0.0.1", tcp_port)) as s:
                s.sendall(data)
        senders.append(threading.Thread(target=send))
        senders[-1].start()
    while accepted() < total:
        time.sleep(0.05)
    seconds = time.time() - started
    for sender in senders:
        sender.join()
    stop_started = time.time()
    daemon.send_signal(signal.SIGTERM)
    code = daemon.wait()
    stop_seconds = time.time() - stop_started
    log.seek(0)
    alerts = sum(1 for _ in open(os.path.join(tmp, "state", "alerts.jsonl")))
    print("serve_load: %d sites x %d readings = %d readings over %d connections, %d shards" % (
        args.sites, len(lines), total, args.sites, args.shards))
    print("serve_load: ingest %.2f s -> %.0f readings/s sustained" % (seconds, total / seconds))
    print("serve_load: peak RSS %.1f MiB; %d alerts; SIGTERM to exit %.2f s (status %d)" % (
        peak_kib[0] / 1024, alerts, stop_seconds, code))
    shutil.rmtree(tmp, ignore_errors=True)
    return 0 if code == 0 else 1


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
