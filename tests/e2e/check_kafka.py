#!/usr/bin/python3
"""Scale-out on Kafka: three instances in one consumer group, one killed.

librdkafka's mock cluster (tests/tools/kafka_mock.cc: three brokers in the
tool's process, on loopback) holds a readings topic of 12 partitions, a
state topic and an alerts topic. Three `plumbline serve` instances join one
group (inputs.kafka, state in the state topic, sinks.kafka). 300,000
readings of 3,000 series (one a minute, a quarter of the series stepping up
by six standard deviations two thirds of the way) are produced at a steady
pace, keyed by series; at 210,000 (while the stepped series raise their alerts) one instance gets SIGKILL and
its partitions move to the two others after the session timeout. When the
group's committed offsets reach the end, the survivors stop (SIGTERM).

Checks: the alerts on the alerts topic, by id, are exactly those of
`plumbline replay` over the same readings (nothing lost, nothing extra);
every id seen more than once carries identical alerts (duplicates are
counted and printed); the killed instance had consumed readings, and a
survivor restored series state from the state topic after the kill.

Usage: check_kafka.py --plumbline BIN --kafka-mock BIN
"""
import argparse
import json
import os
import random
import re
import signal
import subprocess
import sys
import tempfile
import time

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from check_serve import Failure, check, load_alerts  # noqa: E402

SEED = 20261202
SERIES = 3000
PER_SERIES = 100
PARTITIONS = 12
INSTANCES = 3
RATE = 15000  # readings a second: the 300,000 take 20 s, so the kill is mid-stream
KILL_AT = 210000  # produced when one instance is killed: as the stepped series alert
TIMEOUT = 240

PROFILES = """series:
  - match: "**"
    seasons: []
    warmup: 30
"""


def write_readings(path):
    """3,000 flat noisy series; every fourth steps up by 6 sd at reading 67."""
    rng = random.Random(SEED)
    start = 1767225600  # 2026-01-01T00:00:00Z
    with open(path, "w", encoding="utf-8") as f:
        for i in range(PER_SERIES):
            for s in range(SERIES):
                value = 20.0 + rng.gauss(0.0, 1.0) + (6.0 if s % 4 == 0 and i >= 67 else 0.0)
                f.write("%d,coldstore/rack-%04d/temp_c,%.4f\n" % (start + 60 * i, s, value))


def write_config(path, state, brokers, shards=1):
    with open(path, "w", encoding="utf-8") as f:
        f.write(PROFILES)
        f.write("listeners:\n  tcp: {port: 0}\n  http: {port: 0}\n")
        f.write("shards: %d\n" % shards)
        f.write("storage:\n  directory: %s\n  checkpoint_every: 0\n" % state)
        f.write("inputs:\n  kafka:\n    brokers: \"%s\"\n    topic: readings\n"
                "    group: plumbline-e2e\n    state_topic: partition-state\n"
                "    checkpoint_every: 1s\n    session_timeout: 6s\n" % brokers)
        f.write("sinks:\n  stdout: false\n  kafka: {brokers: \"%s\", topic: alerts}\n" % brokers)
        f.write("shutdown_timeout: 60s\n")


class Instance:
    def __init__(self, plumbline, config, log_path):
        self.log_path = log_path
        self.log = open(log_path, "w", encoding="utf-8")
        self.process = subprocess.Popen([plumbline, "serve", "--config", config],
                                        stdout=subprocess.DEVNULL, stderr=self.log)

    def text(self):
        self.log.flush()
        with open(self.log_path, encoding="utf-8") as f:
            return f.read()

    def assigned(self):
        return re.findall(r'msg="kafka partitions assigned".*?partitions=(\S*).*?'
                          r'series_restored=(\d+)', self.text())


def tool(args, *rest):
    out = subprocess.run([args.kafka_mock] + list(rest), capture_output=True, text=True,
                         timeout=TIMEOUT)
    check(out.returncode == 0, "kafka_mock %s: %s" % (rest[0], out.stderr))
    return out.stdout


def run(args, tmp):
    began = time.time()
    readings = os.path.join(tmp, "readings.csv")
    write_readings(readings)
    config = os.path.join(tmp, "replay.yaml")
    with open(config, "w", encoding="utf-8") as f:
        f.write(PROFILES)
    reference = os.path.join(tmp, "replay.jsonl")
    out = subprocess.run([args.plumbline, "replay", "--config", config, "--input", readings,
                          "--alerts", reference], capture_output=True, text=True,
                         timeout=TIMEOUT)
    check(out.returncode == 0, "replay failed: " + out.stderr[-2000:])
    expected = {a["id"]: a for a in load_alerts(reference)}
    check(len(expected) > 100, "the replay raised only %d alerts" % len(expected))

    cluster = subprocess.Popen([args.kafka_mock, "cluster", "readings:%d" % PARTITIONS,
                                "partition-state:3", "alerts:%d" % PARTITIONS],
                               stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True)
    instances = []
    try:
        line = cluster.stdout.readline()
        check(line.startswith("bootstrap="), "no bootstrap from the mock cluster: " + line)
        brokers = line.strip().split("=", 1)[1]
        for n in range(INSTANCES):
            state = os.path.join(tmp, "state-%d" % n)
            path = os.path.join(tmp, "instance-%d.yaml" % n)
            write_config(path, state, brokers)
            instances.append(Instance(args.plumbline, path,
                                      os.path.join(tmp, "instance-%d.log" % n)))
        # Every instance in the group with its share before the readings flow.
        deadline = time.time() + TIMEOUT
        while True:
            shares = [i.assigned()[-1][0] if i.assigned() else "" for i in instances]
            owned = sum(len(s.split(",")) for s in shares if s)
            if all(shares) and owned == PARTITIONS:
                break
            for i in instances:
                check(i.process.poll() is None, "an instance exited:\n" + i.text()[-3000:])
            check(time.time() < deadline, "the group did not form: %s" % shares)
            time.sleep(0.2)
        print("group formed in %.1f s: %s" % (time.time() - began, shares))

        produce_began = time.time()
        producer = subprocess.Popen([args.kafka_mock, "produce", brokers, "readings", readings,
                                     str(RATE)], stdout=subprocess.PIPE, text=True)
        victim = instances[1]
        for line in producer.stdout:
            if line.startswith("produced ") and int(line.split()[1]) >= KILL_AT and \
                    victim.process.poll() is None:
                victim.process.send_signal(signal.SIGKILL)
                victim.process.wait()
                killed_at = time.time()
                print("killed instance 1 at %s readings" % line.split()[1])
        check(producer.wait() == 0, "the producer failed")
        produced_seconds = time.time() - produce_began
        check(victim.process.poll() is not None, "instance 1 was never killed")
        victim_assigned = victim.assigned()

        # Wait until the group has committed every offset (the records follow).
        deadline = time.time() + TIMEOUT
        while True:
            lag = int(tool(args, "lag", brokers, "plumbline-e2e", "readings").split("=")[1])
            if lag == 0:
                break
            for i in (instances[0], instances[2]):
                check(i.process.poll() is None, "a survivor exited:\n" + i.text()[-3000:])
            check(time.time() < deadline, "still %d readings behind" % lag)
            time.sleep(0.5)
        consumed_seconds = time.time() - produce_began
        for i in (instances[0], instances[2]):
            i.process.send_signal(signal.SIGTERM)
        for i in (instances[0], instances[2]):
            code = i.process.wait(timeout=TIMEOUT)
            check(code == 0, "survivor exit status %d:\n%s" % (code, i.text()[-3000:]))

        dumped = tool(args, "dump", brokers, "alerts").splitlines()
    finally:
        for i in instances:
            if i.process.poll() is None:
                i.process.kill()
                i.process.wait()
        cluster.stdin.close()
        cluster.wait(timeout=TIMEOUT)

    check(victim_assigned, "the killed instance never had partitions")
    victim_partitions = set(victim_assigned[-1][0].split(","))
    # A survivor's assignment that holds some of them, with series restored.
    restored_after_kill = [
        (p, int(n)) for i in (instances[0], instances[2]) for p, n in i.assigned()
        if victim_partitions & set(p.split(",")) and int(n) > 0]
    check(restored_after_kill, "no survivor restored the killed instance's partitions (%s)"
          % sorted(victim_partitions))

    got = {}
    duplicates = 0
    for line in dumped:
        alert = json.loads(line)
        if alert["id"] in got:
            duplicates += 1
            check(got[alert["id"]] == alert,
                  "id %s carries different alerts:\n%s\n%s" % (alert["id"], got[alert["id"]],
                                                             alert))
        got[alert["id"]] = alert
    missing = sorted(set(expected) - set(got))
    extra = sorted(set(got) - set(expected))
    check(not missing, "%d alerts of the replay missing, e.g. %s" % (
        len(missing), [expected[m] for m in missing[:3]]))
    check(not extra, "%d alerts the replay does not raise, e.g. %s" % (
        len(extra), [got[e] for e in extra[:3]]))
    for id_, alert in expected.items():
        check(got[id_] == alert, "alert %s differs from the replay's:\n%s\n%s" % (
            id_, got[id_], alert))
    print("ok: %d alerts equal to the replay's; %d duplicates (identical); readings "
          "produced in %.1f s, all consumed and committed %.1f s after the first "
          "(kill to last commit %.1f s); survivors restored %s; total %.1f s" % (
              len(expected), duplicates, produced_seconds, consumed_seconds,
              time.time() - killed_at, restored_after_kill, time.time() - began))


def main(argv):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--plumbline", required=True)
    parser.add_argument("--kafka-mock", required=True)
    args = parser.parse_args(argv)
    with tempfile.TemporaryDirectory(prefix="plumbline-kafka-") as tmp:
        try:
            run(args, tmp)
        except Failure as failure:
            print("FAIL: %s" % failure)
            for n in range(INSTANCES):
                path = os.path.join(tmp, "instance-%d.log" % n)
                if os.path.exists(path):
                    with open(path, encoding="utf-8") as f:
                        print("---- instance %d log (tail) ----\n%s" % (n, f.read()[-4000:]))
            return 1
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
