#!/usr/bin/env bash
# Runs Sutura's whole test suite: the setup (scripts/fetch_refdata.sh: the reference Python
# venv with numpy, scipy, nibabel, tifffile, statsmodels, and the reference files), then
# cargo's tests. The Python libraries' answers are committed fixtures (tests/fixtures/reference);
# in CI (CI=true) every one is also recomputed live and the run fails if one drifted
# (SUTURA_REFERENCE=live; see tests/common/mod.rs).
set -euo pipefail
cd "$(dirname "$0")/.."
bash scripts/fetch_refdata.sh
PY=${SUTURA_PYTHON:-.venv/bin/python}
# absolute, but not resolved: the venv's python is a symlink and must stay inside the venv
export SUTURA_PYTHON="$(cd "$(dirname "$PY")" && pwd)/$(basename "$PY")"
if [ "${CI:-}" = true ]; then
  export SUTURA_REFERENCE=${SUTURA_REFERENCE:-live}
fi
# benches (harness = false) are run by hand, not as tests: see the README's benchmark section
cargo test --workspace --lib --bins --tests --examples "$@"
# the real workstation window under Xvfb, with the binary the tests just built
if [ "${CI:-}" = true ] || { command -v xvfb-run && command -v import && command -v xdotool; } >/dev/null 2>&1; then
  bash scripts/gui_smoke.sh target/gui-smoke
else
  echo "gui smoke test skipped: needs xvfb-run, ImageMagick and xdotool (apt-get install xvfb imagemagick xdotool)"
fi
