"""A LUDB run's `wide_qrs` flag and PR interval against the cardiologists'
diagnoses in the LUDB 1.0.1 headers (`#<diagnoses>:` and `#Rhythm:` comment
lines, read with the `wfdb` Python package), first-degree AV block included.

`wide_qrs` (window QRS duration >= 120 ms):

Complete left or right bundle branch block and ventricular (or biventricular)
pacing widen the QRS to 120 ms or more; incomplete bundle branch block keeps it
under 120 ms (common practice; the 120-ms limit is `measure.limits.wide_qrs_ms`,
AHA/ACCF/HRS 2009, from memory). Records without such a diagnosis may still
have a wide QRS (a conduction delay the diagnoses leave unnamed), so flags
there are counted, not forbidden: measured on records 1-100 with the final
code, 13 of 13 diagnosed records flagged and 15 others (before the
confirmed-extreme QRS rule of `measure.qrs_outlier_ms`, 20 others).

PR interval: atrial fibrillation and flutter have no P wave and complete
(third-degree) AV block no PR interval, since P waves and QRS complexes are
dissociated (common practice); every other record has one.

Inputs (environment): TENDLINE_RUN_LUDB, a finished run on ../shared/data/ludb
(`summary.csv`; skipped, with the reason, when unset or absent);
TENDLINE_DATA (default `<repo>/../shared/data`).
"""

import csv
import os
import re
import statistics
from pathlib import Path

import pytest
import wfdb

from _devtools import DATA

WIDE = re.compile(
    r"(?<!in)complete (left|right) bundle branch block|ventricular pacing", re.IGNORECASE
)


def run_rows():
    """The run's summary.csv rows, each with its record's header comments."""
    run = os.environ.get("TENDLINE_RUN_LUDB")
    if not run or not (Path(run) / "summary.csv").is_file():
        pytest.skip("TENDLINE_RUN_LUDB not set to a finished LUDB run (scripts/test.sh sets it)")
    data = Path(os.environ.get("TENDLINE_DATA", DATA)) / "ludb"
    rows = list(csv.DictReader(open(Path(run) / "summary.csv", newline="")))
    return [(r, wfdb.rdheader(str(data / r["record"])).comments) for r in rows]


def test_wide_qrs_flag_against_ludb_diagnoses():
    rows = run_rows()
    assert len(rows) == 100
    diagnosed, flagged_other = [], []
    for r, comments in rows:
        wide_dx = any(WIDE.search(c) for c in comments)
        flagged = "wide_qrs" in r["flags"].split(";")
        if wide_dx:
            diagnosed.append((r["record"], flagged))
        elif flagged:
            flagged_other.append(r["record"])
    # The diagnoses behind the rule: 4 complete LBBB, 2 complete RBBB and 7
    # ventricularly paced records among LUDB 1-100 (counted in the headers).
    assert len(diagnosed) == 13, diagnosed
    missed = [rec for rec, f in diagnosed if not f]
    assert not missed, f"diagnosed wide QRS not flagged: {missed}"
    # Floor just above the 15 measured.
    assert len(flagged_other) <= 16, flagged_other


NO_PR = re.compile(r"atrial fibrillation|atrial flutter|iii degree av-block", re.IGNORECASE)


def test_pr_interval_only_where_the_rhythm_has_one():
    rows = run_rows()
    without, other = [], []
    for r, comments in rows:
        (without if NO_PR.search(" ".join(comments)) else other).append(r)
    # 11 records in atrial fibrillation or flutter, 3 in complete AV block.
    assert len(without) == 14, [r["record"] for r in without]
    # Before `measure.window_p_min_beat_fraction` 12 of them reported a PR
    # interval (150-312 ms in atrial fibrillation, 94 and 256 ms in flutter)
    # from median beats that average fibrillatory waves into a bump.
    assert [r["record"] for r in without if r["pr_ms"]] == []
    # Every record with a P wave per beat keeps its PR interval (86 of 86
    # measured).
    assert [r["record"] for r in other if not r["pr_ms"]] == []


LEADS = ["i", "ii", "iii", "avr", "avl", "avf", "v1", "v2", "v3", "v4", "v5", "v6"]


def reference_pr_ms(data, record):
    """The record's PR interval from the cardiologists' own boundaries: per
    beat, the earliest P onset to the earliest QRS onset across the 12 leads'
    annotation files (read with `wfdb.rdann`), median over the beats; None
    without a P wave. Beats are matched across leads by their QRS peak (the
    same within 100 ms)."""
    beats = {}
    for lead in LEADS:
        a = wfdb.rdann(str(data / str(record)), lead)
        s, y = a.sample, a.symbol
        for i in range(1, len(y)):
            if y[i] in "NLRAV/" and y[i - 1] == "(":
                b = beats.setdefault(int(s[i]) // 50, {"q": [], "p": []})
                b["q"].append(int(s[i - 1]))
                for j in range(i - 2, max(i - 8, 0), -1):
                    if y[j] == "p" and y[j - 1] == "(":
                        b["p"].append(int(s[j - 1]))
                        break
                    if y[j] in "NLRAV/t":
                        break
    fs = wfdb.rdheader(str(data / str(record))).fs
    prs = [(min(b["q"]) - min(b["p"])) * 1000.0 / fs for b in beats.values() if b["p"]]
    return statistics.median(prs) if prs else None


def test_pr_interval_against_first_degree_av_block():
    # First-degree AV block is a PR interval over 200 ms (common practice).
    # The six LUDB records with that diagnosis do not all reach 200 ms by the
    # cardiologists' own boundaries (earliest P onset to earliest QRS onset,
    # median over beats): 230, 200, 196, 192, 208 and 240 ms for LUDB 13, 15,
    # 20, 61, 77 and 78, measured here from the annotation files. So the tool's
    # record PR is checked against those reference PRs (within 15 ms each) and
    # the count over 200 ms against the reference's count (3), while the group
    # as a whole must stand apart from the other records. Measured on the final
    # code: PRs 230, 198, 198, 184, 208, 226 ms (largest difference from the
    # reference 14 ms, LUDB 78), 3 over 200 ms, 9 of the 80 other records
    # over 200 ms; medians 203 ms against 169 (the tool does not classify AV
    # block; the PR it reports is for the reader to judge).
    rows = run_rows()
    data = Path(os.environ.get("TENDLINE_DATA", DATA)) / "ludb"
    avb, other = [], []
    for r, comments in rows:
        text = " ".join(comments)
        if not r["pr_ms"] or re.search(r"iii degree av-block", text, re.IGNORECASE):
            continue
        if re.search(r"\bi degree av block", text, re.IGNORECASE):
            avb.append((r["record"], float(r["pr_ms"]), reference_pr_ms(data, r["record"])))
        else:
            other.append(float(r["pr_ms"]))
    assert len(avb) == 6, avb
    for rec, pr, ref in avb:
        assert ref is not None and abs(pr - ref) <= 15, (rec, pr, ref)
    ref_over = sum(ref > 200 for _, _, ref in avb)
    assert ref_over == 3, avb
    assert sum(pr > 200 for _, pr, _ in avb) >= ref_over, avb
    assert sum(p > 200 for p in other) <= 11, sorted(other)[-12:]
    prs = [pr for _, pr, _ in avb]
    assert statistics.median(prs) - statistics.median(other) >= 25, (prs, other)
