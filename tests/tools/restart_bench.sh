#!/usr/bin/env bash
# Measures how long `plumbline serve` takes to come back with many series (a
# measurement, not a test): it streams SERIES series of synthetic seasonal
# readings (load_generator, one reading a minute of event time per series,
# STEPS readings each), stops the daemon with SIGTERM (which writes a
# checkpoint), starts it again on the same state directory and reports
#   - the checkpoint's size and the daemon's peak resident memory before the stop,
#     and while it stops (writing the checkpoint),
#   - "restore": the daemon's own figure for reading, checking and restoring
#     the checkpoint (its "checkpoint restored" log line),
#   - "ready": from the second start to the moment /readyz answers 200,
#   - the peak resident memory of the restarted daemon once ready.
#
# usage: tests/tools/restart_bench.sh [BUILD_DIR] [SERIES] [STEPS]
#        (defaults: build 100000 1100; 1,100 steps put every series past its
#        warmup and its threshold re-fit, so the state is the steady one)
set -euo pipefail
build=${1:-build}
series=${2:-100000}
steps=${3:-1100}
bin="$build/daemon/plumbline"
gen="$build/tests/tools/load_generator"
work=$(mktemp -d /tmp/plumbline-restart-XXXXXX)
trap 'kill "$pid" 2>/dev/null || true; [[ -n "${KEEP:-}" ]] || rm -rf "$work"' EXIT
tcp=$((20000 + RANDOM % 20000))
http=$((tcp + 1))
cat >"$work/plumbline.yaml" <<EOF
series:
  - match: "**"
    seasons: [1d, 7d]
listeners:
  tcp: {port: $tcp}
  http: {port: $http}
shards: 2
storage:
  directory: $work/state
  checkpoint_every: 24h      # only the one SIGTERM writes
shutdown_timeout: 600s
sinks:
  stdout: false
EOF

wait_ready() {  # until /readyz answers 200
  until curl -sf "http://127.0.0.1:$http/readyz" >/dev/null 2>&1; do sleep 0.05; done
}
peak_rss_mib() { awk '/VmHWM/ {printf "%.0f", $2 / 1024}' "/proc/$1/status"; }

"$bin" serve --config "$work/plumbline.yaml" 2>"$work/first.log" &
pid=$!
wait_ready
"$gen" --port "$tcp" --http-port "$http" --connections 8 --series "$series" \
  --steps "$steps" --shift-step "$steps" --linger 0 >"$work/load.txt"
first_rss=$(peak_rss_mib "$pid")
# The high-water mark as the daemon stops: writing the checkpoint at SIGTERM
# needs memory beside the state, and the last sample before exit holds it.
(
  last=$first_rss
  while v=$(peak_rss_mib "$pid" 2>/dev/null) && [[ -n "$v" ]]; do last=$v; sleep 0.05; done
  echo "$last" >"$work/stop_peak"
) &
sampler=$!
stop_begun=$(date +%s.%N)
kill -TERM "$pid"
wait "$pid" || true
wait "$sampler" || true
stop_rss=$(cat "$work/stop_peak")
stop_seconds=$(echo "$(date +%s.%N) - $stop_begun" | bc)
checkpoint_bytes=$(stat -c %s "$work"/state/checkpoint-*.plc | sort -n | tail -1)

begun=$(date +%s.%N)
"$bin" serve --config "$work/plumbline.yaml" 2>"$work/second.log" &
pid=$!
wait_ready
ready_seconds=$(echo "$(date +%s.%N) - $begun" | bc)
second_rss=$(peak_rss_mib "$pid")
restore=$(grep 'checkpoint restored' "$work/second.log" | grep -o ' seconds=[0-9.e+-]*' |
  head -1 | cut -d= -f2)
kill -TERM "$pid"
wait "$pid" || true

echo "load: $(cat "$work/load.txt")"
echo "series=$series steps=$steps checkpoint_bytes=$checkpoint_bytes" \
  "bytes_per_series=$((checkpoint_bytes / series)) first_peak_rss_mib=$first_rss" \
  "stopping_peak_rss_mib=$stop_rss" \
  "sigterm_seconds=$stop_seconds restore_seconds=${restore:-?}" \
  "ready_seconds=$ready_seconds restarted_peak_rss_mib=$second_rss"
