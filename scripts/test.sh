#!/usr/bin/env bash
# Every test: Rust unit and integration tests, the accuracy regression gate over
# ../shared/data (QTDB and LUDB), and the Python cross-checks against reference
# libraries (wfdb, h5py, scipy, pyedflib).
set -euo pipefail
cd "$(dirname "$0")/.."
scripts/setup.sh --python
export TENDLINE_BIN_DIR="$PWD/target/release"

echo "== build" >&2
cargo build --release --workspace --bins -q

echo "== cargo test" >&2
cargo test --release --workspace -q 2>&1 | tee target/cargo-test.log

echo "== accuracy gate (validation/floors.toml)" >&2
scripts/validate.sh --gate

echo "== python cross-checks" >&2
export TENDLINE_RUN_QTDB="$PWD/target/validation/qtdb"
export TENDLINE_REPORT_QTDB="$PWD/target/validation/reports/qtdb/report.json"
export TENDLINE_RUN_LUDB="$PWD/target/validation/ludb"
export TENDLINE_REPORT_LUDB="$PWD/target/validation/reports/ludb/report.json"
export TENDLINE_DATA="$PWD/../shared/data"
.venv/bin/python -m pytest -q tests/python
