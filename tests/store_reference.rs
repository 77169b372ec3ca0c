//! OME-Zarr stores against the outside world: zarr-python and ome-zarr read what Sutura writes
//! (every level's shape, type, chunking and values: level 0 bit-identical to the source, coarser
//! levels numpy's block means), and Sutura reads multiscale images zarr-python wrote in other
//! layouts (Zarr v2 + NGFF 0.4 with blosc, Zarr v3 + NGFF 0.5 with gzip and a channel axis),
//! voxel for voxel. Also the command line: `convert -o NAME.ome.zarr`, then `info`, `slice` and
//! `render` on the store equal the same commands on the source.

mod common;

use common::{Reference, reference_path, run_sutura};
use std::path::Path;
use sutura_core::geometry::{Affine3, VoxelIndex};
use sutura_core::store::{Store, StoreOptions};
use sutura_core::volume::{Volume, VolumeSource};

/// A scan with structure at every scale, odd dims so every level has partial edge blocks,
/// anisotropic voxels, a rescale and an offset origin.
fn scan() -> Volume {
    let dims = [45, 38, 29];
    let mut data = Vec::with_capacity(dims[0] * dims[1] * dims[2]);
    for k in 0..dims[2] {
        for j in 0..dims[1] {
            for i in 0..dims[0] {
                let r = ((i as f64 - 22.0).powi(2)
                    + (j as f64 - 19.0).powi(2)
                    + (2.0 * k as f64 - 29.0).powi(2))
                .sqrt();
                let v =
                    if r < 14.0 { 3000.0 } else { 900.0 } + ((i * 7 + j * 13 + k * 29) % 97) as f64;
                data.push(v as u16);
            }
        }
    }
    let w = Affine3::from_rows([
        [0.02, 0.0, 0.0, -1.0],
        [0.0, 0.02, 0.0, 0.5],
        [0.0, 0.0, 0.04, 2.0],
        [0.0, 0.0, 0.0, 1.0],
    ])
    .unwrap();
    let mut v = Volume::from_vec(dims, w, data).unwrap();
    v.set_rescale(sutura_core::volume::Rescale::new(1.0, -1024.0));
    v
}

#[test]
fn zarr_python_and_ome_zarr_read_the_stores_sutura_writes() {
    let dir = tempfile::tempdir().unwrap();
    let src = dir.path().join("scan.nii");
    sutura_core::io::nifti::write(&scan(), &src).unwrap();
    let out = dir.path().join("scan.ome.zarr");
    // relative names: the store records its source's path, and its bytes (which the fixture
    // checks) must not depend on the temp folder
    let (ok, _, err) = run_sutura(
        &[
            "convert",
            "scan.nii",
            "-o",
            "scan.ome.zarr",
            "--chunk",
            "16",
            "--coarsest-kib",
            "4",
            "--quiet",
        ],
        dir.path(),
    );
    assert!(ok, "{err}");
    // Source: zarr-python 3 (zarr.open_group, arrays read whole) and ome-zarr's Reader
    let r = Reference::new("store_read_by_zarr_python", "zarr_store.py")
        .arg("check")
        .dir("tmp", dir.path())
        .path_arg(&out)
        .path_arg(&src)
        .input(&out)
        .input(&src)
        .run();
    assert_eq!(r["zarr_format"], 3);
    assert_eq!(r["ngff_version"], "0.5");
    let levels = r["levels"].as_array().unwrap();
    assert!(levels.len() >= 2, "{r}");
    for l in levels {
        assert_eq!(l["equal"], true, "{l}");
        assert_eq!(l["dtype"], "uint16");
        assert_eq!(l["chunks"], serde_json::json!([16, 16, 16]));
    }
    assert_eq!(levels[0]["shape"], serde_json::json!([29, 38, 45]));
    // NGFF transforms in mm, z y x: voxel size and the world position of voxel 0 (the NIfTI
    // header holds them as float32)
    let near = |got: &serde_json::Value, want: [f32; 3]| {
        let got: Vec<f64> = got
            .as_array()
            .unwrap()
            .iter()
            .map(|x| x.as_f64().unwrap())
            .collect();
        assert_eq!(got, want.map(f64::from).to_vec());
    };
    near(&levels[0]["scale"], [0.04, 0.02, 0.02]);
    near(&levels[0]["translation"], [2.0, 0.5, -1.0]);
    assert_eq!(
        r["ome_zarr"]["levels"].as_u64().unwrap() as usize,
        levels.len()
    );
    assert_eq!(r["ome_zarr"]["axes"], serde_json::json!(["z", "y", "x"]));
    assert_eq!(
        r["ome_zarr"]["units"],
        serde_json::json!(["millimeter", "millimeter", "millimeter"])
    );
}

#[test]
fn sutura_reads_multiscale_images_zarr_python_writes() {
    // Source: zarr-python 3 writing Zarr v2 (numcodecs Blosc zstd, bit shuffle) and Zarr v3
    // (gzip), odd chunk shapes, NGFF 0.4 and 0.5 metadata (scripts/fetch_refdata.sh runs
    // tests/python/zarr_store.py into target/refdata/zarr_made)
    let made = reference_path("zarr_made");
    let written: serde_json::Value =
        serde_json::from_slice(&std::fs::read(made.join("written.json")).unwrap()).unwrap();
    for w in written.as_array().unwrap() {
        let store = Store::open(
            &made.join(w["store"].as_str().unwrap()),
            &StoreOptions::default(),
        )
        .unwrap();
        let npy = std::fs::read(made.join(w["npy"].as_str().unwrap())).unwrap();
        let arr = npyz::NpyFile::new(&npy[..]).unwrap();
        let shape: Vec<usize> = arr.shape().iter().map(|&n| n as usize).collect();
        let dims = [shape[2], shape[1], shape[0]];
        assert_eq!(store.dims(), dims, "{w}");
        let block = store.read_block(0, &store.level(0).full_region()).unwrap();
        let want: Vec<f64> = match store.dtype() {
            sutura_core::volume::DType::U16 => arr
                .into_vec::<u16>()
                .unwrap()
                .into_iter()
                .map(f64::from)
                .collect(),
            sutura_core::volume::DType::I16 => arr
                .into_vec::<i16>()
                .unwrap()
                .into_iter()
                .map(f64::from)
                .collect(),
            other => panic!("unexpected {other}"),
        };
        for (n, &x) in want.iter().enumerate() {
            let (i, j, k) = (
                n % dims[0],
                (n / dims[0]) % dims[1],
                n / (dims[0] * dims[1]),
            );
            assert_eq!(
                block.value(VoxelIndex::new(i, j, k)),
                Some(x),
                "{w} at {i},{j},{k}"
            );
        }
        let s = store.spacing_mm();
        let want_s: Vec<f64> = w["spacing_mm_xyz"]
            .as_array()
            .unwrap()
            .iter()
            .map(|x| x.as_f64().unwrap())
            .collect();
        let want_o: Vec<f64> = w["origin_mm_xyz"]
            .as_array()
            .unwrap()
            .iter()
            .map(|x| x.as_f64().unwrap())
            .collect();
        let t = store.world_from_voxel().translation();
        for a in 0..3 {
            assert!((s[a] - want_s[a]).abs() < 1e-12, "{w}: spacing {s:?}");
            assert!((t[a] - want_o[a]).abs() < 1e-12, "{w}: origin {t:?}");
        }
        if let Some(f) = w.get("level1_factor") {
            assert_eq!(store.level_count(), 2);
            let f: Vec<usize> = f
                .as_array()
                .unwrap()
                .iter()
                .map(|x| x.as_u64().unwrap() as usize)
                .collect();
            assert_eq!(store.level(1).factor.to_vec(), f);
            // level 1 is every other voxel: its voxel (1, 1, 1) is level 0's (2, 2, 2)
            let b1 = store.read_block(1, &[1..2, 1..2, 1..2]).unwrap();
            assert_eq!(
                b1.value(VoxelIndex::new(0, 0, 0)),
                block.value(VoxelIndex::new(2, 2, 2))
            );
        }
    }
}

#[test]
#[allow(
    clippy::too_many_lines,
    reason = "one walk through the commands on the same store"
)]
fn commands_on_a_store_agree_with_the_source() {
    let dir = tempfile::tempdir().unwrap();
    let src = dir.path().join("scan.nii");
    sutura_core::io::nifti::write(&scan(), &src).unwrap();
    let out = dir.path().join("scan.ome.zarr");
    let s = |p: &Path| p.to_str().unwrap().to_owned();
    let (ok, _, err) = run_sutura(
        &[
            "convert",
            &s(&src),
            "-o",
            &s(&out),
            "--chunk",
            "16",
            "--coarsest-kib",
            "4",
            "--quiet",
        ],
        dir.path(),
    );
    assert!(ok, "{err}");
    // converting again refuses to overwrite
    let (ok, _, err) = run_sutura(
        &["convert", &s(&src), "-o", &s(&out), "--quiet"],
        dir.path(),
    );
    assert!(!ok && err.contains("already exists"), "{err}");
    let info = |p: &Path| -> serde_json::Value {
        let (ok, stdout, err) = run_sutura(
            &["info", &s(p), "--json", "--quiet", "--cache-mib", "1"],
            dir.path(),
        );
        assert!(ok, "{err}");
        serde_json::from_str(&stdout).unwrap()
    };
    let (a, b) = (info(&src), info(&out));
    for key in [
        "dims",
        "dtype",
        "voxel_size_mm",
        "world_from_voxel",
        "min",
        "max",
        "mean",
        "sum",
        "p0_5",
        "p50",
        "p99_5",
        "rescale_intercept",
    ] {
        assert_eq!(a[key], b[key], "{key}");
    }
    assert!(b["levels"].as_array().unwrap().len() >= 2);
    assert_eq!(b["intensity_exact"], true);
    // the same slice picture, full resolution and oblique, from the store as from the source
    for extra in [
        &["--plane", "j", "--index", "17"][..],
        &["--normal", "0.3,0.2,1"][..],
        &["--normal", "1,0,0", "--slab", "0.1mm"][..],
    ] {
        let (pa, pb) = (dir.path().join("a.png"), dir.path().join("b.png"));
        for (scan, png) in [(&src, &pa), (&out, &pb)] {
            let mut args = vec![
                "slice".to_owned(),
                s(scan),
                "-o".into(),
                s(png),
                "--quiet".into(),
                "--window".into(),
                "1000,3000".into(),
                "--cache-mib".into(),
                "1".into(),
            ];
            args.extend(extra.iter().map(|x| (*x).to_owned()));
            let args: Vec<&str> = args.iter().map(String::as_str).collect();
            let (ok, _, err) = run_sutura(&args, dir.path());
            assert!(ok, "{err}");
        }
        assert_eq!(
            std::fs::read(&pa).unwrap(),
            std::fs::read(&pb).unwrap(),
            "{extra:?}"
        );
    }
    // a 3D view of the store renders (a level within the budget)
    let png = dir.path().join("r.png");
    let (ok, _, err) = run_sutura(
        &[
            "render",
            &s(&out),
            "-o",
            &s(&png),
            "--size",
            "64",
            "--quiet",
            "--mode",
            "projection",
        ],
        dir.path(),
    );
    assert!(ok, "{err}");
    // a half-written store is refused by name
    std::fs::rename(&out, dir.path().join("half.ome.zarr.partial")).unwrap();
    let (ok, _, err) = run_sutura(
        &["info", &s(&dir.path().join("half.ome.zarr.partial"))],
        dir.path(),
    );
    assert!(!ok && err.contains("half-written"), "{err}");
}

#[test]
fn commands_that_read_a_scan_whole_take_a_store() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let src = d.join("scan.nii");
    sutura_core::io::nifti::write(&scan(), &src).unwrap();
    let run = |args: &[&str]| {
        let (ok, out, err) = run_sutura(args, d);
        assert!(ok, "{args:?}: {err}");
        out
    };
    run(&[
        "convert",
        "scan.nii",
        "-o",
        "scan.ome.zarr",
        "--chunk",
        "16",
        "--coarsest-kib",
        "4",
        "--quiet",
    ]);
    // back to a file: the same voxels, placement and rescale as the source
    run(&["convert", "scan.ome.zarr", "-o", "back.nii", "--quiet"]);
    let open = |p: &Path| {
        sutura_core::io::open(
            p,
            &sutura_core::io::OpenOptions::default(),
            &sutura_core::io::Progress::none(),
        )
        .unwrap()
    };
    let (a, b) = (open(&src), open(&d.join("back.nii")));
    assert_eq!(a.dims(), b.dims());
    assert_eq!(a.world_from_voxel().rows(), b.world_from_voxel().rows());
    assert_eq!(a.rescale(), b.rescale());
    let values = |v: &Volume| -> Vec<f64> {
        sutura_core::with_voxels!(v.voxels(), |s| s.iter().map(|x| f64::from(*x)).collect())
    };
    assert!(
        values(&a) == values(&b),
        "voxels differ after the round trip"
    );
    // a store converted again, with other chunks: the same scan
    run(&[
        "convert",
        "scan.ome.zarr",
        "-o",
        "again.ome.zarr",
        "--chunk",
        "32",
        "--quiet",
    ]);
    let info = |p: &str| -> serde_json::Value {
        serde_json::from_str(&run(&["info", p, "--json", "--quiet"])).unwrap()
    };
    let (x, y) = (info("scan.ome.zarr"), info("again.ome.zarr"));
    for key in [
        "dims",
        "dtype",
        "world_from_voxel",
        "min",
        "max",
        "sum",
        "p50",
    ] {
        assert_eq!(x[key], y[key], "{key}");
    }
    // a project specimen on a store: its id from the store's name, its fingerprint checked
    let scheme = common::root().join("sample_volumes/scheme.toml");
    run(&[
        "project",
        "new",
        "p.json",
        "--scheme",
        scheme.to_str().unwrap(),
    ]);
    run(&["project", "add", "p.json", "scan.ome.zarr"]);
    let project = sutura_core::landmarks::Project::load(&d.join("p.json")).unwrap();
    assert_eq!(project.specimens()[0].id, "scan");
    run(&["project", "check", "p.json"]);
}

/// A project specimen on a store is recorded and picked on, and the store meshed, through the
/// volume interface (a block at a time, never the whole store): its record is the one its
/// `NIfTI` source gets, and a pick on either gives the same sub-voxel point.
#[test]
fn a_store_specimen_is_recorded_and_picked_a_block_at_a_time() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    scan_and_store(d);
    let run = |args: &[&str]| ok_in(d, args);
    let scheme = common::root().join("sample_volumes/scheme.toml");
    run(&[
        "project",
        "new",
        "p.json",
        "--scheme",
        scheme.to_str().unwrap(),
    ]);
    run(&["project", "add", "p.json", "scan.ome.zarr"]);
    run(&["project", "add", "p.json", "scan.nii", "--id", "in_memory"]);
    let project = sutura_core::landmarks::Project::load(&d.join("p.json")).unwrap();
    let (on_store, in_memory) = (&project.specimens()[0].scan, &project.specimens()[1].scan);
    assert_eq!(
        on_store.world_from_voxel.rows(),
        in_memory.world_from_voxel.rows()
    );
    assert_eq!(on_store.fingerprint.dims, in_memory.fingerprint.dims);
    assert_eq!(
        on_store.fingerprint.voxels_sha256,
        in_memory.fingerprint.voxels_sha256
    );
    let pick = |specimen: &str| -> [f64; 3] {
        run(&[
            "landmark",
            "pick",
            "p.json",
            specimen,
            "snout_tip",
            "--operator",
            "Ana",
            "--from",
            "-2.0,0.9,2.55",
            "--toward",
            "0.0,0.88,2.6",
        ]);
        let project = sutura_core::landmarks::Project::load(&d.join("p.json")).unwrap();
        let s = project.specimen(specimen).unwrap();
        s.trials[0]
            .landmark("snout_tip")
            .unwrap()
            .position_mm
            .unwrap()
    };
    let (a, b) = (pick("scan"), pick("in_memory"));
    for i in 0..3 {
        assert!((a[i] - b[i]).abs() < 1e-9, "{a:?} vs {b:?}");
    }
    // on the ball's surface (radius 14 voxels of 0.02 mm about voxel (22, 19, 14.5))
    let centre = [-1.0 + 22.0 * 0.02, 0.5 + 19.0 * 0.02, 2.0 + 14.5 * 0.04];
    let r = ((a[0] - centre[0]).powi(2) + (a[1] - centre[1]).powi(2) + (a[2] - centre[2]).powi(2))
        .sqrt();
    assert!((r - 0.28).abs() < 0.03, "{r}");
    run(&["project", "check", "p.json"]);
    // a surface mesh of the store, read a plane at a time through a cache of one MiB (chunks
    // evicted as the slabs move on): the mesh of its NIfTI source, vertex for vertex
    run(&[
        "mesh",
        "scan.ome.zarr",
        "-o",
        "m.ply",
        "--quiet",
        "--cache-mib",
        "1",
        "--report",
        "m.json",
    ]);
    run(&[
        "mesh", "scan.nii", "-o", "n.ply", "--quiet", "--report", "n.json",
    ]);
    let report = |name: &str| -> serde_json::Value {
        serde_json::from_str(&std::fs::read_to_string(d.join(name)).unwrap()).unwrap()
    };
    let (m, n) = (report("m.json"), report("n.json"));
    assert_eq!(m["report"], n["report"]);
    assert_eq!(m["iso"], n["iso"]);
    assert!(m["report"]["triangles"].as_u64().unwrap() > 1000);
    // the same bytes after the header (whose comment names the scan)
    let body = |name: &str| {
        let b = std::fs::read(d.join(name)).unwrap();
        let at = b
            .windows(11)
            .position(|w| w == b"end_header\n")
            .expect("a PLY header");
        b[at..].to_vec()
    };
    assert!(body("m.ply") == body("n.ply"), "the meshes differ");
}

/// The `labels` commands (new, threshold, grow, brush, keep-piece, export) read a store through
/// the volume interface, here through a cache of one MiB so chunks are evicted as the planes
/// move on: the label images and the exported mask are those made on its `NIfTI` source.
#[test]
fn labels_commands_prepare_a_store_as_they_prepare_its_source() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    scan_and_store(d);
    for (scan, labels, mask) in [
        ("scan.nii", "n.labels.zarr", "n_mask.nii"),
        ("scan.ome.zarr", "s.labels.zarr", "s_mask.nii"),
    ] {
        prepare(d, scan, labels, mask);
    }
    let load = |p: &str| sutura_core::labels::zarr::load(&d.join(p)).unwrap();
    let (n, s) = (load("n.labels.zarr"), load("s.labels.zarr"));
    for name in ["ball", "rest", "core"] {
        let (a, b) = (
            n.mask_of(n.value_of(name).unwrap()),
            s.mask_of(s.value_of(name).unwrap()),
        );
        assert!(a.count() > 0, "{name} is empty");
        assert!(a.words() == b.words(), "{name} differs");
    }
    let open = |p: &str| {
        sutura_core::io::open(
            &d.join(p),
            &sutura_core::io::OpenOptions::default(),
            &sutura_core::io::Progress::none(),
        )
        .unwrap()
    };
    let (a, b) = (open("n_mask.nii"), open("s_mask.nii"));
    assert_eq!(a.world_from_voxel().rows(), b.world_from_voxel().rows());
    let bytes = |v: &Volume| -> Vec<f64> {
        sutura_core::with_voxels!(v.voxels(), |s| s.iter().map(|x| f64::from(*x)).collect())
    };
    assert!(bytes(&a) == bytes(&b), "the exported masks differ");
}

/// One scan labelled by the commands of the test above, each through a cache of one MiB:
/// labels `ball` (threshold in a box, kept piece), `core` (a grown region) and `rest` (a
/// stroke), and `ball` exported as a mask.
fn prepare(d: &Path, scan: &str, labels: &str, mask: &str) {
    let small = ["--cache-mib", "1", "--quiet"];
    let with = |args: &[&str]| {
        let mut all = args.to_vec();
        all.extend_from_slice(&small);
        ok_in(d, &all);
    };
    with(&[
        "labels", "new", scan, "-o", labels, "--label", "ball", "--label", "rest",
    ]);
    with(&[
        "labels",
        "grow",
        scan,
        "--labels",
        labels,
        "--label",
        "core",
        "--seed-voxel",
        "22,19,14",
        "--range",
        "1900:",
        "--max-distance",
        "150um",
    ]);
    with(&[
        "labels",
        "threshold",
        scan,
        "--labels",
        labels,
        "--label",
        "ball",
        "--range",
        "1500:",
        "--box",
        "0:45,0:38,3:20",
    ]);
    with(&[
        "labels",
        "brush",
        scan,
        "--labels",
        labels,
        "--label",
        "rest",
        "--points",
        "-0.8,0.7,2.2;-0.5,0.9,2.2",
        "--radius",
        "60um",
    ]);
    with(&[
        "labels",
        "keep-piece",
        scan,
        "--labels",
        labels,
        "--label",
        "ball",
        "--at-voxel",
        "22,19,10",
    ]);
    with(&[
        "labels", "export", scan, "--labels", labels, "--label", "ball", "-o", mask,
    ]);
}

/// Runs the command line in `d`, asserting it succeeds; returns stdout.
fn ok_in(d: &Path, args: &[&str]) -> String {
    let (ok, out, err) = run_sutura(args, d);
    assert!(ok, "{args:?}: {err}");
    out
}

/// The test scan in `d` as `scan.nii` and converted to `scan.ome.zarr` in 16³ chunks.
fn scan_and_store(d: &Path) {
    sutura_core::io::nifti::write(&scan(), &d.join("scan.nii")).unwrap();
    ok_in(
        d,
        &[
            "convert",
            "scan.nii",
            "-o",
            "scan.ome.zarr",
            "--chunk",
            "16",
            "--quiet",
        ],
    );
}
