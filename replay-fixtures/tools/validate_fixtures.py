#!/usr/bin/python3
"""Checks every replay fixture for internal consistency and for the facts it documents.

    /usr/bin/python3 replay-fixtures/tools/validate_fixtures.py [FIXTURES_DIR]

For each directory under FIXTURES_DIR (default: the replay-fixtures folder this
script lives in) that holds an expect.json, it checks:
  - readings files: the Readings format of DESIGN.md (header `time,series,value`,
    RFC 3339 UTC times, finite values, valid series names), times non-decreasing;
  - plumbline.yaml: the guaranteed keys of DESIGN.md (plus documented optional ones), valid values (the
    ranges of detectors/profile.h), every series matched by a profile;
  - expect.json: the schema of replay-fixtures/README.md; series, reading
    counts, span, warmup and armed_at agree with the readings and the config;
  - documented facts, recomputed from the committed readings (COMP):
    Nile least-squares change after 1898, coal Poisson change-point MLE after
    the 125th disaster (1890-03-10), the seat-belt month, the beaver switch, and
    the scripted events of the Harbourside demo (gaps, meter reset, steps).
Exits 1 and lists every problem if anything fails; prints a summary otherwise.
"""

import csv
import json
import math
import os
import re
import sys
from datetime import datetime, timedelta, timezone

import yaml

GUARANTEED_KEYS = {"match", "kind", "seasons", "gaps", "warmup", "arl0", "shift",
                   "detectors", "agree", "silence_after"}
REQUIRED_KEYS = GUARANTEED_KEYS - {"silence_after"}
# Further profile keys Plumbline documents (README "Using it"); allowed, not required.
OPTIONAL_KEYS = {"harmonics", "every", "memory", "trend", "lateness", "agree_within",
                 "cooldown", "level_noise", "covariates", "covariate_max_age"}
KINDS = {"gauge", "count", "meter"}
GAPS = {"skip", "zero", "hold"}
DETECTORS = {"cusum", "page-hinkley", "bocpd", "ewma"}
ALERT_KINDS = {"level", "rate", "variance", "silence"}
DIRECTIONS = {"up", "down", "none", "any"}
TIME_RE = re.compile(r"^(\d{4})-(\d{2})-(\d{2})T(\d{2}):(\d{2}):(\d{2})(\.\d+)?Z$")
DURATION_RE = re.compile(r"^(\d+(?:\.\d+)?)(ms|s|m|h|d|w)$")
DURATION_SECONDS = {"ms": 0.001, "s": 1, "m": 60, "h": 3600, "d": 86400, "w": 604800}

problems = []


def problem(where, text):
    problems.append(f"{where}: {text}")


def parse_time(text):
    """Seconds since the epoch (float) for RFC 3339 UTC text, or None."""
    m = TIME_RE.match(text)
    if not m:
        return None
    try:
        t = datetime(*(int(m.group(i)) for i in range(1, 7)), tzinfo=timezone.utc)
    except ValueError:
        return None
    frac = float("0" + m.group(7)) if m.group(7) else 0.0
    epoch = datetime(1970, 1, 1, tzinfo=timezone.utc)
    return (t - epoch).days * 86400 + (t - epoch).seconds + frac


def parse_duration(text):
    m = DURATION_RE.match(str(text))
    if not m or float(m.group(1)) <= 0:
        return None
    return float(m.group(1)) * DURATION_SECONDS[m.group(2)]


def glob_to_regex(pattern):
    """The series-name globs of detectors/glob.h: *, **, **/, ?, [...], backslash escapes."""
    out, i = [], 0
    while i < len(pattern):
        c = pattern[i]
        if pattern.startswith("**/", i) and (i == 0 or pattern[i - 1] == "/"):
            out.append("(?:.*/)?")
            i += 3
        elif pattern.startswith("**", i):
            out.append(".*")
            i += 2
        elif c == "*":
            out.append("[^/]*")
            i += 1
        elif c == "?":
            out.append("[^/]")
            i += 1
        elif c == "[":
            j = i + 1
            negate = j < len(pattern) and pattern[j] in "!^"
            if negate:
                j += 1
            k = j + 1 if j < len(pattern) and pattern[j] == "]" else j
            k = pattern.index("]", k)
            body = pattern[j:k].replace("\\", "\\\\")
            out.append(f"(?!/)[{'^' if negate else ''}{body}]")
            i = k + 1
        elif c == "\\" and i + 1 < len(pattern):
            out.append(re.escape(pattern[i + 1]))
            i += 2
        else:
            out.append(re.escape(c))
            i += 1
    return re.compile("^" + "".join(out) + "$", re.S)


def read_readings(path, where):
    """{series: [(time_seconds, value)]} in file order; checks the format."""
    series = {}
    previous = None
    with open(path, newline="") as f:
        raw = f.read()
    if "\r" in raw:
        problem(where, "line ends must be '\\n'")
    lines = raw.split("\n")
    if lines and lines[-1] == "":
        lines.pop()
    else:
        problem(where, "file must end with a newline")
    if not lines or lines[0] != "time,series,value":
        problem(where, "first line must be the header 'time,series,value'")
        return series
    for n, line in enumerate(lines[1:], start=2):
        fields = line.split(",")
        if len(fields) != 3:
            problem(where, f"line {n}: expected 3 fields")
            continue
        t = parse_time(fields[0])
        if t is None:
            problem(where, f"line {n}: bad time {fields[0]!r}")
            continue
        name = fields[1]
        if not name or len(name.encode()) > 256 or any(ord(ch) < 32 or ord(ch) == 127 for ch in name):
            problem(where, f"line {n}: bad series name {name!r}")
        try:
            v = float(fields[2])
            if not math.isfinite(v):
                raise ValueError
        except ValueError:
            problem(where, f"line {n}: bad value {fields[2]!r}")
            continue
        if previous is not None and t < previous:
            problem(where, f"line {n}: time goes backwards")
        previous = t
        series.setdefault(name, []).append((t, v))
    return series


def check_config(path, where):
    try:
        with open(path) as f:
            doc = yaml.safe_load(f)
    except (OSError, yaml.YAMLError) as e:
        problem(where, f"cannot load: {e}")
        return []
    # Fixture configs hold profiles and, where a fixture's story has planned
    # changes or maintenance, `annotations` (README "Using it"); nothing else.
    if (not isinstance(doc, dict) or "series" not in doc or not set(doc) <= {"series", "annotations"}
            or not isinstance(doc["series"], list)):
        problem(where, "top level must be 'series' (a list) and optionally 'annotations'")
        return []
    for i, a in enumerate(doc.get("annotations") or []):
        w = f"{where} annotations[{i}]"
        if not isinstance(a, dict) or a.get("kind") not in ("planned-change", "maintenance"):
            problem(w, "must be a mapping with kind planned-change or maintenance")
        elif a["kind"] == "planned-change" and not (
                isinstance(a.get("at"), datetime) or parse_time(str(a.get("at"))) is not None):
            problem(w, "a planned change needs `at`, an RFC 3339 time")
    profiles = []
    for i, p in enumerate(doc["series"]):
        w = f"{where} series[{i}]"
        if not isinstance(p, dict):
            problem(w, "must be a mapping")
            continue
        extra = set(p) - GUARANTEED_KEYS - OPTIONAL_KEYS
        if extra:
            problem(w, f"unknown keys: {sorted(extra)}")
        missing = REQUIRED_KEYS - set(p)
        if missing:
            problem(w, f"missing keys (give them explicitly in fixtures): {sorted(missing)}")
            continue
        if p["kind"] not in KINDS:
            problem(w, f"kind {p['kind']!r}")
        if p["gaps"] not in GAPS:
            problem(w, f"gaps {p['gaps']!r}")
        if not isinstance(p["seasons"], list) or any(parse_duration(s) is None for s in p["seasons"]):
            problem(w, f"seasons {p['seasons']!r}")
        if not isinstance(p["warmup"], int) or not 4 <= p["warmup"] <= 1000000:
            problem(w, "warmup must be an integer in [4, 1000000]")
        if not isinstance(p["arl0"], (int, float)) or not 10 <= p["arl0"] <= 1e7:
            problem(w, "arl0 must be in [10, 1e7]")
        if not isinstance(p["shift"], (int, float)) or not 0 < p["shift"] <= 10:
            problem(w, "shift must be in (0, 10]")
        d = p["detectors"]
        if not isinstance(d, list) or not d or len(set(d)) != len(d) or not set(d) <= DETECTORS:
            problem(w, f"detectors {d!r}")
        elif not isinstance(p["agree"], int) or not 1 <= p["agree"] <= len(d):
            problem(w, f"agree must be in [1, {len(d)}]")
        if "silence_after" in p and parse_duration(p["silence_after"]) is None:
            problem(w, f"silence_after {p['silence_after']!r}")
        profiles.append(p)
    return profiles


def check_window(w, where, key):
    win = w.get(key)
    if not isinstance(win, dict) or set(win) != {"from", "to"}:
        problem(where, f"{key} must be {{from, to}}")
        return None
    a, b = parse_time(win["from"]), parse_time(win["to"])
    if a is None or b is None or not a < b:
        problem(where, f"{key} must hold two RFC 3339 UTC times with from < to")
        return None
    return a, b


def check_expect(fixture_dir, name):
    where = f"{name}/expect.json"
    if not os.path.isfile(os.path.join(fixture_dir, "SOURCE.md")):
        problem(name, "SOURCE.md is missing")
    with open(os.path.join(fixture_dir, "expect.json")) as f:
        ex = json.load(f)
    for key in ("schema", "fixture", "description", "inputs", "config", "span", "series",
                "unmatched_alerts", "expected"):
        if key not in ex:
            problem(where, f"missing {key}")
            return None
    if ex["schema"] != "plumbline.replay-fixture/1":
        problem(where, "schema must be plumbline.replay-fixture/1")
    if ex["fixture"] != name:
        problem(where, f"fixture must be {name!r}")
    if ex["unmatched_alerts"] not in ("forbidden", "allowed"):
        problem(where, "unmatched_alerts must be forbidden | allowed")

    data = {}
    for inp in ex["inputs"]:
        for s, rows in read_readings(os.path.join(fixture_dir, inp), f"{name}/{inp}").items():
            data.setdefault(s, []).extend(rows)
    for rows in data.values():
        rows.sort(key=lambda r: r[0])
    all_times = sorted(t for rows in data.values() for t, _ in rows)
    if all_times and (parse_time(ex["span"]["first"]) != all_times[0] or
                      parse_time(ex["span"]["last"]) != all_times[-1]):
        problem(where, "span does not match the first and last reading")

    profiles = check_config(os.path.join(fixture_dir, ex["config"]), f"{name}/{ex['config']}")
    listed = {s["name"]: s for s in ex["series"]}
    if set(listed) != set(data):
        problem(where, f"series {sorted(listed)} but readings hold {sorted(data)}")
    for s, info in listed.items():
        rows = data.get(s, [])
        if info["readings"] != len(rows):
            problem(where, f"{s}: readings {info['readings']} but file has {len(rows)}")
        profile = next((p for p in profiles if glob_to_regex(str(p["match"])).match(s)), None)
        if profile is None:
            problem(where, f"{s}: no profile in the config matches")
            continue
        if profile["warmup"] != info["warmup"]:
            problem(where, f"{s}: warmup {info['warmup']} but config says {profile['warmup']}")
        if "every" in profile and rows:
            # Bucketed: armed at the end of observation warmup + 1; the first
            # bucket, not covered from its start, is dropped (detectors/intake.h).
            width = parse_duration(profile["every"])
            first_bucket = rows[0][0] - rows[0][0] % width
            if parse_time(info["armed_at"]) != first_bucket + (info["warmup"] + 2) * width:
                problem(where, f"{s}: armed_at must be the end of bucket number warmup + 2")
        elif info["warmup"] < len(rows) and parse_time(info["armed_at"]) != rows[info["warmup"]][0]:
            problem(where, f"{s}: armed_at must be the time of reading number warmup + 1")

    ids = set()
    for e in ex["expected"]:
        w = f"{where} {e.get('id', '?')}"
        if e.get("id") in ids or not e.get("id"):
            problem(w, "ids must be present and unique")
        ids.add(e.get("id"))
        if e.get("series") not in listed:
            problem(w, f"unknown series {e.get('series')!r}")
        kind = e.get("kind")
        if kind not in ALERT_KINDS | {"none"}:
            problem(w, f"kind {kind!r}")
        if e.get("direction") not in DIRECTIONS:
            problem(w, f"direction {e.get('direction')!r}")
        if not isinstance(e.get("required"), bool) or not isinstance(e.get("planned"), bool):
            problem(w, "required and planned must be booleans")
        if not e.get("basis") or not e.get("notes"):
            problem(w, "basis and notes are required")
        for k in e.get("also_kinds", []) + e.get("quiet_kinds", []):
            if k not in ALERT_KINDS:
                problem(w, f"kind {k!r} in also_kinds/quiet_kinds")
        if kind == "none":
            check_window(e, w, "quiet_window")
            if e.get("direction") != "none":
                problem(w, "a 'none' entry has direction none")
        else:
            win = check_window(e, w, "change_at_window")
            if win and "change_at" in e:
                c = parse_time(e["change_at"])
                if c is None or not win[0] <= c < win[1]:
                    problem(w, "change_at must lie in change_at_window")
            if "detected_by" in e and win:
                d = parse_time(e["detected_by"])
                if d is None or d < win[0]:
                    problem(w, "detected_by must be a time after the window opens")
    return data, ex


# ---------------------------------------------------------------------------
# Facts recomputed from the committed readings (COMP)
# ---------------------------------------------------------------------------

def to_text(t):
    return (datetime(1970, 1, 1, tzinfo=timezone.utc) + timedelta(seconds=t)).strftime("%Y-%m-%dT%H:%M:%SZ")


def facts_nile(data):
    x = [v for _, v in data["nile/aswan/flow"]]
    best = min(range(1, len(x)), key=lambda k: sum((v - sum(x[:k]) / k) ** 2 for v in x[:k]) +
               sum((v - sum(x[k:]) / (len(x) - k)) ** 2 for v in x[k:]))
    last_old_year = int(to_text(data["nile/aswan/flow"][best - 1][0])[:4])
    m1, m2 = sum(x[:best]) / best, sum(x[best:]) / (len(x) - best)
    if last_old_year != 1898 or abs(m1 - 1097.75) > 1e-9 or abs(m2 - 849.972) > 1e-3:
        problem("nile facts", f"least-squares change after {last_old_year}, means {m1}, {m2}")
    if sum(x) != 91935:
        problem("nile facts", "sum must be 91935 (REFERENCES.md section 6)")
    return f"least-squares change after {last_old_year}: means {m1:.2f} -> {m2:.3f}"


def facts_coal(data):
    t = [s / 86400.0 for s, _ in data["coal/uk/disasters"]]
    n, t0, t1 = len(t), t[0], t[-1]

    def loglik(k):  # change right after event k (1-based), window [first, last] event
        tau = t[k - 1]
        a, b = tau - t0, t1 - tau
        return k * math.log(k / a) + (n - k) * math.log((n - k) / b)
    best = max(range(2, n - 1), key=loglik)
    tau = t[best - 1]
    r1 = best / ((tau - t0) / 365.25)
    r2 = (n - best) / ((t1 - tau) / 365.25)
    when = to_text(tau * 86400)
    if n != 191 or best != 125 or not when.startswith("1890-03-10"):
        problem("coal facts", f"MLE change after disaster {best} ({when}); REFERENCES.md says the 125th")
    return f"{n} disasters; Poisson MLE change after disaster {best} ({when[:10]}), rate {r1:.2f} -> {r2:.3f}/yr"


def facts_seatbelts(data):
    rows = data["seatbelts/uk/drivers_ksi"]
    if rows[168][1] != 1494 or rows[169][1] != 1057 or not to_text(rows[169][0]).startswith("1983-02-01"):
        problem("seatbelts facts", "Jan/Feb 1983 must be 1494/1057 with Feb 1983 at row 170")
    before = [v for _, v in rows[145:169]]
    after = [v for _, v in rows[169:]]
    return (f"mean KSI 24 months before the law {sum(before) / len(before):.0f}, "
            f"{len(after)} months after {sum(after) / len(after):.0f}")


def facts_beaver2(data):
    rows = data["beaver2/body/temp_c"]
    if to_text(rows[38][0]) != "1990-11-03T21:50:00Z" or any(b[0] - a[0] != 600 for a, b in zip(rows, rows[1:])):
        problem("beaver2 facts", "row 39 must be 21:50Z (15:50 CST) and spacing 10 min")
    pre = [v for _, v in rows[4:32]]
    post = [v for _, v in rows[38:]]
    return f"mean temp rows 5-32 {sum(pre) / len(pre):.2f} C, rows 39-100 {sum(post) / len(post):.2f} C"


def facts_airline(data):
    x = [math.exp(v) for _, v in data["airline/passengers/log"]]
    if round(sum(round(v) for v in x)) != 40363:
        problem("airline facts", "exp(values) must round back to AirPassengers (sum 40363)")
    return "exp(value) rounds back to AirPassengers (sum 40363)"


def facts_harbourside(data, ex):
    out = []
    entries = {e["id"]: e for e in ex["expected"]}
    freezer = [t for t, _ in data["coldstore/freezer-1/temp_c"]]
    gaps = sorted((b - a, a) for a, b in zip(freezer, freezer[1:]))
    dropout = entries["freezer-sensor-drops-out"]
    if gaps[-1][0] < 12 * 3600 or to_text(gaps[-1][1]) != dropout["change_at"] or gaps[-2][0] > 120:
        problem("harbourside facts", "freezer must have exactly one gap >= 12 h, at the dropout")
    out.append(f"freezer: one gap of {gaps[-1][0] / 3600:.2f} h from {to_text(gaps[-1][1])}")
    meter = data["coldstore/main/energy_kwh"]
    drops = [(a, b) for a, b in zip(meter, meter[1:]) if b[1] < a[1]]
    if len(drops) != 1:
        problem("harbourside facts", f"meter must decrease exactly once (the reset), not {len(drops)} times")
    mgaps = sorted((b[0] - a[0], a[0]) for a, b in zip(meter, meter[1:]))
    if mgaps[-1][0] < 14 * 86400 or mgaps[-2][0] > 4 * 86400:
        problem("harbourside facts", "meter must have one gap >= 14 days and no other gap > 4 days")
    out.append(f"meter: reset at {to_text(drops[0][1][0]) if drops else '?'}, "
               f"gap of {mgaps[-1][0] / 86400:.1f} d from {to_text(mgaps[-1][1])}")
    door = [v for _, v in data["coldstore/dock/door_openings"]]
    if any(v != int(v) or v < 1 for v in door):
        problem("harbourside facts", "door openings must be positive integers")
    pallets = data["coldstore/orders/pallets_shipped"]
    if any(v != int(v) or v < 0 for _, v in pallets) or any(b[0] - a[0] != 3600 for a, b in zip(pallets, pallets[1:])):
        problem("harbourside facts", "pallets must be hourly non-negative integers")
    out.append(f"door openings {int(sum(door))} in {len(door)} readings, pallets {int(sum(v for _, v in pallets))}")
    return "; ".join(out)


FACTS = {"nile": facts_nile, "coal": facts_coal, "seatbelts": facts_seatbelts,
         "beaver2": facts_beaver2, "airline": facts_airline}


def main():
    root = sys.argv[1] if len(sys.argv) > 1 else os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
    names = sorted(d for d in os.listdir(root) if os.path.isfile(os.path.join(root, d, "expect.json")))
    if not names:
        problem(root, "no fixtures found")
    summary = []
    for name in names:
        checked = check_expect(os.path.join(root, name), name)
        if checked is None:
            continue
        data, ex = checked
        counts = ", ".join(f"{s} {len(r)}" for s, r in sorted(data.items()))
        fact = facts_harbourside(data, ex) if name == "harbourside" else FACTS.get(name, lambda d: "")(data)
        summary.append(f"{name}: {counts}\n    {fact}")
    if problems:
        print("validate_fixtures: FAILED", file=sys.stderr)
        for p in problems:
            print("  " + p, file=sys.stderr)
        return 1
    print("validate_fixtures: OK")
    for line in summary:
        print("  " + line)
    return 0


if __name__ == "__main__":
    sys.exit(main())
