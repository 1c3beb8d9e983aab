#!/usr/bin/env bash
# Tuning benchmark (a measurement, not a test): a 100-candidate random search
# over all of ../shared/data/qtdb with 5 record-level folds on 2 threads,
# with the example search space (6 delineation thresholds). Wall time and
# peak memory go into the "Tuning" section of bench/results.md.
set -euo pipefail
cd "$(dirname "$0")/.."
cargo build --release -q -p tendline
bin=${CARGO_TARGET_DIR:-target}/release/tendline
data=../shared/data/qtdb
[ -x /usr/bin/time ] || { echo "needs /usr/bin/time (apt-get install time)"; exit 1; }
tmp=$(mktemp -d)
trap 'rm -rf "$tmp"' EXIT
load=$(cut -d' ' -f1 /proc/loadavg)
/usr/bin/time -f "%e %M" -o "$tmp/time" "$bin" tune "$data" \
  --space validation/tune-space.example.toml --out "$tmp/out" \
  --folds 5 --seed 1 --jobs 2 --quiet
read -r secs kb < "$tmp/time"
cands=$(($(wc -l < "$tmp/out/candidates.csv") - 1))
section=$(cat <<MD
<!-- tune-bench -->
## Tuning: \`tendline tune\`, QTDB

Measured $(date -u +%Y-%m-%dT%H:%MZ) on $(nproc) cores, $(uname -m), with
\`scripts/bench_tune.sh\`: random search, ${cands} candidates (the base
configuration included) over the 6 thresholds of
\`validation/tune-space.example.toml\`, all 105 records, 5 record-level folds,
\`--jobs 2\`. Load average (1 min) when it started: ${load} (the 2 cores
are shared with other work, so wall time varies with it).

| run | wall s | peak RSS MB |
|---|---:|---:|
| tune, 2 threads | ${secs} | $((kb / 1024)) |

Target: 600 s or less. Memory is dominated by the cached wavelet transforms
(per record and lead, 6 arrays of f64 at 250 Hz).

Cross-validation of that run (\`cv.md\`):

$(sed -n '/^| fold/,/^| mean/p' "$tmp/out/cv.md")
<!-- /tune-bench -->
MD
)
python3 - "$section" <<'PY'
import re, sys
path = "bench/results.md"
text = open(path).read()
new = sys.argv[1].strip() + "\n"
pat = re.compile(r"<!-- tune-bench -->.*?<!-- /tune-bench -->\n?", re.S)
text = pat.sub(lambda m: new, text) if pat.search(text) else text.rstrip("\n") + "\n\n" + new
open(path, "w").write(text)
PY
sed -n '/<!-- tune-bench -->/,/<!-- \/tune-bench -->/p' bench/results.md
