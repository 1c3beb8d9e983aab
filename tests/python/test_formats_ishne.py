"""Cross-check of tendline's ISHNE Holter reader against `ishneholterlib`
(PyPI, an independent reader and writer of the ISHNE Holter standard output
format; its CRC is `crccheck`'s CRC-16/CCITT-FALSE).

* A file built here with `struct` at the offsets of the ISHNE publication
  (Badilini 1998, layout from memory) from LUDB record 1 (`wfdb.rdrecord`):
  ishneholterlib must accept it (magic and CRC) and both readers must return
  the same millivolts, sex and dates.
* The same data written by ishneholterlib's own writer: tendline reads it with
  no warning (its CRC agrees) and the same values.

The Rust side is reached through `formats-dump record` (see
test_formats_signals.py).
"""

import datetime
import json
import struct
import subprocess

import ishneholterlib
import numpy as np
import wfdb
from crccheck.crc import Crc16CcittFalse

from _devtools import DATA, dev_bin, need_data

# ISHNE lead specification codes of the 12 standard leads (from memory).
CODES = {"i": 5, "ii": 6, "iii": 7, "avr": 8, "avl": 9, "avf": 10,
         "v1": 11, "v2": 12, "v3": 13, "v4": 14, "v5": 15, "v6": 16}
NAMES = {5: "I", 6: "II", 7: "III", 8: "aVR", 9: "aVL", 10: "aVF",
         11: "V1", 12: "V2", 13: "V3", 14: "V4", 15: "V5", 16: "V6"}


def build(path, digital, codes, res_nv, fs, sex, birth, recorded):
    """ISHNE bytes: 8-byte magic, 2-byte CRC, 512-byte header, samples interleaved."""
    nl, n = digital.shape
    h = bytearray(522)
    struct.pack_into("<iiiih", h, 10, 0, n, 522, 522, 1)
    h[108:113] = b"L-001"
    struct.pack_into("<hh", h, 128, sex, 0)
    struct.pack_into("<3h", h, 132, birth.day, birth.month, birth.year)
    struct.pack_into("<3h", h, 138, recorded.day, recorded.month, recorded.year)
    struct.pack_into("<h", h, 156, nl)
    struct.pack_into("<12h", h, 158, *(codes + [-9] * (12 - nl)))
    struct.pack_into("<12h", h, 182, *([-9] * 12))
    struct.pack_into("<12h", h, 206, *(res_nv + [-9] * (12 - nl)))
    struct.pack_into("<h", h, 230, -9)
    struct.pack_into("<h", h, 272, fs)
    h[0:8] = b"ISHNE1.0"
    struct.pack_into("<H", h, 8, Crc16CcittFalse.calc(bytes(h[10:])))
    path.write_bytes(bytes(h) + digital.T.astype("<i2").tobytes())


def ours(path, out_dir):
    subprocess.run([dev_bin("formats-dump"), "record", str(out_dir), str(path)], check=True)
    meta = json.loads((out_dir / "0.json").read_text())
    assert "error" not in meta, meta
    p = np.fromfile(out_dir / "0.p.bin", dtype="<f8").reshape(len(meta["lead_names"]), -1)
    return meta, p


def assert_lib_accepts(h, path):
    """ishneholterlib's magic-number and CRC checks. (Its `is_valid` reads the
    header through numpy's `tostring`, gone in numpy 2, so the header bytes
    are handed to its `compute_checksum` directly.)"""
    b = path.read_bytes()
    assert h.magic_number == b"ISHNE1.0"
    assert int(h.compute_checksum(header_block=b[10: h.ecg_block_offset])) == int.from_bytes(b[8:10], "little")


def test_ishne_against_ishneholterlib(tmp_path):
    need_data()
    rec = wfdb.rdrecord(str(DATA / "ludb" / "1"))
    codes = [CODES[n.lower()] for n in rec.sig_name]
    # 1000 nV (1 uV) per digital unit.
    digital = np.round(rec.p_signal.T * 1000).astype(np.int16)
    res = [1000] * len(codes)
    birth, recorded = datetime.date(1961, 9, 30), datetime.date(2019, 9, 29)
    p = tmp_path / "ludb1.ecg"
    build(p, digital, codes, res, int(rec.fs), 1, birth, recorded)

    h = ishneholterlib.Holter(str(p), check_valid=False)
    assert_lib_accepts(h, p)
    h.load_data()
    assert h.sr == rec.fs and h.nleads == 12 and h.sex == 1
    assert h.birth_date == birth and h.record_date == recorded
    meta, mine = ours(p, tmp_path / "a")
    assert meta["fs"] == rec.fs
    assert meta["lead_names"] == [NAMES[c] for c in codes]
    assert meta["sex"] == "M"
    assert meta["age"] == 57  # the day before the 58th birthday
    assert not meta["warnings"], meta["warnings"]
    for i in range(12):
        ref = np.asarray(h.lead[i].data, dtype=float)  # mV, as ishneholterlib converts
        assert ref.shape == mine[i].shape
        assert np.max(np.abs(mine[i] - ref)) < 1e-9
        # Within half of the 1-uV step of the file of the WFDB source.
        assert np.max(np.abs(mine[i] - rec.p_signal[:, i])) <= 0.5e-3 + 1e-12

    # Written by ishneholterlib itself.
    q = tmp_path / "written.ecg"
    h.filename = str(q)
    # The loader keeps text fields as bytes; the writer encodes these from str.
    for k in ("first_name", "last_name", "id", "proprietary", "copyright", "reserved"):
        v = getattr(h, k, "")
        if isinstance(v, (bytes, np.bytes_)):
            setattr(h, k, bytes(v).decode("latin-1").rstrip("\x00"))
    h.write_file()
    assert_lib_accepts(ishneholterlib.Holter(str(q), check_valid=False), q)
    meta2, mine2 = ours(q, tmp_path / "b")
    assert not meta2["warnings"], meta2["warnings"]
    assert meta2["lead_names"] == meta["lead_names"]
    np.testing.assert_array_equal(mine2, mine)
