#!/usr/bin/python3
"""Tabulates a `plumbline replay --trace` CSV by phase: does z have unit spread everywhere?

The detectors assume z = residual / expected spread is near N(0, 1) at every phase of
the season. This groups a trace's armed observations by their phase in a period of
your choosing (say the 6-hour defrost cycle, or a day) and, for each stretch of time
given, prints per phase bin: the observations, the spread the profile expected (the
root mean square of phase_sigma), the spread it got (the root mean square of
z * phase_sigma), their ratio squared (mean z^2 over the bin, 1 when the profile is
right) and the lag-1 correlation of z over the whole stretch. A bin where z^2 sits
far from 1 for days is where a variance or level detector is miscalibrated.

  build/daemon/plumbline replay --config C --input R --alerts A --quiet \\
      --trace coldstore/compressor-2/power_kw --trace-to /tmp/compressor.csv
  /usr/bin/python3 tests/tools/trace_phases.py /tmp/compressor.csv --period 6h --bins 12 \\
      --window 2026-04-02 2026-04-15 --window 2026-04-16T12 2026-04-23

Times in the trace are UTC; phases are counted from the Unix epoch (a day's bins
start at midnight UTC). Windows compare as text against the trace's RFC 3339 times,
so a date alone means its midnight. A diagnostic, not part of the test run.
"""
import argparse
import calendar
import csv
import math
import re
import sys
import time

UNITS = {"s": 1, "m": 60, "h": 3600, "d": 86400}


def seconds(text):
    match = re.fullmatch(r"(\d+(?:\.\d+)?)([smhd])", text)
    if not match:
        raise argparse.ArgumentTypeError("a duration such as 30m, 6h or 1d: " + text)
    return float(match.group(1)) * UNITS[match.group(2)]


def epoch(stamp):
    whole = stamp[:19]
    fraction = float("0" + stamp[19:].rstrip("Z")) if stamp[19:20] == "." else 0.0
    return calendar.timegm(time.strptime(whole, "%Y-%m-%dT%H:%M:%S")) + fraction


def lag1(values):
    if len(values) < 3:
        return float("nan")
    mean = sum(values) / len(values)
    d = [v - mean for v in values]
    den = sum(x * x for x in d)
    return sum(a * b for a, b in zip(d, d[1:])) / den if den > 0 else float("nan")


def main(argv):
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("trace")
    parser.add_argument("--period", type=seconds, default=86400.0, help="default 1d")
    parser.add_argument("--bins", type=int, default=24, help="phase bins a period")
    parser.add_argument("--window", nargs=2, action="append", metavar=("FROM", "TO"),
                        help="a stretch of time, FROM inclusive, TO exclusive (repeatable; "
                             "default: the whole trace)")
    args = parser.parse_args(argv)
    if args.bins < 1:
        parser.error("--bins must be at least 1")
    with open(args.trace, encoding="utf-8") as f:
        rows = [r for r in csv.DictReader(f) if r["armed"] == "1"]
    if rows and "phase_sigma" not in rows[0]:
        parser.error("the trace has no phase_sigma column (made by an older plumbline)")
    windows = args.window or [("", "~")]
    width = args.period / args.bins
    for lo, hi in windows:
        picked = [r for r in rows if lo <= r["time"] < hi]
        print("%s .. %s: %d armed observations, lag-1 correlation of z %.3f" %
              (lo or "start", hi if hi != "~" else "end", len(picked),
               lag1([float(r["z"]) for r in picked])))
        if not picked:
            continue
        sums = [[0, 0.0, 0.0] for _ in range(args.bins)]  # n, sum sigma^2, sum a^2
        for r in picked:
            b = min(int((epoch(r["time"]) % args.period) / width), args.bins - 1)
            s, z = float(r["phase_sigma"]), float(r["z"])
            sums[b][0] += 1
            sums[b][1] += s * s
            sums[b][2] += (z * s) ** 2
        print("  %-10s %6s %10s %10s %7s" % ("phase", "n", "expected", "got", "z^2"))
        for b, (n, s2, a2) in enumerate(sums):
            if n == 0:
                continue
            start = b * width
            label = "+%dh%02dm" % (start // 3600, (start % 3600) // 60)
            print("  %-10s %6d %10.4g %10.4g %7.2f" %
                  (label, n, math.sqrt(s2 / n), math.sqrt(a2 / n), a2 / s2 if s2 > 0 else
                   float("nan")))
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
