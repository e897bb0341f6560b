#!/usr/bin/env bash
# Installs every Debian package that building, testing and regenerating the
# reference numbers need. Idempotent; run as root on Debian 12 (bookworm).
set -euo pipefail

packages=(
  build-essential cmake ninja-build pkg-config ccache
  libboost-dev libeigen3-dev libyaml-cpp-dev prometheus-cpp-dev
  libgtest-dev libgmock-dev libbenchmark-dev
  # TLS on the listeners (daemon/tls.h), and the openssl command its e2e test
  # uses to make a self-signed certificate
  libssl-dev openssl
  # deploy checks and the scrape test: promtool and a Prometheus server, and
  # systemd-analyze to verify the unit (so that check runs rather than skips)
  prometheus systemd
  # fuzz targets (tests/fuzz): clang and its runtime (libFuzzer, ASan, UBSan)
  clang libclang-rt-14-dev
  # HTTP load figures (tests/benchmarks/http/http_load.sh)
  wrk curl
  # the status page and replay report in a real browser (tests/e2e/check_ui.py)
  chromium
  # the Kafka and MQTT inputs and the Kafka sink (the tests run librdkafka's mock
  # cluster and a mosquitto broker on loopback)
  librdkafka-dev libmosquitto-dev mosquitto mosquitto-clients
  # reference checks: numpy/scipy/statsmodels oracles and R's data sets
  python3 python3-numpy python3-scipy python3-statsmodels r-base-core r-cran-boot
)

missing=()
for p in "${packages[@]}"; do
  dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q 'install ok installed' || missing+=("$p")
done
if ((${#missing[@]} == 0)); then
  echo "install-deps: all ${#packages[@]} packages present"
  exit 0
fi

as_root=()
if ((EUID != 0)); then
  command -v sudo >/dev/null || { echo "install-deps: run as root (missing: ${missing[*]})" >&2; exit 1; }
  as_root=(sudo)
fi
echo "install-deps: installing ${missing[*]}"
"${as_root[@]}" apt-get update -qq
DEBIAN_FRONTEND=noninteractive "${as_root[@]}" apt-get install -y -qq --no-install-recommends "${missing[@]}"
