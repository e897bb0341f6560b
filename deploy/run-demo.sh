#!/usr/bin/env bash
# Sets up (packages, build) and replays the built-in Harbourside Cold Store demo:
# two months of readings from five streams of a fictional refrigerated warehouse.
# Prints the alerts as a table; writes them as JSON lines to build/demo-alerts.jsonl.
set -euo pipefail
cd "$(dirname "$0")/.."
deploy/install-deps.sh >/dev/null
PLUMBLINE_TARGETS=plumbline deploy/build.sh >/dev/null
build_dir=${PLUMBLINE_BUILD_DIR:-build}
fixture=replay-fixtures/harbourside
echo "Replaying the Harbourside Cold Store demo ($fixture/SOURCE.md tells its story)."
echo
"$build_dir/daemon/plumbline" replay --config "$fixture/plumbline.yaml" \
  --input "$fixture/readings.csv" --alerts "$build_dir/demo-alerts.jsonl" \
  --events "$build_dir/demo-events.jsonl"
echo
echo "Alerts as JSON lines: $build_dir/demo-alerts.jsonl (all events: $build_dir/demo-events.jsonl)"
