#!/usr/bin/env bash
# Runs the tests again under the sanitizers, each in a build directory of its own:
#   build-asan  AddressSanitizer + UndefinedBehaviorSanitizer: every unit and
#               end-to-end test of the default suite except
#                 - the reference checks (label `reference`), which test R and
#                   numpy rather than our code;
#                 - the fuzzers (label `fuzz`), which carry their own sanitizers;
#                 - the statistical trials (label `trials`, tests/detectors/
#                   CMakeLists.txt): recall, false-alarm, delay and stability
#                   figures over thousands of seeded repeats of code the unit
#                   tests already run under the sanitizers. Under ASan they took
#                   282 CPU seconds (152 s on two cores); their statistical
#                   assertions are checked in the plain run.
#               Built at -O1 without debug info (reports name functions, not
#               lines; PLUMBLINE_ASAN_CXXFLAGS="-O1 -g" for lines), only the
#               programs ctest starts (target plumbline_test_programs).
#   build-tsan  ThreadSanitizer: the engine, shard, service, input and sink tests
#               (the code with threads and queues), and replay --threads
# No benchmarks or developer tools are built. Any sanitizer report fails the
# test that raised it, so this script fails too.
# Measured cold (no ccache) on two cores shared with other builds (load 3 to 7):
# `asan` 36 minutes wall, 2,663 CPU seconds: build 1,282 s wall (1,094 CPU s),
# 585 tests 873 s wall (1,569 CPU s); the tests again nearly idle 821 s. On an
# idle machine about 23 minutes (build ~550 s, tests ~820 s); the end-to-end
# tests are 56% of the test time.
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
  cmake -S . -B "$dir" -G Ninja "${launcher[@]}" -DPLUMBLINE_BENCHMARKS=OFF "$@" >/dev/null
}

# Halt on the first report, so that a finding fails its test.
export ASAN_OPTIONS=${ASAN_OPTIONS:-detect_leaks=1:abort_on_error=1:strict_string_checks=1}
export UBSAN_OPTIONS=${UBSAN_OPTIONS:-print_stacktrace=1:halt_on_error=1}
export TSAN_OPTIONS=${TSAN_OPTIONS:-halt_on_error=1:second_deadlock_stack=1}

for variant in "${variants[@]}"; do
  dir="$root/build-$variant"
  case "$variant" in
    asan)
      # CMAKE_BUILD_TYPE=None: exactly these flags. With RelWithDebInfo (-O2 -g)
      # the build and run took 37 minutes on two cores, at -O1 without -g 27
      # (before the trials were left out).
      # A unity build: the library sources compile eight to a file, which took
      # 27% less CPU than file by file (480 s against 662 s for the libraries and
      # the daemon).
      # Shared libraries (BUILD_SHARED_LIBS): linked statically, every test
      # program carried its own instrumented copy of the daemon's libraries
      # (about 180 MB each: inputs_test held 76 MB of data, 68 MB of its
      # relocations and 33 MB of code), and build-asan took 4.0 GB; shared,
      # 767 MB. A CI run ran out of disk linking it.
      configure "$dir" -DPLUMBLINE_ASAN=ON -DCMAKE_BUILD_TYPE=None \
        -DCMAKE_CXX_FLAGS="${PLUMBLINE_ASAN_CXXFLAGS:--O1}" -DCMAKE_UNITY_BUILD=ON \
        -DBUILD_SHARED_LIBS=ON
      cmake --build "$dir" -j "$jobs" --target plumbline_test_programs
      trials=$(ctest --test-dir "$dir" -N -L trials | sed -n 's/^Total Tests: //p')
      echo "run-sanitizers: ASan+UBSan, unit and end-to-end tests; leaving out ${trials:-0}"
      echo "run-sanitizers: statistical trials (label trials), which the plain run checks"
      ctest --test-dir "$dir" --output-on-failure -j "$jobs" -LE 'pending|reference|fuzz|trials'
      ;;
    tsan)
      tsan_tests=(engine_test shard_test service_test inputs_test alert_sinks_test)
      configure "$dir" -DPLUMBLINE_TSAN=ON -DCMAKE_BUILD_TYPE=RelWithDebInfo
      cmake --build "$dir" -j "$jobs" --target "${tsan_tests[@]}" plumbline
      echo "run-sanitizers: ThreadSanitizer, engine, shard, service, input and sink tests," \
        "and replay --threads"
      # Two lanes of about equal length where there are two cores (measured
      # alone: service 161 s, inputs 140 s, shard 84 s, engine 37 s under load):
      # the four one after another were the longest stretch of the run.
      lane() {
        for test in "$@"; do
          if [[ $test == replay_threads ]]; then  # engines on threads, one merge
            /usr/bin/python3 tests/e2e/check_threads.py --plumbline "$dir/daemon/plumbline" \
              --fixture replay-fixtures/harbourside || return 1
          else
            "$dir/tests/daemon/$test" --gtest_brief=1 || return 1
          fi
        done
      }
      if ((jobs >= 2)); then
        lane service_test engine_test replay_threads &
        first=$!
        lane inputs_test shard_test alert_sinks_test &
        second=$!
        status=0
        wait "$first" || status=1
        wait "$second" || status=1
        ((status == 0)) || { echo "run-sanitizers: a ThreadSanitizer test failed" >&2; exit 1; }
      else
        lane "${tsan_tests[@]}" replay_threads
      fi
      ;;
    *) echo "run-sanitizers: unknown variant '$variant' (asan | tsan)" >&2; exit 2 ;;
  esac
done
