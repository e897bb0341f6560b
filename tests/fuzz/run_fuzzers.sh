#!/usr/bin/env bash
# Builds the libFuzzer targets with clang in a build directory of their own and
# runs each for a bounded time, starting from its committed seed corpus
# (tests/fuzz/corpus/<target>); new inputs it finds go to <build-dir>/corpus.
#
#   tests/fuzz/run_fuzzers.sh [--seconds N] [--build-dir DIR] [TARGET ...]
#
# Defaults: 60 s per target, build-fuzz, every target. Exits non-zero on a
# finding (crash, sanitizer report, leak, timeout); the input that caused it is
# kept as <build-dir>/artifacts/<target>-crash-... and can be replayed with
# `<build-dir>/tests/fuzz/<target> FILE`. Prints each target's executions.
set -euo pipefail
here=$(cd "$(dirname "$0")" && pwd)
source_dir=$(cd "$here/../.." && pwd)
seconds=60
build_dir="$source_dir/build-fuzz"
targets=()
while (($#)); do
  case "$1" in
    --seconds) seconds=$2; shift 2 ;;
    --build-dir) build_dir=$2; shift 2 ;;
    -h|--help) sed -n '2,13p' "$0"; exit 0 ;;
    *) targets+=("$1"); shift ;;
  esac
done
((${#targets[@]})) || targets=(reading_parser_fuzzer config_loader_fuzzer snapshot_decoder_fuzzer)

launcher=()
command -v ccache >/dev/null && launcher=(-DCMAKE_CXX_COMPILER_LAUNCHER=ccache)
cmake -S "$source_dir" -B "$build_dir" -G Ninja -DCMAKE_BUILD_TYPE=RelWithDebInfo \
  -DCMAKE_CXX_COMPILER=clang++ "${launcher[@]}" -DPLUMBLINE_FUZZERS=ON \
  -DPLUMBLINE_TESTS=OFF -DPLUMBLINE_BENCHMARKS=OFF >/dev/null
cmake --build "$build_dir" -j "$(nproc)" --target "${targets[@]}"

status=0
for target in "${targets[@]}"; do
  name=${target%_fuzzer}
  corpus="$build_dir/corpus/$name"
  mkdir -p "$corpus" "$build_dir/artifacts"
  log="$build_dir/$target.log"
  echo "run_fuzzers: $target for ${seconds}s (seeds: tests/fuzz/corpus/$name)"
  if "$build_dir/tests/fuzz/$target" -max_total_time="$seconds" -timeout=10 \
       -rss_limit_mb=2048 -print_final_stats=1 \
       -artifact_prefix="$build_dir/artifacts/$target-" \
       "$corpus" "$here/corpus/$name" >"$log" 2>&1; then
    result=ok
  else
    result="FINDING (see $log and $build_dir/artifacts)"
    status=1
    tail -40 "$log"
  fi
  runs=$(sed -n 's/^stat::number_of_executed_units: *//p' "$log" | tail -1)
  echo "run_fuzzers: $target: ${runs:-?} executions, corpus $(ls "$corpus" | wc -l) inputs: $result"
done
exit $status
