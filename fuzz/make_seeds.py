#!/usr/bin/env python3
"""Write small seed inputs for the fuzz targets into fuzz/corpus/<target>/.

Why: libFuzzer starting from an empty corpus spends most of a short run finding
the file magic; a few small valid files of each format let it mutate real
structure from the first second. The seeds are invented (not from any
database) and are regenerated, never committed (fuzz/corpus is git-ignored).

Usage: python3 fuzz/make_seeds.py [corpus_dir]   (default: fuzz/corpus)
"""
import os
import struct
import sys

C = sys.argv[1] if len(sys.argv) > 1 else os.path.join(os.path.dirname(__file__), "corpus")


def w(path, data):
    os.makedirs(os.path.dirname(path), exist_ok=True)
    with open(path, "wb") as f:
        f.write(data)


# HL7 aECG: one rhythm series, a time sequence and two leads, subject data.
AECG = """<?xml version="1.0" encoding="UTF-8"?>
<AnnotatedECG xmlns="urn:hl7-org:v3" xmlns:xsi="http://www.w3.org/2001/XMLSchema-instance">
  <effectiveTime><low value="20210615093000.000"/></effectiveTime>
  <componentOf><timepointEvent><componentOf><subjectAssignment><subject><trialSubject>
    <id extension="S1"/>
    <subjectDemographicPerson>
      <administrativeGenderCode code="F"/>
      <birthTime value="19800616"/>
    </subjectDemographicPerson>
  </trialSubject></subject></subjectAssignment></componentOf></timepointEvent></componentOf>
  <component><series>
    <code code="RHYTHM"/>
    <component><sequenceSet>
<component><sequence><code code="TIME_ABSOLUTE"/><value xsi:type="GLIST_TS"><head value="20210615093000.000"/><increment value="0.002" unit="s"/></value></sequence></component>
<component><sequence><code code="MDC_ECG_LEAD_II"/><value xsi:type="SLIST_PQ"><origin value="0" unit="uV"/><scale value="5" unit="uV"/><digits>0 200 -100 7</digits></value></sequence></component>
<component><sequence><code code="MDC_ECG_LEAD_aVR"/><value xsi:type="SLIST_PQ"><origin value="10" unit="mV"/><scale value="2.5" unit="uV"/><digits>1 2 3 4</digits></value></sequence></component>
</sequenceSet></component>
<derivation><derivedSeries><code code="REPRESENTATIVE_BEAT"/></derivedSeries></derivation>
</series></component>
</AnnotatedECG>
"""
w(f"{C}/aecg/seed1.xml", AECG.encode())

# EDF+C: 2 records of 1 s, ECG II at 10 samples/record, annotations 16 samples/record
def edf(sigs, nrec, dur, patient, recording, reserved, recs):
    ns = len(sigs)
    h = b"0".ljust(8) + patient.ljust(80).encode() + recording.ljust(80).encode()
    h += b"02.02.20" + b"10.00.00" + str(256*(ns+1)).encode().ljust(8) + reserved.ljust(44).encode()
    h += str(nrec).encode().ljust(8) + dur.encode().ljust(8) + str(ns).encode().ljust(4)
    for i, width in enumerate([16, 80, 8, 8, 8, 8, 8, 80, 8, 32]):
        for s in sigs:
            h += str(s[i]).encode().ljust(width)
    return h + recs
sigs = [("ECG II", "AgCl", "uV", -3276.8, 3276.7, -32768, 32767, "HP:0.1Hz", 10, ""),
        ("V1", "", "mV", -5, 5, -2048, 2047, "", 10, ""),
        ("EDF Annotations", "", "", -1, 1, -32768, 32767, "", 16, "")]
recs = b""
for r in range(2):
    recs += struct.pack("<10h", *[i*100 - r for i in range(10)])
    recs += struct.pack("<10h", *[-i*10 for i in range(10)])
    tal = f"+{r}\x14\x14\x00".encode()
    if r == 1:
        tal += b"+1.5\x150.2\x14beat\x14note\x00"
    recs += tal.ljust(32, b"\x00")
w(f"{C}/edf/seed1.edf", edf(sigs, 2, "1", "P1 F 01-JAN-1980 X", "Startdate 02-FEB-2020 X X X", "EDF+C", recs))
w(f"{C}/edf/seed2.edf", edf(sigs[:2], -1, "0.5", "X", "X", "", b"".join(
    struct.pack("<20h", *range(20)) for _ in range(3))))

# WFDB records: header \0 dat
def rec(hea, dat): return hea.encode() + b"\x00" + dat
dat212 = bytes(range(30))
w(f"{C}/wfdb_record/s212", rec("r 2 250 10\nr.dat 212 200 12 0 5 1234 0 II\nr.dat 212 200(-3)/uV 12 0 0 0 0 V1\n# <age>: 40\n# <sex>: F\n", dat212))
w(f"{C}/wfdb_record/s16", rec("r 1 360/720(3) 8 10:00:00 01/01/2000\nr.dat 16+4 200 16 0 0 0 0 MLII\n", bytes(range(24))))
w(f"{C}/wfdb_record/s8x", rec("r 2 500\nr.dat 8x2:1 100 8 0 0 0 0 I\nr.dat 8 100 8 0 3 0 0 II\n", bytes(range(40))))
w(f"{C}/wfdb_record/s310", rec("r 3 250 4\nr.dat 310 200 10 0 0 0 0 I\nr.dat 310 200 10 0 0 0 0 II\nr.dat 310 200 10 0 0 0 0 III\n", bytes(range(16))))
w(f"{C}/wfdb_record/s311", rec("r 3 250\nr.dat 311 200 10 0 0 0 0 I\nr.dat 311 200 10 0 0 0 0 II\nr.dat 311 200 10 0 0 0 0 III\n", bytes(range(17))))
w(f"{C}/wfdb_record/s24", rec("r 2 250\nr.dat 24 200 24\nr.dat 24 200 24\n", bytes(range(18))))
w(f"{C}/wfdb_record/s61", rec("r 1 250\nr.dat 61\n", bytes(range(9))))
w(f"{C}/wfdb_record/s160", rec("r 2 250 3\nr.dat 160 200/mV\nr.dat 160 1e3/V 16 0\n", bytes(range(12))))
w(f"{C}/wfdb_record/s32", rec("r 1 250 2\nr.dat 32:2 200 32 0 0 -3 0 X\n", bytes(range(16))))
w(f"{C}/wfdb_record/s80", rec("r 1 250\nr.dat 80\n", bytes(range(7))))
w(f"{C}/wfdb_record/multi", rec("r/2 2 250 20\nr 10\nr 10\n", b""))
for f in os.listdir(f"{C}/wfdb_record"):
    d = open(f"{C}/wfdb_record/{f}", "rb").read()
    w(f"{C}/wfdb_header/{f}.hea", d.split(b"\x00")[0])

# annotations
def word(a, i): return struct.pack("<H", (a << 10) | i)
def aux(b):
    out = word(63, len(b)) + b
    return out + (b"\x00" if len(b) % 2 else b"")
ann = word(22, 0) + aux(b"## time resolution: 360")
ann += word(22, 0) + aux(b"## annotation type definitions")
ann += word(22, 0) + aux(b"15 c calibration pulse")
ann += word(22, 0) + aux(b"## end of definitions")
ann += word(1, 100) + word(62, 1) + word(60, 2) + word(61, 3)
ann += word(39, 20) + word(27, 30) + word(40, 40)
ann += word(59, 0) + struct.pack("<HH", 1, 5) + word(5, 0) + aux(b"(N")
ann += word(0, 7) + word(60, 5) + word(50, 3) + word(15, 1) + word(0, 0)
w(f"{C}/annotation/seed1.atr", ann)

# A real header layout from the repository's invented demo signals.
demo = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "demo-signals", "s01_base.hea")
if os.path.exists(demo):
    with open(demo, "rb") as f:
        w(f"{C}/wfdb_header/demo1.hea", f.read())

# Multi-segment records: master header \0 segment header \0 segment signal file.
w(f"{C}/wfdb_multiseg/two16", b"m/2 2 250 8\ns 4\ns 4\n# <age>: 50\n\x00s 2 250 4\ns.dat 16 200 16 0 0 0 0 I\ns.dat 16 200 16 0 0 0 0 II\n\x00" + bytes(range(16)))
w(f"{C}/wfdb_multiseg/one212", b"m/3 1 360 9\ns 3\ns 3\ns 3\n\x00s 1 360\ns.dat 212 100(5)/uV 12 0 0 0 0 MLII\n\x00" + bytes(range(5)))
w(f"{C}/wfdb_multiseg/spf2", b"m/1 2 100 3\ns 3\n\x00s 2 100 3\ns.dat 8x2 200 8 0 0 0 0 A\ns.dat 8 200 8 0 0 0 0 B\n\x00" + bytes(range(9)))

# ISHNE Holter (layout of Badilini 1998, from memory): 2 leads (II, V1) of 4
# samples at 200 Hz, 2500 and 1000 nV per unit; CRC left 0 (a mismatch is only
# a warning, so the reader goes on to the samples).
ishne = bytearray(522)
ishne[0:8] = b"ISHNE1.0"
struct.pack_into("<iiiih", ishne, 10, 0, 4, 522, 522, 1)
struct.pack_into("<hh", ishne, 128, 2, 0)
struct.pack_into("<6h", ishne, 132, 15, 6, 1950, 14, 6, 2020)
struct.pack_into("<h", ishne, 156, 2)
struct.pack_into("<12h", ishne, 158, 6, 11, *([-9] * 10))
struct.pack_into("<12h", ishne, 206, 2500, 1000, *([-9] * 10))
struct.pack_into("<h", ishne, 272, 200)
w(f"{C}/ishne/seed1.ecg", bytes(ishne) + struct.pack("<8h", 0, 1, 400, -1, -400, 1000, 7, -8))
