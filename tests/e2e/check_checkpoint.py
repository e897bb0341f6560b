#!/usr/bin/python3
"""plumbline serve keeps series state across a restart (daemon/checkpoint.h).

The demo is fed over TCP to one daemon without a break, and to another in two
halves with a SIGTERM and a restart between them (a checkpoint at shutdown,
restored at start): both alert logs must hold the same alerts, each once.
Then the newest checkpoint generation is corrupted (one byte flipped): the
daemon reports it and restores the older one. Then both files are marked with
another format version: the daemon refuses to start and names both versions.

Usage: check_checkpoint.py --plumbline BIN --fixture DIR
"""
import argparse
import os
import re
import shutil
import subprocess
import sys
import tempfile

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from check_serve import (Daemon, check, load_alerts, profiles_text,  # noqa: E402
                         read_bytes, split_lines, write_config)


def alert_ids(path):
    return [a["id"] for a in load_alerts(path)]


def newest_checkpoint(state):
    best = None
    for slot in (0, 1):
        path = os.path.join(state, "checkpoint-%d.plc" % slot)
        if os.path.exists(path):
            generation = int.from_bytes(read_bytes(path)[16:24], "little")
            if best is None or generation > best[0]:
                best = (generation, path)
    check(best is not None, "no checkpoint file in " + state)
    return best


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--plumbline", required=True)
    parser.add_argument("--fixture", required=True)
    args = parser.parse_args()
    tmp = tempfile.mkdtemp(prefix="plumbline-checkpoint-")
    try:
        profiles = profiles_text(os.path.join(args.fixture, "plumbline.yaml"))
        data = read_bytes(os.path.join(args.fixture, "readings.csv"))
        total = len([line for line in data.splitlines() if line and not line.startswith(b"time")])
        first, second = split_lines(data, 2)

        # Without a break.
        state_a = os.path.join(tmp, "a")
        config_a = os.path.join(tmp, "a.yaml")
        write_config(config_a, profiles, state_a)
        daemon = Daemon(args.plumbline, config_a, tmp, "a")
        daemon.send_tcp(data)
        daemon.wait_readings(total)
        daemon.stop()
        expected = alert_ids(os.path.join(state_a, "alerts.jsonl"))
        check(expected, "the uninterrupted run raised no alert")

        # In two halves, restarted between them.
        state_b = os.path.join(tmp, "b")
        config_b = os.path.join(tmp, "b.yaml")
        write_config(config_b, profiles, state_b)
        daemon = Daemon(args.plumbline, config_b, tmp, "b1")
        daemon.send_tcp(first)
        first_count = len([line for line in first.splitlines() if not line.startswith(b"time")])
        daemon.wait_readings(first_count)
        daemon.stop()
        check("msg=\"checkpoint saved\"" in daemon.text(), "no checkpoint at shutdown:\n" +
              daemon.text()[-2000:])
        daemon = Daemon(args.plumbline, config_b, tmp, "b2")
        restored = re.search(r'msg="checkpoint restored".* series=(\d+) kept=(\d+)',
                             daemon.text())
        check(restored, "no checkpoint restored:\n" + daemon.text()[-2000:])
        check(restored.group(1) == restored.group(2), "not every series kept: " +
              restored.group(0))
        daemon.send_tcp(second)
        daemon.wait_readings(total)  # counts carry over
        daemon.stop()
        got = alert_ids(os.path.join(state_b, "alerts.jsonl"))
        check(len(got) == len(set(got)), "an alert was written twice")
        check(sorted(got) == sorted(expected),
              "alerts differ: missing %s, extra %s" % (sorted(set(expected) - set(got)),
                                                       sorted(set(got) - set(expected))))
        print("check_checkpoint: %d alerts equal across a restart at reading %d of %d" % (
            len(got), first_count, total))

        # A corrupted newest generation: the older one is used.
        generation, path = newest_checkpoint(state_b)
        blob = bytearray(read_bytes(path))
        blob[len(blob) // 2] ^= 0x40
        with open(path, "wb") as f:
            f.write(blob)
        daemon = Daemon(args.plumbline, config_b, tmp, "b3")
        text = daemon.text()
        check("checkpoint skipped" in text and "checksum mismatch" in text,
              "corruption not reported:\n" + text[-2000:])
        check(re.search(r'msg="checkpoint restored" generation=%d ' % (generation - 1), text),
              "older generation not restored:\n" + text[-2000:])
        daemon.stop()

        # Another format version: refused with a clear message, files untouched.
        for slot in (0, 1):
            path = os.path.join(state_b, "checkpoint-%d.plc" % slot)
            blob = bytearray(read_bytes(path))
            blob[8:12] = (99).to_bytes(4, "little")
            with open(path, "wb") as f:
                f.write(blob)
        before = [read_bytes(os.path.join(state_b, "checkpoint-%d.plc" % s)) for s in (0, 1)]
        result = subprocess.run([args.plumbline, "serve", "--config", config_b],
                                capture_output=True, text=True, timeout=60)
        check(result.returncode != 0, "started on a checkpoint of another version")
        check("checkpoint format version 99; this build reads 1 to 2" in result.stderr,
              "unclear refusal:\n" + result.stderr[-2000:])
        after = [read_bytes(os.path.join(state_b, "checkpoint-%d.plc" % s)) for s in (0, 1)]
        check(before == after, "a refused checkpoint was overwritten")
        print("check_checkpoint: corrupted generation skipped; version 99 refused")
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    main()
