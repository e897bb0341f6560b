#!/usr/bin/env bash
# Configures and builds Plumbline into build/ (or $PLUMBLINE_BUILD_DIR).
# Extra arguments go to cmake's configure step, e.g. -DPLUMBLINE_ASAN=ON.
# PLUMBLINE_TARGETS="plumbline" builds only the named targets.
set -euo pipefail
cd "$(dirname "$0")/.."
build_dir=${PLUMBLINE_BUILD_DIR:-build}
launcher=()  # ccache, where installed, makes rebuilds in other folders cheap
command -v ccache >/dev/null && launcher=(-DCMAKE_CXX_COMPILER_LAUNCHER=ccache)
cmake -S . -B "$build_dir" -G Ninja -DCMAKE_BUILD_TYPE=RelWithDebInfo "${launcher[@]}" "$@" >/dev/null
cmake --build "$build_dir" -j "$(nproc)" ${PLUMBLINE_TARGETS:+--target $PLUMBLINE_TARGETS}
