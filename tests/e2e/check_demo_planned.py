#!/usr/bin/env python3
"""The demo's deliberate defrost-schedule change (1 April: defrost every 6 hours
instead of 8, SOURCE.md) is expected, so it must not page anyone.

Replays the Harbourside demo twice: with its config, and with the config's
`annotations` removed. With them, the freezer and compressor re-baseline from
the planned time (a retrain event each with change_at = the planned time) and
no alert that could page (severity page or notify) has its change within two
days of it; any alert dated there carries explained_by. Without them, each of
the two series raises a level alert dated within two days of it, so the check
can fail: it is the annotation, not luck, that keeps the change quiet.

usage: check_demo_planned.py --plumbline BIN --fixture DIR
"""

import argparse
import calendar
import json
import os
import subprocess
import sys
import tempfile
import time

PLANNED = "2026-04-01T00:00:00Z"
SERIES = ("coldstore/freezer-1/temp_c", "coldstore/compressor-2/power_kw")
WINDOW = 2 * 86400  # seconds either side of the planned time


def epoch(text):
    return calendar.timegm(time.strptime(text[:19], "%Y-%m-%dT%H:%M:%S"))


def replay(plumbline, config, readings, tmp, name):
    events = os.path.join(tmp, name + "-events.jsonl")
    subprocess.run([plumbline, "replay", "--config", config, "--input", readings,
                    "--alerts", os.path.join(tmp, name + "-alerts.jsonl"),
                    "--events", events], check=True, stdout=subprocess.DEVNULL)
    with open(events) as f:
        return [json.loads(line) for line in f if line.strip()]


def without_annotations(config_text):
    """The config with its top-level `annotations:` block removed."""
    out, skipping = [], False
    for line in config_text.splitlines():
        if line.startswith("annotations:"):
            skipping = True
            continue
        if skipping and (line.startswith(" ") or line.startswith("-") or not line.strip()):
            continue
        skipping = False
        out.append(line)
    return "\n".join(out) + "\n"


def near(event):
    return abs(epoch(event["change_at"]) - epoch(PLANNED)) <= WINDOW


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--plumbline", required=True)
    parser.add_argument("--fixture", required=True)
    args = parser.parse_args()
    config = os.path.join(args.fixture, "plumbline.yaml")
    readings = os.path.join(args.fixture, "readings.csv")
    failures = []
    with tempfile.TemporaryDirectory(prefix="plumbline-planned-") as tmp:
        annotated = replay(args.plumbline, config, readings, tmp, "annotated")
        with open(config) as f:
            bare_config = os.path.join(tmp, "bare.yaml")
            with open(bare_config, "w") as g:
                g.write(without_annotations(f.read()))
        bare = replay(args.plumbline, bare_config, readings, tmp, "bare")

    for series in SERIES:
        retrains = [e for e in annotated if e["series"] == series and
                    e["event"] == "retrain" and e["change_at"] == PLANNED]
        if not retrains:
            failures.append("%s: no retrain event from %s" % (series, PLANNED))
        for e in annotated:
            if e["series"] != series or e["event"] != "alert" or not near(e):
                continue
            if e.get("severity") in ("page", "notify") or not e.get("explained_by"):
                failures.append("%s: unexplained %s alert dated %s (severity %s)"
                                % (series, e["kind"], e["change_at"], e.get("severity")))
        unannotated = [e for e in bare if e["series"] == series and
                       e["event"] == "alert" and e["kind"] == "level" and near(e)]
        print("%s: %d retrain event(s) from %s with the annotation; without it %d level "
              "alert(s) dated within 2 days" % (series, len(retrains), PLANNED, len(unannotated)))
        if not unannotated:
            failures.append("%s: no alert near %s even without the annotation: the check "
                            "cannot tell the annotation's effect" % (series, PLANNED))
    for failure in failures:
        print("FAIL: " + failure)
    return 1 if failures else 0


if __name__ == "__main__":
    sys.exit(main())
