#!/usr/bin/env bash
# Configures and builds Plumbline into build/ (or $PLUMBLINE_BUILD_DIR).
# Extra arguments go to cmake's configure step, e.g. -DPLUMBLINE_ASAN=ON.
# PLUMBLINE_TARGETS="plumbline" builds only the named targets.
set -euo pipefail
cd "$(dirname "$0")/.."
build_dir=${PLUMBLINE_BUILD_DIR:-build}
cmake -S . -B "$build_dir" -G Ninja -DCMAKE_BUILD_TYPE=RelWithDebInfo "$@" >/dev/null
cmake --build "$build_dir" -j "$(nproc)" ${PLUMBLINE_TARGETS:+--target $PLUMBLINE_TARGETS}
