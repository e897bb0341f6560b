#!/usr/bin/python3
"""A followed file across SIGKILLs: no line taken twice, none lost.

The daemon follows a reading file (inputs.files) that the test writes in
chunks while it runs. One daemon reads it without a break; another is killed
with SIGKILL at seeded chunks (after a seeded pause, so kills land mid-read,
between checkpoints and while a checkpoint is written) and restarted on the
same state directory (checkpoint every 50 ms plus write-ahead log), while the
file keeps growing. The followed file's offset is part of the checkpoint
(daemon/file_follower.h): both runs must end with every line counted exactly
once (the series' reading counts sum to the file's lines, per series equal to
the uninterrupted run's) and the same alerts, none twice.

Then, with the daemon stopped, the file is replaced (a new file renamed over
the path): the restarted daemon reads the new file from its start, once.

Usage: check_follow_crash.py --plumbline BIN --fixture DIR [--readings N] [--kills K]
"""
import argparse
import json
import os
import random
import re
import shutil
import signal
import sys
import tempfile
import time

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from check_serve import Daemon, check, load_alerts  # noqa: E402

SEED = 20261203
CHUNK_LINES = 500
TIMEOUT = 120

PROFILES = """series:
  - match: "**"
    warmup: 200
"""


def demo_lines(fixture, count):
    """The demo's readings, cut at `count`."""
    with open(os.path.join(fixture, "readings.csv"), encoding="utf-8") as f:
        lines = [line.encode() for line in f if not line.startswith("time,")]
    check(len(lines) >= count, "the demo has only %d readings" % len(lines))
    return lines[:count]


def write_config(path, state, followed):
    with open(path, "w", encoding="utf-8") as f:
        f.write(PROFILES)
        f.write("listeners:\n  tcp: {port: 0}\n  http: {port: 0}\n")
        f.write("shards: 2\n")
        f.write("storage:\n  directory: %s\n  checkpoint_every: 50ms\n" % state)
        f.write("inputs:\n  files:\n    - {path: %s, poll_interval: 10ms}\n" % followed)
        f.write("shutdown_timeout: 60s\n")
        f.write("sinks:\n  stdout: false\n")


def per_series(daemon):
    status, data = daemon.request("GET", "/v1/series?limit=100000")
    check(status == 200, "GET /v1/series: %d %s" % (status, data[:200]))
    return {s["name"]: s["readings"] for s in json.loads(data)["series"]}


def wait_total(daemon, count):
    """Waits until the series hold `count` readings; fails on more."""
    deadline = time.time() + TIMEOUT
    while True:
        total = sum(per_series(daemon).values())
        check(total <= count, "%d readings, more than the file's %d lines: some taken twice"
              % (total, count))
        if total == count:
            return
        check(time.time() < deadline, "only %d of %d readings arrived" % (total, count))
        time.sleep(0.05)


def run(args, tmp, name, lines, kill_chunks):
    state = os.path.join(tmp, name)
    followed = os.path.join(tmp, name + ".csv")
    config = os.path.join(tmp, name + ".yaml")
    open(followed, "wb").close()
    write_config(config, state, followed)
    rng = random.Random(SEED)
    daemons = [Daemon(args.plumbline, config, tmp, "%s0" % name)]
    kills = 0
    with open(followed, "ab", buffering=0) as f:
        at, chunk = 0, 0
        while at < len(lines):
            f.write(b"".join(lines[at:at + CHUNK_LINES]))
            at += CHUNK_LINES
            time.sleep(0.01)
            if chunk in kill_chunks:
                time.sleep(rng.uniform(0.0, 0.08))
                daemons[-1].process.send_signal(signal.SIGKILL)
                daemons[-1].process.wait(timeout=TIMEOUT)
                daemons[-1].log.close()
                kills += 1
                # The file grows while the daemon is down.
                f.write(b"".join(lines[at:at + CHUNK_LINES]))
                at += CHUNK_LINES
                daemons.append(Daemon(args.plumbline, config, tmp, "%s%d" % (name, kills)))
            chunk += 1
    return state, followed, config, daemons, kills


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--plumbline", required=True)
    parser.add_argument("--fixture", required=True)
    parser.add_argument("--readings", type=int, default=40000)
    parser.add_argument("--kills", type=int, default=6)
    args = parser.parse_args()
    tmp = tempfile.mkdtemp(prefix="plumbline-follow-crash-")
    try:
        lines = demo_lines(args.fixture, args.readings)
        chunks = (len(lines) + CHUNK_LINES - 1) // CHUNK_LINES
        # Each kill writes one chunk more while the daemon is down.
        kill_chunks = set(random.Random(SEED).sample(range(1, chunks - args.kills - 1),
                                                     args.kills))

        # Without a break (the same writing, no kills).
        _, _, _, plain, _ = run(args, tmp, "plain", lines, set())
        wait_total(plain[-1], len(lines))
        want_counts = per_series(plain[-1])
        plain[-1].stop()
        want = [a["id"] for a in load_alerts(os.path.join(tmp, "plain", "alerts.jsonl"))]
        check(want, "the uninterrupted run raised no alert")

        # Killed and restarted while the file grows.
        state, followed, config, daemons, kills = run(args, tmp, "killed", lines, kill_chunks)
        check(kills == args.kills, "%d kills, expected %d" % (kills, args.kills))
        wait_total(daemons[-1], len(lines))
        got_counts = per_series(daemons[-1])
        check(got_counts == want_counts, "readings per series differ: %s vs %s" % (
            got_counts, want_counts))
        daemons[-1].stop()
        texts = [d.text() for d in daemons]
        restored = sum(len(re.findall(r'msg="checkpoint restored"', t)) for t in texts)
        resumed = sum(len(re.findall(r'msg="following file".*from="checkpointed offset"', t))
                      for t in texts)
        replayed = sum(int(n) for t in texts for n in re.findall(
            r'msg="write-ahead log replayed" records=\d+ readings=(\d+)', t))
        check(resumed >= 1, "no restart resumed the file at a checkpointed offset")
        ids = [a["id"] for a in load_alerts(os.path.join(state, "alerts.jsonl"))]
        check(len(ids) == len(set(ids)),
              "alerts written twice: %s" % sorted({i for i in ids if ids.count(i) > 1}))
        check(sorted(ids) == sorted(want),
              "alerts differ: missing %s, extra %s" % (sorted(set(want) - set(ids)),
                                                       sorted(set(ids) - set(want))))

        # Replaced while stopped: the new file is read from its start, once.
        extra = demo_lines(args.fixture, args.readings + 3000)[args.readings:]
        replacement = followed + ".new"
        with open(replacement, "wb") as f:
            f.write(b"".join(extra))
        os.rename(replacement, followed)
        daemon = Daemon(args.plumbline, config, tmp, "replaced")
        wait_total(daemon, len(lines) + len(extra))
        daemon.stop()
        check(re.search(r'msg="following file".* offset=0 ', daemon.text()),
              "the replaced file was not read from its start:\n" + daemon.text()[-2000:])

        print("check_follow_crash: %d lines written in chunks of %d while followed, %d "
              "SIGKILLs; %d restores, %d resumed at a checkpointed offset, %d readings "
              "replayed from the log; every line counted once (per series equal to the "
              "uninterrupted run), %d alerts equal to it, none twice; a file replaced while "
              "stopped read from its start (%d lines)" % (
                  len(lines), CHUNK_LINES, kills, restored, resumed, replayed, len(ids),
                  len(extra)))
    finally:
        if not os.environ.get("PLUMBLINE_KEEP_TMP"):
            shutil.rmtree(tmp, ignore_errors=True)
        else:
            print("kept", tmp)


if __name__ == "__main__":
    main()
