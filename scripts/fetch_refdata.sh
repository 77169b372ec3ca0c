#!/usr/bin/env bash
# Fetches reference files that registry packages ship: the TIFF test images inside Pillow's
# source distribution (PyPI). nibabel's NIfTI test files come with its wheel in the venv.
set -euo pipefail
cd "$(dirname "$0")/.."
PY=${1:-.venv/bin/python}
dest=target/refdata
mkdir -p "$dest"
if [ ! -d "$dest/pillow/Tests/images" ]; then
  tmp=$(mktemp -d)
  "$PY" -m pip download -q --disable-pip-version-check --no-deps --no-binary :all: -d "$tmp" pillow
  mkdir -p "$dest/pillow"
  tar -xzf "$tmp"/pillow-*.tar.gz -C "$dest/pillow" --strip-components=1 --wildcards '*/Tests/images/*'
  rm -rf "$tmp"
fi
