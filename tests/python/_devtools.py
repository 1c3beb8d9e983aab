"""What the format cross-checks share: where the repository and the reference
data are, and the development binaries of tendline-formats they compare against."""

import os
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[2]
DATA = REPO.parent / "shared" / "data"


def need_data():
    """Skip the calling test, saying why, when ../shared/data is absent."""
    if not DATA.is_dir():
        pytest.skip(f"reference data not found at {DATA}")


def dev_bin(name, package="tendline-formats"):
    """Path of the binary `name` of `package` (tendline-formats' development
    binaries formats-dump and annot-dump; `tendline` itself) in TENDLINE_BIN_DIR
    or target/release; fails the test, naming the build command, when missing."""
    path = Path(os.environ.get("TENDLINE_BIN_DIR", REPO / "target" / "release")) / name
    if not path.is_file():
        pytest.fail(
            f"binary {path} missing: run `cargo build --release -p {package} "
            f"--bin {name}` or set TENDLINE_BIN_DIR"
        )
    return str(path)
