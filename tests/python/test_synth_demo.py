"""Cross-check of the shipped demo folder (`demo-signals/`, written by the
`tendline-synth` crate) with general-purpose reference readers:

- every WFDB record reads with the `wfdb` package (`rdrecord`), and its
  `.truth` / `.leadtruth` annotation files with `wfdb.rdann`;
- the EDF record reads with `pyedflib` (the aECG record is checked with
  ElementTree in test_formats_aecg.py);
- the truth marks give the QT and RR that `truth.csv` states;
- the limb leads obey Einthoven's law III = II - I (handbook relation);
- the noisy record carries 50 Hz interference visible in a `scipy.signal.welch`
  spectrum, the clean records do not;
- `subjects.csv` names every record by its file stem.

Needs only the repository (no reference data).
"""

import csv
from pathlib import Path

import numpy as np
import pyedflib
import pytest
import scipy.signal as sg
import wfdb

REPO = Path(__file__).resolve().parents[2]
DEMO = REPO / "demo-signals"
FS = 500.0


def truth_rows():
    with open(DEMO / "truth.csv", newline="") as f:
        return list(csv.DictReader(f))


def wfdb_records():
    return [r["record"] for r in truth_rows() if r["format"] == "wfdb"]


def test_subjects_name_every_record_by_stem():
    with open(DEMO / "subjects.csv", newline="") as f:
        rows = list(csv.DictReader(f))
    assert [k for k in rows[0].keys()] == ["record", "subject", "sex", "age", "timepoint"]
    assert len(rows) == 16
    for r in rows:
        stem = DEMO / r["record"]
        assert any(stem.with_suffix(e).exists() for e in (".hea", ".edf", ".xml"))
        assert r["timepoint"] in ("baseline", "post-dose")
    # RECORDS: WFDB records by name, the EDF and aECG records with their extension.
    listed = (DEMO / "RECORDS").read_text().split()
    ext = {"wfdb": "", "edf": ".edf", "aecg": ".xml"}
    want = [r["record"] + ext[r["format"]] for r in truth_rows()]
    assert listed == want


@pytest.mark.parametrize("name", wfdb_records())
def test_wfdb_record_and_truth(name):
    rec = wfdb.rdrecord(str(DEMO / name))
    assert rec.fs == FS and rec.n_sig == 12 and rec.sig_len == 5000
    assert rec.sig_name == ["I", "II", "III", "aVR", "aVL", "aVF",
                            "V1", "V2", "V3", "V4", "V5", "V6"]
    d = rec.adc()  # digital values: exact integers
    # Einthoven's law on the stored integers: each lead is rounded on its own,
    # so III and II - I differ by at most one ADC unit (1 µV).
    assert np.max(np.abs(d[:, 2] - (d[:, 1] - d[:, 0]))) <= 1

    ann = wfdb.rdann(str(DEMO / name), "truth")
    sym = ann.symbol
    assert len(sym) % 9 == 0 and len(sym) >= 9 * 8
    for k in range(0, len(sym), 9):
        assert sym[k:k + 9] == ["(", "p", ")", "(", "N", ")", "(", "t", ")"]
    assert np.all(ann.chan == 0)
    s = ann.sample
    qt = (s[8::9] - s[3::9]) / FS * 1000.0
    row = next(r for r in truth_rows() if r["record"] == name)
    # Marks are rounded to the 2-ms sample grid: each end within 1 ms.
    assert abs(qt.mean() - float(row["mean_qt_ms"])) <= 2.0
    assert int(row["n_beats"]) == len(sym) // 9
    # RR from consecutive R marks (mean over the beats after the first).
    rr = np.diff(s[4::9]) / FS * 1000.0
    assert abs(rr.mean() - float(row["mean_rr_ms"])) < 0.05 * float(row["mean_rr_ms"])

    lead = wfdb.rdann(str(DEMO / name), "leadtruth")
    assert set(lead.chan) <= set(range(12))
    # Global onsets are the earliest over the leads, ends the latest.
    on_global = s[3::9]
    lead_on = lead.sample[[i for i, x in enumerate(lead.symbol) if x == "N"]]
    assert lead_on.size >= on_global.size


def test_edf_record_reads_with_pyedflib():
    row = next(r for r in truth_rows() if r["format"] == "edf")
    path = DEMO / (row["record"] + ".edf")
    with pyedflib.EdfReader(str(path)) as f:
        labels = f.getSignalLabels()
        ecg = [i for i, l in enumerate(labels) if l != "EDF Annotations"]
        assert [labels[i] for i in ecg][:3] == ["I", "II", "III"]
        assert len(ecg) == 12
        assert f.getSampleFrequency(ecg[0]) == FS
        x = np.array([f.readSignal(i) for i in ecg])
        steps = [(f.getPhysicalMaximum(i) - f.getPhysicalMinimum(i)) / 65535 for i in ecg[:3]]
    assert x.shape[1] == 5000
    # Einthoven's law within the quantisation of the three leads.
    assert np.max(np.abs(x[2] - (x[1] - x[0]))) <= 1.5 * sum(steps)
    ann = wfdb.rdann(str(DEMO / row["record"]), "truth")
    assert len(ann.sample) == 9 * int(row["n_beats"])


def mains_ratio(x):
    f, p = sg.welch(x, fs=FS, nperseg=1000)
    at = p[np.argmin(np.abs(f - 50.0))]
    around = np.median(p[(f > 40) & (f < 60) & (np.abs(f - 50) > 2)])
    return at / around


def test_noisy_record_has_mains_and_clean_ones_do_not():
    rows = truth_rows()
    noisy = [r["record"] for r in rows if r["noisy"] == "yes"]
    assert len(noisy) == 1
    x = wfdb.rdrecord(str(DEMO / noisy[0])).p_signal[:, 1]
    assert mains_ratio(x) > 10.0
    for name in wfdb_records():
        if name != noisy[0]:
            clean = wfdb.rdrecord(str(DEMO / name)).p_signal[:, 1]
            assert mains_ratio(clean) < 3.0, name


def test_truth_table_is_consistent():
    rows = truth_rows()
    for r in rows:
        qt, rr = float(r["mean_qt_ms"]), float(r["mean_rr_ms"])
        assert abs(float(r["mean_hr_bpm"]) - 60000.0 / rr) < 0.01
        # Fridericia of the means vs the stated value (formula check).
        assert abs(float(r["qtcf_of_means_ms"]) - qt / (rr / 1000.0) ** (1 / 3)) < 0.01
    by = {r["record"]: r for r in rows}
    for r in rows:
        if r["timepoint"] == "post-dose":
            base = by[r["record"].replace("_post", "_base")]
            d = float(r["qtcf_ms"]) - float(base["qtcf_ms"])
            assert abs(d - float(r["delta_qtcf_ms"])) < 0.01
    assert any(r["expected_flag"] == "prolonged" and r["sex"] == "F" for r in rows)
    assert any(r["expected_flag"] == "normal" and r["expected_flag_bazett"] == "prolonged" for r in rows)
