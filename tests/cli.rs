//! The command line end to end on the bundled sample specimens: every command runs, writes what
//! it says, and its numbers agree with the library and with nibabel.

mod common;

use common::{Reference, root, run_sutura, sutura};
use sutura_core::geometry::VoxelIndex;

fn samples() -> std::path::PathBuf {
    root().join("sample_volumes")
}

#[test]
fn info_json_agrees_with_nibabel() {
    let scan = samples().join("HDC-002.nii.gz");
    let (ok, out, err) = run_sutura(
        &["info", "--json", "--quiet", scan.to_str().unwrap()],
        &root(),
    );
    assert!(ok, "{err}");
    let ours: serde_json::Value = serde_json::from_str(&out).unwrap();
    assert_eq!(ours["dims"], serde_json::json!([120, 88, 48]));
    assert_eq!(ours["dtype"], "u16");
    // reference: nibabel's reading of the same file (sum of get_fdata, affine)
    let reference = Reference::new("cli_info_nibabel_sum", "nifti_sum.py")
        .path_arg(&scan)
        .input(&scan)
        .run();
    let (a, b) = (
        ours["sum"].as_f64().unwrap(),
        reference["sum"].as_f64().unwrap(),
    );
    assert!((a - b).abs() <= 1e-9 * b.abs(), "sum {a} vs nibabel {b}");
    for r in 0..4 {
        for c in 0..4 {
            let (x, y) = (
                ours["world_from_voxel"][r][c].as_f64().unwrap(),
                reference["affine"][r][c].as_f64().unwrap(),
            );
            assert!((x - y).abs() < 1e-6, "affine[{r}][{c}] {x} vs {y}");
        }
    }
}

#[test]
fn a_reader_that_goes_away_ends_the_output_quietly() {
    // `sutura info SCAN | head -1` (the demo does this under `pipefail`): the pipe's reading
    // end closed before anything is written gives EPIPE on the first write; the command ends
    // with success and no panic message
    for json in [false, true] {
        let mut cmd = sutura();
        cmd.arg("info")
            .arg(samples().join("HDC-002.nii.gz"))
            .arg("--quiet")
            .stdout(std::process::Stdio::piped())
            .stderr(std::process::Stdio::piped());
        if json {
            cmd.arg("--json");
        }
        let mut child = cmd.spawn().unwrap();
        drop(child.stdout.take());
        let out = child.wait_with_output().unwrap();
        let err = String::from_utf8_lossy(&out.stderr);
        assert!(out.status.success(), "json {json}: {:?}: {err}", out.status);
        assert!(!err.contains("panicked"), "{err}");
    }
}

#[test]
fn slice_folder_needs_and_takes_a_voxel_size() {
    let scan = samples().join("HDC-001_slices");
    let (ok, out, err) = run_sutura(
        &[
            "info",
            "--json",
            "--quiet",
            "--voxel-size",
            "36um,36um,50um",
            scan.to_str().unwrap(),
        ],
        &root(),
    );
    assert!(ok, "{err}");
    let v: serde_json::Value = serde_json::from_str(&out).unwrap();
    let s: Vec<f64> = v["voxel_size_mm"]
        .as_array()
        .unwrap()
        .iter()
        .map(|x| x.as_f64().unwrap())
        .collect();
    assert!(
        (s[0] - 0.036).abs() < 1e-12 && (s[2] - 0.05).abs() < 1e-12,
        "{s:?}"
    );
    let (ok, _, err) = run_sutura(
        &["info", "--voxel-size", "36", scan.to_str().unwrap()],
        &root(),
    );
    assert!(!ok && err.contains("not a length"), "{err}");
}

fn png_is_not_blank(path: &std::path::Path) {
    let img = image::open(path).unwrap().to_rgba8();
    let first = img.get_pixel(0, 0).0;
    assert!(
        img.pixels().any(|p| p.0 != first),
        "{} is blank",
        path.display()
    );
}

#[test]
fn slice_view3d_and_convert_write_what_they_say() {
    let dir = tempfile::tempdir().unwrap();
    let scan = samples().join("TF-002.nii.gz");
    let s = scan.to_str().unwrap();
    let d = |n: &str| dir.path().join(n);
    for (args, out) in [
        (vec!["slice", s, "--plane", "k", "-o"], "k.png"),
        (
            vec!["slice", s, "--normal", "1,0.5,0.2", "--slab", "100um", "-o"],
            "slab.png",
        ),
        (
            vec!["render", s, "--mode", "surface", "--size", "128", "-o"],
            "surf.png",
        ),
        (
            vec![
                "render",
                s,
                "--mode",
                "projection",
                "--size",
                "128",
                "--coarse",
                "-o",
            ],
            "mip.png",
        ),
    ] {
        let mut a = args.clone();
        let p = d(out);
        a.push(p.to_str().unwrap());
        a.push("--quiet");
        let (ok, _, err) = run_sutura(&a, &root());
        assert!(ok, "{args:?}: {err}");
        png_is_not_blank(&p);
    }
    // convert: crop then read back the same voxels
    let out = d("crop.nii");
    let (ok, _, err) = run_sutura(
        &[
            "convert",
            s,
            "--crop",
            "10:50,5:40,2:30",
            "-o",
            out.to_str().unwrap(),
            "--quiet",
        ],
        &root(),
    );
    assert!(ok, "{err}");
    let opts = sutura_core::io::OpenOptions::default();
    let none = sutura_core::io::Progress::none();
    let full = sutura_core::io::open(&scan, &opts, &none).unwrap();
    let crop = sutura_core::io::open(&out, &opts, &none).unwrap();
    assert_eq!(crop.dims(), [40, 35, 28]);
    for (i, j, k) in [(0, 0, 0), (39, 34, 27), (17, 3, 20)] {
        assert_eq!(
            crop.value(VoxelIndex::new(i, j, k)),
            full.value(VoxelIndex::new(i + 10, j + 5, k + 2))
        );
    }
    // and as a TIFF stack
    let tif = d("stack");
    let (ok, _, err) = run_sutura(
        &[
            "convert",
            s,
            "--downsample",
            "2",
            "-o",
            tif.to_str().unwrap(),
            "--quiet",
        ],
        &root(),
    );
    assert!(ok, "{err}");
    let back = sutura_core::io::open(&tif, &opts, &none).unwrap();
    assert_eq!(back.dims(), [60, 44, 24]);
    // errors are one line and name the file
    let bad = d("bad.nii");
    std::fs::write(&bad, &std::fs::read(&out).unwrap()[..4000]).unwrap();
    let (ok, _, err) = run_sutura(&["info", bad.to_str().unwrap()], &root());
    assert!(
        !ok && err.contains("bad.nii") && err.trim().lines().count() == 1,
        "{err}"
    );
}

#[test]
fn sample_regenerates_the_bundled_series() {
    let dir = tempfile::tempdir().unwrap();
    let (ok, _, err) = run_sutura(
        &["sample", "-o", dir.path().to_str().unwrap(), "--count", "2"],
        &root(),
    );
    assert!(ok, "{err}");
    // the generator is deterministic: the regenerated landmark truth equals the shipped one
    for id in ["HDC-001", "HDC-002"] {
        let a: serde_json::Value = serde_json::from_slice(
            &std::fs::read(dir.path().join(format!("{id}.landmarks.json"))).unwrap(),
        )
        .unwrap();
        let b: serde_json::Value = serde_json::from_slice(
            &std::fs::read(samples().join(format!("{id}.landmarks.json"))).unwrap(),
        )
        .unwrap();
        assert_eq!(a, b, "{id}");
    }
    assert!(dir.path().join("HDC-001_slices").is_dir());
    assert!(dir.path().join("HDC-002.nii.gz").is_file());
}

#[test]
fn superimpose_separates_the_two_localities() {
    let dir = tempfile::tempdir().unwrap();
    let table = samples().join("true_landmarks.csv");
    let (ok, _, err) = run_sutura(
        &[
            "superimpose",
            table.to_str().unwrap(),
            "-o",
            dir.path().to_str().unwrap(),
            "--resamples",
            "199",
        ],
        &root(),
    );
    assert!(ok, "{err}");
    for f in [
        "aligned_long.csv",
        "aligned_wide.csv",
        "aligned.npy",
        "specimens.csv",
        "pc_scores.csv",
        "pc_variance.csv",
        "disparity.csv",
        "procrustes_distances.csv",
        "summary.json",
        "morphospace.png",
        "morphospace.svg",
        "disparity.svg",
        "pc1_shapes.png",
    ] {
        assert!(dir.path().join(f).is_file(), "{f} missing");
    }
    // the synthetic groups differ in snout length: PC1 must split them completely
    let mut rdr = csv::Reader::from_path(dir.path().join("pc_scores.csv")).unwrap();
    let mut by_group = std::collections::BTreeMap::<String, Vec<f64>>::new();
    for r in rdr.records() {
        let r = r.unwrap();
        by_group
            .entry(r[2].to_owned())
            .or_default()
            .push(r[3].parse().unwrap());
    }
    let g: Vec<&Vec<f64>> = by_group.values().collect();
    assert_eq!(g.len(), 2);
    let (max0, min0) = (
        g[0].iter().copied().fold(f64::MIN, f64::max),
        g[0].iter().copied().fold(f64::MAX, f64::min),
    );
    let (max1, min1) = (
        g[1].iter().copied().fold(f64::MIN, f64::max),
        g[1].iter().copied().fold(f64::MAX, f64::min),
    );
    assert!(max0 < min1 || max1 < min0, "PC1 overlaps: {g:?}");
    // aligned coordinates have unit centroid size (partial Procrustes): check with numpy
    let npy = dir.path().join("aligned.npy");
    let r = Reference::new("cli_aligned_centroid_sizes", "npy_centroid_sizes.py")
        .dir("out", dir.path())
        .path_arg(&npy)
        .input(&npy)
        .run();
    for cs in r["centroid_sizes"].as_array().unwrap() {
        assert!((cs.as_f64().unwrap() - 1.0).abs() < 1e-9, "{cs}");
    }
}
