"""Window QT on QTDB against annotator 1: which windows carry the error.

For a finished run (`tendline validate RUN --data ../shared/data/qtdb --process`, or
scripts/validate.sh, which leaves its run in target/validation/qtdb), every window of
windows.csv with at least 3 beats annotated by annotator 1 (.q1c) is compared with the
mean annotated beat QT, as the validation report does. Printed: the error of the
superimposed-leads QT, the longest-lead QT and the median beat-level global QT of the
window's beats (from the run's .mark files); the same split by the position of the
record in RECORDS (odd/even, for checking a threshold on both halves); the share of
the squared error between and within records; and the windows with the largest
squared error, to be looked at by hand (median beats and marks are in results.h5).

Usage: python validation/scripts/window_qt_errors.py [RUN] [--data DIR] [--top N]
Needs numpy and wfdb (the repository's .venv).

Findings when it was written (superimposed-leads window QT minus annotator 1, SD in ms
over all / odd / even positions in RECORDS; measured, not estimated):
- After `measure.qrs_onset_all_leads`: -2.2 +/- 22.6 (22.7 / 22.2); 70 % of the squared
  error lies between records (the same lead or morphology problem in every window of a
  record), 30 % within. Against the reference marks placed on the median beat: QRS
  onset error 1.1 +/- 10.9, T end -1.4 +/- 21.9 (correlation 0.21): the T end dominates.
- Choosing per window the better of the two leads' T ends (an oracle) gives 17.6: the
  rest is both leads wrong (long, flat or notched T; biphasic ends).
- Tried and not kept (before the onset change the base was 23.3 (23.9 / 22.4)):
  median of the window's beat-level global QTs alone 27.0; averaged with the median-beat
  QT 22.6 after the onset change (no gain); replacing it when the two disagree by more
  than 10-60 ms 26.7-27.6. Mean with the neighbouring windows (RR within 20 %,
  Fridericia-carried) 22.4 from 23.3. T end method on the median beat: tangent 32.0,
  area 28.9, median of three 24.9 (wavelet 23.3). T amplitude gate measured from the
  T-end level 28.5. Two disagreeing leads: upright then larger T (current) 22.6; larger T
  only 27.6; lower noise/T ratio 25.1; nearer the beat-level QT 27.4; higher T-end
  confidence 27.2. Split-half check (median beats of odd and even beats): median of the
  three T ends 22.5 (LUDB 23.9 unchanged); dropping a lead whose halves differ by more
  than 20 ms 21.7 on 374 windows but LUDB 23.9 -> 24.9 (mean -19.9 -> -22.1). Trimmed
  mean instead of the median beat (0, 0.1, 0.25 trimmed per side) 24.4, 23.9, 22.7.
- Existing settings moved one at a time: min_correlation 0.75 / 0.92 22.8 / 23.6;
  rr_stability 0.1 / 0.3 22.8 / 22.2 (LUDB 23.7 / 24.0); align_half_width_ms 40 / 100
  22.6 / 22.7; linear interpolation 22.5; min_t_amplitude_mv 0.03 / 0.08 23.2 / 22.8
  (LUDB 22.7 / 26.6); max_noise_t_ratio 0.1 / 0.25 23.1 / 22.5; lead_outlier_ms 40 / 50 /
  80 / 100 22.7 / 22.4 / 23.6 / 27.0; delineate.t_xi_end 0.3 / 0.5 23.2 / 22.7 (means
  +5.0 / -8.2). None moves the SD by more than the odd/even halves disagree.
"""

import argparse
import collections
import csv
import os

import numpy as np
import wfdb

BEATS = set("NLRBAaJSVrFejnE/fQ?")


def beat_qts(samples, symbols):
    """(beat sample, QRS onset, T end) per beat: the `(` just before the beat label and
    the `)` right after the first `t` that follows it before the next beat label."""
    out = []
    for i, s in enumerate(symbols):
        if s not in BEATS or i == 0 or symbols[i - 1] != "(":
            continue
        j = i + 1
        while j < len(symbols) and symbols[j] not in BEATS:
            if symbols[j] == "t":
                if j + 1 < len(symbols) and symbols[j + 1] == ")":
                    out.append((samples[i], samples[i - 1], samples[j + 1]))
                break
            j += 1
    return out


def num(v):
    return float(v) if v not in ("", "NaN", "NA") else None


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("run", nargs="?", default="target/validation/qtdb")
    ap.add_argument("--data", default="../shared/data/qtdb")
    ap.add_argument("--top", type=int, default=25)
    a = ap.parse_args()
    order = open(os.path.join(a.data, "RECORDS")).read().split()
    wins = collections.defaultdict(list)
    with open(os.path.join(a.run, "windows.csv")) as f:
        for r in csv.DictReader(f):
            wins[r["record"]].append(r)
    rows = []
    for rec in sorted(wins):
        ann = wfdb.rdann(os.path.join(a.data, rec), "q1c")
        fs = float(wfdb.rdheader(os.path.join(a.data, rec)).fs)
        ref = beat_qts(list(ann.sample), ann.symbol)
        mk = wfdb.rdann(os.path.join(a.run, "annotations", rec), "mark")
        ours = beat_qts(list(mk.sample), mk.symbol)
        for w in wins[rec]:
            lo, hi = round(float(w["start_s"]) * fs), round(float(w["end_s"]) * fs)
            inside = [r for r in ref if lo <= r[0] < hi]
            if len(inside) < 3:
                continue
            beat = [(o[2] - o[1]) / fs * 1000 for o in ours if lo <= o[0] < hi]
            rows.append(
                dict(
                    rec=rec,
                    half=order.index(rec) % 2 if rec in order else -1,
                    start=float(w["start_s"]),
                    ref=float(np.mean([r[2] - r[1] for r in inside])) / fs * 1000,
                    sup=num(w["qt_superimposed_ms"]),
                    longest=num(w["qt_longest_ms"]),
                    beat=float(np.median(beat)) if beat else None,
                    rr=num(w["rr_ms"]),
                    flags=w["flags"],
                )
            )

    def summary(key, sel=lambda r: True):
        e = [r[key] - r["ref"] for r in rows if r[key] is not None and sel(r)]
        if len(e) < 2:
            return f"n {len(e)}"
        return f"n {len(e)} mean {np.mean(e):6.1f} SD {np.std(e, ddof=1):5.1f} ms"

    for key in ("sup", "longest", "beat"):
        print(f"{key:8s} all: {summary(key)} | odd: {summary(key, lambda r: r['half'] == 0)}"
              f" | even: {summary(key, lambda r: r['half'] == 1)}")
    by = collections.defaultdict(list)
    for r in rows:
        if r["sup"] is not None:
            by[r["rec"]].append(r["sup"] - r["ref"])
    allm = np.mean([e for v in by.values() for e in v])
    between = sum(len(v) * (np.mean(v) - allm) ** 2 for v in by.values())
    within = sum(sum((e - np.mean(v)) ** 2 for e in v) for v in by.values())
    print(f"superimposed squared error: {100 * between / (between + within):.0f} % between records,"
          f" {100 * within / (between + within):.0f} % within")
    err = sorted((r for r in rows if r["sup"] is not None), key=lambda r: -((r["sup"] - r["ref"]) ** 2))
    tot = sum((r["sup"] - r["ref"]) ** 2 for r in err)
    f = lambda v: "   -  " if v is None else f"{v:6.1f}"
    print("record    start    ref    sup   err share longest  beat    rr flags")
    for r in err[: a.top]:
        e = r["sup"] - r["ref"]
        print(f"{r['rec']:8s} {r['start']:6.0f} {r['ref']:6.1f} {r['sup']:6.1f} {e:5.0f} {100 * e * e / tot:4.1f}%"
              f" {f(r['longest'])} {f(r['beat'])} {f(r['rr'])} {r['flags']}")


if __name__ == "__main__":
    main()
