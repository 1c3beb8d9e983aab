#!/usr/bin/env python3
"""Accuracy at other sampling rates: QTDB and LUDB resampled, scored the same way.

Devices record at 128 (Holter), 250, 500 or 1000 Hz (and more); the pipeline
analyses every lead at `delineate.analysis_fs_hz` and should give the same
accuracy whatever rate the input has. This script resamples every record of
../shared/data/qtdb (250 Hz) to 128, 500 and 1000 Hz and every record of
../shared/data/ludb (500 Hz) to 128, 250 and 1000 Hz with `scipy.signal.resample_poly` (polyphase FIR with a
Kaiser window, the general-purpose reference), writes them as WFDB format 16
at 1 uV per unit with the `wfdb` package, moves every reference annotation to
the new rate (sample x up / down, rounded to the nearest sample: at 250 Hz
from LUDB's 500 Hz that adds up to 2 ms of rounding to the reference),
runs `tendline validate --process` on each and on the native records, and
writes a table of the global and per-lead figures and the window QT to
validation/results/rates.md (and rates.json).

Usage: python3 scripts/validate_rates.py [--bin target/release/tendline] [--work DIR]
The native rows come from the same script, so the table compares like with like.
"""

import argparse
import csv
import json
import shutil
import subprocess
import sys
import time
from fractions import Fraction
from pathlib import Path

import numpy as np
import scipy.signal
import wfdb

ROOT = Path(__file__).resolve().parents[1]
DATA = ROOT.parent / "shared" / "data"
# The native rate first: the other rates are compared with its run.
PLAN = {"qtdb": [250, 128, 500, 1000], "ludb": [500, 128, 250, 1000]}
FIDUCIALS = ["p_on", "p_end", "qrs_on", "qrs_end", "t_peak", "t_end"]


def annotation_exts(db, rec):
    """Reference annotation files beside a record (every extension but the signal's)."""
    out = []
    for p in sorted((DATA / db).glob(f"{rec}.*")):
        ext = p.suffix[1:]
        # QTDB: beats (.atr) and the two cardiologists' boundaries, the files
        # the validation reads; LUDB: every lead's boundary file.
        wanted = ext in ("atr", "q1c", "q2c") if db == "qtdb" else ext not in ("hea", "dat")
        if wanted and p.name == f"{rec}.{ext}":
            out.append(ext)
    return out


def write_like(src, name, fs, p_signal, dest):
    """Write `p_signal` (mV) as WFDB record `name` in `dest` with `src`'s lead
    names, units and comments: format 16 at 1 uV per unit (gain 1000/mV)."""
    wfdb.wrsamp(
        name,
        fs=fs,
        units=src.units,
        sig_name=src.sig_name,
        p_signal=p_signal,
        fmt=["16"] * src.n_sig,
        adc_gain=[1000.0] * src.n_sig,
        baseline=[0] * src.n_sig,
        comments=src.comments,
        write_dir=str(dest),
    )


def resample_db(db, fs_out, dest, records=None):
    recs = records or (DATA / db / "RECORDS").read_text().split()
    dest.mkdir(parents=True, exist_ok=True)
    for r in recs:
        src = wfdb.rdrecord(str(DATA / db / r))
        ratio = Fraction(fs_out) / Fraction(src.fs).limit_denominator(1000)
        up, down = ratio.numerator, ratio.denominator
        x = src.p_signal
        y = x if up == down else scipy.signal.resample_poly(x, up, down, axis=0)
        write_like(src, r, fs_out, y, dest)
        for ext in annotation_exts(db, r):
            a = wfdb.rdann(str(DATA / db / r), ext)
            s = np.rint(np.asarray(a.sample, dtype=float) * up / down).astype(np.int64)
            s = np.clip(s, 0, len(y) - 1)
            # `wfdb.wrann` takes letters only (QTDB's `q1c`, LUDB's `v1` have
            # digits): written under a placeholder extension, then renamed.
            wfdb.wrann(
                r,
                "tmpann",
                s,
                symbol=a.symbol,
                subtype=np.asarray(a.subtype),
                chan=np.asarray(a.chan),
                # `wrann` refuses numbers outside 0-127 (some files use them);
                # the scoring does not read this field.
                num=np.clip(np.asarray(a.num), 0, 127),
                aux_note=a.aux_note,
                fs=fs_out,
                write_dir=str(dest),
            )
            (dest / f"{r}.tmpann").rename(dest / f"{r}.{ext}")
    (dest / "RECORDS").write_text("\n".join(recs) + "\n")


def score(binary, data, run):
    if run.exists():
        shutil.rmtree(run)
    rep = run.parent / (run.name + "-report")
    cmd = [str(binary), "validate", str(run), "--data", str(data), "--process",
           "--quiet", "--out", str(rep), "--bootstrap", "100"]
    t0 = time.time()
    p = subprocess.run(cmd, capture_output=True, text=True)
    if p.returncode not in (0, 1):
        sys.exit(f"validate failed on {data}:\n{p.stdout}\n{p.stderr}")
    return json.loads((rep / "report.json").read_text()), time.time() - t0


def read_csv(path):
    with open(path, newline="") as f:
        return list(csv.DictReader(f))


def agreement(native_run, run):
    """The same records at two rates: per window and per record, how far the
    measurements of the resampled run lie from the native run's."""
    def by_key(path, key):
        return {tuple(r[k] for k in key): r for r in read_csv(path)}

    def spread(a, b, col):
        d = np.array([float(b[k][col]) - float(a[k][col]) for k in a
                      if k in b and a[k][col] and b[k][col]])
        return d, {
            "n": int(len(d)),
            "mean": float(d.mean()) if len(d) else None,
            "sd": float(d.std(ddof=1)) if len(d) > 1 else None,
        }

    out = {}
    wa = by_key(native_run / "windows.csv", ("record", "window"))
    wb = by_key(run / "windows.csv", ("record", "window"))
    for col in ("qt_ms", "qt_superimposed_ms", "qrs_ms", "pr_ms", "rr_ms"):
        d, st = spread(wa, wb, col)
        st["share_over_8ms_pct"] = float(100 * np.mean(np.abs(d) > 8)) if len(d) else None
        out[f"window_{col}"] = st
    sa = by_key(native_run / "summary.csv", ("record",))
    sb = by_key(run / "summary.csv", ("record",))
    for col in ("qt_ms", "qtc_ms", "qrs_ms"):
        d, st = spread(sa, sb, col)
        st["max_abs"] = float(np.abs(d).max()) if len(d) else None
        out[f"record_{col}"] = st
    wide = [(("wide_qrs" in sa[k]["flags"]), ("wide_qrs" in sb[k]["flags"])) for k in sa if k in sb]
    out["record_wide_qrs_flag_differs"] = sum(a != b for a, b in wide)
    out["records"] = len(wide)
    return out


def fiducial_rows(rep, section):
    out = {}
    for f in (rep.get(section) or {}).get("fiducials", []):
        s = f["stats"]
        out[f["fiducial"]] = {
            "n": s.get("n"),
            "se": f.get("sensitivity_pct"),
            "mean": s.get("mean_ms"),
            "sd": s.get("sd_ms"),
        }
    return out


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--bin", default=str(ROOT / "target" / "release" / "tendline"))
    ap.add_argument("--work", default=str(ROOT / "target" / "validation-rates"))
    a = ap.parse_args()
    work = Path(a.work)
    results = []
    for db, rates in PLAN.items():
        native = wfdb.rdheader(str(DATA / db / (DATA / db / "RECORDS").read_text().split()[0])).fs
        for fs in rates:
            if fs == native:
                data = DATA / db
            else:
                data = work / f"{db}-{fs}"
                if data.exists():
                    shutil.rmtree(data)
                t0 = time.time()
                resample_db(db, fs, data)
                print(f"{db} at {fs} Hz written in {time.time() - t0:.0f} s", file=sys.stderr)
            rep, secs = score(a.bin, data, work / f"run-{db}-{fs}")
            print(f"{db} at {fs} Hz scored in {secs:.0f} s", file=sys.stderr)
            qt = rep.get("qt", {})
            results.append({
                "database": db,
                "fs_hz": fs,
                "native": fs == native,
                "agreement": agreement(work / f"run-{db}-{native:g}", work / f"run-{db}-{fs}")
                if fs != native else None,
                "global": fiducial_rows(rep, "global"),
                "per_lead": fiducial_rows(rep, "per_lead"),
                "window_qt_superimposed": qt.get("window_superimposed"),
                "window_qt_single_lead": qt.get("window_single"),
            })
    write(results)


def cell(r):
    if not r or r.get("sd") is None:
        return "–"
    return f"{r['mean']:+.1f} ± {r['sd']:.1f} ({r['se']:.1f} %)"


def fiducial_tables(results, sections, head, align, tag):
    """Markdown lines: per (section, title), a table of every result holding
    that section, one row per result (`tag(result)` in the second column,
    headed `head` and aligned `align`), one cell per fiducial."""
    s = []
    for section, title in sections:
        rows = [r for r in results if r[section]]
        if not rows:
            continue
        s += [f"## {title}", "", "| database | " + head + " | ".join(FIDUCIALS) + " |",
              "|---|" + align + "---|" * len(FIDUCIALS)]
        for r in rows:
            s.append(f"| {r['database']} | {tag(r)} | " + " | ".join(cell(r[section].get(f)) for f in FIDUCIALS) + " |")
        s.append("")
    return s


def start_results(name, results, title, script):
    """Write validation/results/<name>.json; return that folder and the
    Markdown's opening lines (title, what generated it and when)."""
    out = ROOT / "validation" / "results"
    (out / f"{name}.json").write_text(json.dumps(results, indent=1) + "\n")
    when = time.strftime("%Y-%m-%d %H:%M UTC", time.gmtime())
    return out, [f"# {title}", "", f"Generated by `scripts/{script}` on {when}."]


def write(results):
    out, s = start_results("rates", results, "Accuracy at other sampling rates", "validate_rates.py")
    s += [
        "QTDB (native 250 Hz) and LUDB (native 500 Hz) resampled with `scipy.signal.resample_poly`,",
        "references moved to the new rate (rounded to the nearest sample), scored by `tendline validate`",
        "exactly as the native records. Cells: mean ± SD in ms (sensitivity).",
        "",
    ]
    s += fiducial_tables(
        results,
        (("global", "Global marks"), ("per_lead", "Per-lead marks")),
        "fs Hz | ",
        "---:|",
        lambda r: f"{r['fs_hz']}" + (" (native)" if r["native"] else ""),
    )
    s += ["## Window QT (superimposed leads) against the reference", "",
          "| database | fs Hz | n | bias ms | SD ms |", "|---|---:|---:|---:|---:|"]
    for r in results:
        w = r["window_qt_superimposed"]
        if w:
            tag = f"{r['fs_hz']}" + (" (native)" if r["native"] else "")
            s.append(f"| {r['database']} | {tag} | {w.get('n')} | {w['bias_ms']:+.1f} | {w['sd_ms']:.1f} |")
    s.append("")
    s += ["## The same records at another rate, against the native rate's run", "",
          "Window rows: windows of `windows.csv` with the value in both runs (resampled minus native);",
          "share: windows that differ by more than 8 ms (two samples at the 250-Hz analysis rate).",
          "Record rows: `summary.csv` (the median over windows).", "",
          "| database | fs Hz | measure | n | mean ms | SD ms | share > 8 ms / max abs |",
          "|---|---:|---|---:|---:|---:|---:|"]
    for r in results:
        a = r.get("agreement")
        if not a:
            continue
        for key, v in a.items():
            if not isinstance(v, dict) or v.get("sd") is None:
                continue
            last = (f"{v['share_over_8ms_pct']:.1f} %" if "share_over_8ms_pct" in v
                    else f"{v['max_abs']:.1f} ms")
            s.append(f"| {r['database']} | {r['fs_hz']} | {key} | {v['n']} | {v['mean']:+.2f} | {v['sd']:.2f} | {last} |")
        s.append(f"| {r['database']} | {r['fs_hz']} | records whose `wide_qrs` flag differs | {a['records']} | | | {a['record_wide_qrs_flag_differs']} |")
    s.append("")
    (out / "rates.md").write_text("\n".join(s))
    print("\n".join(s))


if __name__ == "__main__":
    main()
