#!/usr/bin/env bash
# Long-recording benchmark (a measurement, not a test): one 12-lead 1000-Hz
# record of each length in HOURS (default "1 6 24") and each format in
# FORMATS (default "wfdb edf"; "ishne" too) run alone with --jobs 1 and --jobs 2; wall
# time and peak resident memory (/usr/bin/time). Writes bench/long.md.
#
# The records are LUDB record 1 (../shared/data/ludb/1, 10 s, 12 leads at
# 500 Hz) resampled to 1000 Hz (scipy.signal.resample_poly) and repeated to
# the length, written as WFDB format 16 at 1000 ADU/mV and as EDF (1-s data
# records, digital -32768..32767 over -32.768..32.767 mV, so the same 1-uV
# steps) and as ISHNE Holter (1000 nV per unit) in a temporary folder (a 24-hour record takes 2.07 GB of disk there
# in each format; TMPDIR chooses the place).
set -euo pipefail
cd "$(dirname "$0")/.."
hours=${HOURS:-1 6 24}
formats=${FORMATS:-wfdb edf}
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

.venv/bin/python - "$tmp" "$formats" $hours <<'PY'
import sys
from pathlib import Path

import numpy as np
import wfdb
from scipy.signal import resample_poly

out, formats = Path(sys.argv[1]), sys.argv[2].split()
hours = [int(h) for h in sys.argv[3:]]
rec = wfdb.rdrecord("../shared/data/ludb/1")
x = resample_poly(rec.p_signal, 2, 1, axis=0)  # 500 -> 1000 Hz
one = np.round(x * 1000).astype("<i2")  # 10 s, 1 uV steps
hour = np.tile(one, (360, 1)).tobytes()  # frame-interleaved, as format 16 stores it
# EDF: per 1-s data record, each signal's 1000 samples in turn.
hour_edf = np.tile(one.reshape(10, 1000, 12).transpose(0, 2, 1), (360, 1, 1)).tobytes()


def field(s, width):
    return s.encode("ascii").ljust(width)[:width]


for h in hours:
    n = 3_600_000 * h
    if "wfdb" in formats:
        d = out / f"h{h}"
        d.mkdir()
        with open(d / f"h{h}.dat", "wb") as f:
            for _ in range(h):
                f.write(hour)
        lines = [f"h{h} 12 1000 {n}"]
        lines += [f"h{h}.dat 16 1000/mV 16 0 0 0 0 {name}" for name in rec.sig_name]
        (d / f"h{h}.hea").write_text("\n".join(lines) + "\n")
    if "edf" in formats:
        d = out / f"e{h}"
        d.mkdir()
        names = rec.sig_name
        head = field("0", 8) + field("X X X X", 80) + field("Startdate X X X X", 80)
        head += field("01.01.85", 8) + field("00.00.00", 8) + field(str(256 * 13), 8)
        head += field("", 44) + field(str(3600 * h), 8) + field("1", 8) + field("12", 4)
        for width, value in [(16, None), (80, ""), (8, "mV"), (8, "-32.768"), (8, "32.767"),
                             (8, "-32768"), (8, "32767"), (80, ""), (8, "1000"), (32, "")]:
            head += b"".join(field(value if value is not None else x, width) for x in names)
        with open(d / f"e{h}.edf", "wb") as f:
            f.write(head)
            for _ in range(h):
                f.write(hour_edf)
    if "ishne" in formats:
        d = out / f"i{h}"
        d.mkdir()
        head = bytearray(522)
        head[0:8] = b"ISHNE1.0"
        i4 = lambda at, v: head.__setitem__(slice(at, at + 4), int(v).to_bytes(4, "little", signed=True))
        i2 = lambda at, v: head.__setitem__(slice(at, at + 2), int(v).to_bytes(2, "little", signed=True))
        i4(10, 0), i4(14, n), i4(18, 522), i4(22, 522), i2(26, 1), i2(156, 12), i2(272, 1000)
        for k in range(12):
            i2(158 + 2 * k, 5 + k)  # I, II, III, aVR, aVL, aVF, V1..V6 (LUDB's order)
            i2(206 + 2 * k, 1000)  # nV per unit
        crc = 0xFFFF  # CRC-16/CCITT-FALSE of bytes 10..522
        for b in head[10:]:
            crc ^= b << 8
            for _ in range(8):
                crc = ((crc << 1) ^ 0x1021) & 0xFFFF if crc & 0x8000 else (crc << 1) & 0xFFFF
        head[8:10] = crc.to_bytes(2, "little")
        with open(d / f"i{h}.ecg", "wb") as f:
            f.write(bytes(head))
            for _ in range(h):
                f.write(hour)
PY

rows=""
for h in $hours; do
  for fmt in $formats; do
    case $fmt in wfdb) rec=h$h; label="WFDB 16" ;; edf) rec=e$h; label=EDF ;; ishne) rec=i$h; label=ISHNE ;; esac
    for j in 1 2; do
      /usr/bin/time -f "%e %M" -o "$tmp/time" "$bin" run "$tmp/$rec" --out "$tmp/o$rec-$j" --jobs "$j" --quiet --force >/dev/null 2>"$tmp/err" \
        || { cat "$tmp/err"; exit 1; }
      read -r secs kb < "$tmp/time"
      rows+="| $h h | $label | $j | $secs | $((kb / 1024)) |"$'\n'
      rm -rf "$tmp/o$rec-$j"
    done
  done
done
{
  echo "# Long recordings: one record alone"
  echo
  echo "Measured $(date -u +%Y-%m-%dT%H:%MZ) on $(nproc) cores, $(uname -m), with \`scripts/bench_long.sh\`"
  echo "(binary \`${bin#"$PWD"/}\`; load average $(cut -d' ' -f1 /proc/loadavg) at the end). Each record: LUDB 1"
  echo "resampled to 1000 Hz and repeated, 12 leads (8.3 GB of samples as 8-byte values per 24 h)."
  echo
  echo "| record | format | --jobs | wall s | peak RSS MB |"
  echo "|---|---|---:|---:|---:|"
  printf '%s' "$rows"
} > bench/long.md
cat bench/long.md
