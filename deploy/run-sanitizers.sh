#!/usr/bin/env bash
# Runs the tests again under the sanitizers, each in a build directory of its own:
#   build-asan  AddressSanitizer + UndefinedBehaviorSanitizer: every unit and
#               end-to-end test of the default suite (not the reference checks,
#               which test R and numpy rather than our code, nor the fuzzers,
#               which carry their own sanitizers)
#   build-tsan  ThreadSanitizer: the engine, shard, service and input tests
#               (the code with threads and queues)
# Only the targets those tests need are built (no benchmarks). Any sanitizer
# report fails the test that raised it, so this script fails too.
#
#   deploy/run-sanitizers.sh [asan] [tsan]     (both by default)
# PLUMBLINE_SANITIZER_DIR (default: the repository) holds the build directories.
set -euo pipefail
cd "$(dirname "$0")/.."
root=${PLUMBLINE_SANITIZER_DIR:-.}
variants=("$@")
((${#variants[@]})) || variants=(asan tsan)
jobs=$(nproc)
launcher=()
command -v ccache >/dev/null && launcher=(-DCMAKE_CXX_COMPILER_LAUNCHER=ccache)

configure() {  # DIR OPTIONS...
  local dir=$1
  shift
  cmake -S . -B "$dir" -G Ninja -DCMAKE_BUILD_TYPE=RelWithDebInfo "${launcher[@]}" \
    -DPLUMBLINE_BENCHMARKS=OFF "$@" >/dev/null
}

# Halt on the first report, so that a finding fails its test.
export ASAN_OPTIONS=${ASAN_OPTIONS:-detect_leaks=1:abort_on_error=1:strict_string_checks=1}
export UBSAN_OPTIONS=${UBSAN_OPTIONS:-print_stacktrace=1:halt_on_error=1}
export TSAN_OPTIONS=${TSAN_OPTIONS:-halt_on_error=1:second_deadlock_stack=1}

for variant in "${variants[@]}"; do
  dir="$root/build-$variant"
  case "$variant" in
    asan)
      configure "$dir" -DPLUMBLINE_ASAN=ON
      cmake --build "$dir" -j "$jobs"
      echo "run-sanitizers: ASan+UBSan, unit and end-to-end tests"
      ctest --test-dir "$dir" --output-on-failure -j "$jobs" -LE 'pending|reference|fuzz'
      ;;
    tsan)
      tsan_tests=(engine_test shard_test service_test inputs_test)
      configure "$dir" -DPLUMBLINE_TSAN=ON
      cmake --build "$dir" -j "$jobs" --target "${tsan_tests[@]}"
      echo "run-sanitizers: ThreadSanitizer, engine, shard, service and input tests"
      for test in "${tsan_tests[@]}"; do
        "$dir/tests/daemon/$test" --gtest_brief=1
      done
      ;;
    *) echo "run-sanitizers: unknown variant '$variant' (asan | tsan)" >&2; exit 2 ;;
  esac
done
