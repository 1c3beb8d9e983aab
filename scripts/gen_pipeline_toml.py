"""Regenerate pipeline.toml: the compiled defaults (`tendline config --defaults`) with each
key's doc comment (meaning and unit) from the stage's config struct.

Usage: python3 scripts/gen_pipeline_toml.py > pipeline.toml
A test (crates/cli/src/config.rs) checks that pipeline.toml equals the defaults
and that every key carries a comment.
"""

import re
import textwrap
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
TABLES = {
    "filter": ("crates/dsp/src/filter.rs", "FilterConfig"),
    "detect": ("crates/detect/src/lib.rs", "DetectConfig"),
    "delineate": ("crates/delineate/src/config.rs", "DelineateConfig"),
    "measure": ("crates/measure/src/config.rs", "MeasureConfig"),
    "measure.limits": ("crates/measure/src/classify.rs", "Limits"),
    "measure.subject": ("crates/measure/src/subject.rs", "SubjectConfig"),
}
HEADERS = {
    "filter": "Conditioning filters applied to every lead before detection and delineation (zero phase).",
    "detect": "QRS detection: Pan and Tompkins, IEEE Trans Biomed Eng 1985;32:230-236, per lead, then fused.",
    "delineate": "Wave delineation: wavelet rules of Martinez et al. 2004 (IEEE TBME 51:570-581); T end methods.",
    "measure": "Windows, median beats, QT rules and QTc.",
    "measure.limits": "QTc classification limits (AHA/ACCF/HRS 2009 Part IV, from memory). Informative only: automated measurements must be over-read by a qualified clinician.",
    "measure.subject": "Per-subject QT/RR regression and serial delta-QTc.",
}


def field_docs(path, struct):
    src = (ROOT / path).read_text()
    m = re.search(r"pub struct " + struct + r"\s*\{", src)
    if not m:
        sys.exit(f"{path}: struct {struct} not found")
    body, depth, i = [], 1, m.end()
    while depth:
        c = src[i]
        depth += c == "{"
        depth -= c == "}"
        body.append(c)
        i += 1
    docs, pending = {}, []
    for line in "".join(body).splitlines():
        s = line.strip()
        if s.startswith("///"):
            pending.append(s[3:].strip())
        elif s.startswith("pub "):
            name = s[4:].split(":")[0].strip()
            docs[name] = " ".join(pending)
            pending = []
        elif s and not s.startswith("#["):
            pending = []
    return docs


def main():
    text = subprocess.run(
        [str(ROOT / "target/release/tendline"), "config", "--defaults"], check=True, capture_output=True, text=True
    ).stdout
    out = [
        "# tendline pipeline configuration: every threshold and parameter of every stage.",
        "# Units are in the key names (_hz, _ms, _s, _mv, _mv_per_s) and in the comments.",
        "# Generated from the compiled defaults by scripts/gen_pipeline_toml.py; a test keeps",
        "# this file equal to the defaults. Copy it, edit it and pass it with --config, or",
        "# override single keys with --set table.key=value.",
    ]
    table, docs = None, {}
    for line in text.splitlines():
        m = re.match(r"^\[(.+)\]$", line)
        if m:
            table = m.group(1)
            docs = field_docs(*TABLES[table])
            out += [""] + textwrap.wrap(HEADERS[table], 96, initial_indent="# ", subsequent_indent="# ") + [line]
            continue
        m = re.match(r"^(\w+) = ", line)
        if m:
            d = docs.get(m.group(1), "")
            if not d:
                sys.exit(f"[{table}] {m.group(1)}: no doc comment in {TABLES[table][0]}")
            out += textwrap.wrap(d, 96, initial_indent="# ", subsequent_indent="# ")
        if line.strip():
            out.append(line)
    print("\n".join(out))


main()
