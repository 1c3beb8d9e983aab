"""results.h5 written by `tendline run`, read back with the general-purpose `h5py`
package (the reference HDF5 reader), and cross-checked against the inputs as read
by the `wfdb` package (MIT-LCP/wfdb-python) and against `hashlib`.

The layout checked here is the contract documented in docs/results-h5.md.
"""

import csv
import hashlib
import os
import shutil
import subprocess
import tempfile
from pathlib import Path

import h5py
import numpy as np
import pytest
import wfdb

REPO = Path(__file__).resolve().parents[2]
DATA = REPO.parent / "shared" / "data"
BIN = Path(os.environ.get("TENDLINE_BIN_DIR", REPO / "target" / "release")) / "tendline"

WINDOW_FIELDS = [
    "start_s", "end_s", "n_beats", "rr_ms", "hr_bpm", "qt_ms", "qt_lead",
    "qt_superimposed_ms", "qrs_ms", "pr_ms", "qtc_bazett_ms", "qtc_fridericia_ms",
    "qtc_framingham_ms", "qtc_hodges_ms", "qtc_flag",
]


def text(v):
    return v.decode() if isinstance(v, bytes) else str(v)


@pytest.fixture(scope="module")
def run():
    if not BIN.exists():
        pytest.fail(f"{BIN} missing: build with `cargo build --release -p tendline`")
    tmp = Path(tempfile.mkdtemp())
    inp = tmp / "in"
    inp.mkdir()
    for rec in ["7", "8"]:
        for ext in ["hea", "dat"]:
            shutil.copy(DATA / "ludb" / f"{rec}.{ext}", inp / f"{rec}.{ext}")
    out = tmp / "out"
    subprocess.run([str(BIN), "run", str(inp), "--out", str(out), "--quiet"], check=True)
    yield inp, out
    shutil.rmtree(tmp)


def test_root_attributes_identify_the_run(run):
    _, out = run
    with h5py.File(out / "results.h5", "r") as f:
        assert text(f.attrs["tool"]) == "tendline"
        assert text(f.attrs["tool_version"])
        cfg = text(f.attrs["config_toml"])
        # The stored digest is the SHA-256 of the stored config text (hashlib as reference).
        assert text(f.attrs["config_sha256"]) == hashlib.sha256(cfg.encode()).hexdigest()
        assert "[detect]" in cfg and "[delineate]" in cfg
        assert "over-read" in text(f.attrs["caution"])
        assert sorted(f["records"].keys()) == ["7", "8"]


def test_record_attributes_match_the_input(run):
    inp, out = run
    with h5py.File(out / "results.h5", "r") as f:
        for rec in ["7", "8"]:
            g = f["records"][rec]
            ref = wfdb.rdheader(str(inp / rec))
            assert float(g.attrs["fs"]) == ref.fs
            assert int(g.attrs["n_samples"]) == ref.sig_len
            # Lead names exactly as in the input header.
            assert [text(x) for x in g.attrs["leads"]] == ref.sig_name
            files = [text(x) for x in g.attrs["input_files"]]
            sums = [text(x) for x in g.attrs["input_sha256"]]
            for name, digest in zip(files, sums):
                assert hashlib.sha256((inp / name).read_bytes()).hexdigest() == digest
            assert set(files) == {f"{rec}.hea", f"{rec}.dat"}
            # LUDB headers carry sex and age (Kalyakulina et al. 2020).
            assert text(g.attrs["sex"]) in ("M", "F")
            assert 0 < float(g.attrs["age"]) < 120


def test_beats_marks_and_windows_are_consistent(run):
    _, out = run
    with h5py.File(out / "results.h5", "r") as f:
        g = f["records"]["7"]
        peaks = g["beats/qrs_peak"][:]
        labels = [text(x) for x in g["beats/label"][:]]
        assert len(peaks) == len(labels) > 5
        assert np.all(np.diff(peaks) > 0)
        assert set(labels) <= {"N", "V", "Q"}
        gm = g["marks/global"]
        for k in ["qrs_on", "qrs_end", "t_end", "t_end_tangent", "t_end_wavelet", "qrs_on_confidence"]:
            assert len(gm[k]) == len(peaks), k
        on, end = gm["qrs_on"][:], gm["qrs_end"][:]
        ok = (on >= 0) & (end >= 0)
        assert ok.sum() > 0.8 * len(peaks)
        assert np.all(on[ok] < peaks[ok]) and np.all(peaks[ok] < end[ok])
        assert len(g["marks/leads"].keys()) == 12
        w = g["windows"]
        for k in WINDOW_FIELDS:
            assert k in w, k
        assert len(w["start_s"]) == 1  # a 10-s record is one window
        qt = w["qt_ms"][0]
        rr_s = w["rr_ms"][0] / 1000.0
        if np.isfinite(qt):
            # Fridericia 1920: QTc = QT / RR^(1/3), stored beside the inputs it came from.
            assert w["qtc_fridericia_ms"][0] == pytest.approx(qt / rr_s ** (1 / 3), rel=1e-9)
            assert text(w["qt_lead"][0]) in [text(x) for x in g.attrs["leads"]]


def test_window_tpe_p_duration_and_dispersion_follow_the_median_beat_marks(run):
    # The window intervals beyond the QT, rebuilt from the per-lead median-beat
    # marks stored beside them (read with h5py): T peak to T end on the lead of the
    # window's QT, P duration from the earliest P onset to the latest P end, QT
    # dispersion (common practice: longest minus shortest lead QT) within the
    # span of the leads' QTs.
    _, out = run
    with h5py.File(out / "results.h5", "r") as f:
        for rec in ["7", "8"]:
            g = f["records"][rec]
            fs = float(g.attrs["fs"])
            w = g["windows"]
            for k in ["p_ms", "tpe_ms", "qt_dispersion_ms", "qt_valid_leads"]:
                assert k in w, k
            # Median beats stacked [window, lead] (docs/results-h5.md); window 0.
            m = g["windows/medians"]
            marks = m["marks"]
            lead = int(w["qt_lead_index"][0])
            if lead >= 0:
                tp, te = int(marks["t_peak"][0, lead]), int(marks["t_end"][0, lead])
                want = (te - tp) / fs * 1000.0 if tp >= 0 and te > tp else np.nan
                got = float(w["tpe_ms"][0])
                assert (np.isnan(want) and np.isnan(got)) or got == pytest.approx(want), rec
            usable = m["usable"][0] == 1
            on, end = marks["p_on"][0], marks["p_end"][0]
            ok_on, ok_end = usable & (on >= 0), usable & (end >= 0)
            p = float(w["p_ms"][0])
            if np.isfinite(p):
                # Robust extremes drop at most one outlier at each side, so the
                # duration lies between the second-widest and the widest span.
                widest = (end[ok_end].max() - on[ok_on].min()) / fs * 1000.0
                assert 0 < p <= widest + 1e-9, rec
            qts = m["qt_ms"][0]
            qts = qts[np.isfinite(qts)]
            n_valid = int(w["qt_valid_leads"][0])
            assert 0 <= n_valid <= len(qts)
            d = float(w["qt_dispersion_ms"][0])
            if n_valid >= 3:
                assert 0 <= d <= qts.max() - qts.min() + 1e-9, rec
            else:
                assert np.isnan(d), rec


def test_annotation_files_read_with_wfdb(run):
    _, out = run
    ann = wfdb.rdann(str(out / "annotations" / "7"), "mark")
    assert len(ann.sample) > 0
    assert set(ann.symbol) <= {"(", ")", "p", "t", "N", "V", "Q"}
    lead = wfdb.rdann(str(out / "annotations" / "7"), "leadmark")
    assert set(lead.chan) <= set(range(12)) and len(set(lead.chan)) > 1


def test_pacing_spikes_match_the_raw_signal(run):
    # LUDB record 8's header says "UNIpolar ventricular pacing"; record 7 is not
    # paced. Each stored stretch is checked on the samples as the `wfdb` package
    # reads them: in at least half of the leads some sample departs by >= 0.1 mV
    # from the line joining the samples on either side (filter.pacing_min_mv and
    # filter.pacing_min_lead_fraction, defaults). Each lead's stretch is at most
    # 6 ms (filter.pacing_max_width_ms); the stored one is the union over leads
    # whose stretches lie within a sample of each other, so allow two of them.
    _, out = run
    with h5py.File(out / "results.h5", "r") as f:
        r7, r8 = f["records/7"], f["records/8"]
        assert int(r7.attrs["pacing_spikes"]) == 0 and "pacing" not in r7
        start, end = r8["pacing/start"][()], r8["pacing/end"][()]
        assert int(r8.attrs["pacing_spikes"]) == len(start) == len(end) > 0
        fs = float(r8.attrs["fs"])
    x = wfdb.rdrecord(str(DATA / "ludb" / "8")).p_signal
    for s, e in zip(start, end):
        assert 0 < s < e and e - s <= 2 * round(6.0 * fs / 1000.0) + 1
        k = np.arange(1, e - s + 1) / (e - s + 1)
        line = x[s - 1][None, :] + (x[e] - x[s - 1])[None, :] * k[:, None]
        dev = np.abs(x[s:e] - line).max(axis=0)
        assert (dev >= 0.1).sum() >= 0.5 * x.shape[1], (s, e, dev)
    with open(out / "summary.csv") as fh:
        rows = {r["record"]: r for r in csv.DictReader(fh)}
    assert rows["7"]["pacing_spikes"] == "0"
    assert int(rows["8"]["pacing_spikes"]) == len(start)
