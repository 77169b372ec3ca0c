#!/usr/bin/env bash
# Regenerates the committed answers of the Python reference libraries
# (tests/fixtures/reference/*.json): makes the venv and reference files if needed
# (scripts/fetch_refdata.sh), removes every fixture, and runs the integration tests with
# SUTURA_REFERENCE=record so that each reference call writes its own. A fixture no test asks for
# any more is gone afterwards. Review `git diff --stat tests/fixtures/reference` and commit.
# Usage: scripts/refresh_references.sh [cargo test options]
set -euo pipefail
cd "$(dirname "$0")/.."
bash scripts/fetch_refdata.sh
PY=${SUTURA_PYTHON:-.venv/bin/python}
export SUTURA_PYTHON="$(cd "$(dirname "$PY")" && pwd)/$(basename "$PY")"
rm -f tests/fixtures/reference/*.json
SUTURA_REFERENCE=record cargo test --workspace --tests "$@"
git status --short tests/fixtures/reference || true
