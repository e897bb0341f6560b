#!/usr/bin/env python3
"""`plumbline replay --threads N` must write the same alerts and events, in the
same order, and the same summary counts as one thread (DESIGN.md, Command line:
same input, same alerts). Checked on a fixture (covariates: a series and what it
reads stay on one engine) and on a synthetic file built to reach every merge
rule: level shifts; a whole plant falling silent at once, so that silences of
series on different engines come due at the same reading; readings refused
(late, not finite, no profile); and a profile with lateness, whose held
readings the final flush releases on every engine. Standard library only;
invented data (synthetic test).

usage: check_threads.py --plumbline BIN --fixture DIR
"""

import argparse
import json
import os
import random
import re
import subprocess
import sys
import tempfile

START = 1_767_225_600  # 2026-01-01T00:00:00Z
SERIES = 40
STEP = 60  # seconds


def write_synthetic(folder):
    rng = random.Random(20261203)
    config = os.path.join(folder, "plumbline.yaml")
    with open(config, "w", encoding="utf-8") as f:
        f.write(
            "series:\n"
            '  - match: "plant/held/*"\n'
            "    kind: gauge\n"
            "    seasons: [1h]\n"
            "    warmup: 60\n"
            "    arl0: 2000\n"
            "    lateness: 10m\n"
            "    silence_after: 20m\n"
            '  - match: "plant/**"\n'
            "    kind: gauge\n"
            "    seasons: [1h]\n"
            "    warmup: 60\n"
            "    arl0: 2000\n"
            "    silence_after: 20m\n"
        )
    rows = []
    for k in range(SERIES):
        name = "plant/%s/s%02d" % ("held" if k % 5 == 0 else "line", k)
        shift_at = rng.randrange(300, 900)
        level = rng.uniform(10, 50)
        for i in range(1200):
            # Every series stops at reading 1000 for an hour (the whole plant's
            # collector is down), so their silences fall due together.
            if 1000 <= i < 1060:
                continue
            t = START + i * STEP + rng.randrange(0, 20)
            value = level + 2.0 * ((i % 60) / 60.0) + rng.gauss(0, 1)
            if i >= shift_at:
                value += 4.0
            rows.append((t, name, "%.4f" % value))
        rows.append((START + 500 * STEP + 30, name, "nan"))  # not finite
    rows.append((START + 100 * STEP, "elsewhere/x", "1.0"))  # no profile
    rows.sort(key=lambda r: (r[0], r[1]))
    # A late reading (behind its series' newest by more than no lateness at all).
    rows.append((START + 2 * STEP, "plant/line/s01", "20.0"))
    readings = os.path.join(folder, "readings.csv")
    with open(readings, "w", encoding="utf-8") as f:
        f.write("time,series,value\n")
        for t, name, value in rows:
            f.write("%d,%s,%s\n" % (t, name, value))
        f.write("not a line\n")  # rejected by the parser
    return config, [readings]


def replay(plumbline, config, inputs, folder, threads):
    alerts = os.path.join(folder, "alerts-%d.jsonl" % threads)
    events = os.path.join(folder, "events-%d.jsonl" % threads)
    command = [plumbline, "replay", "--config", config, "--alerts", alerts,
               "--events", events, "--quiet", "--threads", str(threads)]
    for path in inputs:
        command += ["--input", path]
    result = subprocess.run(command, capture_output=True, text=True, timeout=600)
    if result.returncode != 0:
        print("check_threads: replay --threads %d failed (%d): %s" % (
            threads, result.returncode, result.stderr[-2000:]))
        sys.exit(1)
    # The summary's counts (not its timing, nor the first-errors list, whose
    # order of bad lines and refusals may differ).
    counts = [line for line in result.stderr.splitlines()
              if re.match(r"\s+(readings|alerts|events|rejected)\s", line)]
    with open(alerts, "rb") as f, open(events, "rb") as g:
        return f.read(), g.read(), counts


def compare(label, plumbline, config, inputs, folder, want_silences):
    one = replay(plumbline, config, inputs, folder, 1)
    failures = 0
    events = [json.loads(line) for line in one[1].decode().splitlines()]
    kinds = {}
    for e in events:
        kinds[(e["event"], e["kind"])] = kinds.get((e["event"], e["kind"]), 0) + 1
    print("check_threads: %s, one thread: %d events %s; %s" % (
        label, len(events), sorted(kinds.items()), "; ".join(s.strip() for s in one[2])))
    if want_silences:
        silences = sum(n for (event, kind), n in kinds.items()
                       if event == "alert" and kind == "silence")
        level = sum(n for (event, kind), n in kinds.items()
                    if event == "alert" and kind == "level")
        if silences < SERIES or level == 0:
            print("check_threads: FAIL: the synthetic file should raise a silence on every "
                  "series and some level alerts (%d, %d)" % (silences, level))
            failures += 1
    for threads in (2, 3):
        other = replay(plumbline, config, inputs, folder, threads)
        for what, a, b in (("alerts", one[0], other[0]), ("events", one[1], other[1]),
                           ("summary counts", one[2], other[2])):
            same = a == b
            print("check_threads: %s, --threads %d: %s %s" % (
                label, threads, what, "identical" if same else "DIFFER"))
            failures += not same
    return failures


def main(argv):
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--plumbline", required=True)
    parser.add_argument("--fixture", required=True)
    args = parser.parse_args(argv)
    with open(os.path.join(args.fixture, "expect.json"), encoding="utf-8") as f:
        spec = json.load(f)
    failures = 0
    with tempfile.TemporaryDirectory(prefix="plumbline-threads-") as tmp:
        failures += compare(spec["fixture"], args.plumbline,
                            os.path.join(args.fixture, spec["config"]),
                            [os.path.join(args.fixture, name) for name in spec["inputs"]],
                            tmp, want_silences=False)
        config, inputs = write_synthetic(tmp)
        failures += compare("synthetic plant", args.plumbline, config, inputs, tmp,
                            want_silences=True)
    return 1 if failures else 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
