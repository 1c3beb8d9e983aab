#!/usr/bin/env bash
# The main job on the demo signals: build tendline, run it over demo-signals/
# into out/demo, and print the per-subject QTc table.
set -euo pipefail
cd "$(dirname "$0")/.."
scripts/setup.sh
cargo build --release -q -p tendline
exec target/release/tendline run demo-signals --out out/demo "$@"
