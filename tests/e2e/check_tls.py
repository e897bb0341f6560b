#!/usr/bin/python3
"""End-to-end check of TLS on both listeners (listeners.tcp.tls and
listeners.http.tls), together with the bearer token. Standard library, the
openssl command and curl.

usage: check_tls.py --plumbline BIN SCENARIO

Scenarios:
  tls   the test makes a self-signed certificate for 127.0.0.1 (openssl req)
        and starts the daemon with TLS and a token on both listeners:
        - HTTP: curl --cacert with the token gets 200 on /v1/series and posts
          readings; without the token 401; curl without the certificate
          refuses the server (it is really that certificate); a plain-HTTP
          client on the port gets no answer and is counted as tls_handshake
        - TCP: a Python ssl client sends the token line, `ack`, and readings,
          and reads `durable <n>` back over TLS; a TLS client without the
          token is closed as unauthorized; a plain-text client on the port is
          closed before any of its readings is taken (tls_handshake)
        - every reading sent over TLS is taken, none of the plain-text ones
  files a listener with a certificate but a missing or mismatched key file
        does not start, and says which file; `plumbline check` shows (tls)
"""

import json
import os
import re
import socket
import ssl
import subprocess
import sys

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from check_hostile import csv, server_closes, wait_until  # noqa: E402
from check_serve import Daemon, check, run_scenario  # noqa: E402

TIMEOUT = 120
TOKEN = "harbourside-tls-7e2a"


def make_certificate(tmp, name):
    """A self-signed certificate and key for 127.0.0.1 (openssl req)."""
    cert = os.path.join(tmp, name + ".pem")
    key = os.path.join(tmp, name + ".key")
    result = subprocess.run(
        ["openssl", "req", "-x509", "-newkey", "rsa:2048", "-nodes", "-days", "2",
         "-subj", "/CN=plumbline-e2e", "-addext", "subjectAltName=IP:127.0.0.1",
         "-keyout", key, "-out", cert],
        capture_output=True, text=True, timeout=TIMEOUT)
    check(result.returncode == 0, "openssl req failed: " + result.stderr)
    return cert, key


def write_config(path, state, tls, extra=""):
    with open(path, "w", encoding="utf-8") as f:
        f.write('series:\n  - match: "**"\n    seasons: []\n')
        f.write("listeners:\n  tcp: {port: 0, tls: %s}\n  http: {port: 0, tls: %s}\n" % (tls, tls))
        f.write("storage:\n  directory: %s\n" % state)
        f.write("shutdown_timeout: 20s\n")
        f.write("sinks:\n  stdout: false\n")
        f.write(extra)


def curl(cert, url, *options):
    """curl's exit status, HTTP status and body (status 0 when there is none)."""
    command = ["curl", "-s", "-o", "-", "-w", "\n%{http_code}", "--max-time", "30"]
    if cert:
        command += ["--cacert", cert]
    result = subprocess.run(command + list(options) + [url], capture_output=True,
                            timeout=TIMEOUT)
    body, _, code = result.stdout.rpartition(b"\n")
    return result.returncode, int(code or 0), body


def metric_value(cert, port, name):
    code, status, body = curl(cert, "https://127.0.0.1:%d/metrics" % port,
                              "-H", "Authorization: Bearer " + TOKEN)
    check(code == 0 and status == 200, "GET /metrics over TLS: curl %d, HTTP %d" % (code,
                                                                                     status))
    for line in body.decode().splitlines():
        if line.startswith(name + " "):
            return float(line.rpartition(" ")[2])
    return 0.0


def tls_client(cert, port):
    context = ssl.create_default_context(cafile=cert)
    raw = socket.create_connection(("127.0.0.1", port), timeout=TIMEOUT)
    return context.wrap_socket(raw, server_hostname="127.0.0.1")


def read_durable(sock, want):
    """Reads `durable <n>` lines until n reaches `want`; returns the last n."""
    pending, latest = b"", -1
    while latest < want:
        data = sock.recv(4096)
        check(data, "connection closed before durable %d (last %d)" % (want, latest))
        pending += data
        while b"\n" in pending:
            line, pending = pending.split(b"\n", 1)
            match = re.fullmatch(rb"durable (\d+)", line)
            check(match, "bad acknowledgement %r" % line)
            latest = int(match.group(1))
    return latest


def scenario_tls(args, tmp):
    cert, key = make_certificate(tmp, "server")
    state = os.path.join(tmp, "state")
    config = os.path.join(tmp, "plumbline.yaml")
    write_config(config, state, "{certificate_file: %s, key_file: %s}" % (cert, key),
                 "access:\n  token_env: PLUMBLINE_E2E_TOKEN\n")
    os.environ["PLUMBLINE_E2E_TOKEN"] = TOKEN
    checked = subprocess.run([args.plumbline, "check", "--config", config],
                             capture_output=True, text=True, timeout=TIMEOUT)
    check(checked.returncode == 0 and re.search(r"tcp 127\.0\.0\.1:any \(tls\), http "
                                                r"127\.0\.0\.1:any \(tls\)", checked.stdout),
          "plumbline check does not show tls: %s %s" % (checked.stdout, checked.stderr))
    daemon = Daemon(args.plumbline, config, tmp)
    base = "https://127.0.0.1:%d" % daemon.http_port
    bearer = "Authorization: Bearer " + TOKEN

    # HTTP over TLS, with and without the token.
    code, status, body = curl(cert, base + "/v1/series", "-H", bearer)
    check(code == 0 and status == 200, "TLS + token: curl %d, HTTP %d" % (code, status))
    code, status, _ = curl(cert, base + "/v1/series")
    check(code == 0 and status == 401, "TLS without token: curl %d, HTTP %d" % (code, status))
    code, status, body = curl(cert, base + "/v1/readings", "-H", bearer,
                              "--data-binary", csv("https", 0, 5))
    check(code == 0 and status == 200, "POST over TLS: curl %d, HTTP %d %s" % (code, status,
                                                                                body))
    check(json.loads(body).get("accepted") == 5, "POST over TLS took %s" % body)
    # curl checks the chain by default: without our certificate it must refuse.
    code, status, _ = curl(None, base + "/healthz")
    check(code == 60, "curl without --cacert: exit %d, expected 60 (certificate refused)" %
          code)
    # A plain-HTTP client on the TLS port gets no HTTP answer.
    code, status, _ = curl(None, "http://127.0.0.1:%d/healthz" % daemon.http_port)
    check(code != 0 and status == 0, "plain HTTP on the TLS port: curl %d, HTTP %d" % (
        code, status))
    wait_until("the plain HTTP client counted", lambda: metric_value(
        cert, daemon.http_port,
        'plumbline_connections_dropped_total{input="http",reason="tls_handshake"}') >= 1)

    # TCP over TLS: token, acknowledged stream, readings, durable count back.
    with tls_client(cert, daemon.tcp_port) as s:
        check(s.version() in ("TLSv1.2", "TLSv1.3"), "TLS version %s" % s.version())
        s.sendall(("token %s\nack tls-feed\n" % TOKEN).encode() + csv("tcp-tls", 0, 40))
        check(read_durable(s, 40) == 40, "durable count over TLS")
    # TLS without the token line: closed as unauthorized.
    with tls_client(cert, daemon.tcp_port) as s:
        s.sendall(csv("no-token", 0, 3))
        check(server_closes(s, 10), "TLS connection without a token not closed")
    # Plain text on the TLS port: closed, nothing taken.
    with socket.create_connection(("127.0.0.1", daemon.tcp_port), timeout=TIMEOUT) as s:
        s.sendall(("token %s\n" % TOKEN).encode() + csv("plain-text", 0, 6))
        check(server_closes(s, 10), "plain-text TCP on the TLS port not closed")

    def dropped(input_name, reason):
        return metric_value(cert, daemon.http_port,
                            'plumbline_connections_dropped_total{input="%s",reason="%s"}' % (
                                input_name, reason))
    wait_until("the plain-text TCP client counted", lambda: dropped("tcp", "tls_handshake") == 1)
    check(dropped("tcp", "unauthorized") == 1, "TLS client without token not counted")
    wait_until("45 readings taken", lambda: metric_value(
        cert, daemon.http_port, "plumbline_readings_accepted_total") == 45)
    code, status, body = curl(cert, base + "/v1/series", "-H", bearer)
    names = sorted(s["name"] for s in json.loads(body)["series"])
    check(names == ["https", "tcp-tls"], "series %s: plain-text or token-less readings taken"
          % names)
    daemon.stop()
    check(TOKEN not in daemon.text(), "the token appears in the log")
    print("check_tls: https with --cacert and token 200, without token 401, without the "
          "certificate refused by curl, plain HTTP dropped; TCP over TLS with token and ack "
          "took 40 readings (durable 40); token-less TLS and plain-text TCP closed, counted, "
          "nothing taken")


def scenario_files(args, tmp):
    cert, key = make_certificate(tmp, "server")
    _, other_key = make_certificate(tmp, "other")
    state = os.path.join(tmp, "state")
    config = os.path.join(tmp, "plumbline.yaml")
    cases = [
        ("{certificate_file: %s, key_file: %s}" % (cert, os.path.join(tmp, "absent.key")),
         r"listeners\.tcp tls: cannot use key_file '[^']*absent\.key'"),
        ("{certificate_file: %s, key_file: %s}" % (cert, other_key),
         r"listeners\.tcp tls: cannot use key_file '[^']*other\.key': key values mismatch"),
        ("{certificate_file: %s}" % cert,
         r"listeners\.tcp\.tls: tls needs both certificate_file and key_file"),
    ]
    for tls, expected in cases:
        write_config(config, state, tls)
        result = subprocess.run([args.plumbline, "serve", "--config", config],
                                capture_output=True, text=True, timeout=TIMEOUT)
        check(result.returncode != 0 and re.search(expected, result.stderr),
              "tls %s: exit %d, log lacks /%s/:\n%s" % (tls, result.returncode, expected,
                                                        result.stderr[-2000:]))
    print("check_tls: files: a missing key, a key of another certificate and a lone "
          "certificate each stop the start with the file named")


SCENARIOS = {"tls": scenario_tls, "files": scenario_files}


def main(argv):
    return run_scenario("tls", __doc__.split("\n")[0], SCENARIOS, argv)


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
