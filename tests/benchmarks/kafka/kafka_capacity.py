#!/usr/bin/python3
"""Capacity of one instance on Kafka (a measurement, not a test).

Puts the Kafka e2e test's readings (tests/e2e/check_kafka.py: 3,000 series,
by default 300,000 readings) on librdkafka's mock cluster first, then starts
one `plumbline serve` instance in a fresh group and times how long it takes
to judge them all (the readings count of GET /v1/series), from its
partitions' assignment. Prints readings per second.

Usage: kafka_capacity.py --plumbline BIN --kafka-mock BIN [--shards N]
"""
import argparse
import json
import os
import subprocess
import sys
import tempfile
import time

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, os.path.join(HERE, "..", "..", "e2e"))
from check_kafka import PARTITIONS, PER_SERIES, SERIES, Instance, write_config, \
    write_readings  # noqa: E402


def readings_judged(instance):
    port = None
    for line in instance.text().splitlines():
        if "msg=ready" in line:
            port = int(line.rsplit(":", 1)[1])
    if port is None:
        return 0
    out = subprocess.run(["curl", "-s", "127.0.0.1:%d/v1/series?limit=100000" % port],
                         capture_output=True, text=True)
    try:
        return sum(s["readings"] for s in json.loads(out.stdout)["series"])
    except ValueError:
        return 0


def main(argv):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--plumbline", required=True)
    parser.add_argument("--kafka-mock", required=True)
    parser.add_argument("--shards", type=int, default=1)
    args = parser.parse_args(argv)
    total = SERIES * PER_SERIES
    with tempfile.TemporaryDirectory(prefix="plumbline-kafka-capacity-") as tmp:
        readings = os.path.join(tmp, "readings.csv")
        write_readings(readings)
        cluster = subprocess.Popen([args.kafka_mock, "cluster", "readings:%d" % PARTITIONS,
                                    "partition-state:3", "alerts:%d" % PARTITIONS],
                                   stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True)
        brokers = cluster.stdout.readline().strip().split("=", 1)[1]
        subprocess.run([args.kafka_mock, "produce", brokers, "readings", readings, "0"],
                       check=True, capture_output=True)
        config = os.path.join(tmp, "instance.yaml")
        write_config(config, os.path.join(tmp, "state"), brokers, args.shards)
        instance = Instance(args.plumbline, config, os.path.join(tmp, "instance.log"))
        try:
            while not instance.assigned():
                time.sleep(0.05)
            began = time.time()
            while readings_judged(instance) < total:
                time.sleep(0.1)
            seconds = time.time() - began
        finally:
            instance.process.terminate()
            instance.process.wait()
            cluster.stdin.close()
            cluster.wait()
    print("kafka_capacity: %d readings of %d series, %d shard(s): %.2f s -> %.0f readings/s"
          % (total, SERIES, args.shards, seconds, total / seconds))
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
