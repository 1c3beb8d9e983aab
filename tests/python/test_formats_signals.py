"""Cross-check of tendline's WFDB signal reader and writer against the `wfdb`
Python package (MIT-LCP/wfdb-python), the reference implementation:
`wfdb.rdrecord(..., physical=False, smooth_frames=False)` for digital samples,
`wfdb.rdrecord(...).p_signal` for physical values, `wfdb.rdheader` for fields.

The Rust side is reached through the dev binary `formats-dump`
(crates/formats/src/bin/formats-dump.rs), looked up in `$TENDLINE_BIN_DIR`
(default `<repo>/target/release`); build it with
`cargo build --release -p tendline-formats --bin formats-dump`.
"""

import csv
import json
import os
import shutil
import subprocess
import tempfile
from pathlib import Path

import numpy as np
import pytest
import wfdb

from _devtools import DATA, dev_bin, need_data
CONF = DATA / "wfdb-conformance"

# Variants our digital reader rejects on purpose (documented in
# crates/formats/src/wfdb/mod.rs): variable-layout multi-segment records, whose
# segments store a signal at different gains; the `wfdb` package refuses them in
# digital form too ("cannot be converted to single segment, in digital format").
# They are read in physical units and checked below against wfdb's p_signal.
# (The FLAC records flacformats, flac_3_constant and mixedsignals, formats
# 508/516/524, are read and checked like the others.)
UNSUPPORTED = {
    "multi-segment/s25047/s25047-2704-05-04-10-44": "variable-layout",
}
# Signals with different samples per frame: read as a Record at the fastest rate.
MULTI_RATE = {"mixedsignals", "multi-segment/041s/041s", "multi-segment/041s/041s01", "multi-segment/041s/041s02", "03700181", "test01_00s_frame", "test01_00s_skewframe", "test_generator_2"}

# Physical units -> factor to millivolts, as the reader documents it.
MV = {"mV": 1.0, "uV": 1e-3, "μV": 1e-3, "µV": 1e-3, "V": 1e3}




def dump(mode, inputs, out_dir):
    """Run formats-dump once over `inputs`; yield (input, meta, out_dir, index)."""
    subprocess.run([dev_bin("formats-dump"), mode, str(out_dir), *map(str, inputs)], check=True)
    for i, path in enumerate(inputs):
        meta = json.loads((Path(out_dir) / f"{i}.json").read_text())
        yield path, meta, Path(out_dir), i


def our_digital(meta, out_dir, i):
    d = np.fromfile(out_dir / f"{i}.d.bin", dtype="<i4")
    sigs, at = [], 0
    for n in meta["lengths"]:
        sigs.append(d[at : at + n])
        at += n
    assert at == d.size
    return sigs


def our_physical(meta, out_dir, i):
    p = np.fromfile(out_dir / f"{i}.p.bin", dtype="<f8")
    n = meta["n_samples"]
    assert p.size == n * len(meta["lead_names"])
    return p.reshape(len(meta["lead_names"]), n).T


def ref_digital(rec):
    """Reference digital samples, one array per signal at its own rate."""
    h = wfdb.rdheader(str(rec))
    spf = getattr(h, "samps_per_frame", None)
    if spf is not None and all((s or 1) == 1 for s in spf):
        # One-rate record: the default (smooth_frames=True) path is the same data and
        # far faster in wfdb 4.3; smooth_frames=False also fails there for some
        # one-rate records (binformats, p10143).
        r = wfdb.rdrecord(str(rec), physical=False)
        return r, [np.asarray(r.d_signal[:, ch], dtype=np.int64) for ch in range(r.n_sig)]
    r = wfdb.rdrecord(str(rec), physical=False, smooth_frames=False)
    return r, [np.asarray(s, dtype=np.int64) for s in r.e_d_signal]


@pytest.fixture
def scratch(tmp_path):
    """Scratch folder, in memory (/dev/shm) when available: the dumps are large."""
    shm = Path("/dev/shm")
    if shm.is_dir() and os.access(shm, os.W_OK):
        d = Path(tempfile.mkdtemp(prefix="tendline-fmt-", dir=shm))
        yield d
        shutil.rmtree(d, ignore_errors=True)
    else:
        yield tmp_path


def check_digital(path, meta, out_dir, i):
    assert "error" not in meta, f"{path}: {meta.get('error')}"
    ref, ref_sigs = ref_digital(path)
    assert meta["n_sig"] == ref.n_sig, path
    assert meta["sig_len"] == ref.sig_len, path
    assert meta["fs"] == pytest.approx(ref.fs, rel=1e-12), path
    assert meta["samps_per_frame"] == [s or 1 for s in ref.samps_per_frame], path
    assert meta["sig_name"] == [s.strip() for s in ref.sig_name], path
    mine = our_digital(meta, out_dir, i)
    for ch, (a, b) in enumerate(zip(mine, ref_sigs)):
        assert a.shape == b.shape, f"{path} signal {ch}: {a.shape} vs {b.shape}"
        bad = np.flatnonzero(a != b)
        assert bad.size == 0, f"{path} signal {ch}: {bad.size} samples differ, first at {bad[:5]}"
    return ref


def check_physical(path, meta, out_dir, i, ref=None):
    """Record values (mV where converted) within 1e-9 of wfdb's p_signal, converted the same way.

    `ref`: the record already read by wfdb with physical=False; its `dac()` is the
    conversion rdrecord applies to produce p_signal."""
    assert "error" not in meta, f"{path}: {meta.get('error')}"
    if ref is None:
        ref = wfdb.rdrecord(str(path))
    else:
        if ref.d_signal is not None:
            ref.p_signal = ref.dac(expanded=False, return_res=64)
        else:
            ref.p_signal = np.column_stack(ref.dac(expanded=True, return_res=64))
    mine = our_physical(meta, out_dir, i)
    assert mine.shape == ref.p_signal.shape, path
    assert meta["lead_names"] == [s.strip() for s in ref.sig_name], path
    for ch, u in enumerate(ref.units):
        f = MV.get(u, 1.0)
        assert meta["units"][ch] == ("mV" if u in MV else u), path
        want = ref.p_signal[:, ch] * f
        np.testing.assert_array_equal(np.isnan(mine[:, ch]), np.isnan(want), err_msg=str(path))
        ok = ~np.isnan(want)
        err = np.max(np.abs(mine[ok, ch] - want[ok]), initial=0.0)
        assert err <= 1e-9, f"{path} lead {ch}: max |difference| {err}"


def records(db):
    return [DATA / db / name.strip() for name in (DATA / db / "RECORDS").read_text().split()]


def batches(items, n):
    for k in range(0, len(items), n):
        yield items[k : k + n]


@pytest.mark.parametrize("db", ["qtdb", "ludb"])
def test_database_digital_and_physical(db, scratch):
    """Every QTDB (105) and LUDB (100) record: digital identical, physical within 1e-9 (wfdb package)."""
    need_data()
    recs = records(db)
    assert len(recs) == {"qtdb": 105, "ludb": 100}[db]
    for k, batch in enumerate(batches(recs, 15)):
        out = scratch / f"b{k}"
        refs = [check_digital(*x) for x in dump("digital", batch, out / "d")]
        for (path, meta, o, i), ref in zip(dump("record", [p.with_suffix(".hea") for p in batch], out / "r"), refs):
            check_physical(path.with_suffix(""), meta, o, i, ref)
            assert meta["fs"] == {"qtdb": 250.0, "ludb": 500.0}[db]
        shutil.rmtree(out)


def manifest():
    with open(CONF / "MANIFEST.tsv", newline="") as f:
        return list(csv.DictReader(f, delimiter="\t"))


def test_conformance_manifest(tmp_path):
    """Every record wfdb reads (MANIFEST.tsv) is read identically, or rejected as unsupported."""
    need_data()
    rows = [r for r in manifest() if r["wfdb_reads"] == "yes"]
    paths = [CONF / r["record"] for r in rows]
    seen_unsupported = set()
    for (path, meta, o, i), row in zip(dump("digital", paths, tmp_path / "d"), rows):
        name = row["record"]
        if name in UNSUPPORTED:
            assert meta.get("kind") == "unsupported", f"{name}: expected a rejection, got {meta}"
            assert UNSUPPORTED[name] in meta["error"], meta["error"]
            seen_unsupported.add(name)
            continue
        # MANIFEST.tsv (what wfdb 4.3 reads) and the wfdb package itself.
        assert meta["n_sig"] == int(row["n_sig"]), name
        assert meta["sig_len"] == int(row["sig_len"]), name
        assert meta["fs"] == pytest.approx(float(row["fs"]), rel=1e-5), name  # MANIFEST rounds fs
        check_digital(path, meta, o, i)
    assert seen_unsupported == set(UNSUPPORTED)


def test_conformance_records_physical(tmp_path):
    """Records readable as one-rate Records: physical values vs wfdb p_signal."""
    need_data()
    rows = [r for r in manifest() if r["wfdb_reads"] == "yes"]
    # The long records are covered digitally; keep this test quick.
    skip = {"100", "100-no-len", "100skew", "p10143", "a103l", "multi-segment/s25047/3234460_0016"}
    names = [r["record"] for r in rows if r["record"] not in skip]
    for path, meta, o, i in dump("record", [CONF / (n + ".hea") for n in names], tmp_path):
        name = str(path.relative_to(CONF).with_suffix(""))
        if name in MULTI_RATE:
            check_multi_rate(path.with_suffix(""), meta, o, i)
            continue
        check_physical(path.with_suffix(""), meta, o, i)


def check_multi_rate(path, meta, out_dir, i):
    """A multi-rate record as one Record: every signal at the fastest rate.

    Reference: wfdb.rdrecord(smooth_frames=False).e_p_signal, each signal at its
    own rate. Sample j of frame f of a signal with k samples per frame lies at
    f + j/k frames (WFDB frame layout), so a slower signal's own samples must
    reappear unchanged every K/k samples of ours (K the largest samples per
    frame), and the samples between them on the straight line joining them."""
    assert "error" not in meta, f"{path}: {meta.get('error')}"
    ref = wfdb.rdrecord(str(path), smooth_frames=False)
    spf = [s or 1 for s in ref.samps_per_frame]
    K = max(spf)
    assert meta["fs"] == pytest.approx(ref.fs * K, rel=1e-12), path
    mine = our_physical(meta, out_dir, i)
    assert mine.shape[0] == ref.sig_len * K, path
    n = mine.shape[0]
    for ch, (k, u) in enumerate(zip(spf, ref.units)):
        want = np.asarray(ref.e_p_signal[ch], dtype=float) * MV.get(u, 1.0)
        assert want.size == ref.sig_len * k, path
        # Our samples that fall on one of the signal's own samples: unchanged.
        at = np.flatnonzero((np.arange(n) * k) % K == 0)
        own, ref_own = mine[at, ch], want[(at * k) // K]
        ok = ~np.isnan(ref_own)
        np.testing.assert_array_equal(np.isnan(own), ~ok, err_msg=f"{path} lead {ch}")
        err = np.max(np.abs(own[ok] - ref_own[ok]), initial=0.0)
        assert err <= 1e-9, f"{path} lead {ch}: max |difference| {err}"
        if k < K:
            # In between: on the straight line joining them (the last one held).
            lin = np.interp(np.arange(n) * k / K, np.arange(want.size), want)
            fin = ~np.isnan(lin)
            err = np.max(np.abs(mine[fin, ch] - lin[fin]), initial=0.0)
            assert err <= 1e-9, f"{path} lead {ch}: interpolation off by {err}"


def test_skew_beyond_file_is_invalid_like_wfdb(tmp_path):
    """100skew: the skewed signal runs 3 frames past the file; wfdb gives NaN there, so do we."""
    need_data()
    [(path, meta, o, i)] = dump("record", [CONF / "100skew.hea"], tmp_path)
    p = our_physical(meta, o, i)
    assert np.isnan(p[-3:, 1]).all() and not np.isnan(p[:-3, 1]).any()
    assert any("invalid" in w for w in meta["warnings"])


def test_metadata_from_comments(tmp_path):
    """Age/sex from both header conventions (values read off the headers in ../shared/data)."""
    need_data()
    paths = [DATA / "qtdb" / "sel100.hea", DATA / "ludb" / "1.hea", DATA / "qtdb" / "sele0107.hea"]
    got = [(m["age"], m["sex"]) for _, m, _, _ in dump("record", paths, tmp_path)]
    assert got == [(69.0, "M"), (51.0, "F"), (52.0, "M")]


def test_written_records_read_back_with_wfdb(tmp_path):
    """Our writer's output, read by wfdb.rdrecord: same lead names, fs, values within half a step."""
    need_data()
    inputs = [DATA / "ludb" / "1.hea", DATA / "qtdb" / "sel100.hea"]
    gain = 1000.0
    for path, meta, o, i in dump(f"write:{gain}", inputs, tmp_path / "w"):
        assert "error" not in meta, meta
        written = Path(meta["header"])
        ref_in = wfdb.rdrecord(str(path.with_suffix("")))
        back = wfdb.rdrecord(str(written.with_suffix("")))
        assert back.fs == ref_in.fs
        assert back.sig_name == ref_in.sig_name
        assert back.units == ["mV"] * back.n_sig
        assert back.p_signal.shape == ref_in.p_signal.shape
        # Quantisation to 1/gain mV: error at most half a step.
        assert np.max(np.abs(back.p_signal - ref_in.p_signal)) <= 0.5 / gain + 1e-12
        # wfdb's own header checks: checksum and initial value agree with the samples.
        d = wfdb.rdrecord(str(written.with_suffix("")), physical=False).d_signal.astype(np.int64)
        hdr = wfdb.rdheader(str(written.with_suffix("")))
        assert list((d.sum(axis=0) + 32768) % 65536 - 32768) == hdr.checksum
        assert list(d[0]) == hdr.init_value
        assert any(c.startswith("<age>:") for c in hdr.comments)
