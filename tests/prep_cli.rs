//! Virtual preparation from the command line: each `sutura labels` command writes the same
//! label voxels as the library call a front end makes; `sutura mesh` reports what the library
//! measures; `convert --crop-to-label` crops to the label's box; the rock-matrix sample's recipe
//! isolates its skull (Dice with the true mask ≥ 0.95); bad input gets one clear line.

mod common;

use std::path::{Path, PathBuf};

use common::{root, run_sutura};
use sutura_core::geometry::{Affine3, WorldPoint};
use sutura_core::labels::brush::{BrushShape, Stroke, paint};
use sutura_core::labels::morph::{MorphOp, morph};
use sutura_core::labels::region::{
    Connectivity, GrowOptions, IntensityRange, fill_holes, grow, keep_piece_at, remove_small,
    threshold,
};
use sutura_core::labels::{BitMask, Combine, LabelVolume, dice, interp, zarr};
use sutura_core::landmarks::scan::open_scan;
use sutura_core::volume::Volume;

fn rock() -> PathBuf {
    root().join("sample_volumes/rock/RM-001.nii.gz")
}

fn truth() -> BitMask {
    let v = open_scan(
        &root().join("sample_volumes/rock/RM-001_skull_truth.nii.gz"),
        None,
        &sutura_core::io::Progress::new(None),
    )
    .unwrap();
    let bytes: Vec<u8> = match v.voxels() {
        sutura_core::volume::Voxels::U8(b) => b.as_slice().to_vec(),
        _ => panic!("truth mask is u8"),
    };
    BitMask::from_bytes(v.dims(), &bytes)
}

fn scan() -> Volume {
    open_scan(&rock(), None, &sutura_core::io::Progress::new(None)).unwrap()
}

/// Runs sutura in `dir`, asserting success; returns stdout.
fn ok(dir: &Path, args: &[&str]) -> String {
    let (success, out, err) = run_sutura(args, dir);
    assert!(success, "sutura {args:?} failed: {err}");
    out
}

fn label_mask(path: &Path, name: &str) -> BitMask {
    let lv = zarr::load(path).unwrap();
    lv.mask_of(lv.value_of(name).unwrap())
}

/// A fresh label image for the rock sample with labels skull and matrix.
fn fresh(dir: &Path) -> PathBuf {
    let out = dir.join("rm.labels.zarr");
    ok(
        dir,
        &[
            "labels",
            "new",
            "--quiet",
            rock().to_str().unwrap(),
            "-o",
            out.to_str().unwrap(),
            "--label",
            "skull",
            "--label",
            "matrix",
        ],
    );
    out
}

#[test]
#[allow(clippy::too_many_lines)] // reason: one command after another, each checked as it runs
fn each_labels_command_writes_what_the_library_computes() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let scan_path = rock();
    let s = scan_path.to_str().unwrap();
    let volume = scan();
    let dims = volume.dims();
    let lp = fresh(d);
    let l = lp.to_str().unwrap();

    // threshold within a box
    ok(
        d,
        &[
            "labels",
            "threshold",
            "--quiet",
            s,
            "--labels",
            l,
            "--label",
            "skull",
            "--range",
            "22000:",
            "--box",
            "10:100,5:80,3:40",
        ],
    );
    let want = threshold(
        &volume,
        IntensityRange::new(22000.0, f64::INFINITY).unwrap(),
        None,
        Some(&[10..100, 5..80, 3..40]),
    );
    assert!(want.count() > 1000);
    assert!(label_mask(&lp, "skull") == want, "threshold");

    // morphology: opening by an 80 µm ball replaces the label
    ok(
        d,
        &[
            "labels", "morph", "--labels", l, "--label", "skull", "--op", "open", "--radius",
            "80um",
        ],
    );
    let want = morph(&want, MorphOp::Open, 0.08, volume.spacing_mm()).unwrap();
    assert!(label_mask(&lp, "skull") == want, "open");

    // remove pieces under 200 voxels, then fill holes
    ok(
        d,
        &[
            "labels",
            "remove-small",
            "--labels",
            l,
            "--label",
            "skull",
            "--min-voxels",
            "200",
        ],
    );
    let want = remove_small(&want, 200, Connectivity::Faces6);
    assert!(label_mask(&lp, "skull") == want, "remove-small");
    ok(
        d,
        &["labels", "fill-holes", "--labels", l, "--label", "skull"],
    );
    let want = fill_holes(&want);
    assert!(label_mask(&lp, "skull") == want, "fill-holes");

    // keep the piece under the largest piece's first voxel
    let p = sutura_core::labels::region::pieces(&want, Connectivity::Faces6);
    let biggest = (0..p.count()).max_by_key(|&n| p.sizes()[n]).unwrap();
    let at = (0..dims[2])
        .flat_map(|k| (0..dims[1]).flat_map(move |j| (0..dims[0]).map(move |i| [i, j, k])))
        .find(|v| p.piece_at(*v) == Some(biggest))
        .unwrap();
    let at_text = format!("{},{},{}", at[0], at[1], at[2]);
    ok(
        d,
        &[
            "labels",
            "keep-piece",
            "--quiet",
            s,
            "--labels",
            l,
            "--label",
            "skull",
            "--at-voxel",
            &at_text,
        ],
    );
    let want = keep_piece_at(&want, at, Connectivity::Faces6).unwrap();
    assert!(label_mask(&lp, "skull") == want, "keep-piece");

    // a region grown from a seed in world mm, not entering other labels
    let seed_world =
        volume.voxel_to_world(sutura_core::geometry::VoxelIndex::new(at[0], at[1], at[2]).centre());
    let seed_text = format!("{},{},{}", seed_world.0.x, seed_world.0.y, seed_world.0.z);
    ok(
        d,
        &[
            "labels",
            "grow",
            "--quiet",
            s,
            "--labels",
            l,
            "--label",
            "matrix",
            "--seed-voxel",
            "5,5,5",
            "--range",
            ":",
            "--max-distance",
            "300um",
            "--connectivity",
            "26",
        ],
    );
    let lv = zarr::load(&lp).unwrap();
    let matrix = lv.value_of("matrix").unwrap();
    let free = BitMask::from_fn(dims, |i, j, k| {
        let v = lv.get(i, j, k);
        v == 0 || v == matrix
    });
    // the grown region is what grow() gives within the voxels free before the command, which
    // the skull label holds apart
    let mut before_free = lv.mask_of(lv.value_of("skull").unwrap()).complement();
    before_free.or_with(&lv.mask_of(matrix));
    let want_m = grow(
        &volume,
        [5, 5, 5],
        &GrowOptions {
            range: IntensityRange::new(f64::NEG_INFINITY, f64::INFINITY).unwrap(),
            connectivity: Connectivity::All26,
            max_distance_mm: Some(0.3),
        },
        Some(&before_free),
    )
    .unwrap();
    assert!(lv.mask_of(matrix) == want_m, "grow");
    assert!(free.count() > 0);
    let _ = seed_text;

    // a disc brush stroke in world mm, then the eraser as a ball
    let pts = "1.0,1.2,1.0;1.5,1.3,1.0";
    ok(
        d,
        &[
            "labels", "brush", "--quiet", s, "--labels", l, "--label", "matrix", "--points", pts,
            "--radius", "60um", "--plane", "k",
        ],
    );
    let mut lib = LabelVolume::new(dims, volume.spacing_mm());
    let v = lib.add_label("matrix").unwrap();
    lib.apply(&want_m, v, Combine::Add, false).unwrap();
    // the label file's skull voxels block the brush (no --overwrite): block them here too
    let skull_now = label_mask(&lp, "skull");
    let stroke = Stroke {
        points: vec![
            WorldPoint::new(1.0, 1.2, 1.0),
            WorldPoint::new(1.5, 1.3, 1.0),
        ],
        radius_mm: 0.06,
        shape: BrushShape::Disc { axis: 2 },
    };
    paint(
        &mut lib,
        volume.world_from_voxel(),
        &stroke,
        v,
        Combine::Add,
        false,
    )
    .unwrap();
    let mut want_b = lib.mask_of(v);
    want_b.and_not_with(&skull_now);
    assert!(label_mask(&lp, "matrix") == want_b, "brush");

    // combine: the matrix label loses what the skull label holds (nothing: disjoint), then
    // the skull gains the matrix's voxels with overwrite
    ok(
        d,
        &[
            "labels",
            "combine",
            "--labels",
            l,
            "--label",
            "skull",
            "--with",
            "matrix",
            "--overwrite",
        ],
    );
    let mut want_s = skull_now.clone();
    want_s.or_with(&want_b);
    assert!(label_mask(&lp, "skull") == want_s, "combine add");
    assert_eq!(label_mask(&lp, "matrix").count(), 0);

    // interpolation between two drawn slices
    let lp2 = d.join("interp.labels.zarr");
    let l2 = lp2.to_str().unwrap();
    ok(
        d,
        &["labels", "new", "--quiet", s, "-o", l2, "--label", "a"],
    );
    ok(
        d,
        &[
            "labels",
            "brush",
            "--quiet",
            s,
            "--labels",
            l2,
            "--label",
            "a",
            "--points",
            "2.0,1.5,0.5",
            "--radius",
            "300um",
        ],
    );
    ok(
        d,
        &[
            "labels",
            "brush",
            "--quiet",
            s,
            "--labels",
            l2,
            "--label",
            "a",
            "--points",
            "2.2,1.6,1.5;2.4,1.6,1.5",
            "--radius",
            "200um",
        ],
    );
    let drawn = zarr::load(&lp2).unwrap();
    let (add, slices) = interp::interpolate(&drawn, 1, 2).unwrap();
    assert_eq!(slices, vec![10, 30]);
    let mut want_i = drawn.mask_of(1);
    want_i.or_with(&add);
    ok(
        d,
        &["labels", "interpolate", "--labels", l2, "--label", "a"],
    );
    assert!(label_mask(&lp2, "a") == want_i, "interpolate");
    let info = ok(d, &["labels", "info", l2, "--json"]);
    let info: serde_json::Value = serde_json::from_str(&info).unwrap();
    assert_eq!(
        info["labels"][0]["voxels"].as_u64().unwrap(),
        want_i.count()
    );
}

#[test]
#[allow(clippy::float_cmp)] // reason: the iso value and voxels round-trip exactly
fn mesh_and_crop_follow_the_label() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let s = rock();
    let s = s.to_str().unwrap();
    let lp = fresh(d);
    let l = lp.to_str().unwrap();
    // a label around part of the skull: a ball brush
    ok(
        d,
        &[
            "labels",
            "brush",
            "--quiet",
            s,
            "--labels",
            l,
            "--label",
            "skull",
            "--points",
            "2.1,1.55,1.2",
            "--radius",
            "500um",
            "--ball",
        ],
    );
    let out = ok(
        d,
        &[
            "mesh",
            "--quiet",
            s,
            "--labels",
            l,
            "--label",
            "skull",
            "-o",
            "part.ply",
            "--report",
            "part.json",
        ],
    );
    assert!(out.contains("closed\tyes"), "{out}");
    let rep: serde_json::Value =
        serde_json::from_slice(&std::fs::read(d.join("part.json")).unwrap()).unwrap();
    // the library on the same inputs
    let volume = scan();
    let lv = zarr::load(&lp).unwrap();
    let mask = lv.mask_of(1);
    let iso = sutura_core::landmarks::pick::iso50(&volume).unwrap();
    let field = sutura_core::mesh::IntensityField {
        volume: &volume,
        iso: iso.threshold,
        outside: iso.background,
        within: Some(&mask),
    };
    let lib = sutura_core::mesh::march::extract(&field, volume.world_from_voxel()).report();
    assert_eq!(
        rep["report"]["triangles"].as_u64().unwrap(),
        lib.triangles as u64
    );
    assert!(
        (rep["report"]["area_mm2"].as_f64().unwrap() - lib.area_mm2).abs() < 1e-9 * lib.area_mm2
    );
    assert!(
        (rep["report"]["volume_mm3"].as_f64().unwrap() - lib.volume_mm3).abs()
            < 1e-9 * lib.volume_mm3
    );
    assert_eq!(rep["iso"].as_f64().unwrap(), iso.threshold);

    // crop to the label's box with a 2-voxel margin
    ok(
        d,
        &[
            "convert",
            "--quiet",
            s,
            "--crop-to-label",
            &format!("{l}:skull"),
            "--margin",
            "2",
            "-o",
            "crop.nii",
        ],
    );
    let b = sutura_core::labels::label_box(&lv, 1, 2).unwrap();
    let cropped = open_scan(
        &d.join("crop.nii"),
        None,
        &sutura_core::io::Progress::new(None),
    )
    .unwrap();
    assert_eq!(cropped.dims(), b.clone().map(|r| r.end - r.start));
    let v0 = volume
        .value(sutura_core::geometry::VoxelIndex::new(
            b[0].start, b[1].start, b[2].start,
        ))
        .unwrap();
    assert_eq!(
        cropped
            .value(sutura_core::geometry::VoxelIndex::new(0, 0, 0))
            .unwrap(),
        v0
    );
}

#[test]
fn bad_input_gets_one_line() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let s = rock();
    let s = s.to_str().unwrap();
    let lp = fresh(d);
    let l = lp.to_str().unwrap();
    let cases: Vec<(Vec<&str>, &str)> = vec![
        (
            vec!["labels", "fill-holes", "--labels", l, "--label", "bone"],
            "no label named \"bone\" (labels: skull, matrix)",
        ),
        (
            vec!["labels", "info", "nowhere.labels.zarr"],
            "nowhere.labels.zarr: no label image folder here",
        ),
        (
            vec![
                "labels",
                "grow",
                "--quiet",
                s,
                "--labels",
                l,
                "--label",
                "skull",
                "--seed-voxel",
                "500,1,1",
                "--range",
                "1:2",
            ],
            "lies outside the [120, 88, 48] grid",
        ),
        (
            vec![
                "labels", "morph", "--labels", l, "--label", "skull", "--op", "melt", "--radius",
                "1um",
            ],
            "operation \"melt\": give erode, dilate, open or close",
        ),
        (
            vec![
                "labels",
                "threshold",
                "--quiet",
                s,
                "--labels",
                l,
                "--label",
                "skull",
                "--range",
                "5:1",
            ],
            "intensity range 5..1 is empty",
        ),
        (
            vec!["mesh", "--quiet", s, "-o", "x.vrml"],
            "name the mesh file .ply, .stl or .obj",
        ),
    ];
    for (args, want) in cases {
        let (success, _, err) = run_sutura(&args, d);
        assert!(!success, "{args:?} succeeded");
        assert_eq!(err.lines().count(), 1, "{args:?}: {err}");
        assert!(err.contains(want), "{args:?}: {err}");
        assert!(!err.contains("panicked"));
    }
    // a label image made on another scan is refused
    let other = root().join("sample_volumes/HDC-002.nii.gz");
    let other_labels = d.join("other.labels.zarr");
    ok(
        d,
        &[
            "labels",
            "new",
            "--quiet",
            other.to_str().unwrap(),
            "-o",
            other_labels.to_str().unwrap(),
        ],
    );
    let (success, _, err) = run_sutura(
        &[
            "labels",
            "threshold",
            "--quiet",
            s,
            "--labels",
            other_labels.to_str().unwrap(),
            "--label",
            "a",
            "--range",
            "1:2",
        ],
        d,
    );
    assert!(!success && err.lines().count() == 1, "{err}");
    assert!(err.contains("is not the scan"), "{err}");
    let _ = Affine3::identity();
}

/// The README's recipe for `RM-001`: three strokes of the matrix label across the vein where it
/// touches the skull (slices k = 11, 16, 21), interpolation between them, and a region grown
/// from a point in the braincase wall at the scan's ISO-50 (22000), which the matrix label
/// stops at the vein.
#[test]
fn the_rock_sample_recipe_isolates_the_skull() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let s = rock();
    let s = s.to_str().unwrap();
    let lp = fresh(d);
    let l = lp.to_str().unwrap();
    let truth = truth();
    let volume = scan();
    // a threshold alone cannot separate bone from the dense grains and the vein
    let t = threshold(
        &volume,
        IntensityRange::new(22000.0, f64::INFINITY).unwrap(),
        None,
        None,
    );
    let d_threshold = dice(&t, &truth);
    assert!(d_threshold < 0.7, "threshold alone: Dice {d_threshold}");
    // nor does a region grown from the skull: it runs into the vein
    let g = grow(
        &volume,
        [34, 40, 31],
        &GrowOptions {
            range: IntensityRange::new(22000.0, f64::INFINITY).unwrap(),
            connectivity: Connectivity::Faces6,
            max_distance_mm: None,
        },
        None,
    )
    .unwrap();
    let d_grow = dice(&g, &truth);
    assert!(d_grow < 0.7, "grow alone: Dice {d_grow}");
    for z in ["0.55", "0.80", "1.05"] {
        let pts = format!("1.374,2.288,{z};0.736,2.235,{z}");
        ok(
            d,
            &[
                "labels", "brush", "--quiet", s, "--labels", l, "--label", "matrix", "--points",
                &pts, "--radius", "90um",
            ],
        );
    }
    ok(
        d,
        &["labels", "interpolate", "--labels", l, "--label", "matrix"],
    );
    ok(
        d,
        &[
            "labels",
            "grow",
            "--quiet",
            s,
            "--labels",
            l,
            "--label",
            "skull",
            "--seed",
            "1.224,1.44,1.55",
            "--range",
            "22000:",
        ],
    );
    let skull = label_mask(&lp, "skull");
    let d_recipe = dice(&skull, &truth);
    eprintln!(
        "Dice with the true skull: threshold {d_threshold:.3}, grow alone {d_grow:.3}, recipe {d_recipe:.4}"
    );
    assert!(d_recipe >= 0.95, "recipe: Dice {d_recipe}");
    // the skull's mesh is closed and one piece
    let out = ok(
        d,
        &[
            "mesh",
            "--quiet",
            s,
            "--labels",
            l,
            "--label",
            "skull",
            "-o",
            "skull.stl",
            "--smooth",
            "10",
        ],
    );
    assert!(out.contains("closed\tyes"), "{out}");
    assert!(out.contains("pieces\t1\n"), "{out}");
}

#[test]
fn sample_rock_regenerates_the_bundled_files() {
    let dir = tempfile::tempdir().unwrap();
    ok(dir.path(), &["sample", "--rock", "-o", "."]);
    for name in ["RM-001.nii.gz", "RM-001_skull_truth.nii.gz"] {
        let a = open_scan(
            &dir.path().join(name),
            None,
            &sutura_core::io::Progress::new(None),
        )
        .unwrap();
        let b = open_scan(
            &root().join("sample_volumes/rock").join(name),
            None,
            &sutura_core::io::Progress::new(None),
        )
        .unwrap();
        assert_eq!(a.dims(), b.dims());
        assert_eq!(
            sutura_core::synth::voxel_checksum(&a),
            sutura_core::synth::voxel_checksum(&b),
            "{name}"
        );
    }
}

/// Negative numbers are values, not options: an intensity range below zero (CT in Hounsfield
/// units) and points with negative coordinates are taken as given.
#[test]
fn negative_values_are_read_as_values() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let l = fresh(d);
    let (s, l) = (rock(), l);
    let (s, l) = (s.to_str().unwrap(), l.to_str().unwrap());
    let out = run_sutura(
        &[
            "labels",
            "threshold",
            "--quiet",
            s,
            "--labels",
            l,
            "--label",
            "matrix",
            "--range",
            "-500:14000",
        ],
        d,
    );
    assert!(out.0, "{}", out.2);
    assert!(label_mask(Path::new(l), "matrix").count() > 0);
    // a point outside the scan, given with negative coordinates: the scan's own refusal
    let (ok, _, err) = run_sutura(
        &[
            "labels",
            "keep-piece",
            "--quiet",
            s,
            "--labels",
            l,
            "--label",
            "matrix",
            "--at",
            "-1,-2,-3",
        ],
        d,
    );
    assert!(!ok);
    assert!(err.contains("lies outside the scan"), "{err}");
    // a negative iso-value reaches the mesh's own check
    let (ok, _, err) = run_sutura(&["mesh", "--quiet", s, "-o", "m.ply", "--iso", "-100"], d);
    assert!(!ok);
    assert!(err.contains("at or above the iso-value -100"), "{err}");
}
