#!/usr/bin/env bash
# HTTP load figures for `plumbline serve` (not a test): requests/s of
# GET /v1/series/{name} and POST /v1/readings (100 readings a request) with wrk,
# and the size and time of one /metrics scrape with 1000 series, with the
# default per-series gauge limit (100) and with the limit at 1000.
# Usage: tests/benchmarks/http/http_load.sh [BUILD_DIR] [SECONDS]
# Needs wrk and curl (Debian packages). Quote medians of several runs.
set -euo pipefail
here=$(cd "$(dirname "$0")" && pwd)
build=${1:-build}
seconds=${2:-10}
plumbline=$(realpath "$build/daemon/plumbline")
for tool in wrk curl; do
  command -v $tool >/dev/null || { echo "http_load: $tool not found (apt-get install $tool)" >&2; exit 1; }
done
work=$(mktemp -d)
pid=
cleanup() { [[ -n $pid ]] && kill "$pid" 2>/dev/null && wait "$pid" 2>/dev/null; rm -rf "$work"; }
trap cleanup EXIT

start() {  # start SERIES_LIMIT: runs the daemon, sets $base
  [[ -n $pid ]] && { kill "$pid"; wait "$pid" || true; pid=; }
  rm -rf "$work/state"
  cat >"$work/plumbline.yaml" <<YAML
listeners:
  tcp: {enabled: false}
  http: {address: 127.0.0.1, port: 0}
storage: {directory: $work/state}
sinks: {stdout: false, alert_log: {enabled: false}}
metrics: {series_limit: $1}
series:
  - match: "coldstore/**"
    kind: gauge
    seasons: []
    detectors: [cusum, page-hinkley, bocpd]
    lateness: 1d   # wrk's connections share a thread's series: their requests interleave
YAML
  "$plumbline" serve --config "$work/plumbline.yaml" 2>"$work/log" &
  pid=$!
  for _ in $(seq 100); do grep -q msg=ready "$work/log" && break; sleep 0.1; done
  base=http://$(sed -n 's/.*msg=ready.*http=\(127[0-9.:]*\).*/\1/p' "$work/log")
}

feed_series() {  # feed_series N: 20 readings for each of N series, one POST
  python3 - "$1" >"$work/body.csv" <<'PY'
import sys
n = int(sys.argv[1])
for step in range(20):
    for i in range(n):
        print(f"{1772366400 + 60 * step},coldstore/bay-{i}/temp_c,{-18.5 + (i + step) % 5 * 0.1:.1f}")
PY
  curl -sf --data-binary @"$work/body.csv" "$base/v1/readings" >/dev/null
}

start 100
feed_series 1000
echo "== GET /v1/series/{name} (1000 series held), 2 threads, 16 connections, ${seconds}s"
wrk -t2 -c16 -d"${seconds}s" "$base/v1/series/coldstore/bay-7/temp_c" | grep -E "Requests/sec|Latency|Non-2xx"
echo "== POST /v1/readings, 100 readings a request, 2 threads, 16 connections, ${seconds}s"
wrk -t2 -c16 -d"${seconds}s" -s "$here/post_readings.lua" "$base" | grep -E "Requests/sec|Latency|readings/s|Non-2xx"
curl -sf "$base/metrics" | grep -E '^plumbline_readings_(accepted|late)_total' || true
echo "rejected: $(curl -sf "$base/metrics" | awk '/^plumbline_readings_rejected_total/ { s += $2 } END { print s }')"
echo "== GET /healthz, 2 threads, 16 connections, ${seconds}s"
wrk -t2 -c16 -d"${seconds}s" "$base/healthz" | grep -E "Requests/sec|Latency"

for limit in 100 1000; do
  start $limit
  feed_series 1000
  curl -sf "$base/metrics" >/dev/null  # first scrape creates the gauges
  size=$(curl -sf "$base/metrics" | wc -c)
  lines=$(curl -sf "$base/metrics" | grep -vc '^#')
  time=$(curl -sf -o /dev/null -w '%{time_total}' "$base/metrics")
  echo "== /metrics with 1000 series, series_limit $limit: $size bytes, $lines samples, ${time}s"
done
