"""Cross-check of tendline's HL7 aECG (XML) reader against the `wfdb` Python
package (MIT-LCP/wfdb-python), the reference implementation of WFDB.

A small generator below writes an aECG XML file from a WFDB record read with
`wfdb.rdrecord(..., physical=False)`: the digits are the record's ADC integers
(`d_signal`), scale = 1000 / adc_gain uV and origin = -baseline * 1000 / adc_gain
uV, so that origin + scale * digit (HL7 SLIST_PQ, from memory of the HL7 v3 aECG
standard) equals wfdb's physical value (d - baseline) / adc_gain mV. The file
follows the HL7 aECG structure (from memory): AnnotatedECG / component / series
(code RHYTHM) / component / sequenceSet / component / sequence, a time sequence
(GLIST_TS or GLIST_PQ with an increment) and one SLIST_PQ sequence per lead with
code MDC_ECG_LEAD_<name>.

The Rust side is reached through the dev binary `formats-dump record`
(crates/formats/src/bin/formats-dump.rs) and, for one end-to-end check, the
`tendline` binary, both looked up in `$TENDLINE_BIN_DIR` (default
`<repo>/target/release`); build them with
`cargo build --release -p tendline-formats --bin formats-dump` and
`cargo build --release -p tendline`.
"""

import csv
import json
import subprocess
from pathlib import Path
from xml.sax.saxutils import quoteattr

import numpy as np
import wfdb

from _devtools import DATA, REPO, dev_bin, need_data

# MDC lead-name spelling of the 12 standard leads (MDC_ECG_LEAD_I ... _V6, from memory
# of ISO/IEEE 11073-10101); LUDB writes them in lower case.
MDC = {n.lower(): n for n in ["I", "II", "III", "aVR", "aVL", "aVF", "V1", "V2", "V3", "V4", "V5", "V6"]}




def write_aecg(path, rec, time_code, time_value, sex=None, birth=None):
    """Write `rec` (wfdb.Record read with physical=False) as an HL7 aECG XML file.

    `time_value`: the inner XML of the time sequence's <value> element."""
    parts = [
        '<?xml version="1.0" encoding="UTF-8"?>\n'
        '<AnnotatedECG xmlns="urn:hl7-org:v3" '
        'xmlns:xsi="http://www.w3.org/2001/XMLSchema-instance">\n'
        '  <id root="2.25.1"/>\n'
        '  <code code="93000" codeSystem="2.16.840.1.113883.6.12"/>\n'
        '  <effectiveTime><low value="20200101120000.000"/>'
        '<high value="20200101120010.000"/></effectiveTime>\n'
    ]
    if sex or birth:
        person = ""
        if sex:
            person += f'<administrativeGenderCode code="{sex}" codeSystem="2.16.840.1.113883.5.1"/>'
        if birth:
            person += f'<birthTime value="{birth}"/>'
        parts.append(
            "  <componentOf><timepointEvent><componentOf><subjectAssignment><subject>"
            f'<trialSubject><id extension="{rec.record_name}"/>'
            f"<subjectDemographicPerson>{person}</subjectDemographicPerson></trialSubject>"
            "</subject></subjectAssignment></componentOf></timepointEvent></componentOf>\n"
        )
    parts.append(
        '  <component><series>\n    <code code="RHYTHM" codeSystem="2.16.840.1.113883.5.4"/>\n'
        "    <component><sequenceSet>\n"
        f'      <component><sequence><code code="{time_code}" codeSystem="2.16.840.1.113883.5.4"/>'
        f"{time_value}</sequence></component>\n"
    )
    for ch, name in enumerate(rec.sig_name):
        gain, base = rec.adc_gain[ch], rec.baseline[ch]
        scale = 1000.0 / gain  # uV per ADC unit
        origin = -base * scale
        code = "MDC_ECG_LEAD_" + MDC.get(name, name)
        # One join per lead: no repeated string concatenation.
        digits = " ".join(map(str, rec.d_signal[:, ch].tolist()))
        parts.append(
            f'      <component><sequence><code code={quoteattr(code)} codeSystem="2.16.840.1.113883.6.24"/>'
            f'<value xsi:type="SLIST_PQ"><origin value="{origin!r}" unit="uV"/>'
            f'<scale value="{scale!r}" unit="uV"/><digits>{digits}</digits></value>'
            "</sequence></component>\n"
        )
    parts.append("    </sequenceSet></component>\n  </series></component>\n</AnnotatedECG>\n")
    Path(path).write_text("".join(parts), encoding="utf-8")


def dump(inputs, out_dir):
    subprocess.run([dev_bin("formats-dump"), "record", str(out_dir), *map(str, inputs)], check=True)
    res = []
    for i in range(len(inputs)):
        meta = json.loads((Path(out_dir) / f"{i}.json").read_text())
        p = None
        if "error" not in meta:
            p = np.fromfile(Path(out_dir) / f"{i}.p.bin", dtype="<f8")
            p = p.reshape(len(meta["lead_names"]), meta["n_samples"]).T
        res.append((meta, p))
    return res


def compare(meta, mine, ref, names):
    """Samples, fs and lead order against wfdb; returns (samples compared, max |diff| mV)."""
    assert "error" not in meta, meta.get("error")
    assert meta["fs"] == ref.fs  # fs = 1 / increment, exact for these increments
    assert meta["lead_names"] == names
    assert meta["units"] == ["mV"] * len(names)
    phys = (ref.d_signal - np.asarray(ref.baseline)) / np.asarray(ref.adc_gain)
    # wfdb's own conversion: rdrecord's p_signal is dac() of the digital samples.
    wp = ref.dac(expanded=False, return_res=64)
    assert np.max(np.abs(wp - phys)) < 1e-12
    assert mine.shape == wp.shape
    diff = np.abs(mine - wp)
    # Tolerance from the ADC resolution: a millionth of one ADC step (1 / adc_gain mV);
    # a wrong origin or scale is off by at least a whole step somewhere.
    step = 1.0 / np.asarray(ref.adc_gain)
    assert np.all(diff <= 1e-6 * step), f"max |ours - wfdb| = {diff.max()} mV"
    return wp.size, float(diff.max())


def test_ludb_12_lead_500hz(tmp_path):
    need_data()
    # LUDB record 1: 12 leads at 500 Hz, 10 s (wfdb.rdrecord reads the reference).
    ref = wfdb.rdrecord(str(DATA / "ludb" / "1"), physical=False)
    assert ref.fs == 500 and ref.n_sig == 12
    hdr = " ".join(ref.comments)
    sex = "F" if "<sex>: F" in hdr else "M"
    age = int(hdr.split("<age>:")[1].split()[0])  # LUDB header comment `<age>: 51`
    # Born the day after the ECG's date, `age + 1` years earlier: completed years = age.
    birth = f"{2020 - age - 1}0102"
    xml = tmp_path / "ludb1.xml"
    time = '<value xsi:type="GLIST_TS"><head value="20200101120000.000"/><increment value="0.002" unit="s"/></value>'
    write_aecg(xml, ref, "TIME_ABSOLUTE", time, sex=sex, birth=birth)
    (meta, mine), = dump([xml], tmp_path / "out")
    names = [MDC[n] for n in ref.sig_name]
    n, err = compare(meta, mine, ref, names)
    print(f"LUDB 1: {n} samples, max |ours - wfdb| = {err:.3g} mV")
    assert n == 12 * 5000
    assert meta["sex"] == sex and meta["age"] == age
    assert meta["files"] == [str(xml)]
    assert meta["warnings"] == []


def test_qtdb_cut_250hz_relative_time_ms(tmp_path):
    need_data()
    # QTDB sel100 (MIT-BIH 100 excerpt), first 4 s at 250 Hz, leads MLII and V5.
    ref = wfdb.rdrecord(str(DATA / "qtdb" / "sel100"), physical=False, sampto=1000)
    assert ref.fs == 250
    xml = tmp_path / "sel100.xml"
    time = '<value xsi:type="GLIST_PQ"><head value="0" unit="ms"/><increment value="4" unit="ms"/></value>'
    write_aecg(xml, ref, "TIME_RELATIVE", time)
    (meta, mine), = dump([xml], tmp_path / "out")
    n, err = compare(meta, mine, ref, list(ref.sig_name))
    print(f"QTDB sel100: {n} samples, max |ours - wfdb| = {err:.3g} mV")
    assert n == 2 * 1000
    assert meta["sex"] is None and meta["age"] is None


def test_bad_files_name_the_file(tmp_path):
    need_data()
    ref = wfdb.rdrecord(str(DATA / "qtdb" / "sel100"), physical=False, sampto=500)
    good = tmp_path / "good.xml"
    time = '<value xsi:type="GLIST_TS"><increment value="0.004" unit="s"/></value>'
    write_aecg(good, ref, "TIME_ABSOLUTE", time)
    text = good.read_text()
    cases = {
        # Cut in the middle of the second lead's <digits>.
        "truncated.xml": (text[: text.rindex("<digits>") + 40], "not well-formed XML"),
        "empty.xml": ("", "empty file"),
        "other.xml": ('<?xml version="1.0"?><svg xmlns="http://www.w3.org/2000/svg"/>', "root element is <svg>"),
        "nan.xml": (text.replace("<digits>", "<digits>NaN ", 1), "`NaN` is not an integer"),
        "noinc.xml": (text.replace('<increment value="0.004" unit="s"/>', ""), "no <increment>"),
    }
    paths = []
    for name, (body, _) in cases.items():
        (tmp_path / name).write_text(body)
        paths.append(tmp_path / name)
    res = dump(paths, tmp_path / "out")
    for p, (meta, _), (_, want) in zip(paths, res, cases.values()):
        assert meta.get("kind") == "invalid", (p, meta)
        assert str(p) in meta["error"] and want in meta["error"], meta["error"]


def test_run_on_aecg_equals_run_on_wfdb(tmp_path):
    """`tendline run` on the aECG copy of LUDB 1 measures what it measures on the
    WFDB original (same samples, so the same summary row apart from the record
    name and the subject id the aECG file carries); an XML file in the same folder
    that is not an aECG document fails as its own record and the batch goes on."""
    need_data()
    tl = dev_bin("tendline", "tendline")
    ref = wfdb.rdrecord(str(DATA / "ludb" / "1"), physical=False)
    inp = tmp_path / "in"
    inp.mkdir()
    time = '<value xsi:type="GLIST_TS"><head value="20200101120000.000"/><increment value="0.002" unit="s"/></value>'
    write_aecg(inp / "ludb1.xml", ref, "TIME_ABSOLUTE", time, sex="F", birth="19680102")
    (inp / "notes.xml").write_text('<?xml version="1.0"?><notes/>')
    a = subprocess.run([str(tl), "run", str(inp), "--out", str(tmp_path / "a"), "--quiet"],
                       capture_output=True, text=True)
    assert a.returncode == 1, a.stderr  # one record failed (documented exit code 1)
    assert "notes.xml" in a.stdout + a.stderr and "root element is <notes>" in a.stdout + a.stderr
    subprocess.run([str(tl), "run", str(DATA / "ludb" / "1.hea"), "--out", str(tmp_path / "b"), "--quiet"],
                       capture_output=True, text=True, check=True)
    rows_a = list(csv.DictReader(open(tmp_path / "a" / "summary.csv")))
    rows_b = list(csv.DictReader(open(tmp_path / "b" / "summary.csv")))
    assert [r["record"] for r in rows_a] == ["ludb1"]
    ra, rb = rows_a[0], rows_b[0]
    assert ra["subject"] == "1" and ra["age"] == "51" and ra["sex"] == "F"
    for k in ra:
        if k not in ("record", "subject"):
            assert ra[k] == rb[k], f"{k}: aECG {ra[k]} vs WFDB {rb[k]}"


def test_written_demo_record_decodes_with_an_independent_xml_parser(tmp_path):
    """The demo's s05_post.xml is written by tendline's aECG writer
    (tendline_formats::aecg::write_aecg, via tendline-synth). Decoded here with the
    Python standard library's ElementTree, by the HL7 aECG structure (from memory:
    AnnotatedECG/component/series[code RHYTHM]/component/sequenceSet/component/
    sequence; SLIST_PQ physical value = origin + scale x digit), it must be a
    well-formed HL7 v3 document with 12 standard MDC lead codes and equal, sample
    for sample, what tendline's reader returns."""
    import xml.etree.ElementTree as ET

    path = REPO / "demo-signals" / "s05_post.xml"
    ns = {"h": "urn:hl7-org:v3"}
    xsi = "{http://www.w3.org/2001/XMLSchema-instance}type"
    root = ET.parse(path).getroot()
    assert root.tag == "{urn:hl7-org:v3}AnnotatedECG"
    series = [
        s for s in root.findall("h:component/h:series", ns)
        if s.find("h:code", ns).get("code") == "RHYTHM"
    ]
    assert len(series) == 1
    seqs = series[0].findall("h:component/h:sequenceSet/h:component/h:sequence", ns)
    time = [s for s in seqs if s.find("h:code", ns).get("code").startswith("TIME_")]
    assert len(time) == 1
    inc = time[0].find("h:value/h:increment", ns)
    assert time[0].find("h:value", ns).get(xsi) == "GLIST_PQ"
    fs = 1.0 / float(inc.get("value")) * (1000.0 if inc.get("unit") == "ms" else 1.0)
    leads, names = [], []
    for s in seqs:
        code = s.find("h:code", ns).get("code")
        if code.startswith("TIME_"):
            continue
        v = s.find("h:value", ns)
        assert v.get(xsi) == "SLIST_PQ"
        scale = {"uV": 1e-3, "mV": 1.0}
        o, sc = v.find("h:origin", ns), v.find("h:scale", ns)
        digits = np.array(v.find("h:digits", ns).text.split(), dtype=np.int64)
        leads.append(float(o.get("value")) * scale[o.get("unit")]
                     + float(sc.get("value")) * scale[sc.get("unit")] * digits)
        names.append(code)
    assert names == ["MDC_ECG_LEAD_" + n for n in
                     ["I", "II", "III", "AVR", "AVL", "AVF", "V1", "V2", "V3", "V4", "V5", "V6"]]
    ref = np.stack(leads, axis=1)
    # Einthoven's law on the stored 1 uV steps (handbook relation III = II - I; each
    # lead is rounded on its own, so at most one step apart), as for the WFDB demo records.
    steps = np.rint(ref * 1000.0).astype(np.int64)
    assert np.max(np.abs(steps[:, 2] - (steps[:, 1] - steps[:, 0]))) <= 1
    (meta, mine), = dump([path], tmp_path / "out")
    assert "error" not in meta, meta.get("error")
    assert meta["fs"] == fs == 500.0
    assert meta["lead_names"] == [n.removeprefix("MDC_ECG_LEAD_") for n in names]
    assert mine.shape == ref.shape == (5000, 12)
    assert np.max(np.abs(mine - ref)) < 1e-12
