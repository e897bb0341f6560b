#!/usr/bin/env python3
"""Replays a fixture from one file and from one file per series, and requires
byte-identical alerts: `plumbline replay` merges several inputs by reading time
(DESIGN.md, Command line). Standard library only.

usage: check_merge.py --plumbline BIN --fixture DIR
"""

import argparse
import json
import os
import subprocess
import sys
import tempfile


def replay(plumbline, config, inputs, alerts):
    command = [plumbline, "replay", "--config", config, "--alerts", alerts, "--quiet"]
    for path in inputs:
        command += ["--input", path]
    result = subprocess.run(command, capture_output=True, text=True, timeout=600)
    if result.returncode != 0:
        print("check_merge: replay failed (%d): %s" % (result.returncode, result.stderr[-2000:]))
        sys.exit(1)
    with open(alerts, "rb") as f:
        return f.read()


def main(argv):
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--plumbline", required=True)
    parser.add_argument("--fixture", required=True)
    args = parser.parse_args(argv)
    with open(os.path.join(args.fixture, "expect.json"), encoding="utf-8") as f:
        spec = json.load(f)
    config = os.path.join(args.fixture, spec["config"])
    inputs = [os.path.join(args.fixture, name) for name in spec["inputs"]]
    with tempfile.TemporaryDirectory(prefix="plumbline-merge-") as tmp:
        whole = replay(args.plumbline, config, inputs, os.path.join(tmp, "whole.jsonl"))
        # One file per series, each keeping the header and its lines' order.
        parts = {}
        for path in inputs:
            with open(path, encoding="utf-8") as f:
                for line in f:
                    if line.startswith("time,series,value"):
                        continue
                    series = line.split(",")[1]
                    parts.setdefault(series, []).append(line)
        split_inputs = []
        for i, (series, lines) in enumerate(sorted(parts.items())):
            path = os.path.join(tmp, "part%d.csv" % i)
            with open(path, "w", encoding="utf-8") as f:
                f.write("time,series,value\n")
                f.writelines(lines)
            split_inputs.append(path)
        split = replay(args.plumbline, config, split_inputs, os.path.join(tmp, "split.jsonl"))
    same = whole == split
    print("check_merge: %s: %d series in %d files; alerts %s (%d bytes vs %d)" % (
        spec["fixture"], len(split_inputs), len(split_inputs),
        "byte-identical" if same else "DIFFER", len(whole), len(split)))
    print("check_merge: %d passed, %d failed" % (1 if same else 0, 0 if same else 1))
    return 0 if same else 1


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
