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


def test_pr_interval_against_first_degree_av_block():
    # First-degree AV block is a PR interval over 200 ms (common practice).
    # Measured on the final code: 5 of the 6 LUDB records with that diagnosis
    # have a record PR over 200 ms (LUDB 61: 192 ms), and 10 of the 80 other
    # records with a PR interval do (the tool does not classify AV block; the
    # PR it reports is for the reader to judge).
    rows = run_rows()
    avb, other = [], []
    for r, comments in rows:
        text = " ".join(comments)
        if not r["pr_ms"] or re.search(r"iii degree av-block", text, re.IGNORECASE):
            continue
        (avb if re.search(r"\bi degree av block", text, re.IGNORECASE) else other).append(
            float(r["pr_ms"])
        )
    assert len(avb) == 6, avb
    assert sum(p > 200 for p in avb) >= 5, avb
    assert sum(p > 200 for p in other) <= 11, sorted(other)[-12:]
    # Medians measured: 208 ms against 172 ms (the others' upper quartile 185).
    assert statistics.median(avb) - statistics.median(other) >= 25, (avb, other)
