#!/usr/bin/env bash
# Checks the systemd unit (deploy/systemd/plumbline.service):
#   1. the hardening the deploy contract asks for is there (own user, read-only
#      system, the state directory as the one writable path, no new privileges);
#   2. `systemd-analyze verify` accepts it without a single diagnostic (it
#      reports unknown keys and bad values as warnings only, so any output fails);
#   3. `systemd-analyze security --offline` rates its exposure at most
#      MAX_EXPOSURE (0 = fully sandboxed, 10 = not at all).
# Usage: check_systemd_unit.sh UNIT PLUMBLINE_BINARY [MAX_EXPOSURE]
# Exits 77 (ctest SKIP_RETURN_CODE: reported as skipped, not passed) when
# systemd-analyze is not installed (Debian package systemd).
set -euo pipefail
unit=$1
plumbline=$2
max_exposure=${3:-2.0}

fail() { echo "FAIL: $*" >&2; exit 1; }

for directive in DynamicUser=yes ProtectSystem=strict ReadWritePaths=%S/plumbline \
                 StateDirectory=plumbline NoNewPrivileges=yes ProtectHome=yes \
                 PrivateTmp=yes CapabilityBoundingSet=; do
  grep -qx "$directive" "$unit" || fail "$unit lacks $directive"
done
writable=$(grep -c '^ReadWritePaths=' "$unit")
[[ $writable == 1 ]] || fail "$unit has $writable ReadWritePaths= lines; only the state directory may be writable"

if ! command -v systemd-analyze >/dev/null; then
  echo "SKIPPED: systemd-analyze not found (Debian package systemd); the directives were checked, the unit was not verified"
  exit 77
fi

tmp=$(mktemp -d)
trap 'rm -rf "$tmp"' EXIT
# verify insists that ExecStart's binary exists: point it at the one just built.
sed "s#^ExecStart=/usr/local/bin/plumbline #ExecStart=$plumbline #" "$unit" >"$tmp/plumbline.service"
grep -q "^ExecStart=$plumbline serve " "$tmp/plumbline.service" ||
  fail "$unit has no 'ExecStart=/usr/local/bin/plumbline serve ...' line"

if ! out=$(systemd-analyze verify "$tmp/plumbline.service" 2>&1); then
  echo "$out" >&2
  fail "systemd-analyze verify refused the unit"
fi
if [[ -n $out ]]; then
  echo "$out" >&2
  fail "systemd-analyze verify printed diagnostics"
fi
echo "systemd-analyze verify: no diagnostics"

if ! security=$(systemd-analyze security --offline=true "$tmp/plumbline.service" 2>&1); then
  echo "$security" >&2
  fail "systemd-analyze security --offline failed (systemd >= 250 needed)"
fi
exposure=$(sed -n 's/.*Overall exposure level for plumbline.service: \([0-9.]*\).*/\1/p' <<<"$security")
[[ -n $exposure ]] || fail "no exposure level in: $security"
echo "systemd-analyze security: exposure $exposure (at most $max_exposure allowed)"
awk -v e="$exposure" -v m="$max_exposure" 'BEGIN { exit !(e <= m) }' ||
  fail "exposure $exposure above $max_exposure"
