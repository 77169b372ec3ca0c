//! The DICOM series reader against pydicom + numpy (reference: pydicom 3.x `dcmread` and
//! `Dataset.pixel_array`, DICOM PS3.3 C.7.6.2.1.1 for the placement, via
//! `tests/python/dicom_reference.py`; its answers are the committed fixtures `dicom_*`).
//!
//! Series and files (made by `scripts/fetch_refdata.sh` under `target/refdata`):
//! - `dicom_made/`: series pydicom wrote from known numpy arrays (`tests/python/dicom_make.py`;
//!   the reference script first checks pydicom reads back the arrays and placements written):
//!   an oblique int16 series with rescale, shuffled file names and reverse instance numbers;
//!   uint8 stored top down; 8-bit signed; 12 bits stored in 16 (signed); RLE lossless uint16;
//!   implicit VR uint16; two series in one folder, each chosen by its `SeriesInstanceUID`;
//! - `pydicom/`: CT and MR files shipped in pydicom's wheel (explicit and implicit VR, big
//!   endian, RLE, a padded file) each alone in a folder, and a 5-slice CT series of its
//!   DICOMDIR test set (`CT5N`);
//! - `pydicom_data/`: 512×512 CT and 1024×1024 MR files of the `pydicom-data` package.
//!
//! Values are compared exactly (SHA-256 of the voxels as stored), placements and world
//! positions to 1e-9 mm (both sides parse the same decimal strings).

mod common;

use common::{Reference, reference_path, run_sutura};
use serde_json::Value;
use std::path::{Path, PathBuf};
use sutura_core::geometry::VoxelPoint;
use sutura_core::io::{self, OpenOptions, Progress};
use sutura_core::landmarks::scheme::sha256_hex;
use sutura_core::volume::{DType, Volume, Voxel};

/// A series to compare: its folder and the UID to choose, if any.
struct Case {
    folder: PathBuf,
    uid: Option<&'static str>,
}

fn reference(name: &str, truth: &Path, cases: &[Case]) -> Vec<Value> {
    let mut r = Reference::new(name, "dicom_reference.py").path_arg(truth);
    for c in cases {
        r = r.path_arg(&c.folder).input(&c.folder);
        if let Some(u) = c.uid {
            r = r.arg(format!("uid={u}"));
        }
    }
    r.run().as_array().unwrap().clone()
}

fn options(uid: Option<&str>) -> OpenOptions {
    OpenOptions {
        dicom_series: uid.map(str::to_owned),
        ..OpenOptions::default()
    }
}

fn voxel_bytes(v: &Volume) -> Vec<u8> {
    let mut out = Vec::with_capacity(v.voxel_bytes());
    sutura_core::with_voxels!(v.voxels(), |s| {
        for x in s {
            out.extend_from_slice(&x.le_bytes());
        }
    });
    out
}

/// A voxel's little-endian bytes (numpy's `<` order of the reference's hash).
trait Le: Copy {
    fn le_bytes(self) -> Vec<u8>;
}
macro_rules! le {
    ($($t:ty),*) => {$(impl Le for $t { fn le_bytes(self) -> Vec<u8> { self.to_le_bytes().to_vec() } })*};
}
le!(u8, i16, u16, f32);

fn dtype_of(numpy: &str) -> DType {
    match numpy {
        "uint8" => DType::U8,
        "int8" | "int16" => DType::I16,
        "uint16" => DType::U16,
        other => panic!("unexpected dtype {other}"),
    }
}

fn compare(case: &Case, r: &Value) {
    let name = &r["series"];
    let v = io::open(&case.folder, &options(case.uid), &Progress::none())
        .unwrap_or_else(|e| panic!("{name}: {e}"));
    let dims: Vec<usize> = r["dims"]
        .as_array()
        .unwrap()
        .iter()
        .map(|d| d.as_u64().unwrap() as usize)
        .collect();
    assert_eq!(v.dims().to_vec(), dims, "{name}: dims");
    assert_eq!(
        v.dtype(),
        dtype_of(r["dtype"].as_str().unwrap()),
        "{name}: dtype"
    );
    let bytes = voxel_bytes(&v);
    assert_eq!(
        sha256_hex(&bytes),
        r["sha256"].as_str().unwrap(),
        "{name}: voxel values differ from pydicom's pixel_array"
    );
    let (slope, intercept) = v.rescale().map_or((1.0, 0.0), |s| (s.slope, s.intercept));
    assert!(
        (slope - r["slope"].as_f64().unwrap()).abs() < 1e-12,
        "{name}"
    );
    assert!(
        (intercept - r["intercept"].as_f64().unwrap()).abs() < 1e-12,
        "{name}"
    );
    let mut sum = 0.0;
    sutura_core::with_voxels!(v.voxels(), |s| {
        for x in s {
            sum += v.apply_rescale(x.to_f64());
        }
    });
    let want = r["rescaled_sum"].as_f64().unwrap();
    // the values are equal (the hash above); the sums differ only by summation order
    assert!(
        (sum - want).abs() <= 1e-9 * want.abs().max(1.0),
        "{name}: sum"
    );
    let rows = v.world_from_voxel().rows();
    for (rr, want) in rows.iter().zip(r["world_from_voxel"].as_array().unwrap()) {
        for (a, b) in rr.iter().zip(want.as_array().unwrap()) {
            assert!(
                (a - b.as_f64().unwrap()).abs() < 1e-9,
                "{name}: world_from_voxel {rows:?} vs {}",
                r["world_from_voxel"]
            );
        }
    }
    for c in r["corners"].as_array().unwrap() {
        let ijk: Vec<f64> = c["ijk"]
            .as_array()
            .unwrap()
            .iter()
            .map(|x| x.as_f64().unwrap())
            .collect();
        let w = v.voxel_to_world(VoxelPoint::new(ijk[0], ijk[1], ijk[2]));
        let want: Vec<f64> = c["world"]
            .as_array()
            .unwrap()
            .iter()
            .map(|x| x.as_f64().unwrap())
            .collect();
        let got = [w.0.x, w.0.y, w.0.z];
        for a in 0..3 {
            assert!(
                (got[a] - want[a]).abs() < 1e-9,
                "{name}: corner {ijk:?} at {got:?}, pydicom+numpy {want:?}"
            );
        }
    }
    // streamed, one slice at a time: the same bytes
    let mut reader = io::slices::open_slices(&case.folder, &options(case.uid)).unwrap();
    let per = reader.slice_bytes();
    let mut slab = vec![0u8; per];
    for k in 0..v.dims()[2] {
        reader.read_slices(k, &mut slab, &Progress::none()).unwrap();
        let native: Vec<u8> = slab.clone();
        let mut le = native.clone();
        if cfg!(target_endian = "big") && per / (v.dims()[0] * v.dims()[1]) == 2 {
            for w in le.chunks_exact_mut(2) {
                w.swap(0, 1);
            }
        }
        assert_eq!(
            le,
            bytes[k * per..(k + 1) * per],
            "{name}: slice {k} streamed"
        );
    }
}

fn made(name: &str) -> PathBuf {
    reference_path("dicom_made").join(name)
}

#[test]
fn series_written_by_pydicom_from_known_arrays() {
    let cases = [
        Case {
            folder: made("oblique_i16"),
            uid: None,
        },
        Case {
            folder: made("axial_u8"),
            uid: None,
        },
        Case {
            folder: made("signed_s8"),
            uid: None,
        },
        Case {
            folder: made("bits12_i16"),
            uid: None,
        },
        Case {
            folder: made("rle_u16"),
            uid: None,
        },
        Case {
            folder: made("implicit_u16"),
            uid: None,
        },
        Case {
            folder: made("two_series"),
            uid: Some("1.2.826.0.1.3680043.10.1138.7"),
        },
        Case {
            folder: made("two_series"),
            uid: Some("1.2.826.0.1.3680043.10.1138.8"),
        },
    ];
    let refs = reference("dicom_made", &made("truth"), &cases);
    assert_eq!(refs.len(), cases.len());
    for (c, r) in cases.iter().zip(&refs) {
        compare(c, r);
    }
    // the oblique series' files are named in an order unrelated to their positions
    let v = io::open(
        &made("oblique_i16"),
        &OpenOptions::default(),
        &Progress::none(),
    )
    .unwrap();
    assert!(
        v.notes.iter().any(|n| n.contains("slice step 0.8 mm")),
        "{:?}",
        v.notes
    );
    // without a choice, the two series are listed
    let e = io::open(
        &made("two_series"),
        &OpenOptions::default(),
        &Progress::none(),
    )
    .unwrap_err()
    .to_string();
    assert!(
        e.contains("\"first\" (3 slices)") && e.contains("\"second\" (5 slices)"),
        "{e}"
    );
}

#[test]
fn files_shipped_with_pydicom_and_pydicom_data() {
    let p = |n: &str| reference_path("pydicom").join(n);
    let d = |n: &str| reference_path("pydicom_data").join(n);
    let cases: Vec<Case> = [
        p("CT_small"),
        p("MR_small"),
        p("MR_small_implicit"),
        p("MR_small_bigendian"),
        p("MR_small_expb"),
        p("MR_small_RLE"),
        p("MR_small_padded"),
        p("CT5N"),
        d("693_UNCI"),
        d("693_UNCR"),
        d("MR2_UNCI"),
        d("MR2_UNCR"),
    ]
    .into_iter()
    .map(|folder| Case { folder, uid: None })
    .collect();
    // no truth arrays for shipped files: the folder holds none
    let refs = reference("dicom_pydicom_files", &reference_path("pydicom"), &cases);
    for (c, r) in cases.iter().zip(&refs) {
        compare(c, r);
    }
}

#[test]
fn shipped_files_sutura_refuses_say_why_in_one_line() {
    let p = |n: &str| reference_path("pydicom").join(n);
    for (folder, want) in [
        (p("693_J2KI"), "unsupported: the transfer syntax JPEG 2000"),
        (p("MR_truncated"), "the file is truncated or damaged"),
        (p("rtdose"), "a multi-frame image (15 frames)"),
        (p("SC_rgb_rle"), "3 samples per pixel"),
        (p("JPEG-lossy"), "SamplePrecision(12)"),
        (p("MR700"), "mixed orientations in one series"),
    ] {
        let e = io::open(&folder, &OpenOptions::default(), &Progress::none())
            .unwrap_err()
            .to_string();
        assert!(e.contains(want), "{}: {e}", folder.display());
        assert!(!e.contains('\n'));
    }
}

#[test]
fn the_command_line_reads_and_converts_a_series() {
    let dir = tempfile::tempdir().unwrap();
    let series = made("oblique_i16");
    let (ok, out, err) = run_sutura(
        &["info", "--json", "--quiet", series.to_str().unwrap()],
        dir.path(),
    );
    assert!(ok, "{err}");
    let info: Value = serde_json::from_str(&out).unwrap();
    assert_eq!(info["dims"], serde_json::json!([14, 10, 12]));
    assert_eq!(info["rescale_slope"], 0.5);
    let two = made("two_series");
    let (ok, _, err) = run_sutura(&["info", "--quiet", two.to_str().unwrap()], dir.path());
    assert!(!ok);
    assert_eq!(err.trim().lines().count(), 1, "{err}");
    assert!(err.contains("--series UID"), "{err}");
    let (ok, out, err) = run_sutura(
        &[
            "info",
            "--json",
            "--quiet",
            "--series",
            "1.2.826.0.1.3680043.10.1138.8",
            two.to_str().unwrap(),
        ],
        dir.path(),
    );
    assert!(ok, "{err}");
    let info: Value = serde_json::from_str(&out).unwrap();
    assert_eq!(info["dims"], serde_json::json!([4, 6, 5]));
    // streamed into a store, which reads back voxel for voxel
    let (ok, _, err) = run_sutura(
        &[
            "convert",
            "--quiet",
            series.to_str().unwrap(),
            "-o",
            "s.ome.zarr",
        ],
        dir.path(),
    );
    assert!(ok, "{err}");
    let (ok, out2, err) = run_sutura(&["info", "--json", "--quiet", "s.ome.zarr"], dir.path());
    assert!(ok, "{err}");
    let stored: Value = serde_json::from_str(&out2).unwrap();
    let original: Value = serde_json::from_str(
        &run_sutura(
            &["info", "--json", "--quiet", series.to_str().unwrap()],
            dir.path(),
        )
        .1,
    )
    .unwrap();
    for key in ["dims", "world_from_voxel", "sum", "min", "max"] {
        assert_eq!(stored[key], original[key], "{key}");
    }
}
