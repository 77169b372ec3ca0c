//! The landmark project from the command line, end to end on the bundled sample specimens:
//! create, digitise (world and voxel coordinates, missing, curves), measure, export, superimpose,
//! detect a swapped scan, refuse bad input, and survive being killed mid-save.

mod common;

use common::{python, root, run_sutura, sutura};
use serde_json::Value;
use std::path::{Path, PathBuf};
use sutura_core::export::table::LandmarkTable;
use sutura_core::landmarks::Project;

fn samples() -> PathBuf {
    root().join("sample_volumes")
}

fn ok(args: &[&str], cwd: &Path) -> String {
    let (success, out, err) = run_sutura(args, cwd);
    assert!(success, "sutura {args:?} failed: {err}");
    out
}

fn fails(args: &[&str], cwd: &Path) -> String {
    let (success, _, err) = run_sutura(args, cwd);
    assert!(!success, "sutura {args:?} should fail");
    let last = err.trim().lines().last().unwrap_or_default().to_owned();
    assert!(last.starts_with("sutura: "), "one-line error: {err}");
    last
}

type Truth = (Vec<(String, [f64; 3])>, Vec<[f64; 3]>);

/// The true landmarks (world mm) and dorsal curve points of a sample specimen.
fn truth(id: &str) -> Truth {
    let v: Value = serde_json::from_slice(
        &std::fs::read(samples().join(format!("{id}.landmarks.json"))).unwrap(),
    )
    .unwrap();
    let p = |x: &Value| {
        [
            x["x"].as_f64().unwrap(),
            x["y"].as_f64().unwrap(),
            x["z"].as_f64().unwrap(),
        ]
    };
    let lms = v["landmarks"]
        .as_array()
        .unwrap()
        .iter()
        .map(|l| (l["id"].as_str().unwrap().to_owned(), p(l)))
        .collect();
    let curve = v["curves"][0]["points"]
        .as_array()
        .unwrap()
        .iter()
        .map(|q| {
            let a = q.as_array().unwrap();
            [
                a[0].as_f64().unwrap(),
                a[1].as_f64().unwrap(),
                a[2].as_f64().unwrap(),
            ]
        })
        .collect();
    (lms, curve)
}

fn xyz(p: [f64; 3]) -> String {
    format!("{:?},{:?},{:?}", p[0], p[1], p[2])
}

fn dist(a: [f64; 3], b: [f64; 3]) -> f64 {
    ((a[0] - b[0]).powi(2) + (a[1] - b[1]).powi(2) + (a[2] - b[2]).powi(2)).sqrt()
}

/// Digitises every landmark and the curve of a specimen from its truth, one CLI call each.
fn digitise(proj: &str, id: &str, cwd: &Path, skip: &[&str]) {
    let (lms, curve) = truth(id);
    for (lm, p) in &lms {
        if skip.contains(&lm.as_str()) {
            continue;
        }
        let at = xyz(*p);
        ok(
            &[
                "landmark",
                "set",
                proj,
                id,
                lm,
                "--world-mm",
                &at,
                "--method",
                "surface",
                "--operator",
                "tester",
                "--time",
                "2025-03-01T10:00:00Z",
            ],
            cwd,
        );
    }
    let seg: Vec<String> = curve.iter().map(|p| xyz(*p)).collect();
    let seg = seg.join(";");
    ok(
        &[
            "curve",
            "trace",
            proj,
            id,
            "dorsal_midline",
            "--segment",
            &seg,
        ],
        cwd,
    );
}

fn csv_rows(path: &Path) -> Vec<std::collections::HashMap<String, String>> {
    let mut r = csv::Reader::from_path(path).unwrap();
    let h = r.headers().unwrap().clone();
    r.records()
        .map(|rec| {
            let rec = rec.unwrap();
            h.iter()
                .zip(rec.iter())
                .map(|(a, b)| (a.to_owned(), b.to_owned()))
                .collect()
        })
        .collect()
}

#[test]
#[allow(clippy::too_many_lines, reason = "one end-to-end story")]
fn create_digitise_measure_export_superimpose() {
    let dir = tempfile::tempdir().unwrap();
    let cwd = dir.path();
    let scheme = samples().join("scheme.toml");
    let scans = samples();
    ok(
        &[
            "project",
            "new",
            "p/skulls.json",
            "--scheme",
            scheme.to_str().unwrap(),
            "--scans",
            scans.to_str().unwrap(),
            "--voxel-size",
            "36um,36um,50um",
            "--group",
            "batch=2025",
        ],
        cwd,
    );
    let proj = "p/skulls.json";
    let project = Project::load(&cwd.join(proj)).unwrap();
    assert_eq!(project.specimens().len(), 10);
    let first = &project.specimens()[0];
    assert_eq!(first.id, "HDC-001");
    assert!(
        first.scan.path.starts_with("../"),
        "relative to the project: {}",
        first.scan.path
    );
    assert_eq!(
        std::fs::canonicalize(first.scan.resolve(&cwd.join(proj))).unwrap(),
        std::fs::canonicalize(samples().join("HDC-001_slices")).unwrap()
    );
    // exactly the values given (36um is the double nearest 0.036 mm)
    assert_eq!(
        first.scan.voxel_size_mm.map(f64::to_bits),
        [0.036f64, 0.036, 0.05].map(f64::to_bits)
    );
    assert_eq!(format!("{:?}", first.scan.voxel_size_source), "User");
    assert_eq!(
        format!("{:?}", project.specimens()[1].scan.voxel_size_source),
        "File"
    );
    ok(
        &[
            "project",
            "group",
            proj,
            "HDC-002",
            "--set",
            "formation=Harrowdene Clay",
        ],
        cwd,
    );

    // four specimens fully digitised, one with a missing landmark
    for id in ["HDC-002", "HDC-003", "TF-002", "TF-003"] {
        let g = if id.starts_with("HDC") {
            "Harrowdene Clay"
        } else {
            "Tallis Fissure"
        };
        ok(
            &[
                "project",
                "group",
                proj,
                id,
                "--set",
                &format!("formation={g}"),
            ],
            cwd,
        );
        let skip: &[&str] = if id == "TF-003" { &["crest_top"] } else { &[] };
        digitise(proj, id, cwd, skip);
    }
    ok(
        &[
            "landmark",
            "missing",
            proj,
            "TF-003",
            "crest_top",
            "--note",
            "crest broken",
        ],
        cwd,
    );

    // voxel coordinates go through the scan's own world_from_voxel (nibabel-checked `info`)
    ok(
        &[
            "landmark",
            "set",
            proj,
            "TF-001",
            "snout_tip",
            "--voxel",
            "10,20,30.5",
            "--operator",
            "ana",
        ],
        cwd,
    );
    let info: Value = serde_json::from_str(&ok(
        &[
            "info",
            "--json",
            "--quiet",
            samples().join("TF-001.nii.gz").to_str().unwrap(),
        ],
        cwd,
    ))
    .unwrap();
    let m = &info["world_from_voxel"];
    let want: Vec<f64> = (0..3)
        .map(|r| {
            m[r][0].as_f64().unwrap() * 10.0
                + m[r][1].as_f64().unwrap() * 20.0
                + m[r][2].as_f64().unwrap() * 30.5
                + m[r][3].as_f64().unwrap()
        })
        .collect();
    let project = Project::load(&cwd.join(proj)).unwrap();
    let got = project.specimen("TF-001").unwrap().trials[0]
        .position("snout_tip")
        .unwrap();
    for a in 0..3 {
        assert!((got[a] - want[a]).abs() < 1e-12, "{got:?} vs {want:?}");
    }
    let list = ok(&["landmark", "list", proj, "--specimen", "TF-001"], cwd);
    assert!(
        list.contains("snout_tip") && list.contains("10.00") && list.contains("30.50"),
        "{list}"
    );

    // measurements: values from the truth coordinates, skipped where a landmark is missing
    ok(&["measure", proj, "-o", "m.csv"], cwd);
    let rows = csv_rows(&cwd.join("m.csv"));
    assert_eq!(rows.len(), 5 * 11, "5 trials x 11 measurements");
    let (t, curve) = truth("HDC-002");
    let p = |id: &str| t.iter().find(|(n, _)| n == id).unwrap().1;
    let row = |spec: &str, m: &str| {
        rows.iter()
            .find(|r| r["specimen"] == spec && r["measurement"] == m)
            .unwrap()
            .clone()
    };
    let sl = row("HDC-002", "skull_length");
    let v: f64 = sl["value"].parse().unwrap();
    assert!(
        (v - dist(p("snout_tip"), p("occipital_condyle"))).abs() < 1e-12,
        "{sl:?}"
    );
    assert_eq!(
        (
            sl["unit"].as_str(),
            sl["status"].as_str(),
            sl["group_formation"].as_str()
        ),
        ("mm", "ok", "Harrowdene Clay")
    );
    let res: f64 = sl["resolution"].parse().unwrap();
    assert!(res > 0.036 && res < 2f64.sqrt() * 0.05 + 1e-9, "{res}");
    let pa = row("HDC-002", "profile_angle");
    let (a, b, c) = (p("snout_tip"), p("occipital_condyle"), p("crest_top"));
    let (u, w) = (
        [a[0] - b[0], a[1] - b[1], a[2] - b[2]],
        [c[0] - b[0], c[1] - b[1], c[2] - b[2]],
    );
    let cos = (u[0] * w[0] + u[1] * w[1] + u[2] * w[2]) / (dist(a, b) * dist(c, b));
    let deg: f64 = pa["value"].parse().unwrap();
    assert!((deg - cos.acos().to_degrees()).abs() < 1e-9, "{deg}");
    let ol: f64 = row("HDC-002", "dorsal_outline_length")["value"]
        .parse()
        .unwrap();
    let mut poly = vec![p("snout_tip")];
    poly.extend(&curve);
    poly.push(p("crest_top"));
    let want: f64 = poly.windows(2).map(|w| dist(w[0], w[1])).sum();
    assert!((ol - want).abs() < 1e-12);
    let skipped = row("TF-003", "crest_height");
    assert_eq!(
        (
            skipped["status"].as_str(),
            skipped["reason"].as_str(),
            skipped["value"].as_str()
        ),
        ("skipped", "crest_top missing", "")
    );
    assert_eq!(
        row("TF-001", "skull_length")["reason"],
        "occipital_condyle not digitised"
    );

    // exports agree with each other and with numpy
    for (fmt, out) in [
        ("long", "l.csv"),
        ("wide", "w.csv"),
        ("json", "l.json"),
        ("npy", "l.npy"),
        ("ply", "ply"),
    ] {
        ok(
            &[
                "export",
                proj,
                "--format",
                fmt,
                "-o",
                out,
                "--semilandmarks",
                "--group-by",
                "formation",
            ],
            cwd,
        );
    }
    let table = LandmarkTable::read_csv(&cwd.join("l.csv")).unwrap();
    assert_eq!(table.landmarks.len(), 17 + 8);
    assert_eq!(table.observations.len(), 5);
    let hdc2 = &table.observations[0];
    assert_eq!(
        (hdc2.specimen.as_str(), hdc2.group.as_deref()),
        ("HDC-002", Some("Harrowdene Clay"))
    );
    assert_eq!(
        hdc2.coords[0],
        Some(p("snout_tip")),
        "exact through the CSV"
    );
    let np = std::process::Command::new(python())
        .arg("-c")
        .arg("import json,sys,numpy as np; a=np.load(sys.argv[1]); print(json.dumps({'shape': a.shape, 'nan': int(np.isnan(a).sum()), 'x': a[0,0].tolist()}))")
        .arg(cwd.join("l.npy"))
        .output()
        .unwrap();
    assert!(
        np.status.success(),
        "{}",
        String::from_utf8_lossy(&np.stderr)
    );
    let npv: Value = serde_json::from_slice(&np.stdout).unwrap();
    assert_eq!(npv["shape"], serde_json::json!([5, 25, 3]));
    let nan_points = table
        .observations
        .iter()
        .flat_map(|o| &o.coords)
        .filter(|c| c.is_none())
        .count();
    assert_eq!(npv["nan"].as_u64().unwrap() as usize, 3 * nan_points);
    assert_eq!(npv["x"], serde_json::json!(p("snout_tip")));
    let index: Value =
        serde_json::from_slice(&std::fs::read(cwd.join("l.index.json")).unwrap()).unwrap();
    assert_eq!(index["observations"][0]["specimen"], "HDC-002");
    assert_eq!(index["points"][17], "dorsal_midline_s01");
    let ply = std::fs::read_to_string(cwd.join("ply/HDC-002_1.ply")).unwrap();
    assert!(ply.contains("element vertex 25\n"), "{ply}");
    let json: Value = serde_json::from_slice(&std::fs::read(cwd.join("l.json")).unwrap()).unwrap();
    assert_eq!(json["observations"][4]["specimen"], "TF-003");
    assert_eq!(json["observations"][4]["points"][1]["state"], "missing");

    // superimposition straight from the project; TF-003's missing crest is estimated; TF-001
    // with one landmark cannot be, and once cleared its empty trial is left out
    let e = fails(
        &[
            "superimpose",
            proj,
            "-o",
            "shape",
            "--resamples",
            "20",
            "--group-by",
            "formation",
        ],
        cwd,
    );
    assert!(
        e.contains("1 landmarks present, at least 4 are needed"),
        "{e}"
    );
    ok(&["landmark", "clear", proj, "TF-001", "snout_tip"], cwd);
    ok(
        &[
            "superimpose",
            proj,
            "-o",
            "shape",
            "--resamples",
            "20",
            "--group-by",
            "formation",
        ],
        cwd,
    );
    let specs = csv_rows(&cwd.join("shape/specimens.csv"));
    let est: usize = specs
        .iter()
        .map(|r| r["estimated_landmarks"].parse::<usize>().unwrap())
        .sum();
    assert!(specs.iter().any(|r| r["specimen"] == "HDC-002"));
    assert_eq!((specs.len(), est), (4, 1), "{specs:?}");

    // the project file itself: loads, and saving it again gives the same bytes
    let bytes = std::fs::read(cwd.join(proj)).unwrap();
    let back = Project::load(&cwd.join(proj)).unwrap();
    assert_eq!(back.to_bytes(), bytes);
    let status = ok(&["project", "status", proj], cwd);
    assert!(
        status
            .contains("landmarks 17/17 (placed 17, estimated 0, missing 0)  curves 1/1  complete"),
        "{status}"
    );
    assert!(
        status.contains("landmarks 17/17 (placed 16, estimated 0, missing 1)"),
        "{status}"
    );
}

#[test]
fn a_swapped_scan_is_detected_by_its_fingerprint() {
    let dir = tempfile::tempdir().unwrap();
    let cwd = dir.path();
    std::fs::create_dir(cwd.join("scans")).unwrap();
    for id in ["HDC-002", "TF-001"] {
        std::fs::copy(
            samples().join(format!("{id}.nii.gz")),
            cwd.join(format!("scans/{id}.nii.gz")),
        )
        .unwrap();
    }
    let scheme = samples().join("scheme.toml");
    ok(
        &[
            "project",
            "new",
            "p.json",
            "--scheme",
            scheme.to_str().unwrap(),
            "--scans",
            "scans",
        ],
        cwd,
    );
    assert!(ok(&["project", "check", "p.json", "--full"], cwd).contains("HDC-002          ok"));
    // another specimen's scan under the same name
    std::fs::copy(
        cwd.join("scans/TF-001.nii.gz"),
        cwd.join("scans/HDC-002.nii.gz"),
    )
    .unwrap();
    let (success, out, err) = run_sutura(&["project", "check", "p.json"], cwd);
    assert!(!success && err.contains("1 of 2 scans differ"), "{err}");
    assert!(
        out.contains("HDC-002          MISMATCH")
            && out.contains("is not the scan this specimen was digitised on"),
        "{out}"
    );
    assert!(out.contains("TF-001           ok"), "{out}");
    // the library reports voxel and header differences when the scan is opened
    let project = Project::load(&cwd.join("p.json")).unwrap();
    let (_, mismatch) = project
        .specimen("HDC-002")
        .unwrap()
        .scan
        .open(&cwd.join("p.json"), &sutura_core::io::Progress::none())
        .unwrap();
    let m = mismatch.expect("a mismatch").to_string();
    assert!(
        m.contains("header hash") && m.contains("sampled voxels hash"),
        "{m}"
    );
}

#[test]
#[allow(clippy::too_many_lines, reason = "a list of refusals")]
fn bad_input_gets_a_clear_one_line_error() {
    let dir = tempfile::tempdir().unwrap();
    let cwd = dir.path();
    let scheme = samples().join("scheme.toml");
    let scan = samples().join("TF-002.nii.gz");
    let slices = samples().join("HDC-001_slices");
    ok(
        &[
            "project",
            "new",
            "p.json",
            "--scheme",
            scheme.to_str().unwrap(),
        ],
        cwd,
    );
    let e = fails(
        &[
            "project",
            "new",
            "p.json",
            "--scheme",
            scheme.to_str().unwrap(),
        ],
        cwd,
    );
    assert!(e.contains("already exists"), "{e}");
    // a folder of slices written by another program: no 3D voxel size recorded
    let bare = cwd.join("bare_slices");
    std::fs::create_dir_all(&bare).unwrap();
    for z in 0..3 {
        let f = std::fs::File::create(bare.join(format!("s{z}.tif"))).unwrap();
        let mut enc = tiff::encoder::TiffEncoder::new(f).unwrap();
        enc.write_image::<tiff::encoder::colortype::Gray16>(4, 3, &[z as u16; 12])
            .unwrap();
    }
    let e = fails(&["project", "add", "p.json", bare.to_str().unwrap()], cwd);
    assert!(e.contains("records no full voxel size"), "{e}");
    // the sample's folder records its voxel size (36 x 36 x 50 µm) and is accepted as it is
    ok(&["project", "add", "p.json", slices.to_str().unwrap()], cwd);
    ok(
        &[
            "project",
            "add",
            "p.json",
            scan.to_str().unwrap(),
            "--id",
            "T2",
        ],
        cwd,
    );
    let e = fails(
        &[
            "project",
            "add",
            "p.json",
            scan.to_str().unwrap(),
            "--id",
            "T2",
        ],
        cwd,
    );
    assert!(e.contains("specimen 'T2' already exists"), "{e}");
    let e = fails(
        &[
            "landmark",
            "set",
            "p.json",
            "T2",
            "snout_tip",
            "--world-mm",
            "3000,1,1",
        ],
        cwd,
    );
    assert!(e.contains("outside the scan"), "{e}");
    let e = fails(
        &[
            "landmark",
            "set",
            "p.json",
            "T2",
            "nose",
            "--world-mm",
            "1,1,1",
        ],
        cwd,
    );
    assert!(e.contains("'nose' is not a landmark"), "{e}");
    let e = fails(
        &[
            "landmark",
            "set",
            "p.json",
            "T9",
            "snout_tip",
            "--world-mm",
            "1,1,1",
        ],
        cwd,
    );
    assert!(e.contains("no specimen 'T9'"), "{e}");
    let e = fails(
        &[
            "landmark",
            "set",
            "p.json",
            "T2",
            "snout_tip",
            "--world-mm",
            "1,1",
        ],
        cwd,
    );
    assert!(e.contains("three numbers"), "{e}");
    let e = fails(
        &[
            "landmark",
            "set",
            "p.json",
            "T2",
            "snout_tip",
            "--world-mm",
            "1,1,1",
            "--trial",
            "4",
        ],
        cwd,
    );
    assert!(e.contains("no trial '4'"), "{e}");
    let e = fails(&["landmark", "clear", "p.json", "T2", "snout_tip"], cwd);
    assert!(e.contains("no trials yet"), "{e}");
    ok(
        &[
            "trial",
            "new",
            "p.json",
            "T2",
            "--operator",
            "bo",
            "--time",
            "2025-01-02T03:04:05+02:00",
        ],
        cwd,
    );
    let e = fails(&["landmark", "clear", "p.json", "T2", "snout_tip"], cwd);
    assert!(e.contains("nothing to clear"), "{e}");
    let e = fails(
        &[
            "curve",
            "trace",
            "p.json",
            "T2",
            "dorsal_midline",
            "--segment",
            "1,1,1",
            "--segment",
            "",
        ],
        cwd,
    );
    assert!(e.contains("1 segments, 2 traced lists"), "{e}");
    let e = fails(
        &[
            "landmark",
            "set",
            "p.json",
            "T2",
            "snout_tip",
            "--world-mm",
            "1,1,1",
            "--time",
            "noon",
        ],
        cwd,
    );
    assert!(e.contains("not an RFC 3339 time"), "{e}");
    let p = Project::load(&cwd.join("p.json")).unwrap();
    assert_eq!(
        p.specimen("T2").unwrap().trials[0].started.as_str(),
        "2025-01-02T01:04:05Z"
    );

    // a bad scheme names the line; a newer project file is refused
    std::fs::write(
        cwd.join("s.toml"),
        "format_version = 1\nid = \"x\"\n[[landmark]]\nid = \"a\"\ntype = \"V\"\n",
    )
    .unwrap();
    let e = fails(&["project", "new", "q.json", "--scheme", "s.toml"], cwd);
    assert!(e.contains("s.toml:5: landmark \"a\".type"), "{e}");
    let text = std::fs::read_to_string(cwd.join("p.json")).unwrap();
    std::fs::write(
        cwd.join("new.json"),
        text.replace("\"format_version\": 2", "\"format_version\": 7"),
    )
    .unwrap();
    let e = fails(&["measure", "new.json"], cwd);
    assert!(
        e.contains("new.json: written by a newer Sutura (project format_version 7"),
        "{e}"
    );
}

/// Relabels a large project through the CLI again and again, killing the process at random
/// moments; the project file must always load, and be either
/// the version before the command or the one after.
#[test]
#[allow(
    clippy::too_many_lines,
    reason = "build, then one loop of kills and checks"
)]
fn killing_the_program_mid_save_leaves_a_whole_project() {
    let dir = tempfile::tempdir().unwrap();
    let cwd = dir.path();
    let path = cwd.join("big.json");
    // a project of 2000 specimens (about 10 MB) so that a save takes a while
    let text = std::fs::read_to_string(samples().join("scheme.toml")).unwrap();
    let mut p = Project::new(text, "scheme.toml".into()).unwrap();
    let template = {
        let mut q = p.clone();
        let s = sutura_core::landmarks::project::Specimen {
            id: "S0".into(),
            groups: [("round".to_owned(), "0".to_owned())].into(),
            scan: serde_json::from_value(serde_json::json!({
                "path": "scan.nii.gz", "voxel_size_mm": [0.036, 0.036, 0.05], "voxel_size_source": "file",
                "world_from_voxel": [[0.036, 0, 0, 0], [0, 0.036, 0, 0], [0, 0, 0.05, 0], [0, 0, 0, 1]],
                "fingerprint": {"files": 1, "bytes": 1, "head_sha256": "00", "dims": [120, 88, 48], "dtype": "u16", "voxels_sha256": "00"}
            })).unwrap(),
            trials: Vec::new(),
        };
        sutura_core::landmarks::Edit::AddSpecimen {
            specimen: Box::new(s),
            index: None,
        }
        .apply(&mut q)
        .unwrap();
        q.specimens()[0].clone()
    };
    let (lms, _) = truth("HDC-002");
    for n in 0..2000 {
        let mut s = template.clone();
        s.id = format!("S{n:04}");
        sutura_core::landmarks::Edit::AddSpecimen {
            specimen: Box::new(s),
            index: None,
        }
        .apply(&mut p)
        .unwrap();
        sutura_core::landmarks::Edit::AddTrial {
            specimen: format!("S{n:04}"),
            trial: Box::new(sutura_core::landmarks::project::Trial::new(
                "1",
                "op",
                sutura_core::landmarks::project::Timestamp::now(),
            )),
            index: None,
        }
        .apply(&mut p)
        .unwrap();
        for (lm, pos) in &lms {
            sutura_core::landmarks::Edit::SetLandmark {
                specimen: format!("S{n:04}"),
                trial: "1".into(),
                landmark: lm.clone(),
                position_mm: [pos[0] + f64::from(n) * 1e-4, pos[1], pos[2]],
                method: sutura_core::landmarks::project::Method::Surface,
                pick: None,
                at: sutura_core::landmarks::project::Timestamp::now(),
            }
            .apply(&mut p)
            .unwrap();
        }
    }
    p.save(&path).unwrap();
    let round = |p: &Project| {
        p.specimen("S0000").unwrap().groups["round"]
            .parse::<u32>()
            .unwrap()
    };

    // time one uninterrupted run to spread the kills over it
    let t0 = std::time::Instant::now();
    ok(
        &["project", "group", "big.json", "S0000", "--set", "round=1"],
        cwd,
    );
    let run = t0.elapsed();
    let mut expected = 1;
    let mut seed: u64 = 0x9e37_79b9_7f4a_7c15;
    let (mut killed_mid_save, mut tries) = (0, 0);
    while killed_mid_save < 3 && tries < 200 {
        tries += 1;
        seed = seed
            .wrapping_mul(6_364_136_223_846_793_005)
            .wrapping_add(1_442_695_040_888_963_407);
        let delay = run.mul_f64((seed >> 11) as f64 / (1u64 << 53) as f64 * 1.2);
        let mut child = sutura()
            .args([
                "project",
                "group",
                "big.json",
                "S0000",
                "--set",
                &format!("round={}", expected + 1),
            ])
            .current_dir(cwd)
            .stdout(std::process::Stdio::null())
            .stderr(std::process::Stdio::null())
            .spawn()
            .unwrap();
        std::thread::sleep(delay);
        let _ = child.kill();
        let status = child.wait().unwrap();
        let temp_left: Vec<PathBuf> = std::fs::read_dir(cwd)
            .unwrap()
            .map(|e| e.unwrap().path())
            .filter(|p| p.file_name().unwrap().to_string_lossy().contains(".tmp-"))
            .collect();
        if !temp_left.is_empty() {
            killed_mid_save += 1;
        }
        for t in temp_left {
            std::fs::remove_file(t).unwrap();
        }
        let now =
            Project::load(&path).unwrap_or_else(|e| panic!("try {tries}: project unreadable: {e}"));
        let r = round(&now);
        assert!(
            r == expected || r == expected + 1,
            "try {tries}: round {r}, expected {expected} or {}",
            expected + 1
        );
        if status.success() {
            assert_eq!(r, expected + 1);
        }
        expected = r;
        // the backup is always a whole project too
        Project::load(&sutura_core::landmarks::project::backup_path(&path)).unwrap();
    }
    eprintln!("{tries} runs killed at random, {killed_mid_save} of them mid-save (run {run:?})");
    assert!(
        killed_mid_save >= 3,
        "only {killed_mid_save} kills landed during a save in {tries} tries"
    );
}

#[test]
#[allow(clippy::too_many_lines, reason = "one pick story with its refusals")]
fn pick_places_a_landmark_on_the_surface_and_records_the_ray() {
    let dir = tempfile::tempdir().unwrap();
    let cwd = dir.path();
    let scheme = samples().join("scheme.toml");
    let scan = samples().join("HDC-003.nii.gz");
    ok(
        &[
            "project",
            "new",
            "p.json",
            "--scheme",
            scheme.to_str().unwrap(),
        ],
        cwd,
    );
    ok(&["project", "add", "p.json", scan.to_str().unwrap()], cwd);
    let (t, _) = truth("HDC-003");
    let tip = t.iter().find(|(n, _)| n == "snout_tip").unwrap().1;
    // from 0.3 mm in front of the snout (+x, the direction its definition names) towards it
    let from = [tip[0] + 0.3, tip[1], tip[2]];
    ok(
        &[
            "landmark",
            "pick",
            "p.json",
            "HDC-003",
            "snout_tip",
            "--from",
            &xyz(from),
            "--toward",
            &xyz(tip),
            "--operator",
            "ana",
        ],
        cwd,
    );
    let p = Project::load(&cwd.join("p.json")).unwrap();
    let e = p.specimen("HDC-003").unwrap().trials[0]
        .landmark("snout_tip")
        .unwrap()
        .clone();
    let got = e.position_mm.unwrap();
    // within half a voxel of the true surface point (the tolerance of tests/pick_samples.rs)
    assert!(dist(got, tip) < 0.018, "{} mm off", dist(got, tip));
    let pick = e.pick.expect("the pick is recorded");
    assert_eq!(pick.origin_mm.map(f64::to_bits), from.map(f64::to_bits));
    assert!((pick.direction[0] + 1.0).abs() < 1e-12);
    assert!(
        pick.threshold > 15_000.0 && pick.threshold < 25_000.0,
        "iso-50 {}",
        pick.threshold
    );
    // a ray into the resin block's empty corner meets nothing; a too short search neither
    let e = fails(
        &[
            "landmark",
            "pick",
            "p.json",
            "HDC-003",
            "crest_top",
            "--from",
            "0.1,0.1,0.1",
            "--direction",
            "-1,0,0",
        ],
        cwd,
    );
    assert!(e.contains("meets no surface"), "{e}");
    let e = fails(
        &[
            "landmark",
            "pick",
            "p.json",
            "HDC-003",
            "crest_top",
            "--from",
            &xyz(from),
            "--toward",
            &xyz(tip),
            "--max-distance",
            "100um",
        ],
        cwd,
    );
    assert!(
        e.contains("meets no surface") && e.contains("100 µm"),
        "{e}"
    );
    // voxel coordinates: the same ray gives the same point
    let v = p
        .specimen("HDC-003")
        .unwrap()
        .scan
        .voxel_from_world_point(from);
    let w = p
        .specimen("HDC-003")
        .unwrap()
        .scan
        .voxel_from_world_point(tip);
    ok(
        &[
            "landmark",
            "pick",
            "p.json",
            "HDC-003",
            "symphysis_ventral",
            "--frame",
            "voxel",
            "--from",
            &xyz(v),
            "--toward",
            &xyz(w),
        ],
        cwd,
    );
    let q = Project::load(&cwd.join("p.json")).unwrap();
    let again = q.specimen("HDC-003").unwrap().trials[0]
        .position("symphysis_ventral")
        .unwrap();
    assert!(dist(again, got) < 1e-9, "{again:?} vs {got:?}");
}

/// The bundled example project is what the script makes: it loads, its scans match their
/// fingerprints, its measurements CSV is current, and every position lies within a voxel of
/// the generator's truth (aims are off by under a voxel; see `scripts/make_sample_project.sh`).
#[test]
fn bundled_sample_project_is_current() {
    let path = samples().join("sample_project.json");
    let p = Project::load(&path).unwrap();
    assert_eq!(p.specimens().len(), 10);
    assert_eq!(
        p.specimens().iter().filter(|s| s.trials.len() == 2).count(),
        4
    );
    let out = ok(&["project", "check", path.to_str().unwrap()], &root());
    assert_eq!(
        out.lines().filter(|l| l.contains(" ok ")).count(),
        10,
        "{out}"
    );
    let dir = tempfile::tempdir().unwrap();
    let csv = dir.path().join("m.csv");
    ok(
        &[
            "measure",
            path.to_str().unwrap(),
            "-o",
            csv.to_str().unwrap(),
        ],
        &root(),
    );
    assert!(
        std::fs::read(&csv).unwrap()
            == std::fs::read(samples().join("sample_project_measurements.csv")).unwrap(),
        "sample_volumes/sample_project_measurements.csv is stale: run scripts/make_sample_project.sh"
    );
    let mut picked = 0;
    for s in p.specimens() {
        let (t, _) = truth(&s.id);
        for trial in &s.trials {
            for e in &trial.landmarks {
                let Some(pos) = e.position_mm else { continue };
                let want = t.iter().find(|(n, _)| *n == e.id).unwrap().1;
                assert!(
                    dist(pos, want) < 0.036,
                    "{} {} {}: {} mm off",
                    s.id,
                    trial.id,
                    e.id,
                    dist(pos, want)
                );
                picked += usize::from(e.pick.is_some());
            }
        }
    }
    assert_eq!(picked, 167, "surface landmarks picked along rays");
}

/// A project file of format version 1 still opens from the command line.
#[test]
fn a_version_1_project_opens() {
    let fixture = root().join("tests/fixtures/project_v1.json");
    let out = ok(
        &["project", "check", fixture.to_str().unwrap(), "--full"],
        &root(),
    );
    assert_eq!(
        out.lines().filter(|l| l.contains(" ok ")).count(),
        2,
        "{out}"
    );
    let out = ok(&["measure", fixture.to_str().unwrap()], &root());
    assert!(out.contains("skipped: occipital_condyle missing"), "{out}");
    assert!(out.contains("dorsal_outline_length"), "{out}");
}

/// `superimpose --slide-curves` on the sample project: the dorsal midline's semilandmarks join
/// the analysis and are slid (the summary says so); a bare landmark table has no curves and is
/// refused with a reason.
#[test]
fn superimpose_slides_the_project_curves_semilandmarks() {
    let path = samples().join("sample_project.json");
    let dir = tempfile::tempdir().unwrap();
    let p = path.to_str().unwrap();
    ok(
        &[
            "superimpose",
            p,
            "-o",
            "slid",
            "--resamples",
            "20",
            "--slide-curves",
            "bending-energy",
        ],
        dir.path(),
    );
    let summary: serde_json::Value =
        serde_json::from_slice(&std::fs::read(dir.path().join("slid/summary.json")).unwrap())
            .unwrap();
    assert_eq!(summary["landmarks"], 17 + 8, "{summary}");
    assert_eq!(summary["sliding"]["semilandmarks"], 8, "{summary}");
    assert_eq!(summary["sliding"]["criterion"], "BendingEnergy");
    let rows = csv_rows(&dir.path().join("slid/aligned_long.csv"));
    let semis: std::collections::BTreeSet<&str> = rows
        .iter()
        .map(|r| r["landmark"].as_str())
        .filter(|l| l.starts_with("dorsal_midline_s"))
        .collect();
    assert_eq!(semis.len(), 8, "{semis:?}");
    // without the flag the curves stay out
    ok(
        &["superimpose", p, "-o", "plain", "--resamples", "20"],
        dir.path(),
    );
    let plain: serde_json::Value =
        serde_json::from_slice(&std::fs::read(dir.path().join("plain/summary.json")).unwrap())
            .unwrap();
    assert_eq!(plain["landmarks"], 17);
    assert!(plain["sliding"].is_null());
    let csv = dir.path().join("plain/aligned_long.csv");
    let e = fails(
        &[
            "superimpose",
            csv.to_str().unwrap(),
            "-o",
            "x",
            "--slide-curves",
            "bending-energy",
        ],
        dir.path(),
    );
    assert!(e.contains("needs a project"), "{e}");
}
