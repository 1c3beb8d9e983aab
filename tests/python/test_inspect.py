"""Cross-check of `tendline inspect` (what a run would read) against outside
references: the `wfdb` Python package (MIT-LCP/wfdb-python, `wfdb.rdheader`)
for the sampling rate, length, signal names and units of every QTDB and LUDB
record; Python's `hashlib` and the conformance set's own `SHA256SUMS` file for
the input checksums; LUDB's header comment tags `<age>` and `<sex>` (the LUDB
1.0.1 header convention) for age and sex.

The binary is `tendline` in `$TENDLINE_BIN_DIR` (default `<repo>/target/release`).
"""

import csv
import hashlib
import subprocess
import tempfile
from pathlib import Path

import numpy as np
import pytest
import wfdb

from _devtools import DATA, dev_bin, need_data


def inspect(*args):
    with tempfile.TemporaryDirectory() as d:
        out = Path(d) / "inspect.csv"
        r = subprocess.run(
            [dev_bin("tendline", "tendline"), "inspect", *map(str, args), "--csv", str(out)],
            capture_output=True,
            text=True,
            check=False,
        )
        rows = list(csv.DictReader(out.open())) if out.exists() else []
    return r, rows


@pytest.mark.parametrize("db", ["qtdb", "ludb"])
def test_header_fields_equal_wfdb_rdheader(db):
    need_data()
    r, rows = inspect(DATA / db, "--checksums")
    assert r.returncode == 0, r.stderr
    records = [ln.strip() for ln in (DATA / db / "RECORDS").read_text().split() if ln.strip()]
    assert sorted(x["record"] for x in rows) == sorted(records)
    for row in rows:
        h = wfdb.rdheader(str(DATA / db / row["record"]))
        assert row["status"] == "ok", row
        assert float(row["fs_hz"]) == pytest.approx(h.fs), row["record"]
        assert int(row["n_samples"]) == h.sig_len, row["record"]
        assert float(row["duration_s"]) == pytest.approx(h.sig_len / h.fs, abs=5e-4)
        assert row["leads"].split(";") == h.sig_name, row["record"]
        assert row["units"].split(";") == h.units, row["record"]
        assert int(row["missing_samples"]) == 0
        # Memory estimate (crates/cli/src/budget.rs): every QTDB and LUDB
        # record is under the default chunk of 2 M samples, so its samples as
        # 8-byte values times 7.2, plus 48 MiB, in MiB, from the header's sizes.
        assert h.sig_len * h.n_sig <= 2_000_000
        need = int(h.sig_len * h.n_sig * 8 * 7.2) + (48 << 20)
        assert int(row["memory_mib"]) == need >> 20, row["record"]
        assert row["flat_leads"] == ""
        # Checksums of the files a run stores in results.h5, against hashlib.
        files = row["files"].split(";")
        sums = row["sha256"].split(";")
        assert len(files) == len(sums) >= 2, row["record"]
        for f, s in zip(files, sums):
            assert hashlib.sha256(Path(f).read_bytes()).hexdigest() == s, f
        if db == "ludb":
            tags = dict(
                c.split(":", 1) for c in h.comments if c.startswith("<") and ":" in c
            )
            assert float(row["age"]) == float(tags["<age>"]), row["record"]
            assert row["sex"] == tags["<sex>"].strip(), row["record"]
            # LUDB keeps each lead's reference in a file named after the lead.
            assert set(row["annotations"].split(";")) >= {"i", "ii", "v6"}
        else:
            assert "q1c" in row["annotations"].split(";"), row["record"]


def typical_range_mv(p_signal, fs, block_s=2.0):
    """The amplitude rule of crates/dsp/src/amplitude.rs written with numpy:
    per lead, the median over consecutive whole blocks of 2 s of each block's
    peak-to-peak range (the whole lead when shorter than a block); over the
    record, the median of the leads with a nonzero range."""
    block = int(round(block_s * fs))
    per_lead = []
    for x in p_signal.T:
        n = len(x) // block
        if n == 0:
            r = np.ptp(x)
        else:
            b = x[: n * block].reshape(n, block)
            r = np.median(b.max(axis=1) - b.min(axis=1))
        if r > 0:
            per_lead.append(r)
    return float(np.median(per_lead))


@pytest.mark.parametrize("db", ["qtdb", "ludb"])
def test_amplitude_equals_numpy_on_wfdb_samples_and_is_plausible(db):
    # Samples from `wfdb.rdrecord` (physical units, mV in both databases'
    # headers), the rule above in numpy; `inspect` prints 4 decimals.
    need_data()
    r, rows = inspect(DATA / db)
    assert r.returncode == 0, r.stderr
    for row in rows:
        rec = wfdb.rdrecord(str(DATA / db / row["record"]))
        assert set(rec.units) == {"mV"}, row["record"]
        want = typical_range_mv(rec.p_signal, rec.fs)
        assert float(row["amplitude_mv"]) == pytest.approx(want, abs=6e-5), row["record"]
        # Surface-ECG QRS amplitudes lie between about 0.3 and 5 mV (common
        # practice): every record of both databases is inside the default
        # plausible span of 0.05 to 20 mV and draws no amplitude warning.
        assert 0.3 < want < 6.0, (row["record"], want)
        assert "amplitude" not in row["warnings"], row["record"]


def test_checksums_equal_the_conformance_sha256sums():
    need_data()
    conf = DATA / "wfdb-conformance"
    listed = {}
    for line in (conf / "SHA256SUMS").read_text().splitlines():
        digest, name = line.split(maxsplit=1)
        listed[(conf / name).resolve()] = digest
    r, rows = inspect(conf / "100.hea", conf / "a103l.hea", conf / "310derive.hea", "--checksums")
    assert r.returncode == 0, r.stderr
    compared = 0
    for row in rows:
        for f, s in zip(row["files"].split(";"), row["sha256"].split(";")):
            p = Path(f).resolve()
            if p in listed:
                assert listed[p] == s, f
                compared += 1
    assert compared >= 5, rows


def test_unreadable_records_fail_alone_and_subjects_are_matched():
    need_data()
    with tempfile.TemporaryDirectory() as d:
        d = Path(d)
        for ext in ["hea", "dat", "i"]:
            (d / f"1.{ext}").write_bytes((DATA / "ludb" / f"1.{ext}").read_bytes())
        # A truncated signal file: the header promises 5000 frames of 12 signals.
        (d / "3.hea").write_bytes((DATA / "ludb" / "3.hea").read_bytes())
        dat = (DATA / "ludb" / "3.dat").read_bytes()
        (d / "3.dat").write_bytes(dat[: len(dat) // 3])
        # A lead of zeros read from CSV (a disconnected electrode).
        (d / "flat.csv").write_text("# fs=500\nI,II\n" + "0,0.1\n0,0.2\n0,0.15\n")
        (d / "subjects.csv").write_text("record,subject,sex,age\n1,S1,M,40\n99,S9,F,50\n")
        r, rows = inspect(d)
    assert r.returncode == 1, r.stderr
    by = {x["record"]: x for x in rows}
    assert by["1"]["status"] == "ok" and by["1"]["annotations"] == "i"
    # The subjects table overrides the header's sex and age, as in a run.
    assert (by["1"]["sex"], by["1"]["age"], by["1"]["subject"]) == ("M", "40", "S1")
    assert by["3"]["status"] == "failed" and "truncated" in by["3"]["error"]
    assert by["flat"]["flat_leads"] == "I"
    assert "2 record(s) without a row (3, flat)" in r.stderr, r.stderr
    assert "1 row(s) naming no record found (99)" in r.stderr, r.stderr
