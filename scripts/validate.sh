#!/usr/bin/env bash
# Runs the pipeline over the reference databases in ../shared/data and scores it.
#   scripts/validate.sh          regenerate the committed results in validation/results/
#   scripts/validate.sh --gate   score into target/validation/ and fail below validation/floors.toml
set -euo pipefail
cd "$(dirname "$0")/.."
data=../shared/data
bin=target/release/tendline
# Always build: a stale binary would score old code (cargo is a no-op when up to date).
cargo build --release -q -p tendline

gate=()
reports=validation/results
if [ "${1:-}" = "--gate" ]; then
  gate=(--floors validation/floors.toml)
  reports=target/validation/reports
fi

status=0
for db in qtdb ludb; do
  run=target/validation/$db
  rm -rf "$run"   # always score this build's output, never a resumed older one
  "$bin" validate "$run" --data "$data/$db" --process --quiet --out "$reports/$db" "${gate[@]}" || status=1
done
# The README's accuracy table is built from the committed reports.
if [ ${#gate[@]} -eq 0 ] && [ $status -eq 0 ]; then
  python3 scripts/accuracy_table.py --write
fi
exit $status
