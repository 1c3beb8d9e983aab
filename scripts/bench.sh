#!/usr/bin/env bash
# Whole-pipeline benchmark over ../shared/data/qtdb (a measurement, not a test):
#  - tendline run with 1 and 2 threads (wall time, peak memory via /usr/bin/time),
#  - a plain Python script that only reads the records with `wfdb` and
#    band-passes them once with scipy.signal.filtfilt, side by side.
# Writes bench/results.md.
set -euo pipefail
cd "$(dirname "$0")/.."
scripts/setup.sh --python
# The `dist` profile (fat LTO, one codegen unit) is the one for processing.
cargo build --profile dist -q -p tendline
bin=target/dist/tendline
data=../shared/data/qtdb
tmp=$(mktemp -d)
trap 'rm -rf "$tmp"' EXIT

measure() { # label, command...
  local label=$1; shift
  /usr/bin/time -f "%e %M" -o "$tmp/time" "$@" >/dev/null 2>"$tmp/err" || { cat "$tmp/err"; exit 1; }
  read -r secs kb < "$tmp/time"
  echo "$label $secs $kb"
}
[ -x /usr/bin/time ] || { echo "needs /usr/bin/time (apt-get install time)"; exit 1; }

r1=$(measure jobs1 "$bin" run "$data" --out "$tmp/o1" --jobs 1 --quiet --force)
r2=$(measure jobs2 "$bin" run "$data" --out "$tmp/o2" --jobs 2 --quiet --force)
py=$(measure python .venv/bin/python bench/python_baseline.py "$data")

# Keep the tuning section written by scripts/bench_tune.sh.
tune_section=$(sed -n '/<!-- tune-bench -->/,/<!-- \/tune-bench -->/p' bench/results.md 2>/dev/null || true)
read -r _ s1 m1 <<<"$r1"; read -r _ s2 m2 <<<"$r2"; read -r _ sp mp <<<"$py"
{
  echo "# Whole-pipeline benchmark, QTDB (105 records, 47.2 M samples)"
  echo
  echo "Measured $(date -u +%Y-%m-%dT%H:%MZ) on $(nproc) cores, $(uname -m)."
  echo
  echo "| run | wall s | peak RSS MB |"
  echo "|---|---:|---:|"
  echo "| tendline, 1 thread | $s1 | $((m1 / 1024)) |"
  echo "| tendline, 2 threads | $s2 | $((m2 / 1024)) |"
  echo "| Python: wfdb read + scipy filtfilt only | $sp | $((mp / 1024)) |"
  echo
  echo "Speed-up 1→2 threads: $(python3 -c "print(f'{$s1/$s2:.2f}')")×; tendline (2 threads) / Python read+filter: $(python3 -c "print(f'{$s2/$sp:.2f}')")."
} | tee bench/results.md
if [ -n "$tune_section" ]; then printf '\n%s\n' "$tune_section" >> bench/results.md; fi
