"""Cross-check of tendline's WFDB annotation reader and writer against the
`wfdb` Python package (MIT-LCP/wfdb-python), the reference implementation named
in the task: `wfdb.rdann` for reading, `wfdb.wrann` for files written outside
tendline.

The Rust side is reached through the dev binary `annot-dump`
(crates/formats/src/bin/annot-dump.rs), looked up in `$TENDLINE_BIN_DIR`
(default `<repo>/target/release`); build it with
`cargo build --release -p tendline-formats --bin annot-dump`.
"""

import json
import subprocess
from pathlib import Path

import numpy as np
import pytest
import wfdb
from wfdb.io import annotation as wfdb_annotation

from _devtools import DATA, dev_bin, need_data

LUDB_LEADS = ["i", "ii", "iii", "avr", "avl", "avf", "v1", "v2", "v3", "v4", "v5", "v6"]
QTDB_EXTS = ["atr", "man", "q1c", "q2c", "qt1", "qt2"]




def ours(path):
    out = subprocess.run(
        [dev_bin("annot-dump"), "read", str(path)], capture_output=True, text=True, check=True
    ).stdout
    return [json.loads(line) for line in out.splitlines()]


def theirs(path):
    path = Path(path)
    rec, ext = str(path.with_suffix("")), path.suffix[1:]
    a = wfdb.rdann(rec, ext, return_label_elements=["symbol", "label_store"])
    return a


def compare(path, mine, ref):
    """List of mismatch descriptions (empty when identical)."""
    n = len(ref.sample)
    if len(mine) != n:
        return [f"{path}: {len(mine)} annotations, wfdb.rdann has {n}"]
    fields = {
        "sample": [int(x) for x in ref.sample],
        "code": [int(x) for x in ref.label_store],
        "symbol": list(ref.symbol),
        "subtype": [int(x) for x in ref.subtype],
        "chan": [int(x) for x in ref.chan],
        "num": [int(x) for x in ref.num],
        "aux_note": list(ref.aux_note),
    }
    bad = []
    for k, vals in fields.items():
        got = [m[k] for m in mine]
        if got != vals:
            i = next(i for i in range(n) if got[i] != vals[i])
            bad.append(f"{path}: field {k} differs first at #{i}: ours {got[i]!r}, wfdb {vals[i]!r}")
    return bad


def annotation_files(group):
    if group == "conformance":
        return [DATA / "wfdb-conformance" / f for f in ("100.atr", "1003.atr", "huge.qrs")]
    if group.startswith("qtdb."):
        return sorted((DATA / "qtdb").glob("*." + group.split(".")[1]))
    if group.startswith("ludb."):
        return [DATA / "ludb" / f"{i}.{group.split('.')[1]}" for i in range(1, 101)]
    raise ValueError(group)


GROUPS = ["conformance"] + [f"qtdb.{e}" for e in QTDB_EXTS] + [f"ludb.{lead}" for lead in LUDB_LEADS]


@pytest.mark.parametrize("group", GROUPS)
def test_read_matches_rdann(group):
    # Reference: wfdb.rdann (wfdb-python 4.3), all six fields per annotation.
    need_data()
    files = annotation_files(group)
    assert files, f"no files for {group}"
    bad = []
    total = 0
    for f in files:
        assert f.is_file(), f"missing reference file {f}"
        mine = ours(f)
        total += len(mine)
        bad += compare(f, mine, theirs(f))
    assert not bad, "\n".join(bad[:20])
    assert total > 0


@pytest.mark.parametrize("group", GROUPS)
def test_our_writer_reads_back_in_rdann(group, tmp_path):
    # Files written by tendline's writer, read by wfdb.rdann, equal the original
    # read by wfdb.rdann (reference: wfdb-python 4.3).
    need_data()
    bad = []
    for f in annotation_files(group):
        out = tmp_path / f.name
        subprocess.run([dev_bin("annot-dump"), "copy", str(f), str(out)], check=True, capture_output=True)
        mine = [
            {
                "sample": int(s),
                "code": int(c),
                "symbol": y,
                "subtype": int(t),
                "chan": int(h),
                "num": int(n),
                "aux_note": x,
            }
            for s, c, y, t, h, n, x in zip(*_fields(theirs(out)))
        ]
        bad += compare(f, mine, theirs(f))
    assert not bad, "\n".join(bad[:20])


def _fields(a):
    return a.sample, a.label_store, a.symbol, a.subtype, a.chan, a.num, a.aux_note


def test_code_table_matches_wfdb():
    # Reference: wfdb.io.annotation.ann_label_table and is_qrs (wfdb-python 4.3).
    table = {int(r.label_store): r.symbol for r in wfdb_annotation.ann_label_table.itertuples()}
    out = subprocess.run([dev_bin("annot-dump"), "codes"], capture_output=True, text=True, check=True).stdout
    rows = [json.loads(line) for line in out.splitlines()]
    assert len(rows) == 50
    for r in rows:
        assert r["symbol"] == table.get(r["code"], ""), r
        assert r["is_beat"] == bool(wfdb_annotation.is_qrs[r["code"]]), r


def test_wrann_file_with_every_field(tmp_path):
    # A file written by wfdb.wrann (the reference writer) with sticky chan/num
    # changes, subtypes, odd and even aux lengths and a gap needing SKIP reads
    # identically in ours and in wfdb.rdann; our rewrite of it too.
    rng = np.random.default_rng(7)
    n = 400
    gaps = rng.integers(0, 3000, n)
    gaps[100] = 5_000_000_000  # beyond 2**31: several SKIPs
    sample = np.cumsum(gaps).astype("int64")
    symbols = list(rng.choice(["N", "V", "(", ")", "p", "t", "|", "+", '"'], n))
    subtype = rng.integers(-3, 4, n)
    chan = np.repeat(rng.integers(0, 12, n // 20), 20)
    num = np.repeat(rng.integers(0, 128, n // 10), 10)  # wrann allows 0..127; negative nums occur in QTDB files
    aux = [["", "x", "ab", "(AFIB", "note text"][i % 5] for i in range(n)]
    wfdb.wrann("w", "tst", sample, symbol=symbols, subtype=subtype, chan=chan, num=num,
               aux_note=aux, write_dir=str(tmp_path))
    f = tmp_path / "w.tst"
    ref = theirs(f)
    assert len(ref.sample) == n
    assert not compare(f, ours(f), ref)
    out = tmp_path / "c.tst"
    subprocess.run([dev_bin("annot-dump"), "copy", str(f), str(out)], check=True, capture_output=True)
    assert not compare(out, ours(out), ref)
    assert not compare(out, ours(f), theirs(out))


def test_truncated_file_is_a_clear_error(tmp_path):
    # Cutting the 100.atr file (reference data) inside its first AUX field must
    # give an error naming the file, not a crash.
    need_data()
    data = (DATA / "wfdb-conformance" / "100.atr").read_bytes()
    bad = tmp_path / "cut.atr"
    bad.write_bytes(data[:5])
    r = subprocess.run([dev_bin("annot-dump"), "read", str(bad)], capture_output=True, text=True)
    assert r.returncode != 0
    assert "cut.atr" in r.stderr and "truncated" in r.stderr, r.stderr
