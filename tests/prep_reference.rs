//! Virtual preparation and meshes checked against reference libraries: scipy.ndimage
//! (morphology, hole filling, piece labels), scikit-image (flood fill, marching cubes and
//! `mesh_surface_area`), trimesh (reading our PLY/STL/OBJ back) and zarr-python (opening our
//! label image). Each check names its source.

mod common;

use std::path::Path;

use sutura_core::geometry::Affine3;
use sutura_core::labels::morph::{MorphOp, morph};
use sutura_core::labels::region::{
    Connectivity, GrowOptions, IntensityRange, fill_holes, grow, pieces,
};
use sutura_core::labels::{BitMask, Combine, LabelVolume, zarr};
use sutura_core::landmarks::scheme::sha256_hex;
use sutura_core::mesh::march::extract;
use sutura_core::mesh::{IntensityField, write};
use sutura_core::volume::Volume;

/// A test mask: overlapping blobs with a cavity, thin bridges, specks and a border touch, on
/// anisotropic voxels.
fn blobs(dims: [usize; 3]) -> BitMask {
    BitMask::from_fn(dims, |i, j, k| {
        let (x, y, z) = (i as f64, j as f64, k as f64);
        let b1 =
            ((x - 20.0) / 13.0).powi(2) + ((y - 18.0) / 11.0).powi(2) + ((z - 10.0) / 7.0).powi(2);
        let b2 =
            ((x - 44.0) / 9.0).powi(2) + ((y - 22.0) / 12.0).powi(2) + ((z - 12.0) / 6.0).powi(2);
        let cavity =
            ((x - 20.0) / 4.0).powi(2) + ((y - 18.0) / 3.0).powi(2) + ((z - 10.0) / 2.0).powi(2);
        let speck = (i * 31 + j * 17 + k * 7) % 97 == 0;
        let bar = j == 35 && k == 4 && i > 5;
        ((b1 < 1.0 && cavity > 1.0) || b2 < 1.0 || speck || bar) && !(i == 30 && j < 30)
    })
}

fn write_bytes(path: &Path, bytes: &[u8]) {
    std::fs::write(path, bytes).unwrap();
}

#[test]
fn morphology_holes_and_pieces_match_scipy_ndimage() {
    let dir = tempfile::tempdir().unwrap();
    let dims = [61, 40, 22];
    let spacing = [0.03, 0.036, 0.05];
    let mask = blobs(dims);
    let path = dir.path().join("mask.raw");
    write_bytes(&path, &mask.to_bytes());
    for radius_mm in [0.1f64, 0.16] {
        let out = common::Reference::new(
            &format!("prep_ndimage_r{}", (radius_mm * 1000.0).round()),
            "prep_ndimage.py",
        )
        .dir("tmp", dir.path())
        .path_arg(&path)
        .input(&path)
        .arg(dims[0].to_string())
        .arg(dims[1].to_string())
        .arg(dims[2].to_string())
        .arg(spacing[0].to_string())
        .arg(spacing[1].to_string())
        .arg(spacing[2].to_string())
        .arg(radius_mm.to_string())
        .run();
        // scipy.ndimage.binary_erosion / _dilation / _opening / _closing, same ball, default
        // border_value 0: identical voxels
        for (name, op) in [
            ("erode", MorphOp::Erode),
            ("dilate", MorphOp::Dilate),
            ("open", MorphOp::Open),
            ("close", MorphOp::Close),
        ] {
            let ours = morph(&mask, op, radius_mm, spacing).unwrap();
            assert_eq!(
                ours.count(),
                out[name]["count"].as_u64().unwrap(),
                "{name} r={radius_mm}: voxel count differs from scipy"
            );
            assert_eq!(
                sha256_hex(&ours.to_bytes()),
                out[name]["sha256"].as_str().unwrap(),
                "{name} r={radius_mm}: voxels differ from scipy"
            );
        }
        // scipy.ndimage.binary_fill_holes (face-connected background)
        assert_eq!(
            sha256_hex(&fill_holes(&mask).to_bytes()),
            out["fill"]["sha256"].as_str().unwrap(),
            "fill holes differs from scipy"
        );
        assert!(
            fill_holes(&mask).count() > mask.count(),
            "the test mask has a cavity"
        );
        // scipy.ndimage.label with generate_binary_structure(3, 1) and (3, 3): same pieces in
        // the same order
        for (key, conn) in [
            ("sizes6", Connectivity::Faces6),
            ("sizes26", Connectivity::All26),
        ] {
            let want: Vec<u64> = out[key]
                .as_array()
                .unwrap()
                .iter()
                .map(|v| v.as_u64().unwrap())
                .collect();
            assert_eq!(pieces(&mask, conn).sizes(), want.as_slice(), "{key}");
        }
    }
}

#[test]
fn region_growing_matches_skimage_flood() {
    let dir = tempfile::tempdir().unwrap();
    let dims = [57, 43, 19];
    // a noisy field: smooth waves plus a hash, u16
    let mut data = Vec::new();
    for k in 0..dims[2] {
        for j in 0..dims[1] {
            for i in 0..dims[0] {
                let w = 1000.0
                    + 400.0 * ((i as f64) * 0.31).sin() * ((j as f64) * 0.23).cos()
                    + 300.0 * ((k as f64) * 0.5 + (i as f64) * 0.07).sin()
                    + ((i * 7919 + j * 104_729 + k * 1_299_709) % 211) as f64;
                data.push(w as u16);
            }
        }
    }
    let path = dir.path().join("vol.raw");
    let bytes: Vec<u8> = data.iter().flat_map(|v| v.to_le_bytes()).collect();
    write_bytes(&path, &bytes);
    let volume = Volume::from_vec(dims, Affine3::from_spacing([0.02, 0.02, 0.03]), data).unwrap();
    let seed = [28usize, 20, 9];
    let tol = 100.0;
    for (conn, skimage_conn) in [(Connectivity::Faces6, "1"), (Connectivity::All26, "3")] {
        let out = common::Reference::new(&format!("prep_flood_{skimage_conn}"), "prep_flood.py")
            .dir("tmp", dir.path())
            .path_arg(&path)
            .input(&path)
            .arg("<u2")
            .arg(dims[0].to_string())
            .arg(dims[1].to_string())
            .arg(dims[2].to_string())
            .arg(seed[0].to_string())
            .arg(seed[1].to_string())
            .arg(seed[2].to_string())
            .arg(tol.to_string())
            .arg(skimage_conn)
            .run();
        let v = out["seed_value"].as_f64().unwrap();
        let options = GrowOptions {
            range: IntensityRange::new(v - tol, v + tol).unwrap(),
            connectivity: conn,
            max_distance_mm: None,
        };
        let ours = grow(&volume, seed, &options, None).unwrap();
        // skimage.segmentation.flood with the same tolerance and connectivity: same voxels
        assert_eq!(ours.count(), out["count"].as_u64().unwrap(), "{conn:?}");
        assert_eq!(
            sha256_hex(&ours.to_bytes()),
            out["sha256"].as_str().unwrap(),
            "{conn:?}: voxels differ from skimage"
        );
        assert!(ours.count() > 500 && ours.count() < volume.len() as u64 / 2);
    }
}

/// A blurred ball (erf-shaped edge), f32, anisotropic voxels.
fn ball(dims: [usize; 3], spacing: [f64; 3]) -> Volume {
    let c = [
        dims[0] as f64 * spacing[0] * 0.51,
        dims[1] as f64 * spacing[1] * 0.48,
        dims[2] as f64 * spacing[2] * 0.505,
    ];
    let r = 0.36 * (dims[0] as f64 * spacing[0]).min(dims[2] as f64 * spacing[2]);
    let mut data = Vec::new();
    for k in 0..dims[2] {
        for j in 0..dims[1] {
            for i in 0..dims[0] {
                let p = [
                    i as f64 * spacing[0],
                    j as f64 * spacing[1],
                    k as f64 * spacing[2],
                ];
                let d =
                    ((p[0] - c[0]).powi(2) + (p[1] - c[1]).powi(2) + (p[2] - c[2]).powi(2)).sqrt();
                data.push((100.0 + 900.0 / (1.0 + ((d - r) / 0.04).exp())) as f32);
            }
        }
    }
    Volume::from_vec(dims, Affine3::from_spacing(spacing), data).unwrap()
}

#[test]
fn marching_cubes_matches_skimage() {
    let dir = tempfile::tempdir().unwrap();
    let dims = [48, 44, 36];
    let spacing = [0.05, 0.055, 0.07];
    let volume = ball(dims, spacing);
    let path = dir.path().join("ball.raw");
    let bytes: Vec<u8> = match volume.voxels() {
        sutura_core::volume::Voxels::F32(b) => {
            b.as_slice().iter().flat_map(|v| v.to_le_bytes()).collect()
        }
        _ => unreachable!(),
    };
    write_bytes(&path, &bytes);
    let iso = 550.0;
    let field = IntensityField {
        volume: &volume,
        iso,
        outside: 100.0,
        within: None,
    };
    let mesh = extract(&field, volume.world_from_voxel());
    let rep = mesh.report();
    let out = common::Reference::new("prep_marching_cubes", "prep_marching.py")
        .dir("tmp", dir.path())
        .path_arg(&path)
        .input(&path)
        .arg(dims[0].to_string())
        .arg(dims[1].to_string())
        .arg(dims[2].to_string())
        .arg(spacing[0].to_string())
        .arg(spacing[1].to_string())
        .arg(spacing[2].to_string())
        .arg(iso.to_string())
        .run();
    // skimage.measure.marching_cubes (Lewiner) places one vertex per crossed cell edge by the
    // same linear interpolation: the same vertices. Its triangulation of cells with four or
    // more crossings can split them along other diagonals, so the area (mesh_surface_area) and
    // volume agree closely but not exactly.
    assert_eq!(rep.vertices as u64, out["vertices"].as_u64().unwrap());
    let (area, vol) = (
        out["area"].as_f64().unwrap(),
        out["volume"].as_f64().unwrap(),
    );
    eprintln!(
        "ours: {} triangles, area {:.6}, volume {:.6}; skimage: {} faces, area {area:.6}, volume {vol:.6}",
        rep.triangles, rep.area_mm2, rep.volume_mm3, out["faces"]
    );
    assert!(
        (rep.area_mm2 / area - 1.0).abs() < 2e-4,
        "area {} vs skimage {area}",
        rep.area_mm2
    );
    assert!(
        (rep.volume_mm3 / vol - 1.0).abs() < 2e-4,
        "volume {} vs {vol}",
        rep.volume_mm3
    );
    assert!(rep.closed && rep.pieces == 1 && rep.euler_characteristic == 2);
}

#[test]
fn exported_meshes_read_back_in_trimesh() {
    let dir = tempfile::tempdir().unwrap();
    let volume = ball([40, 36, 30], [0.05, 0.055, 0.07]);
    let field = IntensityField {
        volume: &volume,
        iso: 550.0,
        outside: 100.0,
        within: None,
    };
    let mesh = extract(&field, volume.world_from_voxel());
    let rep = mesh.report();
    let files: Vec<String> = ["m.ply", "m.stl", "m.obj"]
        .iter()
        .map(|n| dir.path().join(n).to_string_lossy().into_owned())
        .collect();
    for f in &files {
        write::write(&mesh, Path::new(f), "test ball").unwrap();
    }
    let mut r = common::Reference::new("prep_trimesh", "prep_trimesh.py").dir("tmp", dir.path());
    for f in &files {
        r = r.arg(f.clone()).input(Path::new(f));
    }
    let out = r.run();
    for f in &files {
        let name = Path::new(f).file_name().unwrap().to_str().unwrap();
        let m = &out[name];
        // trimesh 5, trimesh.load(process=False): STL stores three vertices per triangle
        let want_vertices = if f.to_ascii_lowercase().ends_with(".stl") {
            3 * rep.triangles
        } else {
            rep.vertices
        };
        assert_eq!(m["vertices"].as_u64().unwrap(), want_vertices as u64, "{f}");
        assert_eq!(m["faces"].as_u64().unwrap(), rep.triangles as u64, "{f}");
        // 32-bit floats in PLY and STL: agreement to about 1e-6
        let (a, v) = (m["area"].as_f64().unwrap(), m["volume"].as_f64().unwrap());
        assert!(
            (a / rep.area_mm2 - 1.0).abs() < 1e-5,
            "{f}: area {a} vs {}",
            rep.area_mm2
        );
        assert!(
            (v / rep.volume_mm3 - 1.0).abs() < 1e-5,
            "{f}: volume {v} vs {}",
            rep.volume_mm3
        );
        if !f.to_ascii_lowercase().ends_with(".stl") {
            assert!(m["watertight"].as_bool().unwrap(), "{f}");
        }
    }
}

#[test]
fn label_image_opens_in_zarr_python() {
    let dir = tempfile::tempdir().unwrap();
    let dims = [130, 70, 66];
    let mut lv = LabelVolume::new(dims, [0.036, 0.036, 0.05]);
    let skull = lv.add_label("skull").unwrap();
    let matrix = lv.add_label("matrix").unwrap();
    let m = blobs(dims);
    lv.apply(&m, skull, Combine::Add, false).unwrap();
    lv.apply(
        &BitMask::from_fn(dims, |i, _, k| i > 100 && k > 60),
        matrix,
        Combine::Add,
        false,
    )
    .unwrap();
    let path = dir.path().join("RM-001.labels.zarr");
    zarr::save(&lv, &path).unwrap();
    let out = common::Reference::new("prep_zarr_labels", "prep_zarr.py")
        .dir("tmp", dir.path())
        .path_arg(&path)
        .input(&path)
        .run();
    // zarr-python 3 opens the group and array: Zarr v3, (z, y, x) uint8 in 64³ chunks
    assert_eq!(out["zarr_format"], 3);
    assert_eq!(out["shape"], serde_json::json!([66, 70, 130]));
    assert_eq!(out["dtype"], "uint8");
    assert_eq!(out["chunks"], serde_json::json!([64, 64, 64]));
    let counts = lv.counts();
    for v in [0u8, skull, matrix] {
        assert_eq!(
            out["counts"][v.to_string()].as_u64().unwrap(),
            counts[usize::from(v)],
            "value {v}"
        );
    }
    // NGFF image-label metadata: colours and names by label value
    let ome = &out["ome"];
    assert_eq!(ome["version"], "0.5");
    assert_eq!(ome["image-label"]["properties"][0]["name"], "skull");
    assert_eq!(ome["image-label"]["colors"][1]["label-value"], 2);
    assert_eq!(
        ome["multiscales"][0]["datasets"][0]["coordinateTransformations"][0]["scale"],
        serde_json::json!([0.05, 0.036, 0.036])
    );
}

/// A label image saved inside a scan's OME-Zarr store (`STORE/labels/NAME`, what `labels new`
/// writes when given that path, and where the workstation keeps the labels of a store) is
/// listed in the store's `labels` group, so zarr-python finds it beside the scan by the NGFF
/// rules (reference: zarr-python 3 via `tests/python/prep_zarr_store.py`).
#[test]
fn a_label_image_inside_a_store_is_listed_where_ngff_readers_look() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    // copied and converted by a relative name: the store records its source's path, and its
    // bytes (which the fixture checks) must not depend on where the project is checked out
    std::fs::copy(
        common::root().join("sample_volumes/rock/RM-001.nii.gz"),
        d.join("RM-001.nii.gz"),
    )
    .unwrap();
    let run = |args: &[&str]| {
        let (ok, _, err) = common::run_sutura(args, d);
        assert!(ok, "{args:?}: {err}");
    };
    run(&["convert", "RM-001.nii.gz", "-o", "rm.ome.zarr", "--quiet"]);
    let store = d.join("rm.ome.zarr");
    let labels = store.join("labels/preparation");
    let l = labels.to_str().unwrap();
    run(&[
        "labels",
        "new",
        "--quiet",
        "rm.ome.zarr",
        "-o",
        l,
        "--label",
        "skull",
        "--label",
        "matrix",
    ]);
    run(&[
        "labels",
        "threshold",
        "--quiet",
        "rm.ome.zarr",
        "--labels",
        l,
        "--label",
        "skull",
        "--range",
        "22000:",
    ]);
    // saved twice: listed once
    let opened =
        sutura_core::store::Store::open(&store, &sutura_core::store::StoreOptions::default())
            .unwrap();
    assert_eq!(
        opened.label_names().unwrap(),
        vec!["preparation".to_owned()]
    );
    let lv = zarr::load(&labels).unwrap();
    assert!(lv.counts()[1] > 0);
    let out = common::Reference::new("prep_zarr_store_labels", "prep_zarr_store.py")
        .dir("tmp", d)
        .path_arg(&store)
        .input(&store)
        .run();
    assert_eq!(out["labels"], serde_json::json!(["preparation"]));
    let image = &out["images"]["preparation"];
    assert_eq!(image["shape"], out["image_shape"]);
    assert_eq!(image["shape"], serde_json::json!([48, 88, 120]));
    assert_eq!(image["dtype"], "uint8");
    assert_eq!(image["source"]["image"], "../../");
    let counts = lv.counts();
    for v in [0u8, 1] {
        assert_eq!(
            image["counts"][v.to_string()].as_u64().unwrap(),
            counts[usize::from(v)],
            "value {v}"
        );
    }
}
