"""Honesty check of the per-lead window intervals of `tendline validate` on LUDB.

Recomputes, independently of the Rust code (crates/evaluate), from LUDB's lead
annotation files read with the `wfdb` Python package (`wfdb.rdann`) and the run's
`windows.csv`:
- the window T peak to T end (`tpe_ms`, measured on the window's `qt_lead`)
  against the mean T end - T peak of that lead file's beats in the window;
- the window QT dispersion (`qt_dispersion_ms`) against the longest minus the
  shortest of the lead files' mean beat QTs in the window;
and asserts agreement with the run's `report.json` (counts exactly, times to
0.01 ms). The wave and beat rules are those restated in
test_validation_crosscheck.py (from the protocol); windows need at least
`min_window_beats` beats of a lead, and the dispersion at least two such leads.

Inputs (environment):
- TENDLINE_RUN_LUDB: a finished run directory on LUDB records (`windows.csv`);
  the tests are skipped, with the reason printed, when it is unset or absent.
- TENDLINE_REPORT_LUDB: the report.json to check (default
  `<run>/validation/report.json`).
- TENDLINE_DATA: the data root holding `ludb/` (default `<repo>/../shared/data`).
"""

import csv
import json
import os
from pathlib import Path

import numpy as np
import pytest
import wfdb

from test_validation_crosscheck import (
    REPO,
    _beats_p_tpe,
    _beats_qrs_on_t_end,
    _check_ba,
    _window_mean,
)


def _paths():
    run = os.environ.get("TENDLINE_RUN_LUDB")
    if not run or not Path(run, "windows.csv").is_file():
        reason = (
            "TENDLINE_RUN_LUDB is not set"
            if not run
            else f"TENDLINE_RUN_LUDB={run} has no windows.csv"
        )
        print(f"SKIP LUDB cross-check: {reason}")
        pytest.skip(reason)
    run = Path(run)
    data = Path(os.environ.get("TENDLINE_DATA", REPO.parent / "shared" / "data"))
    ludb = data / "ludb"
    if not ludb.is_dir():
        pytest.fail(f"LUDB data folder {ludb} not found (set TENDLINE_DATA)")
    report = Path(os.environ.get("TENDLINE_REPORT_LUDB", run / "validation" / "report.json"))
    if not report.is_file():
        pytest.fail(f"report {report} not found: run the validation first or set TENDLINE_REPORT_LUDB")
    return run, ludb, json.loads(report.read_text())


def _lead_files(ludb, rec):
    """(fs, {lead name in the header: lead annotation file stem}) of one record;
    LUDB names each lead's annotation file by the lead's name in lower case."""
    h = wfdb.rdheader(str(ludb / rec))
    return float(h.fs), {n: n.lower() for n in h.sig_name if (ludb / f"{rec}.{n.lower()}").is_file()}


def test_window_tpe_and_dispersion_against_the_lead_files():
    run, ludb, report = _paths()
    qt = report.get("qt") or {}
    assert qt.get("window_tpe_lead_ref") and qt.get("window_qt_dispersion_lead_ref")
    min_beats = report["protocol"]["min_window_beats"]
    scored = set(report["records"])
    cache = {}
    tpe_pairs, disp_pairs = [], []
    with open(run / "windows.csv", newline="") as f:
        for row in csv.DictReader(f):
            rec = row["record"]
            if rec not in scored:
                continue
            if rec not in cache:
                fs, files = _lead_files(ludb, rec)
                per = {}
                for name, ext in files.items():
                    qts = [(p, e - o if o is not None and e is not None else None)
                           for p, o, e in _beats_qrs_on_t_end(ludb / rec, ext, fs)]
                    tpe = [(p, d) for p, _, d in _beats_p_tpe(ludb / rec, ext, fs)]
                    per[name] = (qts, tpe)
                cache[rec] = (fs, per)
            fs, per = cache[rec]
            s, e = float(row["start_s"]), float(row["end_s"])
            tpe_v, disp_v = row.get("tpe_ms", ""), row.get("qt_dispersion_ms", "")
            lead = row.get("qt_lead", "")
            if tpe_v not in ("", "NaN", "nan"):
                match = [n for n in per if lead and n.lower() == lead.lower()]
                if match:
                    m = _window_mean(per[match[0]][1], s, e, fs, min_beats)
                    if m is not None:
                        tpe_pairs.append((float(tpe_v), m))
            if disp_v not in ("", "NaN", "nan"):
                means = [m for qts, _ in per.values()
                         if (m := _window_mean(qts, s, e, fs, min_beats)) is not None]
                if len(means) >= 2:
                    disp_pairs.append((float(disp_v), max(means) - min(means)))
    assert len(tpe_pairs) > 50 and len(disp_pairs) > 50
    _check_ba("LUDB window Tp-e vs the same lead", tpe_pairs, qt["window_tpe_lead_ref"])
    _check_ba("LUDB window QT dispersion", disp_pairs, qt["window_qt_dispersion_lead_ref"])
    # The dispersion of the reference itself, for scale (printed, not asserted).
    ref = np.array([r for _, r in disp_pairs])
    print(f"reference QT dispersion: mean {ref.mean():.1f} ms, SD {ref.std(ddof=1):.1f} ms")
