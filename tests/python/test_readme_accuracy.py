"""The README's "Accuracy at a glance" block states exactly what the committed
reports measured (validation/results/<db>/report.json) and what the latest
benchmark measured (bench/results.md), so a change of results cannot leave the
README behind. The block is rebuilt by scripts/validate.sh and scripts/bench.sh
through scripts/accuracy_table.py; this test rebuilds it and compares."""

import subprocess
import sys

from _devtools import REPO


def run_table(*args):
    return subprocess.run(
        [sys.executable, str(REPO / "scripts" / "accuracy_table.py"), *args],
        capture_output=True,
        text=True,
    )


def test_readme_block_matches_committed_results():
    r = run_table("--check")
    assert r.returncode == 0, r.stderr


def test_block_figures_come_from_the_reports():
    # One figure traced by hand through report.json to the printed block, so the
    # --check above cannot pass on a block that ignores its inputs.
    import json

    rep = json.loads((REPO / "validation" / "results" / "qtdb" / "report.json").read_text())
    t_end = next(f for f in rep["global"]["fiducials"] if f["fiducial"] == "t_end")
    s = t_end["stats"]
    block = run_table().stdout
    row = next(line for line in block.splitlines() if line.startswith("| T end |"))
    assert f"{s['mean_ms']:.1f} ± {s['sd_ms']:.1f}" in row
    assert f"{t_end['sensitivity_pct']:.2f}" in row
    # Target 20 ms SD (issue "Wave delineation"): the verdict follows the figure.
    assert row.endswith("| yes |") == (
        s["sd_ms"] <= 20 and abs(s["mean_ms"]) <= 10 and t_end["sensitivity_pct"] >= 99
    )


def test_check_fails_on_a_stale_block(tmp_path):
    # The checker must be able to fail: a README whose block lost a row.
    import shutil

    fake = tmp_path / "repo"
    (fake / "scripts").mkdir(parents=True)
    shutil.copy(REPO / "scripts" / "accuracy_table.py", fake / "scripts")
    shutil.copytree(REPO / "validation" / "results", fake / "validation" / "results",
                    ignore=shutil.ignore_patterns("*.html", "marks.csv"))
    (fake / "bench").mkdir()
    shutil.copy(REPO / "bench" / "results.md", fake / "bench")
    text = (REPO / "README.md").read_text()
    stale = "\n".join(l for l in text.splitlines() if not l.startswith("| QRS end |")) + "\n"
    (fake / "README.md").write_text(stale)
    r = subprocess.run(
        [sys.executable, str(fake / "scripts" / "accuracy_table.py"), "--check"],
        capture_output=True,
        text=True,
    )
    assert r.returncode == 1
    assert "accuracy block differs" in r.stderr
