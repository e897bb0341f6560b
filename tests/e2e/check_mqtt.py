#!/usr/bin/python3
"""MQTT input against a real mosquitto broker on loopback.

The test starts /usr/sbin/mosquitto on a free loopback port with its own
config file (no system service), and `plumbline serve` with inputs.mqtt
subscribed to two topic filters, series template coldstore/{2}/{3}.
It publishes at QoS 1 with mosquitto_pub:
  - bare numbers on harbourside/freezer-1/temp_c: series
    coldstore/freezer-1/temp_c, time = receipt;
  - reading lines (CSV and JSON) on harbourside/lines/batch, whose series
    they name themselves;
  - a message on a topic no filter matches, and a bad payload (refused).
Then it stops the broker, checks that the daemon keeps trying (reconnect
with backoff), starts the broker again on the same port, publishes more,
and checks through GET /v1/series that every reading arrived exactly once.

Usage: check_mqtt.py --plumbline BIN [--mosquitto /usr/sbin/mosquitto]
"""
import argparse
import json
import os
import re
import subprocess
import sys
import tempfile
import time

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from check_serve import Daemon, Failure, check, free_port  # noqa: E402

TIMEOUT = 60


class Broker:
    def __init__(self, mosquitto, port, tmp):
        self.mosquitto, self.port, self.tmp = mosquitto, port, tmp
        self.config = os.path.join(tmp, "mosquitto.conf")
        with open(self.config, "w", encoding="utf-8") as f:
            f.write("listener %d 127.0.0.1\nallow_anonymous true\npersistence false\n"
                    "log_dest stderr\n" % port)
        self.process = None

    def start(self):
        self.log = open(os.path.join(self.tmp, "mosquitto.log"), "a", encoding="utf-8")
        self.process = subprocess.Popen([self.mosquitto, "-c", self.config],
                                        stdout=self.log, stderr=self.log)
        deadline = time.time() + TIMEOUT
        while subprocess.run(["mosquitto_pub", "-h", "127.0.0.1", "-p", str(self.port),
                              "-t", "probe", "-m", "x"], capture_output=True).returncode:
            check(self.process.poll() is None, "mosquitto exited")
            check(time.time() < deadline, "mosquitto not listening")
            time.sleep(0.1)

    def stop(self):
        self.process.terminate()
        self.process.wait(timeout=TIMEOUT)
        self.log.close()

    def publish(self, topic, message):
        out = subprocess.run(["mosquitto_pub", "-h", "127.0.0.1", "-p", str(self.port),
                              "-q", "1", "-t", topic, "-m", message],
                             capture_output=True, text=True, timeout=TIMEOUT)
        check(out.returncode == 0, "mosquitto_pub: " + out.stderr)


def series_counts(daemon):
    status, data = daemon.request("GET", "/v1/series?limit=1000")
    check(status == 200, "GET /v1/series: %d" % status)
    return {s["name"]: s["readings"] for s in json.loads(data)["series"]}


def wait_counts(daemon, expected):
    deadline = time.time() + TIMEOUT
    while series_counts(daemon) != expected:
        check(time.time() < deadline, "series %s, expected %s" % (series_counts(daemon),
                                                                  expected))
        time.sleep(0.1)


def run(args, tmp):
    port = free_port()
    broker = Broker(args.mosquitto, port, tmp)
    broker.start()
    config = os.path.join(tmp, "plumbline.yaml")
    with open(config, "w", encoding="utf-8") as f:
        f.write('series:\n  - match: "**"\n    seasons: []\n')
        f.write("listeners:\n  tcp: {port: 0}\n  http: {port: 0}\n")
        f.write("storage:\n  directory: %s\n  checkpoint_every: 0\n" % os.path.join(tmp, "state"))
        f.write("sinks:\n  stdout: false\n")
        f.write('inputs:\n  mqtt:\n    host: 127.0.0.1\n    port: %d\n'
                '    client_id: plumbline-e2e\n'
                '    topics: ["harbourside/+/temp_c", "harbourside/lines/#"]\n'
                '    series: "coldstore/{2}/{3}"\n    backoff: 200ms\n    backoff_max: 1s\n'
                % port)
    daemon = Daemon(args.plumbline, config, tmp)
    try:
        deadline = time.time() + TIMEOUT
        while "mqtt connected" not in daemon.text():
            check(time.time() < deadline, "never connected:\n" + daemon.text())
            time.sleep(0.1)
        for value in ("-18.5", "-18.25", " -18.0\n"):
            broker.publish("harbourside/freezer-1/temp_c", value)
        broker.publish("harbourside/lines/batch",
                       "2026-03-01T12:00:00Z,coldstore/dock/door_openings,3\n"
                       '{"time": "2026-03-01T12:01:00Z", "series": '
                       '"coldstore/dock/door_openings", "value": 4}\n')
        broker.publish("harbourside/freezer-1/humidity", "55")  # no filter matches
        broker.publish("harbourside/freezer-2/temp_c", "not a number")  # refused
        expected = {"coldstore/freezer-1/temp_c": 3, "coldstore/dock/door_openings": 2}
        wait_counts(daemon, expected)

        # Broker gone: the daemon keeps trying with backoff; back: reconnected.
        broker.stop()
        deadline = time.time() + TIMEOUT
        while len(re.findall(r'msg="mqtt connect failed"', daemon.text())) < 2:
            check(time.time() < deadline, "no reconnect attempts:\n" + daemon.text())
            time.sleep(0.1)
        broker.start()
        deadline = time.time() + TIMEOUT
        while daemon.text().count('msg="mqtt connected"') < 2:
            check(time.time() < deadline, "never reconnected:\n" + daemon.text())
            time.sleep(0.1)
        broker.publish("harbourside/freezer-1/temp_c", "-17.75")
        expected["coldstore/freezer-1/temp_c"] = 4
        wait_counts(daemon, expected)
        check("mqtt message refused" in daemon.text(), "the bad payload was not refused")
        daemon.stop()
    finally:
        if daemon.process.poll() is None:
            daemon.process.kill()
        if broker.process.poll() is None:
            broker.stop()
    print("ok: bare numbers and reading lines over QoS 1, topic template, refusal, "
          "reconnect after the broker restarted")


def main(argv):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--plumbline", required=True)
    parser.add_argument("--mosquitto", default="/usr/sbin/mosquitto")
    args = parser.parse_args(argv)
    with tempfile.TemporaryDirectory(prefix="plumbline-mqtt-") as tmp:
        try:
            run(args, tmp)
        except Failure as failure:
            print("FAIL: %s" % failure)
            return 1
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
