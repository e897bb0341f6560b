#!/usr/bin/python3
"""Replays many realisations of the Harbourside Cold Store demo and tallies the outcomes.

The committed fixture (replay-fixtures/harbourside) is one draw of a random story:
whether a detector fires on one Tuesday's noise is luck as much as method. This
regenerates the same scripted story with other seeds (generate.py --seed), checks each
against its own expect.json with tests/e2e/check_fixture.py, and prints how often each
expected entry passed and how many unexplained alerts each series raised, by kind.

  /usr/bin/python3 tests/tools/harbourside_seeds.py --plumbline build/daemon/plumbline \\
      --seeds 20

Synthetic data, invented for the demo (replay-fixtures/harbourside/SOURCE.md). Not part
of the default test run; a few seconds a seed.
"""
import argparse
import collections
import json
import os
import re
import shutil
import subprocess
import sys
import tempfile

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.dirname(os.path.dirname(HERE))
FIXTURE = os.path.join(ROOT, "replay-fixtures", "harbourside")
CHECK = os.path.join(ROOT, "tests", "e2e", "check_fixture.py")
ALERT = re.compile(r"detected_at (\S+)\s+change_at (\S+)\s+(\w+) (\w+)\s+(\S+)")


def one_seed(plumbline, seed, work):
    folder = os.path.join(work, f"seed-{seed}")
    os.makedirs(folder)
    subprocess.run([sys.executable, os.path.join(FIXTURE, "generate.py"), "--out", folder,
                    "--seed", str(seed)], check=True, stdout=subprocess.DEVNULL)
    shutil.copy(os.path.join(FIXTURE, "plumbline.yaml"), folder)
    report = os.path.join(folder, "report.json")
    subprocess.run([sys.executable, CHECK, "--plumbline", plumbline, "--fixture", folder,
                    "--report", report], stdout=subprocess.DEVNULL)
    with open(report) as f:
        verdict = json.load(f)
    shutil.rmtree(folder)
    return verdict


def main():
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--plumbline", required=True)
    parser.add_argument("--seeds", type=int, default=20, help="how many realisations")
    parser.add_argument("--first", type=int, default=1, help="the first seed")
    parser.add_argument("--seed-list", help="comma-separated seeds instead of --first/--seeds")
    parser.add_argument("--require", action="append", default=[],
                        help="an expected entry (say door-openings-steady) that must pass in "
                             "every realisation, else exit 1 (repeatable; a regression test)")
    args = parser.parse_args()
    seeds = ([int(x) for x in args.seed_list.split(",")] if args.seed_list
             else list(range(args.first, args.first + args.seeds)))
    failed_required = []

    entries = collections.Counter()
    unmatched = collections.Counter()
    clean = 0
    with tempfile.TemporaryDirectory(prefix="plumbline-seeds-") as work:
        for seed in seeds:
            verdict = one_seed(os.path.abspath(args.plumbline), seed, work)
            extra = []
            missed = []
            for check in verdict["checks"]:
                name = check["check"].split(":")[0]
                if check["passed"]:
                    entries[name] += 1
                else:
                    if name != "unmatched alerts forbidden":
                        missed.append(name)
                    if name in args.require:
                        failed_required.append(f"seed {seed}: {name}")
                if name == "unmatched alerts forbidden":
                    for line in check["details"]:
                        m = ALERT.search(line)
                        if m:
                            extra.append(f"{m.group(5).split('/')[1]} {m.group(3)} {m.group(4)}")
            unmatched.update(extra)
            clean += verdict["failed"] == 0
            print(f"seed {seed}: {verdict['passed']} passed, {verdict['failed']} failed"
                  + (f"; missed: {', '.join(missed)}" if missed else "")
                  + (f"; unexplained: {', '.join(extra)}" if extra else ""), flush=True)
    n = len(seeds)
    print(f"\n{clean} of {n} realisations pass every check")
    print("passed, by check:")
    for name, count in sorted(entries.items()):
        print(f"  {count:3d}/{n}  {name}")
    print(f"unexplained alerts after warmup ({sum(unmatched.values())} in {n} realisations):")
    for what, count in unmatched.most_common():
        print(f"  {count:3d}  {what}")
    if args.require:
        for line in failed_required:
            print(f"required entry failed: {line}")
        print(f"required ({', '.join(args.require)}): "
              + ("FAILED" if failed_required else f"passed in all {n} realisations"))
    return 1 if failed_required else 0


if __name__ == "__main__":
    sys.exit(main())
