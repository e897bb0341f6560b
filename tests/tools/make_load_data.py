#!/usr/bin/python3
"""Writes seeded synthetic readings for throughput measurements (not a test):
SERIES series named load/sNNNNN, one reading every SPACING seconds each
(jittered), in time order, as CSV `time,series,value` with epoch-second times.
Each series has a daily and a weekly season and Gaussian noise; with --shifts F
a fraction F of the series steps up by --shift noise sd at a seeded reading
in the second half. Invented data. Also writes a config with the default
profile (seasons [1d, 7d], cusum + page-hinkley) or, with --bocpd, bocpd added.

usage: make_load_data.py --readings 10000000 --series 10000 --output DIR
                         [--spacing 60] [--shifts 0.01] [--bocpd] [--seed 1]
Writes DIR/readings.csv and DIR/plumbline.yaml.
"""

import argparse
import os

import numpy as np

START = 1_772_323_200  # 2026-03-01T00:00:00Z
CHUNK = 200_000  # readings formatted at a time


def main():
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--readings", type=int, required=True)
    parser.add_argument("--series", type=int, required=True)
    parser.add_argument("--output", required=True)
    parser.add_argument("--spacing", type=int, default=60)
    parser.add_argument("--shifts", type=float, default=0.0)
    parser.add_argument("--shift", type=float, default=3.0)
    parser.add_argument("--bocpd", action="store_true")
    parser.add_argument("--seed", type=int, default=1)
    args = parser.parse_args()
    os.makedirs(args.output, exist_ok=True)
    rng = np.random.default_rng(args.seed)

    per_series = args.readings // args.series
    level = rng.uniform(10.0, 100.0, args.series)
    daily = rng.uniform(1.0, 4.0, args.series)
    weekly = rng.uniform(0.5, 2.0, args.series)
    phase = rng.uniform(0.0, 2 * np.pi, args.series)
    shifted = rng.random(args.series) < args.shifts
    shift_at = rng.integers(per_series // 2, per_series, args.series)
    names = np.array([b"load/s%05d" % s for s in range(args.series)])

    with open(os.path.join(args.output, "readings.csv"), "wb") as out:
        # Reading k of every series is at START + k spacing + jitter (< spacing
        # / 2), so rows ordered by (k, series) are in time order.
        rows = per_series * args.series
        for first in range(0, rows, CHUNK):
            row = np.arange(first, min(first + CHUNK, rows))
            k, s = row // args.series, row % args.series
            jitter = rng.integers(0, max(1, args.spacing // 2), row.size)
            t = START + k * args.spacing + jitter
            days = (t - START) / 86400.0
            value = (level[s] + daily[s] * np.sin(2 * np.pi * days + phase[s])
                     + weekly[s] * np.cos(2 * np.pi * days / 7) + rng.normal(size=row.size))
            value += np.where(shifted[s] & (k >= shift_at[s]), args.shift, 0.0)
            text = b"".join(b"%d,%s,%.4f\n" % line
                            for line in zip(t.tolist(), names[s].tolist(), value.tolist()))
            out.write(text)

    detectors = "[cusum, page-hinkley, bocpd]" if args.bocpd else "[cusum, page-hinkley]"
    with open(os.path.join(args.output, "plumbline.yaml"), "w", encoding="utf-8") as f:
        f.write("series:\n  - match: \"load/**\"\n    kind: gauge\n    seasons: [1d, 7d]\n"
                "    arl0: 5000\n    shift: 1.0\n    detectors: %s\n" % detectors)
    with open(os.path.join(args.output, "shifts.csv"), "w", encoding="utf-8") as f:
        f.write("series,reading\n")
        for s in np.flatnonzero(shifted):
            f.write("%s,%d\n" % (names[s].decode(), shift_at[s]))


if __name__ == "__main__":
    main()
