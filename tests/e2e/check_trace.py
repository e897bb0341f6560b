#!/usr/bin/python3
"""End-to-end check of `plumbline replay --trace NAME --trace-to FILE` on the Nile
fixture (annual flow at Aswan; replay-fixtures/nile/SOURCE.md): one CSV line per
observation of the series, with the standardised residual and every detector's
statistic and threshold; the series' level alert shows in the trace as a
detector at or past its threshold at the alert's reading. Standard library only.

usage: check_trace.py --plumbline BIN --fixture DIR
"""

import argparse
import csv
import json
import os
import subprocess
import sys
import tempfile

SERIES = "nile/aswan/flow"


def main(argv):
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--plumbline", required=True)
    parser.add_argument("--fixture", required=True)
    args = parser.parse_args(argv)
    config = os.path.join(args.fixture, "plumbline.yaml")
    readings = os.path.join(args.fixture, "readings.csv")
    failures = []

    def check(ok, what):
        if not ok:
            failures.append(what)

    with tempfile.TemporaryDirectory(prefix="plumbline-trace-") as tmp:
        alerts = os.path.join(tmp, "alerts.jsonl")
        trace = os.path.join(tmp, "trace.csv")
        base = [args.plumbline, "replay", "--config", config, "--input", readings,
                "--alerts", alerts, "--quiet"]
        run = subprocess.run(base + ["--trace", SERIES, "--trace-to", trace],
                             capture_output=True, text=True, timeout=300)
        check(run.returncode == 0, "replay --trace exit %d: %s" % (run.returncode, run.stderr))
        half = subprocess.run(base + ["--trace", SERIES], capture_output=True, text=True,
                              timeout=300)
        check(half.returncode == 2 and "--trace-to" in half.stderr,
              "--trace without --trace-to: exit %d" % half.returncode)
        with open(trace, encoding="utf-8") as f:
            rows = list(csv.DictReader(f))
        with open(readings, encoding="utf-8") as f:
            expected = sum(1 for line in f if ("," + SERIES + ",") in line)
        with open(alerts, encoding="utf-8") as f:
            raised = [json.loads(line) for line in f if line.strip()]

    columns = list(rows[0].keys()) if rows else []
    check(columns[:7] == ["time", "value", "observation", "armed", "sigma", "z",
                          "phase_sigma"], "columns %s" % columns)
    for name in ("cusum", "page-hinkley", "bocpd", "variance", "rate"):
        check(name in columns and name + "_threshold" in columns, "no column " + name)
    check(len(rows) == expected, "%d trace lines for %d readings" % (len(rows), expected))
    check([int(r["observation"]) for r in rows] == list(range(1, len(rows) + 1)),
          "observations not numbered 1, 2, ...")
    armed = [r for r in rows if r["armed"] == "1"]
    check(armed and all(float(r["cusum_threshold"]) > 0 for r in armed), "no armed rows")
    check(any(float(r["z"]) != 0 for r in armed), "z is 0 at every armed observation")
    check(all(float(r["z"]) == 0 for r in rows if r["armed"] == "0"), "z before arming")
    check(all(float(r["phase_sigma"]) > 0 for r in armed), "phase_sigma 0 while armed")
    levels = [a for a in raised if a["kind"] == "level"]
    check(len(levels) >= 1, "no level alert on the Nile")
    by_time = {r["time"]: r for r in rows}
    for a in levels:
        row = by_time.get(a["detected_at"])
        check(row is not None, "no trace line at the alert's reading " + a["detected_at"])
        if row is None:
            continue
        # The detectors restart after an alert, so their statistics on that line
        # are back at zero; the line before shows them on the way.
        check(float(row["cusum"]) == 0 and float(row["page-hinkley"]) == 0,
              "detectors not restarted at the alert's reading")
    for failure in failures:
        print("check_trace: FAILED: " + failure)
    if not failures:
        print("check_trace: %d observations traced, %d armed, %d level alert(s) on the "
              "trace's timeline" % (len(rows), len(armed), len(levels)))
    return 1 if failures else 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
