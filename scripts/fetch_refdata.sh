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
  # pip prepares an sdist's metadata before it keeps the file; with build isolation that would
  # build Pillow's build tools from source, so use the venv's own setuptools instead.
  "$PY" -m pip install -q --disable-pip-version-check "setuptools>=77" pybind11
  "$PY" -m pip download -q --disable-pip-version-check --no-deps --no-binary :all: \
    --no-build-isolation -d "$tmp" "pillow==13.0.0"
  mkdir -p "$dest/pillow"
  tar -xzf "$tmp"/pillow-*.tar.gz -C "$dest/pillow" --strip-components=1 --wildcards '*/Tests/images/*'
  rm -rf "$tmp"
fi
