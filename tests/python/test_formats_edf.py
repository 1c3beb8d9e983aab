"""Cross-check of tendline's EDF/EDF+ reader and writer against outside
references:

* `pyedflib` (EDFlib-based reader/writer) for samples, annotations and the
  EDF+ patient field;
* `wfdb.rdrecord` on `test_generator_2.hea/.dat`, the WFDB copy of the same
  recording as `test_generator_2.edf` (wfdb-python sample data), and on QTDB
  and LUDB records that are written to EDF with `pyedflib`.

The Rust side is reached through the dev binary `annot-dump`
(crates/formats/src/bin/annot-dump.rs, subcommands `edf`, `edf-ann`,
`edf-copy`), looked up in `$TENDLINE_BIN_DIR` (default `<repo>/target/release`).
"""

import datetime
import json
import re
import subprocess

import numpy as np
import pyedflib
import pytest
import wfdb

from _devtools import DATA, dev_bin, need_data
CONF = DATA / "wfdb-conformance"




def ours_edf(path):
    out = subprocess.run([dev_bin("annot-dump"), "edf", str(path)], capture_output=True, text=True, check=True).stdout
    lines = [json.loads(x) for x in out.splitlines()]
    return lines[0], {x["name"]: np.array(x["samples"]) for x in lines[1:]}


def ours_ann(path):
    out = subprocess.run([dev_bin("annot-dump"), "edf-ann", str(path)], capture_output=True, text=True, check=True).stdout
    return [json.loads(x) for x in out.splitlines()]


def steps(reader, i):
    # EDF quantisation step of signal i: (pmax - pmin) / (dmax - dmin).
    return (reader.getPhysicalMaximum(i) - reader.getPhysicalMinimum(i)) / (
        reader.getDigitalMaximum(i) - reader.getDigitalMinimum(i)
    )


def ascii_copy_of_generator(tmp_path):
    # edflib (pyedflib) refuses test_generator_2.edf because two physical
    # dimensions are the Latin-1 byte 0xB0 (degree sign); a copy with those
    # eight-byte fields replaced by `deg` is otherwise byte-identical.
    b = (CONF / "test_generator_2.edf").read_bytes()
    patched = b.replace(b"\xb0       ", b"deg     ")
    assert len(patched) == len(b) and patched != b
    p = tmp_path / "tg2_ascii.edf"
    p.write_bytes(patched)
    return p


def test_generator_edf_matches_pyedflib_and_wfdb(tmp_path):
    need_data()
    head, sig = ours_edf(CONF / "test_generator_2.edf")
    assert head["fs"] == 200.0
    assert head["n_samples"] == 120000
    # pyedflib on the ASCII copy: same samples up to floating-point rounding.
    r = pyedflib.EdfReader(str(ascii_copy_of_generator(tmp_path)))
    labels = r.getSignalLabels()
    assert head["leads"] == labels
    for i, name in enumerate(labels):
        ref = r.readSignal(i)
        dim = r.getPhysicalDimension(i)
        scale = 1000.0 if dim == "uV" else 1.0  # ours is in mV for voltage units
        got = sig[name] * scale
        assert len(got) == len(ref)
        step = steps(r, i)
        err = np.max(np.abs(got - ref))
        assert err <= 1e-6 * step, f"{name}: max |ours - pyedflib| = {err} (step {step})"
    # wfdb.rdrecord on the WFDB copy of the same recording: within one step
    # (the WFDB header rounds away EDF's half-step offset).
    # 200 samples per frame at 1 frame/s: read unsmoothed.
    w = wfdb.rdrecord(str(CONF / "test_generator_2"), smooth_frames=False)
    for i, name in enumerate(w.sig_name):
        if name == "EDF Annotations":
            continue
        scale = 1000.0 if head["units"][head["leads"].index(name)] == "mV" else 1.0
        assert len(w.e_p_signal[i]) == len(sig[name])
        err = np.max(np.abs(sig[name] * scale - w.e_p_signal[i]))
        assert err <= steps(r, i), f"{name}: max |ours - wfdb| = {err}"
    # Annotations against pyedflib.
    on, du, tx = r.readAnnotations()
    mine = ours_ann(CONF / "test_generator_2.edf")
    assert [a["text"] for a in mine] == list(tx)
    assert np.allclose([a["onset_s"] for a in mine], on, atol=1e-9)
    r.close()


def test_edfann_annotations_match_pyedflib():
    need_data()
    r = pyedflib.EdfReader(str(CONF / "test_edfann.edf"))
    on, du, tx = r.readAnnotations()
    r.close()
    mine = ours_ann(CONF / "test_edfann.edf")
    assert len(mine) == len(on) == 856  # count from pyedflib
    assert [a["text"] for a in mine] == list(tx)
    assert np.allclose([a["onset_s"] for a in mine], on, atol=1e-9)
    # pyedflib reports a missing duration as -1.
    assert np.allclose([-1.0 if a["duration_s"] is None else a["duration_s"] for a in mine], du)
    # The file has no signal channel: reading it as a record is a clear error.
    p = subprocess.run([dev_bin("annot-dump"), "edf", str(CONF / "test_edfann.edf")], capture_output=True, text=True)
    assert p.returncode != 0 and "test_edfann.edf" in p.stderr and "no signal" in p.stderr


def test_signals_at_other_rates_are_resampled_against_numpy(tmp_path):
    # pyedflib writes an ECG at 250 Hz beside a respiration signal at 25 Hz and
    # a plethysmogram at 500 Hz. Ours keeps all three in header order at 250 Hz:
    # the slower signal as numpy.interp of pyedflib's samples at the record's
    # sample times (numpy.interp also holds the last value past the end), the
    # faster one as the mean of the source samples within half a record period
    # of each record sample (both ends included), computed here independently.
    n_s = 4
    t250 = np.arange(250 * n_s) / 250
    t25 = np.arange(25 * n_s) / 25
    t500 = np.arange(500 * n_s) / 500
    sigs = [np.sin(2 * np.pi * 1.3 * t250), 0.5 * np.cos(2 * np.pi * 0.3 * t25), np.sin(2 * np.pi * 7 * t500)]
    heads = [
        pyedflib.highlevel.make_signal_header("ECG II", dimension="mV", sample_frequency=250, physical_min=-2, physical_max=2),
        pyedflib.highlevel.make_signal_header("Resp", dimension="mV", sample_frequency=25, physical_min=-2, physical_max=2),
        pyedflib.highlevel.make_signal_header("Pleth", dimension="mV", sample_frequency=500, physical_min=-2, physical_max=2),
    ]
    p = tmp_path / "rates.edf"
    assert pyedflib.highlevel.write_edf(str(p), sigs, heads)
    r = pyedflib.EdfReader(str(p))
    ref = [r.readSignal(i) for i in range(3)]
    r.close()
    head, sig = ours_edf(p)
    assert head["fs"] == 250
    assert head["leads"] == ["ECG II", "Resp", "Pleth"]
    assert np.max(np.abs(sig["ECG II"] - ref[0])) < 1e-9
    n = len(ref[0])
    want_resp = np.interp(np.arange(n) / 250, np.arange(len(ref[1])) / 25, ref[1])
    assert np.max(np.abs(sig["Resp"] - want_resp)) < 1e-9
    src = ref[2]
    want_pleth = np.array([src[max(2 * j - 1, 0): min(2 * j + 2, len(src))].mean() for j in range(n)])
    assert np.max(np.abs(sig["Pleth"] - want_pleth)) < 1e-9


def _age_sex(rec):
    """Age and sex from the WFDB header comments (LUDB `#<age>: 51`, QTDB `# 69 M`)."""
    text = " ".join(rec.comments)
    m = re.search(r"<age>:\s*(\d+)", text)
    s = re.search(r"<sex>:\s*([MF])", text)
    if m and s:
        return int(m.group(1)), s.group(1)
    m = re.match(r"\s*(\d+)\s+([MF])\b", rec.comments[0]) if rec.comments else None
    return (int(m.group(1)), m.group(2)) if m else (None, None)


RECORDS = [("qtdb", "sel100"), ("qtdb", "sel16265"), ("qtdb", "sel30"), ("ludb", "1"), ("ludb", "37"), ("ludb", "100")]


def write_with_pyedflib(rec, path, age, sex):
    start = datetime.datetime(2020, 3, 10, 8, 0, 0)
    headers = []
    for i, name in enumerate(rec.sig_name):
        x = rec.p_signal[:, i]
        headers.append(
            pyedflib.highlevel.make_signal_header(
                name, dimension=rec.units[i] or "mV", sample_frequency=rec.fs,
                physical_min=float(np.floor(x.min() * 100) / 100),
                physical_max=float(np.ceil(x.max() * 100) / 100),
            )
        )
    # Birthday after the start day-of-year: completed age is `age`.
    birth = datetime.datetime(2020 - age - 1, 6, 15) if age is not None else ""
    header = pyedflib.highlevel.make_header(patientcode="P1", sex={"M": "Male", "F": "Female"}.get(sex, ""),
                                            startdate=start, birthdate=birth)
    ok = pyedflib.highlevel.write_edf(str(path), rec.p_signal.T, headers, header)
    assert ok


@pytest.mark.parametrize("db,name", RECORDS)
def test_pyedflib_written_database_records(db, name, tmp_path):
    # A QTDB/LUDB record (wfdb.rdrecord) written to EDF+ by pyedflib reads back
    # in tendline within the EDF quantisation step, with age and sex from the
    # EDF+ patient field; and tendline's own rewrite reads back in pyedflib
    # within tendline's quantisation step.
    need_data()
    rec = wfdb.rdrecord(str(DATA / db / name))
    age, sex = _age_sex(rec)
    p = tmp_path / f"{name}.edf"
    write_with_pyedflib(rec, p, age, sex)
    head, sig = ours_edf(p)
    assert head["fs"] == rec.fs
    assert head["leads"] == rec.sig_name
    # pyedflib pads the last 1-s data record: compare the record's own samples.
    n = rec.sig_len
    assert rec.sig_len <= head["n_samples"] < rec.sig_len + rec.fs
    assert head["age"] == age and head["sex"] == sex, (head["age"], head["sex"], age, sex)
    r = pyedflib.EdfReader(str(p))
    for i, lead in enumerate(rec.sig_name):
        step = steps(r, i)
        ref = r.readSignal(i)
        assert len(ref) == len(sig[lead])
        assert np.max(np.abs(sig[lead] - ref)) <= 1e-6 * step
        err = np.max(np.abs(sig[lead][:n] - rec.p_signal[:, i]))
        # pyedflib's writer may be off by a whole step (it does not round to
        # nearest); our reading of its file equals pyedflib's reading above.
        assert err <= step * (1 + 1e-6), f"{lead}: max |ours - wfdb| = {err}, step {step}"
    r.close()

    # Our writer, read by pyedflib.
    q = tmp_path / f"{name}_ours.edf"
    subprocess.run([dev_bin("annot-dump"), "edf-copy", str(p), str(q)], check=True, capture_output=True)
    r = pyedflib.EdfReader(str(q))
    assert r.getSignalLabels() == rec.sig_name
    assert r.filetype == pyedflib.FILETYPE_EDFPLUS
    assert r.getSex() in ({"M": "Male", "F": "Female"}.get(sex, ""),) or r.getSex() == sex
    for i, lead in enumerate(rec.sig_name):
        assert r.getSampleFrequency(i) == rec.fs
        x = r.readSignal(i)
        # Our writer rounds to the nearest level: within half of its step of
        # the samples it was given (what our reader returned for `p`).
        assert len(x) == len(sig[lead])
        err = np.max(np.abs(x - sig[lead]))
        assert err <= 0.5 * steps(r, i) * (1 + 1e-6), (lead, err, steps(r, i))
    r.close()
    head2, sig2 = ours_edf(q)
    assert head2["age"] == age and head2["sex"] == sex


@pytest.mark.parametrize("file_type", ["bdfplus", "bdf"])
def test_pyedflib_written_bdf(file_type, tmp_path):
    # BDF (24-bit EDF) and BDF+ written by pyedflib (edflib) from LUDB record 1
    # (wfdb.rdrecord) over the full 24-bit digital range: tendline reads the
    # same values as pyedflib, within 1e-6 of a quantisation step; BDF+ also
    # gives the patient field's sex and age and the annotations.
    need_data()
    rec = wfdb.rdrecord(str(DATA / "ludb" / "1"))
    age, sex = _age_sex(rec)
    headers = []
    for i, name in enumerate(rec.sig_name):
        x = rec.p_signal[:, i]
        headers.append(
            pyedflib.highlevel.make_signal_header(
                name, dimension="mV", sample_frequency=rec.fs,
                physical_min=float(np.floor(x.min() * 100) / 100),
                physical_max=float(np.ceil(x.max() * 100) / 100),
                digital_min=-(2 ** 23), digital_max=2 ** 23 - 1,
            )
        )
    start = datetime.datetime(2020, 3, 10, 8, 0, 0)
    birth = datetime.datetime(2020 - age - 1, 6, 15)
    header = pyedflib.highlevel.make_header(patientcode="P1", sex={"M": "Male", "F": "Female"}[sex],
                                            startdate=start, birthdate=birth)
    plus = file_type == "bdfplus"
    if plus:
        header["annotations"] = [[1.25, -1, "first"], [7.5, 0.5, "second"]]
    p = tmp_path / "ludb1.bdf"
    ft = pyedflib.FILETYPE_BDFPLUS if plus else pyedflib.FILETYPE_BDF
    assert pyedflib.highlevel.write_edf(str(p), np.ascontiguousarray(rec.p_signal.T), headers, header, file_type=ft)
    assert p.read_bytes()[:8] == b"\xffBIOSEMI"
    head, sig = ours_edf(p)
    r = pyedflib.EdfReader(str(p))
    assert r.filetype == ft
    assert head["fs"] == rec.fs and head["leads"] == rec.sig_name
    for i, lead in enumerate(rec.sig_name):
        ref = r.readSignal(i)
        step = steps(r, i)
        assert len(ref) == len(sig[lead])
        assert np.max(np.abs(sig[lead] - ref)) <= 1e-6 * step, lead
        # And close to the WFDB source (24-bit steps are far below LUDB's 1 uV).
        assert np.max(np.abs(sig[lead][: rec.sig_len] - rec.p_signal[:, i])) <= step * (1 + 1e-6)
    if plus:
        assert head["age"] == age and head["sex"] == sex
        onsets, durations, texts = r.readAnnotations()
        ours = ours_ann(p)
        assert [a["text"] for a in ours] == list(texts)
        assert np.allclose([a["onset_s"] for a in ours], onsets)
    r.close()


def _fields(b):
    """Signal count, record count, labels and samples per record of EDF bytes
    (header layout: EDF specification, Kemp et al. 1992)."""
    ns = int(b[252:256])
    n_rec = int(b[236:244])
    labels = [b[256 + 16 * k: 256 + 16 * (k + 1)].decode().strip() for k in range(ns)]
    at = 256 + ns * (16 + 80 + 8 * 5 + 80)
    spr = [int(b[at + 8 * k: at + 8 * (k + 1)]) for k in range(ns)]
    return ns, n_rec, labels, spr


def test_discontinuous_edf_against_pyedflib(tmp_path):
    # LUDB record 1 (leads i, ii; wfdb.rdrecord) written by pyedflib as EDF+C in
    # 1-s data records, then turned into EDF+D by hand: the reserved field says
    # EDF+D and the time-keeping TALs of records 4..9 are moved 2.5 s later.
    # edflib refuses discontinuous files, but the signal bytes are those of the
    # EDF+C file: tendline must return pyedflib's reading of that file with each
    # record at its new onset, and NaN for the 2.5-s gap (1250 samples at
    # 500 Hz), placed here from the onsets written.
    need_data()
    rec = wfdb.rdrecord(str(DATA / "ludb" / "1"), channels=[0, 1])
    heads = [pyedflib.highlevel.make_signal_header(n, dimension="mV", sample_frequency=500,
                                                   physical_min=-5, physical_max=5) for n in rec.sig_name]
    c = tmp_path / "c.edf"
    assert pyedflib.highlevel.write_edf(str(c), np.ascontiguousarray(rec.p_signal.T), heads)
    b = bytearray(c.read_bytes())
    ns, n_rec, labels, spr = _fields(b)
    ann = labels.index("EDF Annotations")
    assert b[192:197] == b"EDF+C" and n_rec == 10
    b[192:197] = b"EDF+D"
    head, rec_bytes = 256 * (ns + 1), 2 * sum(spr)
    onsets = [r + (2.5 if r >= 4 else 0.0) for r in range(n_rec)]
    for r, onset in enumerate(onsets):
        at = head + r * rec_bytes + 2 * sum(spr[:ann])
        tal = f"+{onset:g}".encode() + b"\x14\x14\x00"
        assert b[at: at + 2] == f"+{r}".encode()  # pyedflib's own time-keeping TAL
        b[at: at + 2 * spr[ann]] = tal.ljust(2 * spr[ann], b"\x00")
    d = tmp_path / "d.edf"
    d.write_bytes(bytes(b))
    with pytest.raises(OSError, match="discontinuous"):
        pyedflib.EdfReader(str(d))
    r = pyedflib.EdfReader(str(c))
    ref = [r.readSignal(i) for i in range(2)]
    r.close()
    head_json, sig = ours_edf(d)
    n_total = int(round((onsets[-1] + 1) * 500))
    assert head_json["n_samples"] == n_total == 5000 + 1250
    for i, lead in enumerate(rec.sig_name):
        got = np.array(sig[lead], dtype=float)  # the dump writes NaN as null
        placed = np.full(n_total, np.nan)
        for k, onset in enumerate(onsets):
            at = int(round(onset * 500))
            placed[at: at + 500] = ref[i][k * 500: (k + 1) * 500]
        np.testing.assert_array_equal(np.isnan(got), np.isnan(placed))
        ok = ~np.isnan(placed)
        assert np.max(np.abs(got[ok] - placed[ok])) < 1e-9, lead
    assert np.isnan(np.array(sig[rec.sig_name[0]], dtype=float)[2000:3250]).all()
