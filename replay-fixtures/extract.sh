#!/usr/bin/env bash
# Regenerates every replay fixture file from its source, or checks the committed ones.
#
#   replay-fixtures/extract.sh           rewrite the generated files in place, then validate
#   replay-fixtures/extract.sh --check   regenerate into a temporary directory and compare
#                                        byte for byte with the committed files; then validate
#
# Sources: R 4.2 (Debian r-base-core, package datasets) and r-cran-boot for
# nile, coal, airline, beaver2, seatbelts (tools/extract_r_datasets.R); numpy
# 1.24 under /usr/bin/python3 for the Harbourside demo (harbourside/generate.py).
# Hand-written files (expect.json of the R fixtures, every plumbline.yaml,
# SOURCE.md) are not generated; tools/validate_fixtures.py checks them against
# the data.
#
# Exit status: 0 all good; 1 a file differs, is missing, or fails validation;
# 77 a required tool (Rscript, /usr/bin/python3 with numpy and yaml) is missing,
# so a test runner can report "skipped" instead of "failed".
set -euo pipefail

here="$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)"
mode=write
case "${1:-}" in
  "") ;;
  --check) mode=check ;;
  -h|--help) sed -n '2,19p' "${BASH_SOURCE[0]}" | sed 's/^# \{0,1\}//'; exit 0 ;;
  *) echo "extract.sh: unknown argument '$1' (use --check or nothing)" >&2; exit 2 ;;
esac

python=/usr/bin/python3
if ! command -v Rscript >/dev/null 2>&1; then
  echo "extract.sh: Rscript not found (apt-get install r-base-core r-cran-boot)" >&2; exit 77
fi
if ! Rscript -e 'quit(status = !requireNamespace("boot", quietly = TRUE))' >/dev/null 2>&1; then
  echo "extract.sh: R package boot not found (apt-get install r-cran-boot)" >&2; exit 77
fi
if ! "$python" -c 'import numpy, yaml' >/dev/null 2>&1; then
  echo "extract.sh: $python lacks numpy or yaml (apt-get install python3-numpy python3-yaml)" >&2; exit 77
fi

# Files produced by the two generators, relative to replay-fixtures/.
generated=(
  nile/readings.csv
  coal/readings.csv
  airline/readings.csv
  beaver2/readings.csv
  seatbelts/readings.csv
  harbourside/readings.csv
  harbourside/expect.json
)

if [[ $mode == write ]]; then
  out="$here"
else
  out="$(mktemp -d)"
  trap 'rm -rf "$out"' EXIT
fi

Rscript "$here/tools/extract_r_datasets.R" "$out" >/dev/null
"$python" "$here/harbourside/generate.py" --out "$out/harbourside"

status=0
if [[ $mode == check ]]; then
  for f in "${generated[@]}"; do
    if [[ ! -f "$here/$f" ]]; then
      echo "extract.sh: committed file missing: replay-fixtures/$f" >&2; status=1
    elif ! cmp -s "$out/$f" "$here/$f"; then
      echo "extract.sh: replay-fixtures/$f differs from its regenerated copy:" >&2
      diff -u "$here/$f" "$out/$f" | head -n 20 >&2 || true
      status=1
    fi
  done
  if [[ $status == 0 ]]; then
    echo "extract.sh: all ${#generated[@]} generated files match their sources"
  fi
fi

"$python" "$here/tools/validate_fixtures.py" "$here" || status=1
exit $status
