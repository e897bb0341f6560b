#!/usr/bin/python3
"""Tests of check_fixture.py: each harness rule of replay-fixtures/README.md, the
alert contract and the determinism check, on a small synthetic fixture replayed
by a stand-in for plumbline that writes given alert lines.

    check_fixture_selftest.py        (unittest; standard library only)
"""

import copy
import datetime
import json
import os
import random
import subprocess
import sys
import tempfile
import unittest

HERE = os.path.dirname(os.path.abspath(__file__))
CHECKER = os.path.join(HERE, "check_fixture.py")
sys.path.insert(0, HERE)
import check_fixture  # noqa: E402

# Writes the lines of canned.jsonl (next to this script) to --alerts, and to
# --events with the lines of extra_events.jsonl appended; exits with the status in
# exit_status if present. With a file `vary`, each run appends a counter line so
# two runs differ.
FAKE_PLUMBLINE = r'''#!/usr/bin/python3
import os, sys
here = os.path.dirname(os.path.abspath(__file__))
args = sys.argv[1:]
assert args[0] == "replay", args
alerts = args[args.index("--alerts") + 1]
events = args[args.index("--events") + 1]
with open(os.path.join(here, "canned.jsonl")) as f:
    lines = f.read()
if os.path.exists(os.path.join(here, "vary")):
    with open(os.path.join(here, "vary"), "a+") as f:
        f.seek(0)
        n = len(f.read())
        f.write("x")
    lines += '{"id":"v%d","event":"alert","series":"s/a","kind":"level","direction":"up",' \
             '"detected_at":"2000-01-01T00:00:00Z","change_at":"2000-01-01T00:00:00Z",' \
             '"detectors":["cusum"],"severity":"notify"}\n' % n
with open(alerts, "w") as f:
    f.write(lines)
extra = ""
if os.path.exists(os.path.join(here, "extra_events.jsonl")):
    with open(os.path.join(here, "extra_events.jsonl")) as f:
        extra = f.read()
with open(events, "w") as f:
    f.write(lines + extra)
status = 0
if os.path.exists(os.path.join(here, "exit_status")):
    with open(os.path.join(here, "exit_status")) as f:
        status = int(f.read())
sys.exit(status)
'''

BASE_SPEC = {
    "schema": "plumbline.replay-fixture/1",
    "fixture": "selftest",
    "description": "synthetic",
    "inputs": ["readings.csv"],
    "config": "plumbline.yaml",
    "span": {"first": "1999-01-01T00:00:00Z", "last": "2001-01-01T00:00:00Z"},
    "series": [
        {"name": "s/a", "readings": 10, "warmup": 2, "armed_at": "1999-06-01T00:00:00Z"},
        {"name": "s/b", "readings": 10, "warmup": 2, "armed_at": "1999-06-01T00:00:00Z"},
    ],
    "unmatched_alerts": "forbidden",
    "expected": [
        {"id": "step", "series": "s/a", "kind": "level", "direction": "up",
         "change_at_window": {"from": "2000-01-01T00:00:00Z", "to": "2000-02-01T00:00:00Z"},
         "detected_by": "2000-03-01T00:00:00Z", "required": True, "first": True,
         "max_count": 1},
        {"id": "quiet-b", "series": "s/b", "kind": "none", "direction": "none",
         "quiet_window": {"from": "1999-06-01T00:00:00Z", "to": "2000-06-01T00:00:00Z"},
         "required": True},
    ],
}


def alert(series="s/a", kind="level", direction="up", detected="2000-01-10T00:00:00Z",
          change="2000-01-05T00:00:00Z", ident=None, **extra):
    obj = {"id": ident or f"{series}-{kind}-{direction}-{detected}-{change}", "event": "alert",
           "series": series, "kind": kind, "direction": direction, "detected_at": detected,
           "change_at": change, "detectors": ["cusum"], "severity": "notify"}
    obj.update(extra)
    return obj


GOOD = alert()


class Harness(unittest.TestCase):
    """Runs check_fixture.py as a program on a temporary fixture."""

    def setUp(self):
        self.tmp = tempfile.TemporaryDirectory(prefix="check-fixture-selftest-")
        self.dir = self.tmp.name
        self.fixture = os.path.join(self.dir, "fixture")
        os.makedirs(self.fixture)
        for name in ("readings.csv", "plumbline.yaml"):
            with open(os.path.join(self.fixture, name), "w") as f:
                f.write("# unused by the stand-in\n")
        self.fake = os.path.join(self.dir, "plumbline")
        with open(self.fake, "w") as f:
            f.write(FAKE_PLUMBLINE)
        os.chmod(self.fake, 0o755)

    def tearDown(self):
        self.tmp.cleanup()

    def run_checker(self, alerts, spec=None, raw_lines=None, extra_events="", exit_status=None,
                    vary=False, determinism=False):
        with open(os.path.join(self.fixture, "expect.json"), "w") as f:
            json.dump(spec or BASE_SPEC, f)
        lines = raw_lines if raw_lines is not None else [json.dumps(a) for a in alerts]
        with open(os.path.join(self.dir, "canned.jsonl"), "w") as f:
            f.write("".join(line + "\n" for line in lines))
        with open(os.path.join(self.dir, "extra_events.jsonl"), "w") as f:
            f.write(extra_events)
        if exit_status is not None:
            with open(os.path.join(self.dir, "exit_status"), "w") as f:
                f.write(str(exit_status))
        if vary:
            open(os.path.join(self.dir, "vary"), "w").close()
        command = [sys.executable, CHECKER, "--plumbline", self.fake, "--fixture", self.fixture,
                   "--report", os.path.join(self.dir, "report.json")]
        if determinism:
            command.append("--check-determinism")
        proc = subprocess.run(command, stdout=subprocess.PIPE, stderr=subprocess.STDOUT,
                              check=False)
        self.output = proc.stdout.decode()
        report = None
        if os.path.exists(os.path.join(self.dir, "report.json")):
            with open(os.path.join(self.dir, "report.json")) as f:
                report = json.load(f)
            os.remove(os.path.join(self.dir, "report.json"))
        return proc.returncode, report

    def failed_checks(self, report):
        return [c["check"].split(":")[0] for c in report["checks"] if not c["passed"]]

    def assert_fails(self, alerts, *labels, **kwargs):
        code, report = self.run_checker(alerts, **kwargs)
        self.assertEqual(code, 1, self.output)
        failed = self.failed_checks(report)
        for label in labels:
            self.assertTrue(any(f.startswith(label) for f in failed),
                            f"expected {label!r} to fail; failed: {failed}\n{self.output}")
        self.assertEqual(len(failed), len(labels), f"failed: {failed}\n{self.output}")

    def assert_passes(self, alerts, **kwargs):
        code, report = self.run_checker(alerts, **kwargs)
        self.assertEqual(code, 0, self.output)
        self.assertEqual(report["failed"], 0)
        self.assertIn(f"fixture selftest: {report['passed']} passed, 0 failed", self.output)


class MatchingRules(Harness):
    def test_exact_match_passes(self):
        self.assert_passes([GOOD])

    def test_missing_required_alert_fails(self):
        self.assert_fails([], "step")

    def test_alert_before_armed_at_is_ignored(self):
        early = alert(detected="1999-05-31T23:59:59Z", change="1999-05-01T00:00:00Z")
        self.assert_passes([early, GOOD])
        self.assert_fails([early], "step")

    def test_alert_at_armed_at_is_considered(self):
        at_arm = alert(series="s/b", detected="1999-06-01T00:00:00Z",
                       change="1999-05-01T00:00:00Z")
        self.assert_fails([at_arm, GOOD], "quiet-b", "unmatched alerts forbidden")

    def test_wrong_direction_does_not_match(self):
        self.assert_fails([alert(direction="down")], "step", "unmatched alerts forbidden")

    def test_wrong_kind_does_not_match_unless_in_also_kinds(self):
        variance = alert(kind="variance")
        self.assert_fails([variance], "step", "unmatched alerts forbidden")
        spec = copy.deepcopy(BASE_SPEC)
        spec["expected"][0]["also_kinds"] = ["variance"]
        self.assert_passes([variance], spec=spec)

    def test_direction_any_matches_every_direction(self):
        spec = copy.deepcopy(BASE_SPEC)
        spec["expected"][0]["direction"] = "any"
        for direction in ("up", "down", "none"):
            self.assert_passes([alert(direction=direction)], spec=spec)

    def test_change_window_is_half_open(self):
        self.assert_passes([alert(change="2000-01-01T00:00:00Z")])
        self.assert_fails([alert(change="2000-02-01T00:00:00Z", detected="2000-02-02T00:00:00Z")],
                          "step", "unmatched alerts forbidden")
        self.assert_fails([alert(change="1999-12-31T23:59:59.999999Z")],
                          "step", "unmatched alerts forbidden")

    def test_detected_by_is_inclusive(self):
        self.assert_passes([alert(detected="2000-03-01T00:00:00Z")])
        self.assert_fails([alert(detected="2000-03-01T00:00:00.001Z")],
                          "step", "unmatched alerts forbidden")

    def test_max_count_limits_matches(self):
        second = alert(detected="2000-01-11T00:00:00Z")
        self.assert_fails([GOOD, second], "step")

    def test_first_fails_when_another_kind_comes_first(self):
        spec = copy.deepcopy(BASE_SPEC)
        spec["unmatched_alerts"] = "allowed"
        earlier = alert(kind="rate", direction="down", detected="2000-01-02T00:00:00Z",
                        change="1999-12-01T00:00:00Z")
        self.assert_fails([earlier, GOOD], "step", spec=spec)

    def test_first_does_not_count_silence(self):
        spec = copy.deepcopy(BASE_SPEC)
        spec["unmatched_alerts"] = "allowed"
        silence = alert(kind="silence", direction="none", detected="2000-01-02T00:00:00Z",
                        change="1999-12-01T00:00:00Z")
        self.assert_passes([silence, GOOD], spec=spec)

    def test_first_counts_alerts_after_armed_at_only(self):
        spec = copy.deepcopy(BASE_SPEC)
        early = alert(kind="rate", detected="1999-05-01T00:00:00Z", change="1999-04-01T00:00:00Z")
        self.assert_passes([early, GOOD], spec=spec)

    def test_first_is_by_detected_at_not_file_order(self):
        spec = copy.deepcopy(BASE_SPEC)
        spec["unmatched_alerts"] = "allowed"
        earlier = alert(kind="rate", direction="down", detected="2000-01-02T00:00:00Z",
                        change="1999-12-01T00:00:00Z")
        self.assert_fails([GOOD, earlier], "step", spec=spec)

    def test_optional_entry_tolerates_absence_and_matches(self):
        spec = copy.deepcopy(BASE_SPEC)
        spec["expected"][0]["required"] = False
        self.assert_passes([], spec=spec)
        self.assert_passes([GOOD], spec=spec)

    def test_other_series_does_not_match(self):
        self.assert_fails([alert(series="s/b", detected="2000-07-01T00:00:00Z")],
                          "step", "unmatched alerts forbidden")


class QuietAndUnmatched(Harness):
    def test_alert_in_quiet_window_fails(self):
        noisy = alert(series="s/b", detected="2000-05-31T23:59:59Z", change="2000-05-01T00:00:00Z")
        self.assert_fails([GOOD, noisy], "quiet-b", "unmatched alerts forbidden")

    def test_quiet_window_is_half_open(self):
        spec = copy.deepcopy(BASE_SPEC)
        spec["unmatched_alerts"] = "allowed"
        after = alert(series="s/b", detected="2000-06-01T00:00:00Z", change="2000-05-01T00:00:00Z")
        self.assert_passes([GOOD, after], spec=spec)

    def test_quiet_kinds_limit_the_rule(self):
        spec = copy.deepcopy(BASE_SPEC)
        spec["unmatched_alerts"] = "allowed"
        spec["expected"][1]["quiet_kinds"] = ["level", "rate", "variance"]
        silence = alert(series="s/b", kind="silence", direction="none",
                        detected="2000-01-10T00:00:00Z", change="2000-01-09T00:00:00Z")
        self.assert_passes([GOOD, silence], spec=spec)
        rate = alert(series="s/b", kind="rate", direction="up")
        self.assert_fails([GOOD, rate], "quiet-b", spec=spec)

    def test_unmatched_alert_fails_when_forbidden_only(self):
        stray = alert(kind="rate", direction="down", detected="2000-09-01T00:00:00Z",
                      change="2000-08-01T00:00:00Z")
        self.assert_fails([GOOD, stray], "unmatched alerts forbidden")
        spec = copy.deepcopy(BASE_SPEC)
        spec["unmatched_alerts"] = "allowed"
        self.assert_passes([GOOD, stray], spec=spec)

    def test_alert_matching_an_optional_entry_is_not_unmatched(self):
        spec = copy.deepcopy(BASE_SPEC)
        spec["expected"].append(
            {"id": "maybe", "series": "s/a", "kind": "variance", "direction": "any",
             "change_at_window": {"from": "2000-06-01T00:00:00Z", "to": "2000-07-01T00:00:00Z"},
             "required": False})
        extra = alert(kind="variance", direction="up", detected="2000-06-10T00:00:00Z",
                      change="2000-06-02T00:00:00Z")
        self.assert_passes([GOOD, extra], spec=spec)


class Contract(Harness):
    def test_change_after_detected_fails(self):
        bad = alert(detected="2000-01-10T00:00:00Z", change="2000-01-10T00:00:00.000001Z")
        self.assert_fails([bad], "alert contract")

    def test_times_must_be_utc_with_z(self):
        for text in ("2000-01-10T00:00:00+00:00", "2000-01-10 00:00:00Z", "2000-02-30T00:00:00Z",
                     "2000-01-10T24:00:00Z", 946684800):
            code, report = self.run_checker([alert(detected=text)])
            self.assertEqual(code, 1, self.output)
            self.assertIn("alert contract", self.failed_checks(report), text)

    def test_guaranteed_fields_are_checked(self):
        broken = [
            {k: v for k, v in GOOD.items() if k != "series"},
            dict(GOOD, kind="spike"),
            dict(GOOD, direction="sideways"),
            dict(GOOD, detectors="cusum"),
            dict(GOOD, detectors=[]),
            dict(GOOD, detectors=["cusum", 3]),
            dict(GOOD, event="retrain"),
            dict(GOOD, series="s/unknown"),
            {k: v for k, v in GOOD.items() if k != "id"},
        ]
        for obj in broken:
            code, report = self.run_checker([obj])
            self.assertEqual(code, 1, self.output)
            self.assertIn("alert contract", self.failed_checks(report), obj)

    def test_duplicate_ids_fail(self):
        spec = copy.deepcopy(BASE_SPEC)
        spec["unmatched_alerts"] = "allowed"
        twin = alert(kind="rate", detected="2000-09-01T00:00:00Z", ident=GOOD["id"])
        self.assert_fails([GOOD, twin], "alert contract", spec=spec)

    def test_non_finite_numbers_and_bad_json_fail(self):
        line = json.dumps(GOOD)[:-1] + ', "magnitude": NaN}'
        self.assert_fails(None, "alert contract", "step", raw_lines=[line])
        self.assert_fails(None, "alert contract", "step", raw_lines=["{not json"])
        self.assert_fails(None, "alert contract", raw_lines=[json.dumps(dict(GOOD, magnitude="1"))])
        self.assert_passes(None, raw_lines=[json.dumps(dict(GOOD, magnitude=None, before=1.5))])

    def test_events_must_repeat_the_alert_lines(self):
        retrain = json.dumps({"id": "r", "event": "retrain", "series": "s/a",
                              "detected_at": "2000-01-01T00:00:00Z"}) + "\n"
        self.assert_passes([GOOD], extra_events=retrain)
        self.assert_fails([GOOD], "alert contract", extra_events=json.dumps(GOOD) + "\n")
        bogus = json.dumps({"event": "reboot", "series": "s/a",
                            "detected_at": "2000-01-01T00:00:00Z"}) + "\n"
        self.assert_fails([GOOD], "alert contract", extra_events=bogus)

    def test_replay_failure_fails(self):
        self.assert_fails([GOOD], "replay exit status 3", exit_status=3)

    def test_determinism_detects_differing_runs(self):
        self.assert_passes([GOOD], determinism=True)
        code, report = self.run_checker([GOOD], vary=True, determinism=True)
        self.assertEqual(code, 1, self.output)
        self.assertIn("determinism", self.failed_checks(report))

    def test_malformed_fixture_is_a_usage_error(self):
        spec = copy.deepcopy(BASE_SPEC)
        spec["expected"][0]["kind"] = "spike"
        code, _ = self.run_checker([GOOD], spec=spec)
        self.assertEqual(code, 2, self.output)
        spec = copy.deepcopy(BASE_SPEC)
        del spec["expected"][0]["change_at_window"]
        code, _ = self.run_checker([GOOD], spec=spec)
        self.assertEqual(code, 2, self.output)


class TimeParsing(unittest.TestCase):
    def test_matches_datetime_over_years_1_to_9999(self):
        # Cross-check against Python's own proleptic Gregorian calendar (common
        # practice, no source), including times before 1970 and fractions.
        rng = random.Random(20260301)
        epoch = datetime.datetime(1970, 1, 1)
        lo = datetime.datetime(1, 1, 1) - epoch
        hi = datetime.datetime(9999, 12, 31, 23, 59, 59, 999999) - epoch
        span_us = (hi - lo) // datetime.timedelta(microseconds=1)
        for _ in range(20000):
            offset = datetime.timedelta(microseconds=rng.randrange(span_us)) + lo
            t = epoch + offset
            text = t.strftime("%Y-%m-%dT%H:%M:%S") if t.year >= 1000 else \
                f"{t.year:04d}" + t.strftime("-%m-%dT%H:%M:%S")
            if t.microsecond:
                text += f".{t.microsecond:06d}"
            text += "Z"
            expected_ns = (offset // datetime.timedelta(microseconds=1)) * 1000
            self.assertEqual(check_fixture.parse_utc(text), expected_ns, text)

    def test_leap_second_and_short_fractions(self):
        parse = check_fixture.parse_utc
        self.assertEqual(parse("2016-12-31T23:59:60Z"), parse("2016-12-31T23:59:59.999999Z"))
        self.assertEqual(parse("1970-01-01T00:00:00.5Z"), 500_000_000)
        self.assertEqual(parse("1969-12-31T23:59:59.25Z"), -750_000_000)
        for bad in ("2001-02-29T00:00:00Z", "2000-13-01T00:00:00Z", "2000-01-01T00:60:00Z",
                    "2000-01-01T00:00:00.Z", "2000-01-01T00:00:00z", "2000-01-01T00:00:00"):
            self.assertIsNone(parse(bad), bad)
        self.assertIsNotNone(parse("2000-02-29T00:00:00Z"))


if __name__ == "__main__":
    unittest.main()
