#!/usr/bin/env bash
# Long-recording benchmark (a measurement, not a test): one 12-lead 1000-Hz
# record of each length in HOURS (default "1 6 24") run alone with --jobs 1
# and --jobs 2; wall time and peak resident memory (/usr/bin/time).
# Writes bench/long.md.
#
# The records are LUDB record 1 (../shared/data/ludb/1, 10 s, 12 leads at
# 500 Hz) resampled to 1000 Hz (scipy.signal.resample_poly) and repeated to
# the length, written as WFDB format 16 at 1000 ADU/mV in a temporary folder
# (a 24-hour record takes 2.07 GB of disk there; TMPDIR chooses the place).
set -euo pipefail
cd "$(dirname "$0")/.."
hours=${HOURS:-1 6 24}
scripts/setup.sh --python
# TENDLINE_BIN: another binary (e.g. target/release/tendline for a quick check).
if [ -n "${TENDLINE_BIN:-}" ]; then
  bin=$(realpath "$TENDLINE_BIN")
else
  cargo build --profile dist -q -p tendline
  bin=$PWD/target/dist/tendline
fi
[ -x /usr/bin/time ] || { echo "needs /usr/bin/time (apt-get install time)"; exit 1; }
tmp=$(mktemp -d)
trap 'rm -rf "$tmp"' EXIT

.venv/bin/python - "$tmp" $hours <<'PY'
import sys
from pathlib import Path

import numpy as np
import wfdb
from scipy.signal import resample_poly

out, hours = Path(sys.argv[1]), [int(h) for h in sys.argv[2:]]
rec = wfdb.rdrecord("../shared/data/ludb/1")
x = resample_poly(rec.p_signal, 2, 1, axis=0)  # 500 -> 1000 Hz
one = np.round(x * 1000).astype("<i2")  # 10 s, 1 uV steps
hour = np.tile(one, (360, 1)).tobytes()  # frame-interleaved, as format 16 stores it
for h in hours:
    d = out / f"h{h}"
    d.mkdir()
    with open(d / f"h{h}.dat", "wb") as f:
        for _ in range(h):
            f.write(hour)
    n = 3_600_000 * h
    lines = [f"h{h} 12 1000 {n}"]
    lines += [f"h{h}.dat 16 1000/mV 16 0 0 0 0 {name}" for name in rec.sig_name]
    (d / f"h{h}.hea").write_text("\n".join(lines) + "\n")
PY

rows=""
for h in $hours; do
  for j in 1 2; do
    /usr/bin/time -f "%e %M" -o "$tmp/time" "$bin" run "$tmp/h$h" --out "$tmp/o$h-$j" --jobs "$j" --quiet --force >/dev/null 2>"$tmp/err" \
      || { cat "$tmp/err"; exit 1; }
    read -r secs kb < "$tmp/time"
    rows+="| $h h | $j | $secs | $((kb / 1024)) |"$'\n'
    rm -rf "$tmp/o$h-$j"
  done
done
{
  echo "# Long recordings: one record alone"
  echo
  echo "Measured $(date -u +%Y-%m-%dT%H:%MZ) on $(nproc) cores, $(uname -m), with \`scripts/bench_long.sh\`"
  echo "(binary \`${bin#"$PWD"/}\`; load average $(cut -d' ' -f1 /proc/loadavg) at the end). Each record: LUDB 1"
  echo "resampled to 1000 Hz and repeated, 12 leads (8.3 GB of samples as 8-byte values per 24 h)."
  echo
  echo "| record | --jobs | wall s | peak RSS MB |"
  echo "|---|---:|---:|---:|"
  printf '%s' "$rows"
} > bench/long.md
cat bench/long.md
