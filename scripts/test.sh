#!/usr/bin/env bash
# Runs Sutura's whole test suite: builds the reference Python venv (numpy, scipy, nibabel,
# tifffile, statsmodels) and fetches the reference files if missing, then cargo's tests.
set -euo pipefail
cd "$(dirname "$0")/.."
PY=${SUTURA_PYTHON:-.venv/bin/python}
if [ ! -x "$PY" ]; then
  python3 -m venv .venv
  PY=.venv/bin/python
fi
"$PY" -m pip install -q --disable-pip-version-check -r tests/python/requirements.txt
# absolute, but not resolved: the venv's python is a symlink and must stay inside the venv
export SUTURA_PYTHON="$(cd "$(dirname "$PY")" && pwd)/$(basename "$PY")"
bash scripts/fetch_refdata.sh "$SUTURA_PYTHON"
# benches (harness = false) are run by hand, not as tests: see the README's benchmark section
cargo test --workspace --lib --bins --tests --examples "$@"
# the real workstation window under Xvfb, with the binary the tests just built
if [ "${CI:-}" = true ] || { command -v xvfb-run && command -v import && command -v xdotool; } >/dev/null 2>&1; then
  bash scripts/gui_smoke.sh target/gui-smoke
else
  echo "gui smoke test skipped: needs xvfb-run, ImageMagick and xdotool (apt-get install xvfb imagemagick xdotool)"
fi
