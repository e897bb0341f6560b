#!/usr/bin/python3
"""Crash test: nothing lost, nothing twice, across SIGKILLs.

A sender streams 200,000 demo readings (the Harbourside demo, then the same
readings nine weeks later, cut at 200,000) over TCP in acknowledged mode
(daemon/tcp_listener.cc: `ack <stream>`, answered `durable <n>`), as fast as
the daemon takes them, resending from the last durable line after every
broken connection. One daemon takes them without a break; another is killed
with SIGKILL at 10 seeded moments (when the acknowledged count passes 10
seeded points) and restarted each time on the same state directory
(checkpoint every 50 ms plus write-ahead log). Both end with SIGTERM. Their
alert logs must be equal: no alert missing, none written twice.

Usage: check_crash.py --plumbline BIN --fixture DIR [--readings N] [--kills K]
"""
import argparse
import datetime
import os
import random
import re
import select
import shutil
import signal
import socket
import sys
import tempfile
import time

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from check_serve import Daemon, check, load_alerts  # noqa: E402

SEED = 20261202
CHUNK_LINES = 2000
TIMEOUT = 120


def demo_lines(fixture, count):
    """The demo's readings, then the same nine weeks later, until `count`."""
    with open(os.path.join(fixture, "readings.csv"), encoding="utf-8") as f:
        rows = [line.rstrip("\n").split(",", 2) for line in f if not line.startswith("time,")]
    shift = datetime.timedelta(weeks=9)  # whole weeks keep the weekly pattern in phase
    lines, copy = [], 0
    while len(lines) < count:
        for stamp, series, value in rows:
            if len(lines) == count:
                break
            t = datetime.datetime.strptime(stamp, "%Y-%m-%dT%H:%M:%SZ") + copy * shift
            lines.append(("%s,%s,%s\n" % (t.strftime("%Y-%m-%dT%H:%M:%SZ"), series,
                                          value)).encode())
        copy += 1
    return lines


# Few profiles: a start calibrates each profile (the demo's five take about
# 25 s on a loaded 2-core machine, 3 s for one), and this test starts the
# daemon 12 times. The alerts only need to be equal. Door openings read
# pallets shipped as a covariate, as in the demo: two shards would split them
# by name, so the join runs on the shard they share, and its observations
# pass through every checkpoint and log replay.
PROFILES = """series:
  - match: "coldstore/dock/door_openings"
    warmup: 200
    silence_after: 1d
    covariates: [coldstore/orders/pallets_shipped]
  - match: "**"
    warmup: 200
    silence_after: 1d
"""


def write_config(path, state):
    with open(path, "w", encoding="utf-8") as f:
        f.write(PROFILES)
        f.write("listeners:\n  tcp: {port: 0}\n  http: {port: 0}\n")
        f.write("shards: 2\n")
        # Checkpoints often, so that even a daemon killed soon after its start
        # has restored one, and kills fall between them (the log's tail matters).
        f.write("storage:\n  directory: %s\n  checkpoint_every: 50ms\n" % state)
        f.write("shutdown_timeout: 60s\n")
        f.write("sinks:\n  stdout: false\n")


class Sender:
    """One acknowledged stream; reconnects and resends from the durable count."""

    def __init__(self, lines, stream):
        self.lines = lines
        self.stream = stream
        self.acked = 0
        self.sock = None
        self.pending = b""
        self.resends = 0

    def connect(self, port):
        self.close()
        self.sock = socket.create_connection(("127.0.0.1", port), timeout=TIMEOUT)
        self.sock.sendall(("ack %s\n" % self.stream).encode())
        self.pending = b""
        durable = self.read_ack(block=True)
        check(durable is not None, "no durable count after the ack line")
        if durable < self.acked:
            raise AssertionError("durable count went back: %d < %d" % (durable, self.acked))
        self.acked = durable
        return durable

    def close(self):
        if self.sock:
            self.sock.close()
            self.sock = None

    def read_ack(self, block):
        """Reads what acknowledgements have come; the latest count or None."""
        latest = None
        while True:
            ready, _, _ = select.select([self.sock], [], [], TIMEOUT if block else 0)
            if not ready:
                check(not block, "no acknowledgement in %d s" % TIMEOUT)
                return latest
            data = self.sock.recv(65536)
            if not data:
                raise ConnectionResetError("closed")
            self.pending += data
            while b"\n" in self.pending:
                line, self.pending = self.pending.split(b"\n", 1)
                match = re.fullmatch(rb"durable (\d+)", line)
                check(match, "bad acknowledgement line %r" % line)
                latest = int(match.group(1))
                self.acked = max(self.acked, latest)
            if latest is not None and (not block or b"\n" not in self.pending):
                return latest

    def run(self, port_of, kill_at, restart):
        """Streams everything; calls restart() when acked passes each kill point."""
        kills = list(kill_at)
        start = self.connect(port_of())
        sent = start
        while self.acked < len(self.lines) or kills:
            try:
                if kills and self.acked >= kills[0]:
                    kills.pop(0)
                    restart()
                    raise ConnectionResetError("killed")
                if sent < len(self.lines):
                    end = min(sent + CHUNK_LINES, len(self.lines))
                    self.sock.sendall(b"".join(self.lines[sent:end]))
                    sent = end
                    self.read_ack(block=False)
                else:
                    self.read_ack(block=True)
            except (ConnectionError, BrokenPipeError, OSError) as error:
                if isinstance(error, socket.timeout):
                    raise
                while True:
                    try:
                        durable = self.connect(port_of())
                        break
                    except (ConnectionError, OSError):
                        time.sleep(0.05)
                self.resends += sent - durable
                sent = durable
        self.close()


def run_daemon(args, tmp, name, lines, kill_at):
    state = os.path.join(tmp, name)
    config = os.path.join(tmp, name + ".yaml")
    write_config(config, state)
    daemons = [Daemon(args.plumbline, config, tmp, "%s0" % name)]

    def restart():
        daemons[-1].process.send_signal(signal.SIGKILL)
        daemons[-1].process.wait(timeout=TIMEOUT)
        daemons[-1].log.close()
        daemons.append(Daemon(args.plumbline, config, tmp, "%s%d" % (name, len(daemons))))

    sender = Sender(lines, "harbourside-feed")
    began = time.time()
    sender.run(lambda: daemons[-1].tcp_port, kill_at, restart)
    daemons[-1].stop()
    seconds = time.time() - began
    restored = sum(len(re.findall(r'msg="checkpoint restored"', d.text())) for d in daemons)
    replayed = sum(int(n) for d in daemons
                   for n in re.findall(r'msg="write-ahead log replayed" records=\d+ readings=(\d+)',
                                       d.text()))
    return (load_alerts(os.path.join(state, "alerts.jsonl")), len(daemons) - 1, restored,
            replayed, sender.resends, seconds)


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--plumbline", required=True)
    parser.add_argument("--fixture", required=True)
    parser.add_argument("--readings", type=int, default=200000)
    parser.add_argument("--kills", type=int, default=10)
    args = parser.parse_args()
    tmp = tempfile.mkdtemp(prefix="plumbline-crash-")
    try:
        lines = demo_lines(args.fixture, args.readings)
        rng = random.Random(SEED)
        kill_at = sorted(rng.sample(range(args.readings // 50, args.readings * 49 // 50),
                                    args.kills))
        expected, _, _, _, _, plain_seconds = run_daemon(args, tmp, "plain", lines, [])
        got, kills, restored, replayed, resends, seconds = run_daemon(args, tmp, "killed",
                                                                      lines, kill_at)
        check(kills == args.kills, "%d kills, expected %d" % (kills, args.kills))
        ids = [a["id"] for a in got]
        want = [a["id"] for a in expected]
        check(want, "the uninterrupted run raised no alert")
        check(len(ids) == len(set(ids)),
              "alerts written twice: %s" % sorted({i for i in ids if ids.count(i) > 1}))
        check(sorted(ids) == sorted(want),
              "alerts differ: missing %s, extra %s" % (sorted(set(want) - set(ids)),
                                                       sorted(set(ids) - set(want))))
        print("check_crash: %d readings, %d SIGKILLs at acknowledged counts %s; %d restores, "
              "%d readings replayed from the log, %d lines resent; %d alerts equal to the "
              "uninterrupted run's, none twice (%.1f s killed vs %.1f s plain)" % (
                  args.readings, kills, kill_at, restored, replayed, resends, len(ids),
                  seconds, plain_seconds))
    finally:
        if not os.environ.get("PLUMBLINE_KEEP_TMP"):
            shutil.rmtree(tmp, ignore_errors=True)
        else:
            print("kept", tmp)


if __name__ == "__main__":
    main()
