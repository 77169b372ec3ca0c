#!/usr/bin/env bash
# The main job on the bundled sample specimens: describe each scan, render its plane and 3D
# views, superimpose the sample's landmarks into a morphospace with disparity figures, and
# measure and export the example landmark project.
# Everything lands in target/demo/.
set -euo pipefail
cd "$(dirname "$0")/.."
cargo build --release --quiet
S=./target/release/sutura
OUT=target/demo
mkdir -p "$OUT"
# the slice folder records its full voxel size (36 x 36 x 50 µm) in each slice's description
for scan in sample_volumes/*_slices sample_volumes/*.nii.gz; do
  name=$(basename "$scan"); name=${name%.nii.gz}
  $S info --quiet "$scan" | head -4
  $S slice --quiet "$scan" --plane k -o "$OUT/$name-k.png"
  $S slice --quiet "$scan" --plane j -o "$OUT/$name-j.png"
  $S render --quiet "$scan" --mode surface --orbit 35,30 -o "$OUT/$name-surface.png"
done
$S render --quiet sample_volumes/HDC-002.nii.gz --mode projection --orbit 90,60 -o "$OUT/HDC-002-projection.png"
$S slice --quiet sample_volumes/HDC-002.nii.gz --normal 1,0.4,0.3 --slab 150um -o "$OUT/HDC-002-oblique-slab.png"
$S superimpose sample_volumes/true_landmarks.csv -o "$OUT/shape"
# the example landmark project: progress, measurements, exports, and the sample's shape from it
$S project status sample_volumes/sample_project.json
$S project check sample_volumes/sample_project.json
$S measure sample_volumes/sample_project.json -o "$OUT/measurements.csv"
$S export sample_volumes/sample_project.json --format long -o "$OUT/project_landmarks.csv"
$S export sample_volumes/sample_project.json --format ply -o "$OUT/project_ply" --semilandmarks
$S superimpose sample_volumes/sample_project.json -o "$OUT/shape_project"
echo "results in $OUT (PNG views; shape/ and shape_project/ hold CSV, JSON, NPY and morphospace.png/.svg; measurements.csv)"
