"""The study table (`study.csv`: time-matched ΔΔQTc of a parallel-group study)
recomputed with scipy from the run's own `subjects.csv`.

Reference: Welch's unequal-variances t interval, scipy.stats (the `t`
distribution's ppf) and numpy; the per-subject ΔQTc are those `subjects.csv`
lists (already checked against the published QTc formulas elsewhere). The arms
are assigned by this test (S01-S04 `drug`, S05-S08 `placebo`) to the invented
demo records; the ΔQTc values themselves come from the tool's measurements.
"""

import csv
import os
import shutil
import subprocess
import tempfile
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

from _devtools import REPO

BIN = Path(os.environ.get("TENDLINE_BIN_DIR", REPO / "target" / "release")) / "tendline"


def _run(inp, out, *extra):
    subprocess.run([str(BIN), "run", str(inp), "--out", str(out), "--quiet", *extra], check=True)


@pytest.fixture(scope="module")
def study_run():
    if not BIN.exists():
        pytest.fail(f"{BIN} missing: build with `cargo build --release -p tendline`")
    tmp = Path(tempfile.mkdtemp())
    inp = tmp / "in"
    shutil.copytree(REPO / "demo-signals", inp)
    with open(inp / "subjects.csv", newline="") as f:
        rows = list(csv.DictReader(f))
    with open(inp / "subjects.csv", "w", newline="") as f:
        w = csv.DictWriter(f, fieldnames=list(rows[0]) + ["arm"])
        w.writeheader()
        for r in rows:
            r["arm"] = "drug" if r["subject"] in ("S01", "S02", "S03", "S04") else "placebo"
            w.writerow(r)
    out = tmp / "out"
    _run(inp, out)
    yield inp, out
    shutil.rmtree(tmp)


def test_study_table_matches_scipy_welch(study_run):
    _, out = study_run
    with open(out / "subjects.csv", newline="") as f:
        subj = list(csv.DictReader(f))
    with open(out / "study.csv", newline="") as f:
        study = list(csv.DictReader(f))
    arm = {s: ("drug" if s in ("S01", "S02", "S03", "S04") else "placebo") for s in {r["subject"] for r in subj}}
    by = {}
    for r in subj:
        if r["timepoint"] == "baseline" or r["delta_qtc_ms"] == "":
            continue
        by.setdefault((r["timepoint"], arm[r["subject"]]), {}).setdefault(r["subject"], []).append(
            float(r["delta_qtc_ms"])
        )
    # One value per subject (the mean of its records at the timepoint).
    vals = {k: np.array([np.mean(v) for v in d.values()]) for k, d in by.items()}
    assert {(r["timepoint"], r["arm"]) for r in study} == set(vals)
    for r in study:
        v = vals[(r["timepoint"], r["arm"])]
        assert int(r["n_subjects"]) == v.size
        # subjects.csv rounds ΔQTc to 0.1 ms: agreement to 0.06 ms.
        assert abs(float(r["mean_delta_qtc_ms"]) - v.mean()) < 0.06
        assert abs(float(r["sd_delta_qtc_ms"]) - v.std(ddof=1)) < 0.1
        if r["arm"] == "placebo":
            assert r["ddqtc_ms"] == ""
            continue
        ref = vals[(r["timepoint"], "placebo")]
        d = v.mean() - ref.mean()
        q1, q0 = v.var(ddof=1) / v.size, ref.var(ddof=1) / ref.size
        se = np.sqrt(q1 + q0)
        df = (q1 + q0) ** 2 / (q1**2 / (v.size - 1) + q0**2 / (ref.size - 1))
        t = stats.t.ppf(0.95, df)
        print(f"{r['timepoint']} {r['arm']}: python d={d:.3f} se={se:.3f} df={df:.3f} "
              f"CI {d - t * se:.2f} to {d + t * se:.2f}; tool {r['ddqtc_ms']} {r['se_ms']} {r['df']} "
              f"{r['ci90_low_ms']} to {r['ci90_high_ms']}")
        assert r["reference_arm"] == "placebo"
        assert abs(float(r["ddqtc_ms"]) - d) < 0.1
        assert abs(float(r["se_ms"]) - se) < 0.05
        assert abs(float(r["df"]) - df) < 0.05
        assert abs(float(r["ci90_low_ms"]) - (d - t * se)) < 0.3
        assert abs(float(r["ci90_high_ms"]) - (d + t * se)) < 0.3
        # scipy's own Welch test gives the same t statistic.
        res = stats.ttest_ind(v, ref, equal_var=False)
        assert abs(res.statistic - d / se) < 1e-9


def test_study_table_is_removed_when_no_arm_is_given(study_run):
    inp, out = study_run
    assert (out / "study.csv").is_file()
    tmp = Path(tempfile.mkdtemp())
    try:
        plain = tmp / "in"
        shutil.copytree(REPO / "demo-signals", plain)
        # Same output folder, subjects without arms: the stale table goes.
        _run(plain, out, "--force")
        assert not (out / "study.csv").exists()
    finally:
        shutil.rmtree(tmp)
