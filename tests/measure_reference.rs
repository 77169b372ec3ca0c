//! Distances measured through a project on nibabel's own `NIfTI` test files agree with the
//! distances nibabel's affine gives (reference: nibabel 5.x `img.affine` with
//! `nibabel.affines.apply_affine` and `numpy.linalg.norm`, in `tests/python/measure_distances.py`;
//! its answer is the committed fixture `measure_nibabel_distances`, see `tests/common`).
//!
//! For each file a specimen is added to a project (its `world_from_voxel` as Sutura reads it),
//! landmarks are placed by voxel coordinates — voxel (0, 0, 0) and the far corners, a centre and
//! a fractional voxel — and the scheme's distances from the first landmark are measured. The
//! files cover big-endian data, oblique sforms, qform-only placement and NIfTI-2
//! (see `tests/nifti_reference.rs` for what each holds).

mod common;

use sutura_core::io::Progress;
use sutura_core::landmarks::project::{Method, ScanRecord, Specimen, Timestamp, Trial};
use sutura_core::landmarks::{Edit, Project};
use sutura_core::measure::table::measure_project;

const FILES: [&str; 7] = [
    "anatomical.nii",
    "functional.nii",
    "reoriented_anat_moved.nii",
    "resampled_anat_moved.nii",
    "example4d.nii.gz",
    "example_nifti2.nii.gz",
    "standard.nii.gz",
];

const SCHEME: &str = r#"format_version = 1
id = "nibabel-distances"
[[landmark]]
id = "o"
type = "III"
[[landmark]]
id = "a"
type = "III"
[[landmark]]
id = "b"
type = "III"
[[landmark]]
id = "c"
type = "III"
[[landmark]]
id = "d"
type = "III"
[[measurement]]
id = "oa"
distance = ["o", "a"]
[[measurement]]
id = "ob"
distance = ["o", "b"]
[[measurement]]
id = "oc"
distance = ["o", "c"]
[[measurement]]
id = "od"
distance = ["o", "d"]
"#;

#[test]
fn distances_match_nibabels_affine() {
    let data = common::reference_path("nibabel");
    let dir = tempfile::tempdir().unwrap();
    let project_file = dir.path().join("p.json");
    let mut project = Project::new(SCHEME.to_owned(), "inline".into()).unwrap();
    let mut requests = Vec::new();
    let t0 = Timestamp::parse("2025-01-01T00:00:00Z").unwrap();
    for (n, name) in FILES.iter().enumerate() {
        let path = data.join(name);
        let (scan, volume) = ScanRecord::create(&project_file, &path, None, &Progress::none())
            .unwrap_or_else(|e| panic!("{name}: {e}"));
        let [nx, ny, nz] = volume.dims().map(|d| d as f64);
        let voxels = [
            [0.0, 0.0, 0.0],
            [nx - 1.0, 0.0, 0.0],
            [0.0, ny - 1.0, nz - 1.0],
            [nx - 1.0, ny - 1.0, nz - 1.0],
            [nx / 2.0 + 0.25, ny / 3.0, nz / 2.0 - 0.5],
        ];
        let id = format!("F{n}");
        let trial = Trial::new("1", "test", t0.clone());
        let positions: Vec<[f64; 3]> = voxels
            .iter()
            .map(|v| scan.world_from_voxel_point(*v))
            .collect();
        Edit::AddSpecimen {
            specimen: Box::new(Specimen {
                id: id.clone(),
                groups: std::collections::BTreeMap::default(),
                scan,
                trials: Vec::new(),
            }),
            index: None,
        }
        .apply(&mut project)
        .unwrap();
        Edit::AddTrial {
            specimen: id.clone(),
            trial: Box::new(trial),
            index: None,
        }
        .apply(&mut project)
        .unwrap();
        for (lm, p) in ["o", "a", "b", "c", "d"].iter().zip(&positions) {
            Edit::SetLandmark {
                specimen: id.clone(),
                trial: "1".into(),
                landmark: (*lm).into(),
                position_mm: *p,
                method: Method::Typed,
                pick: None,
                at: t0.clone(),
            }
            .apply(&mut project)
            .unwrap();
        }
        requests.push(serde_json::json!({"file": path, "voxels": voxels}));
    }
    let arg = serde_json::to_string(&requests).unwrap();
    let reference = common::Reference::new("measure_nibabel_distances", "measure_distances.py")
        .arg(arg)
        .input(&data)
        .run();
    let rows = measure_project(&project);
    assert_eq!(rows.len(), FILES.len() * 4);
    for (n, name) in FILES.iter().enumerate() {
        for m in 0..4 {
            let ours = rows[n * 4 + m].result.as_ref().unwrap().value;
            let want = reference[n][m].as_f64().unwrap();
            // the affine comes from float32 header fields: both sides read the same numbers
            assert!(
                (ours - want).abs() <= 1e-9 * want.max(1.0),
                "{name} distance {m}: ours {ours} nibabel {want}"
            );
        }
        eprintln!(
            "{name:<28} distances {} mm agree with nibabel",
            reference[n]
        );
    }
}
