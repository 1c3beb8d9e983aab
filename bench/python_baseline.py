"""Baseline for the whole-pipeline benchmark: a plain Python script that only
reads every QTDB record with the `wfdb` package and band-passes it once with
`scipy.signal.filtfilt` (0.5-40 Hz Butterworth, order 2). Prints seconds."""

import sys
import time
from pathlib import Path

import scipy.signal as ss
import wfdb

data = Path(sys.argv[1])
records = [r.strip() for r in (data / "RECORDS").read_text().split() if r.strip()]
t0 = time.perf_counter()
for r in records:
    rec = wfdb.rdrecord(str(data / r))
    b, a = ss.butter(2, [0.5, 40.0], btype="band", fs=rec.fs)
    ss.filtfilt(b, a, rec.p_signal, axis=0)
print(f"{time.perf_counter() - t0:.3f}")
