#!/usr/bin/env bash
# Installs what tendline needs on a fresh Debian/Ubuntu machine with Rust:
#   - the HDF5 C library and pkg-config (system packages), when missing;
#   - with --python: a local virtual environment .venv with the Python
#     reference packages used by the cross-check tests (tests/python/requirements.txt).
set -euo pipefail
cd "$(dirname "$0")/.."

as_root() { if [ "$(id -u)" -eq 0 ]; then "$@"; else sudo "$@"; fi; }

need_pkgs=()
pkg-config --exists hdf5 2>/dev/null || [ -e /usr/include/hdf5/serial/hdf5.h ] || need_pkgs+=(libhdf5-dev)
command -v pkg-config >/dev/null || need_pkgs+=(pkg-config)
if [ "${#need_pkgs[@]}" -gt 0 ]; then
  echo "setup: installing ${need_pkgs[*]} (apt-get)" >&2
  as_root apt-get update -qq
  DEBIAN_FRONTEND=noninteractive as_root apt-get install -y -qq "${need_pkgs[@]}" >/dev/null
fi

if [ "${1:-}" = "--python" ]; then
  if [ ! -x .venv/bin/python ]; then
    echo "setup: creating .venv" >&2
    python3 -m venv .venv
  fi
  stamp=.venv/.requirements.sha256
  want=$(sha256sum tests/python/requirements.txt | cut -d' ' -f1)
  if [ ! -f "$stamp" ] || [ "$(cat "$stamp")" != "$want" ]; then
    echo "setup: installing Python reference packages into .venv" >&2
    .venv/bin/pip install -q --disable-pip-version-check -r tests/python/requirements.txt
    echo "$want" > "$stamp"
  fi
fi
