#!/usr/bin/python3
"""Runs `plumbline replay` on one replay fixture and checks the result.

    check_fixture.py --plumbline BIN --fixture DIR [--check-determinism]
                     [--report FILE] [--keep DIR] [--timeout SECONDS]

The fixture folder holds expect.json (schema plumbline.replay-fixture/1), the
config and the reading files it names. The checks are the "Rules for a test
harness" of replay-fixtures/README.md, applied exactly:

  1. Only alerts with detected_at >= armed_at of their series are considered.
  2. An alert matches an alert entry when the series is equal, its kind is the
     entry's kind or in also_kinds, the directions are equal (or the entry says
     any), its change_at lies in change_at_window [from, to), and, if
     detected_by is given, detected_at <= detected_by.
  3. A required alert entry needs at least one match; max_count and first
     apply when given (first: the series' first considered level, rate or
     variance alert is a match; silence alerts are not counted).
  4. A `none` entry fails if any considered alert on its series (of
     quiet_kinds, if given) has detected_at in quiet_window [from, to).
  5. With unmatched_alerts "forbidden", every considered alert must match some
     alert entry, required or not.

Further checks, each a line of the verdict:
  - replay exits 0;
  - the alert contract (DESIGN.md "Alerts"): every line of the alerts file is
    one JSON object with series (string), detected_at and change_at (RFC 3339
    UTC, ending in Z), kind (level|variance|rate|silence), direction
    (up|down|none), detectors (a non-empty list of strings: the names that
    fired), id (string, unique), event "alert", change_at <= detected_at, and
    any magnitude field a finite number or null; every series is one of the
    fixture's; the events file holds one JSON object per line whose event is
    alert|resume|retrain|meter-reset, and its alert lines are exactly the lines
    of the alerts file, in order;
  - with --check-determinism, a second replay writes byte-identical alerts and
    events files.

Prints a readable verdict ending in "fixture NAME: N passed, M failed". With
--report, also writes the verdict as JSON to FILE. Exit status: 0 when every
check passes, 1 when any fails, 2 for a usage error or a malformed fixture.
Standard library only.
"""

import argparse
import hashlib
import json
import math
import os
import re
import shutil
import signal
import subprocess
import sys
import tempfile

SCHEMA = "plumbline.replay-fixture/1"
ALERT_KINDS = ("level", "variance", "rate", "silence")
DIRECTIONS = ("up", "down", "none")
EVENT_TYPES = ("alert", "resume", "retrain", "meter-reset")
# The alert's urgency, least to most (detectors/severity.h).
SEVERITIES = ("record", "notify", "page")
# Kinds that count for `first` (README: silence alerts are not counted).
FIRST_KINDS = ("level", "variance", "rate")
# Optional numeric fields written for some kinds (daemon/engine.cc).
MAGNITUDE_FIELDS = ("magnitude", "magnitude_sd", "before", "after", "sd_ratio", "sd_before",
                    "sd_after", "silent_seconds", "mean_gap_seconds_before", "total_before",
                    "total_after")

_RFC3339_UTC = re.compile(
    r"^(\d{4})-(\d{2})-(\d{2})T(\d{2}):(\d{2}):(\d{2})(?:\.(\d{1,9}))?Z$")


class FixtureError(Exception):
    """expect.json is malformed or names files that do not exist."""


# ---- time -------------------------------------------------------------------

def _days_from_civil(y, m, d):
    """Days since 1970-01-01 of a proleptic Gregorian date (Hinnant's algorithm)."""
    y -= m <= 2
    era = (y if y >= 0 else y - 399) // 400
    yoe = y - era * 400
    doy = (153 * (m + (-3 if m > 2 else 9)) + 2) // 5 + d - 1
    doe = yoe * 365 + yoe // 4 - yoe // 100 + doy
    return era * 146097 + doe - 719468


def _days_in_month(y, m):
    if m == 2:
        leap = (y % 4 == 0 and y % 100 != 0) or y % 400 == 0
        return 29 if leap else 28
    return 30 if m in (4, 6, 9, 11) else 31


def parse_utc(text):
    """RFC 3339 UTC text ending in Z -> integer nanoseconds since the epoch, or None.

    A leap second (:60) reads as :59.999999, as detectors/time_format.h does.
    """
    if not isinstance(text, str):
        return None
    m = _RFC3339_UTC.match(text)
    if not m:
        return None
    y, mo, d, h, mi, s = (int(g) for g in m.groups()[:6])
    frac = m.group(7) or ""
    if not (1 <= mo <= 12 and 1 <= d <= _days_in_month(y, mo) and h <= 23 and mi <= 59
            and s <= 60):
        return None
    nanos = int((frac + "000000000")[:9])
    if s == 60:
        s, nanos = 59, 999_999_000
    seconds = _days_from_civil(y, mo, d) * 86400 + h * 3600 + mi * 60 + s
    return seconds * 1_000_000_000 + nanos


# ---- fixture ----------------------------------------------------------------

def _need(obj, key, kind, where):
    if key not in obj:
        raise FixtureError(f"{where}: missing '{key}'")
    if not isinstance(obj[key], kind) or (kind is int and isinstance(obj[key], bool)):
        raise FixtureError(f"{where}: '{key}' has the wrong type")
    return obj[key]


def _need_time(obj, key, where):
    value = parse_utc(_need(obj, key, str, where))
    if value is None:
        raise FixtureError(f"{where}: '{key}' is not an RFC 3339 UTC time: {obj[key]!r}")
    return value


def _need_window(obj, key, where):
    window = _need(obj, key, dict, where)
    lo = _need_time(window, "from", f"{where}.{key}")
    hi = _need_time(window, "to", f"{where}.{key}")
    if lo >= hi:
        raise FixtureError(f"{where}.{key}: from must be before to")
    return lo, hi


def load_fixture(folder):
    """Reads and validates expect.json; returns it with parsed times added."""
    path = os.path.join(folder, "expect.json")
    try:
        with open(path, encoding="utf-8") as f:
            spec = json.load(f)
    except (OSError, ValueError) as e:
        raise FixtureError(f"{path}: {e}") from e
    if not isinstance(spec, dict) or spec.get("schema") != SCHEMA:
        raise FixtureError(f"{path}: schema is not {SCHEMA}")
    _need(spec, "fixture", str, "expect.json")
    for name in _need(spec, "inputs", list, "expect.json") + [_need(spec, "config", str,
                                                                     "expect.json")]:
        if not isinstance(name, str) or not os.path.isfile(os.path.join(folder, name)):
            raise FixtureError(f"expect.json: file {name!r} not found in {folder}")
    if not spec["inputs"]:
        raise FixtureError("expect.json: inputs is empty")
    if _need(spec, "unmatched_alerts", str, "expect.json") not in ("forbidden", "allowed"):
        raise FixtureError("expect.json: unmatched_alerts must be forbidden or allowed")
    armed = {}
    for i, s in enumerate(_need(spec, "series", list, "expect.json")):
        where = f"series[{i}]"
        armed[_need(s, "name", str, where)] = _need_time(s, "armed_at", where)
    spec["_armed_at"] = armed
    ids = set()
    for i, e in enumerate(_need(spec, "expected", list, "expect.json")):
        where = f"expected[{i}]"
        if not isinstance(e, dict):
            raise FixtureError(f"{where}: not an object")
        entry_id = _need(e, "id", str, where)
        where = f"expected[{i}] ({entry_id})"
        if entry_id in ids:
            raise FixtureError(f"{where}: duplicate id")
        ids.add(entry_id)
        if _need(e, "series", str, where) not in armed:
            raise FixtureError(f"{where}: series {e['series']!r} is not in 'series'")
        kind = _need(e, "kind", str, where)
        if kind not in ALERT_KINDS + ("none",):
            raise FixtureError(f"{where}: unknown kind {kind!r}")
        _need(e, "required", bool, where)
        if kind == "none":
            e["_quiet"] = _need_window(e, "quiet_window", where)
            quiet_kinds = e.get("quiet_kinds", list(ALERT_KINDS))
            if not isinstance(quiet_kinds, list) or any(k not in ALERT_KINDS
                                                        for k in quiet_kinds):
                raise FixtureError(f"{where}: quiet_kinds must list alert kinds")
            e["_quiet_kinds"] = quiet_kinds
            continue
        if _need(e, "direction", str, where) not in DIRECTIONS + ("any",):
            raise FixtureError(f"{where}: unknown direction {e['direction']!r}")
        also = e.get("also_kinds", [])
        if not isinstance(also, list) or any(k not in ALERT_KINDS for k in also):
            raise FixtureError(f"{where}: also_kinds must list alert kinds")
        e["_kinds"] = [kind] + also
        e["_window"] = _need_window(e, "change_at_window", where)
        e["_detected_by"] = _need_time(e, "detected_by", where) if "detected_by" in e else None
        if "first" in e:
            _need(e, "first", bool, where)
        if "max_count" in e and (_need(e, "max_count", int, where) < 0):
            raise FixtureError(f"{where}: max_count must be >= 0")
    return spec


# ---- replay -----------------------------------------------------------------

def run_replay(plumbline, folder, spec, out_dir, tag, timeout):
    alerts = os.path.join(out_dir, f"alerts{tag}.jsonl")
    events = os.path.join(out_dir, f"events{tag}.jsonl")
    command = [plumbline, "replay", "--config", os.path.join(folder, spec["config"])]
    for name in spec["inputs"]:
        command += ["--input", os.path.join(folder, name)]
    command += ["--alerts", alerts, "--events", events, "--quiet"]
    try:
        proc = subprocess.run(command, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                              timeout=timeout, check=False)
        returncode, stderr = proc.returncode, proc.stderr.decode("utf-8", "replace")
    except subprocess.TimeoutExpired as e:
        returncode = None
        stderr = (e.stderr or b"").decode("utf-8", "replace") + f"\n(timed out after {timeout} s)"
    return {"command": command, "returncode": returncode, "stderr": stderr,
            "alerts_path": alerts, "events_path": events}


def describe_exit(returncode):
    if returncode is None:
        return "timed out"
    if returncode < 0:
        try:
            return f"killed by {signal.Signals(-returncode).name}"
        except ValueError:
            return f"killed by signal {-returncode}"
    return f"exit status {returncode}"


def read_bytes(path):
    try:
        with open(path, "rb") as f:
            return f.read()
    except OSError:
        return None


# ---- contract ---------------------------------------------------------------

def _reject_constant(name):
    raise ValueError(f"non-standard JSON constant {name}")


def parse_lines(data, what):
    """JSON lines -> (list of (line number, raw text, object or None), problems)."""
    problems, rows = [], []
    if data is None:
        return rows, [f"{what}: file was not written"]
    text = data.decode("utf-8", "replace")
    if text and not text.endswith("\n"):
        problems.append(f"{what}: last line has no newline")
    for number, raw in enumerate(text.splitlines(), 1):
        try:
            obj = json.loads(raw, parse_constant=_reject_constant)
        except ValueError as e:
            problems.append(f"{what}:{number}: not JSON ({e}): {raw[:120]}")
            rows.append((number, raw, None))
            continue
        if not isinstance(obj, dict):
            problems.append(f"{what}:{number}: not a JSON object")
            obj = None
        rows.append((number, raw, obj))
    return rows, problems


def check_alert(obj, where, series_names):
    """Contract problems of one alert object; adds parsed times to obj."""
    problems = []

    def bad(message):
        problems.append(f"{where}: {message}")

    if not isinstance(obj.get("id"), str) or not obj.get("id"):
        bad("id missing or not a non-empty string")
    if obj.get("event") != "alert":
        bad(f"event is {obj.get('event')!r}, expected 'alert'")
    series = obj.get("series")
    if not isinstance(series, str) or not series:
        bad("series missing or not a non-empty string")
    elif series not in series_names:
        bad(f"series {series!r} is not one of the fixture's series")
    for key in ("detected_at", "change_at"):
        value = parse_utc(obj.get(key))
        if value is None:
            bad(f"{key} {obj.get(key)!r} is not an RFC 3339 UTC time ending in Z")
        obj["_" + key] = value
    if obj["_detected_at"] is not None and obj["_change_at"] is not None and \
            obj["_change_at"] > obj["_detected_at"]:
        bad(f"change_at {obj['change_at']} is after detected_at {obj['detected_at']}")
    if obj.get("kind") not in ALERT_KINDS:
        bad(f"kind {obj.get('kind')!r} is not one of {'|'.join(ALERT_KINDS)}")
    if obj.get("direction") not in DIRECTIONS:
        bad(f"direction {obj.get('direction')!r} is not one of {'|'.join(DIRECTIONS)}")
    detectors = obj.get("detectors")
    if not isinstance(detectors, list) or not all(isinstance(d, str) and d for d in detectors):
        bad("detectors missing or not a list of non-empty strings")
    elif not detectors:
        bad("detectors is empty (it names the detectors that fired)")
    if obj.get("severity") not in SEVERITIES:
        bad(f"severity {obj.get('severity')!r} is not one of {'|'.join(SEVERITIES)}")
    elif "explained_by" in obj and obj["severity"] != "record":
        bad(f"an explained alert has severity {obj['severity']!r}, expected 'record'")
    for key in MAGNITUDE_FIELDS:
        if key in obj:
            value = obj[key]
            if value is not None and (isinstance(value, bool) or
                                      not isinstance(value, (int, float)) or
                                      not math.isfinite(value)):
                bad(f"{key} is not a finite number or null: {value!r}")
    return problems


def check_contract(alerts_data, events_data, series_names):
    """Returns (alerts usable by the rules, alert line count, problems, event counts)."""
    rows, problems = parse_lines(alerts_data, "alerts")
    alerts, ids = [], {}
    for number, _, obj in rows:
        if obj is None:
            continue
        problems += check_alert(obj, f"alerts:{number}", series_names)
        if isinstance(obj.get("id"), str):
            if obj["id"] in ids:
                problems.append(f"alerts:{number}: id {obj['id']} repeats line {ids[obj['id']]}")
            else:
                ids[obj["id"]] = number
        obj["_line"] = number
        if obj["_detected_at"] is not None and obj["_change_at"] is not None and \
                isinstance(obj.get("series"), str):
            alerts.append(obj)
    event_rows, event_problems = parse_lines(events_data, "events")
    problems += event_problems
    counts = {}
    event_alert_lines = []
    for number, raw, obj in event_rows:
        if obj is None:
            continue
        event = obj.get("event")
        if event not in EVENT_TYPES:
            problems.append(f"events:{number}: event {event!r} is not one of "
                            f"{'|'.join(EVENT_TYPES)}")
        counts[event] = counts.get(event, 0) + 1
        if not isinstance(obj.get("series"), str) or parse_utc(obj.get("detected_at")) is None:
            problems.append(f"events:{number}: series or detected_at missing or malformed")
        if event == "alert":
            event_alert_lines.append(raw)
    alert_lines = [raw for _, raw, _ in rows]
    parsed = all(obj is not None for _, _, obj in rows + event_rows)
    if events_data is not None and alerts_data is not None and parsed and \
            event_alert_lines != alert_lines:
        problems.append(f"events: its {len(event_alert_lines)} alert lines are not the "
                        f"{len(alert_lines)} lines of the alerts file, in order")
    return alerts, len(rows), problems, counts


# ---- harness rules ----------------------------------------------------------

def mismatch_reasons(entry, alert):
    """Why an alert does not match an alert entry (README rule 2); [] if it matches."""
    reasons = []
    if alert["series"] != entry["series"]:
        return ["other series"]
    if alert.get("kind") not in entry["_kinds"]:
        reasons.append(f"kind {alert.get('kind')} not {'/'.join(entry['_kinds'])}")
    if entry["direction"] != "any" and alert.get("direction") != entry["direction"]:
        reasons.append(f"direction {alert.get('direction')} not {entry['direction']}")
    lo, hi = entry["_window"]
    if not lo <= alert["_change_at"] < hi:
        reasons.append("change_at outside change_at_window")
    if entry["_detected_by"] is not None and alert["_detected_at"] > entry["_detected_by"]:
        reasons.append(f"detected after detected_by {entry['detected_by']}")
    return reasons


def alert_text(alert):
    return (f"detected_at {alert['detected_at']}  change_at {alert['change_at']}  "
            f"{alert.get('kind')} {alert.get('direction')}  {alert['series']}  "
            f"[{','.join(map(str, alert.get('detectors') or []))}]  id {alert.get('id')}")


def evaluate(spec, alerts):
    """Applies the README rules; returns (entry results, considered, before-arm, unmatched)."""
    armed = spec["_armed_at"]
    considered, early = [], []
    for a in alerts:
        arm = armed.get(a["series"])
        if arm is not None and a["_detected_at"] < arm:
            early.append(a)
        else:
            considered.append(a)  # an unknown series is already a contract failure
    by_series = {}
    for a in considered:
        by_series.setdefault(a["series"], []).append(a)
    for series_alerts in by_series.values():
        series_alerts.sort(key=lambda a: (a["_detected_at"], a["_line"]))

    results, matched_lines = [], set()
    for entry in spec["expected"]:
        series_alerts = by_series.get(entry["series"], [])
        failures, notes = [], []
        if entry["kind"] == "none":
            lo, hi = entry["_quiet"]
            hits = [a for a in series_alerts
                    if a.get("kind") in entry["_quiet_kinds"] and lo <= a["_detected_at"] < hi]
            if hits and entry["required"]:
                failures.append(f"{len(hits)} alert(s) detected in the quiet window")
            elif hits:
                notes.append(f"{len(hits)} alert(s) in the quiet window (tolerated: not required)")
            results.append({"entry": entry, "matches": [], "violations": hits,
                            "failures": failures, "notes": notes, "near": []})
            continue
        matches = [a for a in series_alerts if not mismatch_reasons(entry, a)]
        matched_lines.update(a["_line"] for a in matches)
        if entry["required"] and not matches:
            failures.append("no matching alert")
        if "max_count" in entry and len(matches) > entry["max_count"]:
            failures.append(f"{len(matches)} matching alerts, max_count {entry['max_count']}")
        if entry.get("first"):
            firsts = [a for a in series_alerts if a.get("kind") in FIRST_KINDS]
            match_lines = {a["_line"] for a in matches}
            if matches and not firsts:
                failures.append("first: the series has no level/rate/variance alert after "
                                "armed_at")
            elif matches and firsts[0]["_line"] not in match_lines:
                failures.append("first: the series' first level/rate/variance alert after "
                                f"armed_at does not match ({alert_text(firsts[0])})")
            elif not matches and firsts:
                notes.append(f"first: the series' first level/rate/variance alert is "
                             f"{alert_text(firsts[0])}")
        near = []
        if not matches or failures:
            for a in series_alerts:
                reasons = mismatch_reasons(entry, a)
                if reasons:
                    near.append((a, reasons))
        results.append({"entry": entry, "matches": matches, "violations": [],
                        "failures": failures, "notes": notes, "near": near})
    unmatched = [a for a in considered if a["_line"] not in matched_lines]
    return results, considered, early, unmatched


def entry_summary(entry):
    if entry["kind"] == "none":
        kinds = "/".join(entry["_quiet_kinds"])
        return (f"quiet ({kinds}) from {entry['quiet_window']['from']} "
                f"to {entry['quiet_window']['to']}")
    parts = [f"{'/'.join(entry['_kinds'])} {entry['direction']}",
             f"change_at in [{entry['change_at_window']['from']}, "
             f"{entry['change_at_window']['to']})"]
    if entry["_detected_by"] is not None:
        parts.append(f"detected by {entry['detected_by']}")
    flags = ["required" if entry["required"] else "optional"]
    if entry.get("first"):
        flags.append("first")
    if "max_count" in entry:
        flags.append(f"max_count {entry['max_count']}")
    if entry.get("planned"):
        flags.append("planned")
    return ", ".join(parts) + " (" + ", ".join(flags) + ")"


# ---- main -------------------------------------------------------------------

def main(argv):
    parser = argparse.ArgumentParser(
        description="Run plumbline replay on a replay fixture and check it against "
                    "expect.json (replay-fixtures/README.md, 'Rules for a test harness').")
    parser.add_argument("--plumbline", required=True, help="the plumbline binary")
    parser.add_argument("--fixture", required=True, help="fixture folder (holds expect.json)")
    parser.add_argument("--check-determinism", action="store_true",
                        help="replay twice; alerts and events files must be byte-identical")
    parser.add_argument("--contract-only", action="store_true",
                        help="check the replay, the alert contract and determinism only, "
                             "not the expected outcomes")
    parser.add_argument("--report", help="also write the verdict as JSON to this file")
    parser.add_argument("--keep", help="write the replay outputs into this folder and keep them")
    parser.add_argument("--timeout", type=float, default=600.0,
                        help="seconds allowed for one replay (default 600)")
    args = parser.parse_args(argv)

    folder = os.path.abspath(args.fixture)
    try:
        spec = load_fixture(folder)
    except FixtureError as e:
        print(f"check_fixture: malformed fixture: {e}", file=sys.stderr)
        return 2
    name = spec["fixture"]
    plumbline = os.path.abspath(args.plumbline)
    if not os.access(plumbline, os.X_OK):
        print(f"check_fixture: {plumbline} is not an executable", file=sys.stderr)
        return 2

    if args.keep:
        os.makedirs(args.keep, exist_ok=True)
        out_dir, cleanup = os.path.abspath(args.keep), None
    else:
        out_dir = tempfile.mkdtemp(prefix=f"plumbline-fixture-{name}-")
        cleanup = out_dir
    try:
        return check(args, spec, folder, plumbline, out_dir)
    finally:
        if cleanup:
            shutil.rmtree(cleanup, ignore_errors=True)


def check(args, spec, folder, plumbline, out_dir):
    name = spec["fixture"]
    checks = []  # (label, passed)
    lines = []

    def say(text=""):
        lines.append(text)

    def record(label, passed, details=()):
        checks.append({"check": label, "passed": passed, "details": list(details)})
        say(f"  {'PASS' if passed else 'FAIL'}  {label}")
        for d in details:
            say(f"        {d}")

    say(f"fixture {name}: {folder}")
    say(f"  {len(spec['series'])} series, {len(spec['expected'])} expected entries, "
        f"unmatched alerts {spec['unmatched_alerts']}")

    first = run_replay(plumbline, folder, spec, out_dir, "", args.timeout)
    say(f"  replay: {' '.join(first['command'])}")
    ok = first["returncode"] == 0
    tail = [] if ok else ["stderr (last lines):"] + \
        ["  " + t for t in first["stderr"].rstrip().splitlines()[-12:]]
    record(f"replay {describe_exit(first['returncode'])}", ok, tail)

    alerts_data = read_bytes(first["alerts_path"])
    events_data = read_bytes(first["events_path"])
    alerts, alert_lines, problems, counts = check_contract(alerts_data, events_data, set(spec["_armed_at"]))
    shown = problems[:25] + ([f"... and {len(problems) - 25} more"] if len(problems) > 25 else [])
    record(f"alert contract: {alert_lines} alert lines, "
           f"{sum(counts.values())} event lines "
           f"({', '.join(f'{k} {v}' for k, v in sorted(counts.items(), key=str)) or 'none'})",
           not problems, shown)

    if args.check_determinism:
        second = run_replay(plumbline, folder, spec, out_dir, ".run2", args.timeout)
        same = []
        for label, a, b in (("alerts", alerts_data, read_bytes(second["alerts_path"])),
                            ("events", events_data, read_bytes(second["events_path"]))):
            if a is None or b is None:
                same.append(f"{label}: not written by both runs")
            elif a != b:
                same.append(f"{label}: the two runs differ ({len(a)} vs {len(b)} bytes)")
        if second["returncode"] != first["returncode"]:
            same.append(f"second run: {describe_exit(second['returncode'])}")
        digest = hashlib.sha256(alerts_data or b"").hexdigest()[:16]
        record(f"determinism: two replays, alerts and events byte-identical "
               f"(alerts sha256 {digest}...)", not same, same)

    if args.contract_only:
        passed = sum(c["passed"] for c in checks)
        failed = len(checks) - passed
        say("")
        say(f"  expected outcomes not checked (--contract-only)")
        say(f"fixture {name}: {passed} passed, {failed} failed")
        print("\n".join(lines))
        return 0 if failed == 0 else 1

    results, considered, early, unmatched = evaluate(spec, alerts)
    say("")
    say(f"  expected entries ({len(considered)} alerts considered, "
        f"{len(early)} detected before armed_at):")
    for r in results:
        entry = r["entry"]
        record(f"{entry['id']}: {entry_summary(entry)}", not r["failures"],
               r["failures"] + r["notes"] +
               [f"match: {alert_text(a)}" for a in r["matches"]] +
               [f"in quiet window: {alert_text(a)}" for a in r["violations"]] +
               [f"not matching: {alert_text(a)}: {'; '.join(why)}" for a, why in r["near"][:12]] +
               ([f"... {len(r['near']) - 12} more non-matching alerts on the series"]
                if len(r["near"]) > 12 else []))

    say("")
    unmatched_lines = [alert_text(a) for a in unmatched]
    if spec["unmatched_alerts"] == "forbidden":
        record(f"unmatched alerts forbidden: {len(unmatched)} unmatched", not unmatched,
               unmatched_lines)
    else:
        say(f"  unmatched alerts (allowed, not counted): {len(unmatched)}")
        for t in unmatched_lines:
            say(f"        {t}")
    if early:
        say(f"  detected before armed_at (outside the claim, not counted): {len(early)}")
        for a in early:
            say(f"        {alert_text(a)}")

    passed = sum(c["passed"] for c in checks)
    failed = len(checks) - passed
    say("")
    say(f"fixture {name}: {passed} passed, {failed} failed")
    print("\n".join(lines))

    if args.report:
        report = {
            "fixture": name, "folder": folder, "passed": passed, "failed": failed,
            "checks": checks,
            "replay": {"command": first["command"], "returncode": first["returncode"],
                       "stderr": first["stderr"]},
            "unmatched": [{k: v for k, v in a.items() if not k.startswith("_")}
                          for a in unmatched],
            "before_armed_at": [{k: v for k, v in a.items() if not k.startswith("_")}
                                for a in early],
        }
        with open(args.report, "w", encoding="utf-8") as f:
            json.dump(report, f, indent=2)
            f.write("\n")
    return 0 if failed == 0 else 1


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
