#!/usr/bin/env python3
"""Accuracy under added noise: QTDB and LUDB with noise at set SNRs, scored the same way.

Recordings outside a resting lab are rarely clean: muscle activity, electrode
motion and baseline wander overlap the waves the tool delineates. This script
adds each kind of noise to every lead of every record of ../shared/data/qtdb
and ../shared/data/ludb at several signal-to-noise ratios, writes the noisy
copies as WFDB (format 16, 1 uV per unit) with the `wfdb` package, copies the
reference annotations unchanged (noise moves no boundary), runs
`tendline validate --process` on each and on the clean records, and writes
beat detection, delineation and window-QT figures, and how far each noisy run's
window measurements lie from the clean run's, to validation/results/noise.md
(and noise.json).

Signal-to-noise ratio, per lead, as in the noise stress tests of QRS detectors
(the `nst` program of the WFDB software; from memory): the signal power is
that of a sine with the lead's QRS peak-to-peak amplitude, S = A^2 / 8, the
noise power the mean square of the added noise, SNR = 10 log10(S / N) dB. A,
without any annotation: the median over 1-s blocks of each block's
peak-to-peak range (at heart rates above 60 bpm every block holds a QRS).

Noise models (synthetic, seeded per record and lead, so a run is repeatable;
the real noise records of the MIT-BIH Noise Stress Test Database can be used
instead with --noise-record, which takes the first signal of a WFDB record):
- `muscle`: white Gaussian noise band-limited to 1-100 Hz (capped at 0.45 fs),
  a stand-in for muscle (EMG) artifact, whose spectrum overlaps the QRS;
- `motion`: Gaussian noise band-limited to 0.5-10 Hz, the band of electrode
  motion artifact, which overlaps P, QRS and T (the hardest kind for a
  delineator: no filter can remove it without removing the waves);
- `baseline`: baseline wander, a sum of 8 sines at random frequencies in
  0.05-0.5 Hz (respiration and movement) with random phases and amplitudes.

Usage: python3 scripts/validate_noise.py [--bin target/release/tendline]
       [--work DIR] [--snr 18 12 6] [--kinds muscle motion baseline]
       [--db qtdb ludb] [--noise-record PATH] [--keep]
"""

import argparse
import shutil
import sys
import time
import zlib
from fractions import Fraction
from pathlib import Path

import numpy as np
import scipy.signal
import wfdb

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "scripts"))
import validate_rates as vr  # noqa: E402  (shares scoring and table helpers)

DATA = vr.DATA
KINDS = ("muscle", "motion", "baseline")
SNRS = (18.0, 12.0, 6.0)


def qrs_amplitude(x, fs):
    """Median over whole 1-s blocks of each block's peak-to-peak range (NaNs
    ignored); 0 for a lead without a finite block."""
    n = int(fs)
    m = len(x) // n
    if m == 0:
        return 0.0
    blocks = x[: m * n].reshape(m, n)
    ok = np.isfinite(blocks).all(axis=1)
    if not ok.any():
        return 0.0
    b = blocks[ok]
    return float(np.median(b.max(axis=1) - b.min(axis=1)))


def seed_for(record, lead, kind):
    return zlib.crc32(f"{record}/{lead}/{kind}".encode())


def make_noise(kind, n, fs, rng, noise_record=None):
    """Zero-mean noise of the kind asked for, any scale (scaled by the caller)."""
    if noise_record is not None:
        # A real noise record, resampled to fs, looped, from a random offset.
        src = noise_record
        start = int(rng.integers(0, len(src)))
        reps = int(np.ceil((n + start) / len(src))) + 1
        y = np.tile(src, reps)[start : start + n]
    elif kind == "muscle":
        hi = min(100.0, 0.45 * fs)
        sos = scipy.signal.butter(4, [1.0, hi], btype="bandpass", fs=fs, output="sos")
        y = scipy.signal.sosfiltfilt(sos, rng.standard_normal(n + int(4 * fs)))[int(2 * fs) :][:n]
    elif kind == "motion":
        sos = scipy.signal.butter(4, [0.5, 10.0], btype="bandpass", fs=fs, output="sos")
        y = scipy.signal.sosfiltfilt(sos, rng.standard_normal(n + int(4 * fs)))[int(2 * fs) :][:n]
    elif kind == "baseline":
        t = np.arange(n) / fs
        f = rng.uniform(0.05, 0.5, 8)
        ph = rng.uniform(0, 2 * np.pi, 8)
        a = rng.uniform(0.5, 1.0, 8)
        y = (a[:, None] * np.sin(2 * np.pi * f[:, None] * t[None, :] + ph[:, None])).sum(axis=0)
    else:
        raise ValueError(f"noise kind: expected one of {', '.join(KINDS)}, got {kind!r}")
    return y - y.mean()


def scaled_noise(x, fs, snr_db, kind, record, lead, noise_record=None):
    """The noise added to one lead `x` (mV) for `snr_db`, and the amplitude A used."""
    a = qrs_amplitude(x, fs)
    rng = np.random.default_rng(seed_for(record, lead, kind))
    y = make_noise(kind, len(x), fs, rng, noise_record)
    if a <= 0 or not np.any(y):
        return np.zeros(len(x)), a
    target = (a * a / 8.0) / (10.0 ** (snr_db / 10.0))
    return y * np.sqrt(target / np.mean(y * y)), a


def load_noise_record(path, fs):
    r = wfdb.rdrecord(str(path))
    y = r.p_signal[:, 0].astype(float)
    y = y[np.isfinite(y)]
    if r.fs != fs:
        q = Fraction(fs) / Fraction(r.fs).limit_denominator(1000)
        y = scipy.signal.resample_poly(y, q.numerator, q.denominator)
    return y - y.mean()


def noisy_db(db, kind, snr_db, dest, records=None, noise_path=None):
    recs = records or (DATA / db / "RECORDS").read_text().split()
    dest.mkdir(parents=True, exist_ok=True)
    cache = {}
    for r in recs:
        src = wfdb.rdrecord(str(DATA / db / r))
        x = src.p_signal.astype(float)
        nr = None
        if noise_path is not None:
            nr = cache.setdefault(src.fs, load_noise_record(noise_path, src.fs))
        y = x.copy()
        for j, name in enumerate(src.sig_name):
            noise, _ = scaled_noise(x[:, j], src.fs, snr_db, kind, r, name, nr)
            y[:, j] = x[:, j] + noise
        vr.write_like(src, r, src.fs, y, dest)
        for ext in vr.annotation_exts(db, r):
            shutil.copyfile(DATA / db / f"{r}.{ext}", dest / f"{r}.{ext}")
    (dest / "RECORDS").write_text("\n".join(recs) + "\n")


def flag_counts(run):
    """Windows of `windows.csv`, those flagged `unreadable_noise`, those with a QT."""
    rows = vr.read_csv(run / "windows.csv")
    noisy = sum("unreadable_noise" in r.get("flags", "") for r in rows)
    with_qt = sum(bool(r.get("qt_ms")) for r in rows)
    return {"windows": len(rows), "noise_flagged": noisy, "with_qt": with_qt}


def beat_row(rep):
    b = (rep.get("beats") or {}).get("overall")
    if not b:
        return None
    return {"se": b.get("sensitivity_pct"), "ppv": b.get("ppv_pct")}


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--bin", default=str(ROOT / "target" / "release" / "tendline"))
    ap.add_argument("--work", default=str(ROOT / "target" / "validation-noise"))
    ap.add_argument("--snr", type=float, nargs="+", default=list(SNRS))
    ap.add_argument("--kinds", nargs="+", default=list(KINDS), choices=KINDS)
    ap.add_argument("--db", nargs="+", default=["qtdb", "ludb"], choices=["qtdb", "ludb"])
    ap.add_argument("--noise-record", help="WFDB record whose first signal is used as noise "
                    "(e.g. the Noise Stress Test Database's em); replaces the synthetic kinds")
    ap.add_argument("--keep", action="store_true",
                    help="keep the noisy copies and the runs' outputs in --work (several GB for "
                    "every setting over QTDB); by default each is removed once scored, "
                    "the reports (run-*-report) stay")
    a = ap.parse_args()
    work = Path(a.work)
    kinds = ["record"] if a.noise_record else a.kinds
    results = []
    for db in a.db:
        clean_run = work / f"run-{db}-clean"
        rep, secs = vr.score(a.bin, DATA / db, clean_run)
        print(f"{db} clean scored in {secs:.0f} s", file=sys.stderr)
        results.append(entry(db, "none", None, rep, clean_run, None))
        for kind in kinds:
            for snr in a.snr:
                tag = f"{db}-{kind}-{snr:g}"
                data = work / tag
                if data.exists():
                    shutil.rmtree(data)
                t0 = time.time()
                noisy_db(db, kind, snr, data, noise_path=a.noise_record)
                rep, secs = vr.score(a.bin, data, work / f"run-{tag}")
                print(f"{tag}: written in {time.time() - t0 - secs:.0f} s, scored in {secs:.0f} s",
                      file=sys.stderr)
                results.append(entry(db, kind, snr, rep, work / f"run-{tag}", clean_run))
                if not a.keep:
                    shutil.rmtree(data)
                    shutil.rmtree(work / f"run-{tag}")
        if not a.keep:
            shutil.rmtree(clean_run)
    write(results, a.noise_record)


def entry(db, kind, snr, rep, run, clean_run):
    qt = rep.get("qt") or {}
    ag = vr.agreement(clean_run, run) if clean_run else None
    return {
        "database": db,
        "noise": kind,
        "snr_db": snr,
        "beats": beat_row(rep),
        "global": vr.fiducial_rows(rep, "global"),
        "per_lead": vr.fiducial_rows(rep, "per_lead"),
        "window_qt_superimposed": qt.get("window_superimposed"),
        "window_qt_superimposed_lead_ref": qt.get("window_superimposed_lead_ref"),
        "windows": flag_counts(run),
        "agreement": ag,
    }


def label(r):
    return "clean" if r["snr_db"] is None else f"{r['noise']} {r['snr_db']:g} dB"


def write(results, noise_record):
    out, s = vr.start_results("noise", results, "Accuracy under added noise", "validate_noise.py")
    s += [
        "Noise added to every lead at the stated SNR (QRS peak-to-peak A, S = A²/8; N = mean square",
        "of the noise), references unchanged, scored by `tendline validate` exactly as the clean records.",
        ("Noise: the first signal of " + f"`{noise_record}`." if noise_record else
         "Noise models (synthetic, seeded): muscle = Gaussian 1-100 Hz; motion = Gaussian 0.5-10 Hz;"
         " baseline = 8 sines 0.05-0.5 Hz (see the script's docstring)."),
        "Cells: mean ± SD in ms (sensitivity %).",
        "",
        "## Beats and windows",
        "",
        "| database | noise | beat Se % | beat +P % | windows | flagged noisy | with a QT |",
        "|---|---|---:|---:|---:|---:|---:|",
    ]
    for r in results:
        b = r["beats"] or {}
        w = r["windows"]
        se = f"{b['se']:.2f}" if b.get("se") is not None else "–"
        ppv = f"{b['ppv']:.2f}" if b.get("ppv") is not None else "–"
        s.append(f"| {r['database']} | {label(r)} | {se} | {ppv} | {w['windows']} | "
                 f"{w['noise_flagged']} | {w['with_qt']} |")
    s.append("")
    s += vr.fiducial_tables(
        results,
        (("global", "Global marks (QTDB, against annotator 1)"),
         ("per_lead", "Per-lead marks (LUDB, each lead against its reference)")),
        "noise | ",
        "---|",
        label,
    )
    s += ["## Window QT (superimposed leads) against the reference", "",
          "QTDB: the mean annotated QT of the window's beats; LUDB: the longest per-lead reference QT.", "",
          "| database | noise | n | bias ms | SD ms |", "|---|---|---:|---:|---:|"]
    for r in results:
        w = r["window_qt_superimposed"] if r["database"] == "qtdb" else r["window_qt_superimposed_lead_ref"]
        if w:
            s.append(f"| {r['database']} | {label(r)} | {w.get('n')} | {w['bias_ms']:+.1f} | {w['sd_ms']:.1f} |")
    s.append("")
    s += ["## The same windows with and without the noise", "",
          "Noisy minus clean run, windows of `windows.csv` with the value in both runs; share: windows",
          "that differ by more than 8 ms.", "",
          "| database | noise | QT n | QT mean ms | QT SD ms | QT share > 8 ms | QRS SD ms | PR SD ms | RR SD ms |",
          "|---|---|---:|---:|---:|---:|---:|---:|---:|"]

    def sd(v):
        return f"{v['sd']:.1f}" if v and v.get("sd") is not None else "–"

    for r in results:
        a = r.get("agreement")
        if not a:
            continue
        q = a["window_qt_ms"]
        if q.get("sd") is None:
            continue
        s.append(f"| {r['database']} | {label(r)} | {q['n']} | {q['mean']:+.1f} | {q['sd']:.1f} | "
                 f"{q['share_over_8ms_pct']:.1f} % | {sd(a['window_qrs_ms'])} | {sd(a['window_pr_ms'])} | "
                 f"{sd(a['window_rr_ms'])} |")
    s.append("")
    (out / "noise.md").write_text("\n".join(s))
    print("\n".join(s))


if __name__ == "__main__":
    main()
