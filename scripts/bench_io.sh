#!/usr/bin/env bash
# Scan-loading benchmark against the Python stack, measured in the same run on the same files.
# Usage: scripts/bench_io.sh [N]   (volume N x N x N u16; default 1024 = 2 GiB; needs ~12 GB disk)
# Makes the volumes with ../shared/bench/make_volumes.py (once), times tifffile/nibabel with
# ../shared/bench/py_baseline.py, then Sutura's loader, each in a fresh process, and prints ratios
# with the 1-minute load average seen by each side (the machine may be shared).
# Environment: SUTURA_BENCH_FORMS (default "slices bigtiff deflate nii niigz");
# SUTURA_BENCH_BEFORE=path/to/another/bench_load also times that build (say, of main) in the same
# run, for before/after figures; SUTURA_BENCH_REPS (default 3; .nii.gz always 1 on the Python side).
set -euo pipefail
cd "$(dirname "$0")/.."
N=${1:-1024}
TAG=${N}x${N}x${N}
KIT=${SUTURA_BENCH_KIT:-../shared/bench}
DIR=target/bench-volumes
PY=${SUTURA_PYTHON:-.venv/bin/python}
FORMS=${SUTURA_BENCH_FORMS:-slices bigtiff deflate nii niigz}
REPS=${SUTURA_BENCH_REPS:-3}
[ -f "$KIT/py_baseline.py" ] || { echo "bench kit not found in $KIT (set SUTURA_BENCH_KIT)" >&2; exit 2; }
[ -f "$DIR/vol_$TAG.json" ] || "$PY" "$KIT/make_volumes.py" --shape "$N" "$N" "$N" --out "$DIR"
cargo build --release --example bench_load -q
OUT=target/bench-io-$TAG.jsonl
rm -f "$OUT.py"
: > "$OUT"
declare -A PYKEY=( [slices]=slices [bigtiff]=bigtiff [deflate]=deflate [nii]='nii_' [niigz]=niigz )
only=$(for k in $FORMS; do printf '%s|' "${PYKEY[$k]}"; done)
env -u OPENBLAS_CORETYPE -u OPENBLAS_L2_SIZE "$PY" "$KIT/py_baseline.py" --dir "$DIR" --tag "$TAG" \
  --repeats 3 --only "^load_.*(${only%|})" --skip 'get_fdata' --reps load_niigz_dataobj_u16=1 \
  --jsonl "$OUT.py" >/dev/null || true
declare -A FILES=( [slices]="$DIR/slices_$TAG" [bigtiff]="$DIR/vol_${TAG}_bigtiff.tif"
                   [deflate]="$DIR/vol_${TAG}_deflate.tif" [nii]="$DIR/vol_$TAG.nii" [niigz]="$DIR/vol_$TAG.nii.gz" )
for k in $FORMS; do
  ./target/release/examples/bench_load "${FILES[$k]}" "$REPS" | sed "s/^{/{\"form\":\"$k\",\"build\":\"this\",/" >> "$OUT"
  if [ -n "${SUTURA_BENCH_BEFORE:-}" ]; then
    "$SUTURA_BENCH_BEFORE" "${FILES[$k]}" "$REPS" | sed "s/^{/{\"form\":\"$k\",\"build\":\"before\",/" >> "$OUT"
  fi
done
"$PY" - "$OUT" "$OUT.py" <<'PYEOF'
import json, sys
ours = [json.loads(l) for l in open(sys.argv[1])]
py = [json.loads(l) for l in open(sys.argv[2]) if l.strip()]
py = [p for p in py if p.get("name") != "env" and "median_s" in p]
print(f"{'form':8} {'build':6} {'sutura s':>9} {'CPU s':>6} {'GB/s':>6} {'RSS MiB':>8} {'load':>5}   python reference (best of its load figures for the form)")
for o in ours:
    f = o["form"]
    key = {"slices": "slices", "bigtiff": "bigtiff", "deflate": "deflate", "nii": "nii_", "niigz": "niigz"}[f]
    cands = [p for p in py if key in p["name"] and not p["name"].endswith("_cold")]
    ref = min(cands, key=lambda p: p["median_s"]) if cands else None
    r = (f"{ref['name']} {ref['median_s']:.3f} s (load {ref.get('load1_end', float('nan')):.1f})"
         f" -> ratio {ref['median_s']/o['median_s']:.2f}x") if ref else "no reference"
    print(f"{f:8} {o['build']:6} {o['median_s']:9.3f} {o.get('cpu_median_s', float('nan')):6.2f} {o['gbps']:6.2f} {o['peak_rss_mib']:8.0f} {o.get('load1', float('nan')):5.1f}   {r}")
PYEOF
