"""Honesty check of `tendline validate` on the QT Database (issue #6).

Recomputes, independently of the Rust code (crates/evaluate), from the files
themselves read with the `wfdb` Python package (`wfdb.rdann`):
- beat sensitivity and positive predictivity of the run's `.mark` files against
  the QTDB `.atr` reference beats;
- the QRS-onset and T-end error count, mean and SD against the `.q1c` reference;
- the window QT (the run's `windows.csv`) against the mean `.q1c` beat QT of each
  window, and the same for annotator 2 (`.q2c`) on the windows both annotators mark;
- the window QRS duration, PR, P duration and T peak to T end the same way;
- the scored pairs listed in `marks.csv` beside the report;
- the split of those errors into record and beat-to-beat parts and the
  beat-to-beat spread of each side's marks around its own QRS peak;
and asserts agreement with the run's `report.json` (rates to 0.01 percentage
points, times to 0.01 ms, counts exactly).

Inputs (environment):
- TENDLINE_RUN_QTDB: a finished run directory on QTDB (`annotations/<rec>.mark`);
  the test is skipped, with the reason printed, when it is unset or absent.
- TENDLINE_REPORT_QTDB: the report.json to check (default
  `<run>/validation/report.json`).
- TENDLINE_DATA: the data root holding `qtdb/` (default `<repo>/../shared/data`);
  a folder that itself holds the QTDB headers is accepted too.

The rules re-implemented here are the documented protocol (crates/evaluate,
also restated in every report's `protocol.rules`):
- window in samples = floor(window_ms * fs / 1000), inclusive (150 ms by default);
- beats are annotations with a WFDB beat code (the `isqrs` set of the wfdb
  package); pairs are all (reference, test) pairs within the window, taken by
  increasing distance, ties by lower reference index then lower test index,
  one-to-one;
- waves: a peak mark (`p`, `t`, `u` or a beat code) with `(` immediately before it
  (onset) and `)` immediately after it (offset); a T wave belongs to the last QRS
  before its peak if it is the first T after that QRS and at most 800 ms after it;
- fiducials of paired beats count when both mark them and |error| <= the window;
  error = test - reference in ms; SD with n - 1.
"""

import csv
import json
import math
import os
from pathlib import Path

import numpy as np
import pytest
import wfdb
from wfdb.io import annotation as wfdb_annotation

REPO = Path(__file__).resolve().parents[2]

# Symbols of the WFDB beat codes, from the wfdb package's own `is_qrs` table.
BEAT_SYMBOLS = {
    wfdb_annotation.ann_label_table.loc[
        wfdb_annotation.ann_label_table.label_store == code, "symbol"
    ].iloc[0]
    for code, q in enumerate(wfdb_annotation.is_qrs)
    if q
}
MAX_QRS_TO_T_MS = 800.0


def _paths():
    run = os.environ.get("TENDLINE_RUN_QTDB")
    if not run or not Path(run, "annotations").is_dir():
        reason = (
            "TENDLINE_RUN_QTDB is not set"
            if not run
            else f"TENDLINE_RUN_QTDB={run} has no annotations/ folder"
        )
        print(f"SKIP validation cross-check: {reason}")
        pytest.skip(reason)
    run = Path(run)
    data = Path(os.environ.get("TENDLINE_DATA", REPO.parent / "shared" / "data"))
    qtdb = data if any(data.glob("*.q1c")) else data / "qtdb"
    if not qtdb.is_dir():
        pytest.fail(f"QTDB data folder {qtdb} not found (set TENDLINE_DATA)")
    report = Path(os.environ.get("TENDLINE_REPORT_QTDB", run / "validation" / "report.json"))
    if not report.is_file():
        pytest.fail(f"report {report} not found: run the validation first or set TENDLINE_REPORT_QTDB")
    return run, qtdb, json.loads(report.read_text())


def _fs(qtdb, rec):
    return float(wfdb.rdheader(str(qtdb / rec)).fs)


def _window(ms, fs):
    return int(math.floor(ms * fs / 1000.0 + 1e-9))


def _match(ref, test, w):
    """Greedy by distance over all pairs within w (brute force, O(n*m) in blocks)."""
    ref = np.asarray(ref, dtype=np.int64)
    test = np.asarray(test, dtype=np.int64)
    cand = []
    order = np.argsort(test, kind="stable")
    ts = test[order]
    for i, r in enumerate(ref):
        lo = np.searchsorted(ts, r - w, side="left")
        hi = np.searchsorted(ts, r + w, side="right")
        for k in range(lo, hi):
            cand.append((abs(int(ts[k]) - int(r)), i, int(order[k])))
    cand.sort()
    used_r, used_t, pairs = set(), set(), []
    for _, i, j in cand:
        if i not in used_r and j not in used_t:
            used_r.add(i)
            used_t.add(j)
            pairs.append((i, j))
    return sorted(pairs)


def _beats_qrs_on_t_end(path_no_ext, ext, fs):
    """Beats of a global annotation file: (qrs peak, qrs onset, T end) per beat."""
    a = wfdb.rdann(str(path_no_ext), ext)
    return _beats_from(a.sample, a.symbol, fs)


def _beats_from(samples, symbols, fs):
    """`_beats_qrs_on_t_end` on annotations already read (one channel)."""
    order = np.argsort(samples, kind="stable")
    smp = [int(samples[k]) for k in order]
    sym = [symbols[k] for k in order]
    beats = []  # [peak, onset, t_end]
    t_waves = []  # (peak, offset)
    for i, y in enumerate(sym):
        if y in BEAT_SYMBOLS:
            on = smp[i - 1] if i > 0 and sym[i - 1] == "(" else None
            beats.append([smp[i], on, None])
        elif y == "t":
            off = smp[i + 1] if i + 1 < len(sym) and sym[i + 1] == ")" else None
            t_waves.append((smp[i], off))
    peaks = [b[0] for b in beats]
    max_t = math.floor(MAX_QRS_TO_T_MS * fs / 1000.0)
    prev_t_peak = None
    for tp, toff in t_waves:
        j = int(np.searchsorted(peaks, tp, side="left"))  # peaks[j-1] < tp
        ok = j > 0 and tp - peaks[j - 1] <= max_t
        if ok and prev_t_peak is not None and prev_t_peak > peaks[j - 1]:
            ok = False  # not the first T after that QRS
        if ok:
            beats[j - 1][2] = toff
        prev_t_peak = tp
    return beats


MAX_P_TO_QRS_MS = 600.0


def _beats_qrs_pr(path_no_ext, ext, fs):
    """Beats of a global annotation file: (qrs peak, qrs onset, qrs end, P onset) per
    beat; the P wave is the last one before the QRS, its peak at most 600 ms before
    it (the report's protocol rule)."""
    a = wfdb.rdann(str(path_no_ext), ext)
    order = np.argsort(a.sample, kind="stable")
    smp = [int(a.sample[k]) for k in order]
    sym = [a.symbol[k] for k in order]
    beats, p_waves = [], []
    for i, y in enumerate(sym):
        on = smp[i - 1] if i > 0 and sym[i - 1] == "(" else None
        off = smp[i + 1] if i + 1 < len(sym) and sym[i + 1] == ")" else None
        if y in BEAT_SYMBOLS:
            beats.append([smp[i], on, off, None])
        elif y == "p":
            p_waves.append((smp[i], on))
    peaks = [b[0] for b in beats]
    max_p = math.floor(MAX_P_TO_QRS_MS * fs / 1000.0)
    for k, (pp, pon) in enumerate(p_waves):
        j = int(np.searchsorted(peaks, pp, side="right"))  # first QRS strictly after
        if j >= len(peaks):
            continue
        if k + 1 < len(p_waves) and p_waves[k + 1][0] < peaks[j]:
            continue  # not the last P before that QRS
        if peaks[j] - pp <= max_p:
            beats[j][3] = pon
    return beats


def _window_mean(values, start_s, end_s, fs, min_beats):
    """Mean (ms) of the (peak, samples) values with peak in [start_s, end_s), or None."""
    lo, hi = start_s * fs, end_s * fs
    v = [x * 1000.0 / fs for peak, x in values if lo <= peak < hi and x is not None]
    return float(np.mean(v)) if len(v) >= min_beats else None


def _scored_window_rows(run, qtdb, report):
    """(record, row) for the rows of the run's windows.csv whose record the report
    scores against annotator 1, each record's parsing left to the caller."""
    with open(run / "windows.csv", newline="") as f:
        for row in csv.DictReader(f):
            rec = row["record"]
            if rec in report["records"] and (qtdb / f"{rec}.q1c").is_file():
                yield rec, row


def test_window_qrs_and_pr_match_report():
    """Window QRS duration and PR interval (windows.csv qrs_ms, pr_ms) against the
    mean annotator-1 QRS duration and PR of each window's beats, recomputed from the
    QTDB .q1c files with the `wfdb` package."""
    run, qtdb, report = _paths()
    qt = report.get("qt")
    assert qt is not None and qt.get("window_qrs") and qt.get("window_pr")
    min_beats = report["protocol"]["min_window_beats"]
    cache = {}
    got = {"qrs": [], "pr": []}
    for rec, row in _scored_window_rows(run, qtdb, report):
        if rec not in cache:
            fs = _fs(qtdb, rec)
            b = _beats_qrs_pr(qtdb / rec, "q1c", fs)
            qrs = [(p, e - o if o is not None and e is not None else None) for p, o, e, _ in b]
            pr = [(p, o - po if o is not None and po is not None else None) for p, o, _, po in b]
            cache[rec] = (fs, qrs, pr)
        fs, qrs, pr = cache[rec]
        s, e = float(row["start_s"]), float(row["end_s"])
        for key, vals, col in (("qrs", qrs, "qrs_ms"), ("pr", pr, "pr_ms")):
            m = _window_mean(vals, s, e, fs, min_beats)
            v = row[col]
            if m is not None and v not in ("", "NaN", "nan"):
                got[key].append((float(v), m))
    _check_ba("window QRS duration", got["qrs"], qt["window_qrs"])
    _check_ba("window PR interval", got["pr"], qt["window_pr"])


def _beats_p_tpe(path_no_ext, ext, fs):
    """Beats of a global annotation file: (qrs peak, P end - P onset, T end - T peak)
    per beat, samples (None where a mark is missing); P and T assigned to beats by
    the rules of _beats_qrs_pr and _beats_qrs_on_t_end."""
    a = wfdb.rdann(str(path_no_ext), ext)
    order = np.argsort(a.sample, kind="stable")
    smp = [int(a.sample[k]) for k in order]
    sym = [a.symbol[k] for k in order]
    peaks, p_waves, t_waves = [], [], []
    for i, y in enumerate(sym):
        on = smp[i - 1] if i > 0 and sym[i - 1] == "(" else None
        off = smp[i + 1] if i + 1 < len(sym) and sym[i + 1] == ")" else None
        if y in BEAT_SYMBOLS:
            peaks.append(smp[i])
        elif y == "p":
            p_waves.append((smp[i], on, off))
        elif y == "t":
            t_waves.append((smp[i], off))
    p_dur = [None] * len(peaks)
    tpe = [None] * len(peaks)
    max_p = math.floor(MAX_P_TO_QRS_MS * fs / 1000.0)
    for k, (pp, pon, poff) in enumerate(p_waves):
        j = int(np.searchsorted(peaks, pp, side="right"))
        if j >= len(peaks) or (k + 1 < len(p_waves) and p_waves[k + 1][0] < peaks[j]):
            continue
        if peaks[j] - pp <= max_p and pon is not None and poff is not None:
            p_dur[j] = poff - pon
    max_t = math.floor(MAX_QRS_TO_T_MS * fs / 1000.0)
    prev_t_peak = None
    for tp, toff in t_waves:
        j = int(np.searchsorted(peaks, tp, side="left"))
        ok = j > 0 and tp - peaks[j - 1] <= max_t
        if ok and prev_t_peak is not None and prev_t_peak > peaks[j - 1]:
            ok = False
        if ok and toff is not None:
            tpe[j - 1] = toff - tp
        prev_t_peak = tp
    return list(zip(peaks, p_dur, tpe))


def test_window_p_duration_and_tpe_match_report():
    """Window P-wave duration and T peak to T end (windows.csv p_ms, tpe_ms) against
    the mean annotator-1 P end - P onset and T end - T peak of each window's beats,
    recomputed from the QTDB .q1c files with the `wfdb` package."""
    run, qtdb, report = _paths()
    qt = report.get("qt")
    assert qt is not None and qt.get("window_p") and qt.get("window_tpe")
    min_beats = report["protocol"]["min_window_beats"]
    cache = {}
    got = {"p": [], "tpe": []}
    for rec, row in _scored_window_rows(run, qtdb, report):
        if rec not in cache:
            fs = _fs(qtdb, rec)
            b = _beats_p_tpe(qtdb / rec, "q1c", fs)
            cache[rec] = (fs, [(pk, d) for pk, d, _ in b], [(pk, d) for pk, _, d in b])
        fs, p_dur, tpe = cache[rec]
        s, e = float(row["start_s"]), float(row["end_s"])
        for key, vals, col in (("p", p_dur, "p_ms"), ("tpe", tpe, "tpe_ms")):
            m = _window_mean(vals, s, e, fs, min_beats)
            v = row[col]
            if m is not None and v not in ("", "NaN", "nan"):
                got[key].append((float(v), m))
    _check_ba("window P duration", got["p"], qt["window_p"])
    _check_ba("window T peak to T end", got["tpe"], qt["window_tpe"])


def test_beats_match_report():
    run, qtdb, report = _paths()
    beats = report.get("beats")
    assert beats is not None, "report.json has no beat section"
    win_ms = report["protocol"]["beat_window_ms"]
    tp = fn = fp = 0
    per = {}
    for rec in report["records"]:
        if not (qtdb / f"{rec}.atr").is_file():
            continue
        fs = _fs(qtdb, rec)
        ref_a = wfdb.rdann(str(qtdb / rec), "atr")
        ref = [int(s) for s, y in zip(ref_a.sample, ref_a.symbol) if y in BEAT_SYMBOLS]
        t_a = wfdb.rdann(str(run / "annotations" / rec), "mark")
        test = [int(s) for s, y in zip(t_a.sample, t_a.symbol) if y in BEAT_SYMBOLS]
        pairs = _match(ref, test, _window(win_ms, fs))
        per[rec] = (len(pairs), len(ref) - len(pairs), len(test) - len(pairs))
        tp += per[rec][0]
        fn += per[rec][1]
        fp += per[rec][2]
    o = beats["overall"]
    print(f"python: TP={tp} FN={fn} FP={fp}; report: TP={o['tp']} FN={o['fn']} FP={o['fp']}")
    assert (o["tp"], o["fn"], o["fp"]) == (tp, fn, fp)
    assert abs(o["sensitivity_pct"] - 100.0 * tp / (tp + fn)) < 0.01
    assert abs(o["ppv_pct"] - 100.0 * tp / (tp + fp)) < 0.01
    for r in beats["per_record"]:
        assert (r["tp"], r["fn"], r["fp"]) == per[r["record"]], r["record"]


# ANSI/AAMI EC57 beat classes (common practice, from memory); any other beat code is Q.
EC57 = {**dict.fromkeys("NLRej", "N"), **dict.fromkeys("AaJS", "S"), "V": "V", "E": "V", "F": "F"}


def test_beat_labels_match_report():
    """The tool's N/V/Q labels on the paired beats against the `.atr` codes,
    recomputed from the `.mark` and `.atr` files with `wfdb.rdann`."""
    run, qtdb, report = _paths()
    labels = report["beats"].get("labels")
    assert labels is not None, "report.json has no beat-label table"
    win_ms = report["protocol"]["beat_window_ms"]
    table = {c: {"N": 0, "V": 0, "Q": 0, "other": 0} for c in "NSVFQ"}
    for rec in report["records"]:
        if not (qtdb / f"{rec}.atr").is_file():
            continue
        fs = _fs(qtdb, rec)
        ref_a = wfdb.rdann(str(qtdb / rec), "atr")
        ref = [(int(s), y) for s, y in zip(ref_a.sample, ref_a.symbol) if y in BEAT_SYMBOLS]
        t_a = wfdb.rdann(str(run / "annotations" / rec), "mark")
        test = [(int(s), y) for s, y in zip(t_a.sample, t_a.symbol) if y in BEAT_SYMBOLS]
        for i, j in _match([r[0] for r in ref], [t[0] for t in test], _window(win_ms, fs)):
            col = test[j][1] if test[j][1] in ("N", "V", "Q") else "other"
            table[EC57.get(ref[i][1], "Q")][col] += 1
    got = {r["reference"]: {"N": r["n"], "V": r["v"], "Q": r["q"], "other": r["other"]} for r in labels["confusion"]}
    print("python:", table)
    print("report:", got)
    assert got == table
    v = table["V"]
    tool_v = sum(row["V"] for row in table.values())
    assert abs(labels["v_sensitivity_pct"] - 100.0 * v["V"] / sum(v.values())) < 0.01
    assert abs(labels["v_ppv_pct"] - 100.0 * v["V"] / tool_v) < 0.01
    n = table["N"]
    assert abs(labels["n_sensitivity_pct"] - 100.0 * n["N"] / sum(n.values())) < 0.01


def _paired_beats(run, qtdb, report):
    """For every record of the report with a `.q1c` reference: (record, fs,
    reference beats, test beats, paired indices, fiducial window in samples),
    beats as in `_beats_qrs_on_t_end`, pairs by the report's beat window."""
    bw_ms = report["protocol"]["beat_window_ms"]
    fw_ms = report["protocol"]["fiducial_window_ms"]
    for rec in report["records"]:
        if not (qtdb / f"{rec}.q1c").is_file():
            continue
        fs = _fs(qtdb, rec)
        ref = _beats_qrs_on_t_end(qtdb / rec, "q1c", fs)
        test = _beats_qrs_on_t_end(run / "annotations" / rec, "mark", fs)
        pairs = _match([b[0] for b in ref], [b[0] for b in test], _window(bw_ms, fs))
        yield rec, fs, ref, test, pairs, _window(fw_ms, fs)


def test_qrs_onset_and_t_end_match_report():
    run, qtdb, report = _paths()
    glob_sec = report.get("global")
    assert glob_sec is not None, "report.json has no global section"
    errs = {"qrs_on": [], "t_end": []}
    # The same errors record by record, in the report's record order, for the
    # stability figures (halves and bootstrap over records).
    per_rec = {"qrs_on": [], "t_end": []}
    for _rec, fs, ref, test, pairs, fw in _paired_beats(run, qtdb, report):
        for key in per_rec:
            per_rec[key].append([])
        for i, j in pairs:
            for key, k in (("qrs_on", 1), ("t_end", 2)):
                r, t = ref[i][k], test[j][k]
                if r is not None and t is not None and abs(t - r) <= fw:
                    errs[key].append((t - r) * 1000.0 / fs)
                    per_rec[key][-1].append((t - r) * 1000.0 / fs)
    for key in ("qrs_on", "t_end"):
        e = np.array(errs[key])
        s = next(f for f in glob_sec["fiducials"] if f["fiducial"] == key)
        st = s["stats"]
        print(
            f"{key}: python n={e.size} mean={e.mean():.4f} sd={e.std(ddof=1):.4f}; "
            f"report n={st['n']} mean={st['mean_ms']:.4f} sd={st['sd_ms']:.4f}"
        )
        assert st["n"] == e.size
        assert s["tp"] == e.size
        assert abs(st["mean_ms"] - e.mean()) < 0.01
        assert abs(st["sd_ms"] - e.std(ddof=1)) < 0.01
        _check_stability(key, per_rec[key], s["stability"])


def test_best_lead_section_matches_report():
    # The "best lead per beat" comparison protocol of the published QTDB
    # results (Martínez et al. 2004, from memory), recomputed here from the
    # `.leadmark` files read with the `wfdb` package: each lead's beats paired
    # with the reference, for every reference beat the lead mark nearest the
    # reference (ties: the lower channel), counted within the fiducial window.
    run, qtdb, report = _paths()
    best = report.get("best_lead")
    assert best is not None, "report.json has no best_lead section"
    bw_ms = report["protocol"]["beat_window_ms"]
    errs = {"qrs_on": [], "t_end": []}
    for rec, fs, ref, _test, _pairs, fw in _paired_beats(run, qtdb, report):
        a = wfdb.rdann(str(run / "annotations" / rec), "leadmark")
        chans = sorted(set(int(c) for c in a.chan))
        cand = [[] for _ in ref]  # per reference beat: [(chan, beat)]
        for ch in chans:
            keep = [k for k in range(len(a.sample)) if int(a.chan[k]) == ch]
            lead = _beats_from([a.sample[k] for k in keep], [a.symbol[k] for k in keep], fs)
            for i, j in _match([b[0] for b in ref], [b[0] for b in lead], _window(bw_ms, fs)):
                cand[i].append((ch, lead[j]))
        for i, r in enumerate(ref):
            for key, k in (("qrs_on", 1), ("t_end", 2)):
                if r[k] is None:
                    continue
                vals = [(abs(b[k] - r[k]), ch, b[k]) for ch, b in cand[i] if b[k] is not None]
                if not vals:
                    continue
                t = min(vals)[2]
                if abs(t - r[k]) <= fw:
                    errs[key].append((t - r[k]) * 1000.0 / fs)
    for key in errs:
        e = np.array(errs[key])
        st = next(f for f in best["fiducials"] if f["fiducial"] == key)["stats"]
        print(f"best lead {key}: python n={e.size} sd={e.std(ddof=1):.4f}; report n={st['n']} sd={st['sd_ms']:.4f}")
        assert st["n"] == e.size
        assert abs(st["mean_ms"] - e.mean()) < 0.01
        assert abs(st["sd_ms"] - e.std(ddof=1)) < 0.01


def _pop_split(keys, values):
    """(between, within) population SDs of `values` around their per-key means."""
    keys, values = np.asarray(keys), np.asarray(values, dtype=float)
    means = {k: values[keys == k].mean() for k in set(keys.tolist())}
    m = np.array([means[k] for k in keys.tolist()])
    return float(np.sqrt(np.mean((m - values.mean()) ** 2))), float(np.sqrt(np.mean((values - m) ** 2)))


def test_error_components_match_report():
    """The report's error components of the global QRS onset and T end,
    rebuilt with numpy from the annotation files (wfdb): population SDs of the
    errors between records and within records (global marks: one channel per
    record, so between record-channels = between records), and the
    within-record SD of each mark's offset from its own beat's QRS peak for
    annotator 1 (reference spread) and the tool (tool spread)."""
    run, qtdb, report = _paths()
    comps = {c["fiducial"]: c for c in report["global"].get("components", [])}
    assert {"qrs_on", "t_end"} <= set(comps), "report.json has no error components"
    for key, k in (("qrs_on", 1), ("t_end", 2)):
        recs, errs, roff, toff = [], [], [], []
        for rec, fs, ref, test, pairs, fw in _paired_beats(run, qtdb, report):
            for i, j in pairs:
                r, t = ref[i][k], test[j][k]
                if r is not None and t is not None and abs(t - r) <= fw:
                    recs.append(rec)
                    errs.append((t - r) * 1000.0 / fs)
                    roff.append((r - ref[i][0]) * 1000.0 / fs)
                    toff.append((t - test[j][0]) * 1000.0 / fs)
        between, within = _pop_split(recs, errs)
        expect = {
            "n": len(errs),
            "groups": len(set(recs)),
            "total_ms": float(np.std(errs)),
            "between_records_ms": between,
            "between_channels_ms": between,
            "within_channel_ms": within,
            "reference_spread_ms": _pop_split(recs, roff)[1],
            "test_spread_ms": _pop_split(recs, toff)[1],
        }
        c = comps[key]
        print(key, "python", {a: round(b, 4) for a, b in expect.items()})
        print(key, "report", {a: round(c[a], 4) if isinstance(c[a], float) else c[a] for a in expect})
        assert c["n"] == expect["n"] and c["groups"] == expect["groups"]
        for a in expect:
            assert abs(c[a] - expect[a]) < 0.01, a


def test_marks_csv_holds_the_scored_pairs():
    """`marks.csv` beside the report lists exactly the pairs recomputed here
    for the global QRS onset and T end (record, reference sample, tool sample,
    error), and its outcome counts give the report's tp, fn and fp."""
    run, qtdb, report = _paths()
    path = Path(os.environ.get("TENDLINE_REPORT_QTDB", run / "validation" / "report.json")).with_name("marks.csv")
    assert path.is_file(), f"{path} not written"
    with open(path, newline="") as fh:
        rows = [r for r in csv.DictReader(fh) if r["section"] == "global"]
    for key, k in (("qrs_on", 1), ("t_end", 2)):
        expect = []
        for rec, fs, ref, test, pairs, fw in _paired_beats(run, qtdb, report):
            for i, j in pairs:
                r, t = ref[i][k], test[j][k]
                if r is not None and t is not None and abs(t - r) <= fw:
                    expect.append((rec, r, t, round((t - r) * 1000.0 / fs, 3)))
        got = [
            (x["record"], int(x["ref_sample"]), int(x["tool_sample"]), float(x["error_ms"]))
            for x in rows
            if x["fiducial"] == key and x["outcome"] == "tp"
        ]
        print(f"{key}: python {len(expect)} pairs, marks.csv {len(got)} tp rows")
        assert sorted(got) == sorted(expect)
        s = next(f for f in report["global"]["fiducials"] if f["fiducial"] == key)
        n = {o: sum(1 for x in rows if x["fiducial"] == key and x["outcome"] == o) for o in ("tp", "fn", "outside", "fp")}
        assert n["tp"] == s["tp"]
        assert n["fn"] + n["outside"] == s["fn"]
        assert n["fp"] + n["outside"] == s["fp"]


def test_t_end_confidence_quartiles_match_report():
    """The report's confidence calibration of the global T end, rebuilt from
    results.h5 (read with h5py; the Rust side reads the part files) and the
    annotation files (wfdb): the matched T ends with their confidence
    (`marks/global/t_end_confidence` at the mark's sample), sorted by
    confidence then error, cut into four groups of n // 4 (the first n % 4
    groups one larger); mean absolute error and SD (n - 1) per group."""
    h5py = pytest.importorskip("h5py")
    run, qtdb, report = _paths()
    rows = [r for r in report["global"].get("calibration", []) if r["fiducial"] == "t_end"]
    assert len(rows) == 4, "report.json has no T-end calibration rows"
    pts = []
    with h5py.File(run / "results.h5", "r") as h5:
        for rec, fs, ref, test, pairs, fw in _paired_beats(run, qtdb, report):
            g = h5[f"records/{rec}/marks/global"]
            conf = dict(zip(g["t_end"][:].tolist(), g["t_end_confidence"][:].tolist()))
            for i, j in pairs:
                r, t = ref[i][2], test[j][2]
                if r is not None and t is not None and abs(t - r) <= fw:
                    c = conf.get(t)
                    if c is not None and math.isfinite(c):
                        pts.append((c, (t - r) * 1000.0 / fs))
    pts.sort()
    n, start = len(pts), 0
    assert sum(r["n"] for r in rows) == n
    for q, row in enumerate(sorted(rows, key=lambda r: r["quartile"])):
        size = n // 4 + (1 if q < n % 4 else 0)
        grp = pts[start:start + size]
        start += size
        e = np.array([x[1] for x in grp])
        print(
            f"T end quartile {q + 1}: python n={e.size} conf {grp[0][0]:.4f}-{grp[-1][0]:.4f} "
            f"mean|e|={np.abs(e).mean():.4f} sd={e.std(ddof=1):.4f}; report n={row['n']} "
            f"mean|e|={row['mean_abs_ms']:.4f} sd={row['sd_ms']:.4f}"
        )
        assert row["n"] == e.size
        assert abs(row["confidence_min"] - grp[0][0]) < 1e-6
        assert abs(row["confidence_max"] - grp[-1][0]) < 1e-6
        assert abs(row["mean_abs_ms"] - np.abs(e).mean()) < 0.01
        assert abs(row["sd_ms"] - e.std(ddof=1)) < 0.01


def _splitmix64(seed):
    """SplitMix64 (Steele, Lea and Flood, OOPSLA 2014), the published
    constants, as an endless generator of 64-bit values."""
    mask = (1 << 64) - 1
    state = seed & mask
    while True:
        state = (state + 0x9E3779B97F4A7C15) & mask
        z = state
        z = ((z ^ (z >> 30)) * 0xBF58476D1CE4E5B9) & mask
        z = ((z ^ (z >> 27)) * 0x94D049BB133111EB) & mask
        yield z ^ (z >> 31)


def _check_stability(key, recs, st):
    """Halves and bootstrap intervals of the pooled mean and SD, rebuilt from the
    per-record errors by the rules the report states (crates/evaluate stability):
    halves by odd/even position; B resamples of the records with replacement,
    index = next() mod (number of records); 2.5th and 97.5th percentiles with
    numpy's linear interpolation."""
    for name, part in (("odd", recs[0::2]), ("even", recs[1::2])):
        e = np.concatenate([np.asarray(r, float) for r in part])
        h = st[name]
        assert h["records"] == len(part) and h["n"] == e.size, (key, name)
        assert abs(h["mean_ms"] - e.mean()) < 0.01, (key, name)
        assert abs(h["sd_ms"] - e.std(ddof=1)) < 0.01, (key, name)
    b = st["bootstrap"]
    rng = _splitmix64(b["seed"])
    k = len(recs)
    arrays = [np.asarray(r, float) for r in recs]
    means, sds = [], []
    for _ in range(b["replicates"]):
        e = np.concatenate([arrays[next(rng) % k] for _ in range(k)])
        if e.size >= 1:
            means.append(e.mean())
        if e.size >= 2:
            sds.append(e.std(ddof=1))
    for name, vals in (("mean_ci_ms", means), ("sd_ci_ms", sds)):
        lo, hi = np.percentile(vals, [2.5, 97.5])
        print(f"{key} {name}: python {lo:.4f} to {hi:.4f}; report {b[name][0]:.4f} to {b[name][1]:.4f}")
        assert abs(lo - b[name][0]) < 0.01 and abs(hi - b[name][1]) < 0.01, (key, name)


def _window_mean_qt(beats, start_s, end_s, fs, min_beats):
    """Mean beat QT (ms) of the beats with QRS peak in [start_s, end_s), or None."""
    lo, hi = start_s * fs, end_s * fs
    qts = [
        (t - on) * 1000.0 / fs
        for peak, on, t in beats
        if lo <= peak < hi and on is not None and t is not None
    ]
    return float(np.mean(qts)) if len(qts) >= min_beats else None


def _bland_altman(pairs):
    d = np.array([a - b for a, b in pairs])
    return d.size, d.mean(), d.std(ddof=1)


def _check_ba(name, pairs, ba):
    n, mean, sd = _bland_altman(pairs)
    print(f"{name}: python n={n} bias={mean:.4f} sd={sd:.4f}; report n={ba['n']} bias={ba['bias_ms']:.4f} sd={ba['sd_ms']:.4f}")
    assert ba["n"] == n
    assert abs(ba["bias_ms"] - mean) < 0.01
    assert abs(ba["sd_ms"] - sd) < 0.01


def test_window_qt_matches_report():
    """Window QT against annotator 1, and annotator 2 against annotator 1 on the same
    windows (the human reference of the window QT), recomputed from the run's
    windows.csv and the QTDB .q1c/.q2c files read with the `wfdb` package."""
    run, qtdb, report = _paths()
    qt = report.get("qt")
    assert qt is not None and qt.get("window_superimposed"), "report.json has no window QT"
    min_beats = report["protocol"]["min_window_beats"]

    def val(v):
        return float(v) if v not in ("", "NaN", "nan") else None

    sup, ann, tool = [], [], []
    sup_keys, ann_keys, tool_keys = [], [], []
    sup_by_rec = {}
    cache = {}
    for rec, row in _scored_window_rows(run, qtdb, report):
        if rec not in cache:
            fs = _fs(qtdb, rec)
            q2 = (
                _beats_qrs_on_t_end(qtdb / rec, "q2c", fs)
                if (qtdb / f"{rec}.q2c").is_file()
                else None
            )
            cache[rec] = (fs, _beats_qrs_on_t_end(qtdb / rec, "q1c", fs), q2)
        fs, q1, q2 = cache[rec]
        s, e = float(row["start_s"]), float(row["end_s"])
        m1 = _window_mean_qt(q1, s, e, fs, min_beats)
        if m1 is None:
            continue
        v = val(row["qt_superimposed_ms"])
        if v is not None:
            sup.append((v, m1))
            sup_keys.append(rec)
            sup_by_rec.setdefault(rec, []).append(v - m1)
        m2 = _window_mean_qt(q2, s, e, fs, min_beats) if q2 is not None else None
        if m2 is not None:
            ann.append((m2, m1))
            ann_keys.append(rec)
            if v is not None:
                tool.append((v, m1))
                tool_keys.append(rec)
    _check_ba("window QT, superimposed", sup, qt["window_superimposed"])
    # Its stability over records: records with scored windows, in report order.
    order = [r for r in report["records"] if r in sup_by_rec]
    _check_stability(
        "window QT", [sup_by_rec[r] for r in order], qt["window_superimposed"]["stability"]
    )
    human = report.get("human")
    assert human is not None and human.get("annotator_qt_window"), "report.json has no human window QT"
    _check_ba("window QT, annotator 2", ann, human["annotator_qt_window"])
    _check_ba("window QT, tool on the same windows", tool, human["tool_qt_window"])
    # The same differences split by record (population SDs).
    for name, keys, pairs, ba in (
        ("superimposed", sup_keys, sup, qt["window_superimposed"]),
        ("annotator 2", ann_keys, ann, human["annotator_qt_window"]),
        ("tool, same windows", tool_keys, tool, human["tool_qt_window"]),
    ):
        between, within = _pop_split(keys, [t - r for t, r in pairs])
        got = ba["by_record"]
        print(f"window QT {name} by record: python {len(set(keys))} records between={between:.4f} "
              f"within={within:.4f}; report {got}")
        assert got["records"] == len(set(keys))
        assert abs(got["between_records_sd_ms"] - between) < 0.01
        assert abs(got["within_record_sd_ms"] - within) < 0.01


def test_window_qt_by_overread_flag_matches_report():
    """The window QT split by each over-read flag (report `qt.window_by_flag`),
    recomputed from windows.csv (its `flags` column) and the .q1c files read with
    `wfdb`: the flagged and the other scored windows separately."""
    run, qtdb, report = _paths()
    splits = report["qt"].get("window_by_flag") or []
    assert {s["flag"] for s in splits} >= {"qt_inconsistent", "unreadable_noise"}
    min_beats = report["protocol"]["min_window_beats"]
    rows, cache = [], {}
    for rec, row in _scored_window_rows(run, qtdb, report):
        if rec not in cache:
            fs = _fs(qtdb, rec)
            cache[rec] = (fs, _beats_qrs_on_t_end(qtdb / rec, "q1c", fs))
        fs, q1 = cache[rec]
        m1 = _window_mean_qt(q1, float(row["start_s"]), float(row["end_s"]), fs, min_beats)
        v = row["qt_superimposed_ms"]
        if m1 is not None and v not in ("", "NaN", "nan"):
            rows.append((float(v), m1, set(filter(None, row["flags"].split(";")))))
    mae = {}
    for s in splits:
        flagged = [(v, m) for v, m, f in rows if s["flag"] in f]
        others = [(v, m) for v, m, f in rows if s["flag"] not in f]
        assert s["flagged_windows"] == len(flagged) and s["unflagged_windows"] == len(others)
        if len(flagged) >= 2:
            _check_ba(f"window QT, {s['flag']}", flagged, s["flagged"])
        _check_ba(f"window QT, not {s['flag']}", others, s["unflagged"])
        mae[s["flag"]] = (
            float(np.mean([abs(v - m) for v, m in flagged])) if flagged else None,
            float(np.mean([abs(v - m) for v, m in others])),
        )
    # The flag must point at worse windows: measured when it was added, the
    # flagged windows' mean absolute error was 28.6 ms against 14.8 ms (1.9
    # times); the floor is 1.5 times, with at least 10 flagged windows.
    fl, ot = mae["qt_inconsistent"]
    n_fl = next(s["flagged_windows"] for s in splits if s["flag"] == "qt_inconsistent")
    print(f"qt_inconsistent: {n_fl} flagged windows, MAE {fl} ms against {ot} ms")
    assert n_fl >= 10 and fl >= 1.5 * ot


def test_window_to_window_stability_matches_report():
    """The window-to-window QTcF differences (report `qt.window_stability`),
    recomputed with pandas from windows.csv: Fridericia's correction QT / RR^(1/3)
    (RR in s) of the QTc-feeding `qt_ms`, differences between windows of a record
    whose numbers follow each other."""
    import pandas as pd

    run, _qtdb, report = _paths()
    st = report["qt"].get("window_stability")
    assert st is not None, "report.json has no window_stability"
    # Every window of the run counts, scored or not (record names kept as text).
    w = pd.read_csv(run / "windows.csv", dtype={"record": str})
    w["qtcf"] = w["qt_ms"] / np.cbrt(w["rr_ms"] / 1000.0)
    ok = w["qtcf"].notna() & np.isfinite(w["qtcf"])
    flags = w["flags"].fillna("").astype(str).str.split(";")
    assert st["windows"] == int(ok.sum())
    inconsistent = flags.apply(lambda f: "qt_inconsistent" in f) & ok
    assert abs(st["inconsistent_pct"] - 100.0 * inconsistent.sum() / ok.sum()) < 1e-9
    prev = w.shift(1)
    pair = (
        (prev["record"] == w["record"])
        & (w["window"] - prev["window"] == 1)
        & ok
        & ok.shift(1, fill_value=False)
    )
    d = (w["qtcf"] - prev["qtcf"])[pair]
    print(f"window stability: python pairs={d.size} sd={d.std(ddof=1):.4f}; report {st}")
    assert st["pairs"] == d.size and st["records"] == w.loc[pair, "record"].nunique()
    assert abs(st["delta_sd_ms"] - d.std(ddof=1)) < 1e-6
    assert abs(st["delta_median_abs_ms"] - d.abs().median()) < 1e-6
    assert abs(st["delta_above_40_pct"] - 100.0 * (d.abs() > 40).mean()) < 1e-9
