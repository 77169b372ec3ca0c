//! Tests of the project document: edits and their inverses, the file's exact round trip,
//! interrupted saves, versions.

use super::*;
use crate::geometry::Affine3;
use crate::landmarks::fingerprint::Fingerprint;
use proptest::prelude::*;
use std::io::Write;

pub const SCHEME: &str = r#"format_version = 1
id = "test-scheme"

[[landmark]]
id = "tip"
type = "II"

[[landmark]]
id = "eye_L"
type = "I"
partner = "eye_R"

[[landmark]]
id = "eye_R"
type = "I"
partner = "eye_L"

[[landmark]]
id = "back"
type = "III"

[[curve]]
id = "outline"
anchors = ["tip", "eye_L", "back"]
semilandmarks = [3, 2]

[[measurement]]
id = "length"
distance = ["tip", "back"]
"#;

pub fn scan(path: &str) -> ScanRecord {
    ScanRecord {
        path: path.to_owned(),
        voxel_size_mm: [0.036, 0.036, 0.05],
        voxel_size_source: VoxelSizeSource::User,
        world_from_voxel: Affine3::from_spacing([0.036, 0.036, 0.05]),
        fingerprint: Fingerprint {
            files: 1,
            bytes: 1234,
            head_sha256: "ab".repeat(32),
            dims: [100, 80, 40],
            dtype: "u16".into(),
            voxels_sha256: "cd".repeat(32),
        },
    }
}

pub fn ts(s: u32) -> Timestamp {
    Timestamp::parse(&format!("2025-03-01T10:{:02}:{:02}Z", s / 60 % 60, s % 60)).unwrap()
}

pub fn specimen(id: &str) -> Specimen {
    Specimen {
        id: id.to_owned(),
        groups: [("locality".to_owned(), "north pit".to_owned())].into(),
        scan: scan(&format!("scans/{id}.nii.gz")),
        trials: Vec::new(),
    }
}

/// A project with specimen A (trial 1 with three landmarks and a curve) and B (no trials).
pub fn sample_project() -> Project {
    let mut p = Project::new(SCHEME.to_owned(), "lab/scheme.toml".to_owned()).unwrap();
    for id in ["A", "B"] {
        Edit::AddSpecimen {
            specimen: Box::new(specimen(id)),
            index: None,
        }
        .apply(&mut p)
        .unwrap();
    }
    Edit::AddTrial {
        specimen: "A".into(),
        trial: Box::new(Trial::new("1", "ana", ts(0))),
        index: None,
    }
    .apply(&mut p)
    .unwrap();
    let set = |lm: &str, pos: [f64; 3], s: u32| Edit::SetLandmark {
        specimen: "A".into(),
        trial: "1".into(),
        landmark: lm.into(),
        position_mm: pos,
        method: Method::Surface,
        pick: None,
        at: ts(s),
    };
    set("back", [0.1, 0.2, 0.3], 1).apply(&mut p).unwrap();
    set("tip", [3.0, 0.2, 0.3], 2).apply(&mut p).unwrap();
    set("eye_L", [2.0, 0.9, 0.7], 3).apply(&mut p).unwrap();
    Edit::SetCurve {
        specimen: "A".into(),
        trial: "1".into(),
        curve: "outline".into(),
        traced_mm: vec![
            vec![[2.5, 0.5, 0.9]],
            vec![[1.0, 0.8, 0.9], [0.5, 0.5, 0.6]],
        ],
        at: ts(4),
    }
    .apply(&mut p)
    .unwrap();
    p
}

#[test]
fn landmarks_stay_in_scheme_order_and_curves_follow_their_anchors() {
    let p = sample_project();
    let t = p.specimen("A").unwrap().trial("1").unwrap();
    let ids: Vec<&str> = t.landmarks.iter().map(|l| l.id.as_str()).collect();
    assert_eq!(ids, ["tip", "eye_L", "back"]);
    let c = t.curve("outline").unwrap();
    assert_eq!(c.semilandmarks_mm[0].len(), 3);
    assert_eq!(c.semilandmarks_mm[1].len(), 2);
    // first segment: tip (3,.2,.3) → (2.5,.5,.9) → eye_L (2,.9,.7), 3 points at equal arc length
    let poly = [[3.0, 0.2, 0.3], [2.5, 0.5, 0.9], [2.0, 0.9, 0.7]];
    assert_eq!(
        c.semilandmarks_mm[0],
        crate::landmarks::curve::resample_interior(&poly, 3).unwrap()
    );
    let prog = p.progress("A", "1").unwrap();
    assert_eq!(
        (prog.placed, prog.landmarks_total, prog.curves_done),
        (3, 4, 1)
    );
    assert!(!prog.is_complete());

    // moving an anchor recomputes the curve; marking it missing empties the segments it ends
    let mut q = p.clone();
    Edit::SetLandmark {
        specimen: "A".into(),
        trial: "1".into(),
        landmark: "eye_L".into(),
        position_mm: [2.0, 1.0, 0.7],
        method: Method::Slice,
        pick: None,
        at: ts(5),
    }
    .apply(&mut q)
    .unwrap();
    let c2 = q
        .specimen("A")
        .unwrap()
        .trial("1")
        .unwrap()
        .curve("outline")
        .unwrap();
    assert_ne!(c2.semilandmarks_mm[0], c.semilandmarks_mm[0]);
    Edit::MarkMissing {
        specimen: "A".into(),
        trial: "1".into(),
        landmark: "eye_L".into(),
        at: ts(6),
    }
    .apply(&mut q)
    .unwrap();
    let t = q.specimen("A").unwrap().trial("1").unwrap();
    assert!(
        t.curve("outline")
            .unwrap()
            .semilandmarks_mm
            .iter()
            .all(Vec::is_empty)
    );
    assert_eq!(t.position("eye_L"), None);
    assert_eq!(q.progress("A", "1").unwrap().curves_done, 0);
}

#[test]
fn edits_refuse_bad_input_and_leave_the_project_alone() {
    let p = sample_project();
    let bad = [
        Edit::AddSpecimen {
            specimen: Box::new(specimen("A")),
            index: None,
        },
        Edit::AddSpecimen {
            specimen: Box::new(specimen("bad id")),
            index: None,
        },
        Edit::AddSpecimen {
            specimen: Box::new(specimen("C")),
            index: Some(9),
        },
        Edit::RemoveSpecimen {
            specimen: "Z".into(),
        },
        Edit::SetGroup {
            specimen: "A".into(),
            key: "a key".into(),
            value: None,
        },
        Edit::SetLandmark {
            specimen: "A".into(),
            trial: "1".into(),
            landmark: "nose".into(),
            position_mm: [0.0; 3],
            method: Method::Typed,
            pick: None,
            at: ts(9),
        },
        Edit::SetLandmark {
            specimen: "A".into(),
            trial: "1".into(),
            landmark: "tip".into(),
            position_mm: [f64::NAN, 0.0, 0.0],
            method: Method::Typed,
            pick: None,
            at: ts(9),
        },
        Edit::SetLandmark {
            specimen: "A".into(),
            trial: "7".into(),
            landmark: "tip".into(),
            position_mm: [0.0; 3],
            method: Method::Typed,
            pick: None,
            at: ts(9),
        },
        Edit::ClearLandmark {
            specimen: "A".into(),
            trial: "1".into(),
            landmark: "eye_R".into(),
        },
        Edit::SetNote {
            specimen: "A".into(),
            trial: "1".into(),
            landmark: "eye_R".into(),
            note: Some("x".into()),
        },
        Edit::SetCurve {
            specimen: "A".into(),
            trial: "1".into(),
            curve: "outline".into(),
            traced_mm: vec![vec![]],
            at: ts(9),
        },
        Edit::ClearCurve {
            specimen: "B".into(),
            trial: "1".into(),
            curve: "outline".into(),
        },
        Edit::AddTrial {
            specimen: "A".into(),
            trial: Box::new(Trial::new("1", "bo", ts(9))),
            index: None,
        },
    ];
    for e in bad {
        let mut q = p.clone();
        let d = e.describe();
        let err = e.apply(&mut q).expect_err(&d);
        assert_eq!(q, p, "{d}: {err}");
    }
}

#[allow(clippy::too_many_lines, reason = "one arm per variant")]
/// A strategy over every variant, with ids drawn from small pools that include unknown ones.
fn arb_edit() -> impl Strategy<Value = Edit> {
    let spec = || prop::sample::select(vec!["A", "B", "C"]).prop_map(str::to_owned);
    let trial = || prop::sample::select(vec!["1", "2"]).prop_map(str::to_owned);
    let lm = || {
        prop::sample::select(vec!["tip", "eye_L", "eye_R", "back", "nose"]).prop_map(str::to_owned)
    };
    let pos = || prop::array::uniform3(-5.0f64..5.0);
    let at = || (0u32..3600).prop_map(ts);
    let method = || {
        prop::sample::select(vec![
            Method::Slice,
            Method::Surface,
            Method::Typed,
            Method::Estimated,
        ])
    };
    let traced = || prop::collection::vec(prop::collection::vec(pos(), 0..3), 1..3);
    let pick = || {
        (
            pos(),
            pos(),
            1000.0f64..30000.0,
            any::<bool>(),
            any::<bool>(),
        )
            .prop_map(
                |(origin_mm, direction, threshold, refined, exit)| PickRecord {
                    origin_mm,
                    direction,
                    threshold,
                    refined,
                    crossing: if exit {
                        PickCrossing::Exit
                    } else {
                        PickCrossing::Entry
                    },
                },
            )
    };
    prop_oneof![
        (spec(), prop::option::of(0usize..4)).prop_map(|(s, index)| Edit::AddSpecimen {
            specimen: Box::new(specimen(&s)),
            index
        }),
        spec().prop_map(|specimen| Edit::RemoveSpecimen { specimen }),
        (
            spec(),
            prop::sample::select(vec!["locality", "horizon"]),
            prop::option::of("[a-z ]{0,6}")
        )
            .prop_map(|(specimen, key, value)| Edit::SetGroup {
                specimen,
                key: key.to_owned(),
                value
            }),
        (spec(), "[a-z]{1,5}").prop_map(|(specimen, name)| Edit::SetScan {
            specimen,
            scan: Box::new(scan(&format!("moved/{name}.nii")))
        }),
        (spec(), trial(), prop::option::of(0usize..3), at()).prop_map(
            |(specimen, t, index, at)| {
                Edit::AddTrial {
                    specimen,
                    trial: Box::new(Trial::new(&t, "op", at)),
                    index,
                }
            }
        ),
        (spec(), trial()).prop_map(|(specimen, trial)| Edit::RemoveTrial { specimen, trial }),
        (
            spec(),
            trial(),
            lm(),
            pos(),
            method(),
            prop::option::of(pick()),
            at()
        )
            .prop_map(
                |(specimen, trial, landmark, position_mm, method, pick, at)| Edit::SetLandmark {
                    specimen,
                    trial,
                    landmark,
                    position_mm,
                    method,
                    pick,
                    at
                }
            ),
        (spec(), trial(), lm(), at()).prop_map(|(specimen, trial, landmark, at)| {
            Edit::MarkMissing {
                specimen,
                trial,
                landmark,
                at,
            }
        }),
        (spec(), trial(), lm()).prop_map(|(specimen, trial, landmark)| Edit::ClearLandmark {
            specimen,
            trial,
            landmark
        }),
        (spec(), trial(), lm(), prop::option::of("[a-z ]{0,8}")).prop_map(
            |(specimen, trial, landmark, note)| Edit::SetNote {
                specimen,
                trial,
                landmark,
                note
            }
        ),
        (
            spec(),
            trial(),
            prop::sample::select(vec!["outline", "rim"]),
            traced(),
            at()
        )
            .prop_map(|(specimen, trial, curve, traced_mm, at)| Edit::SetCurve {
                specimen,
                trial,
                curve: curve.to_owned(),
                traced_mm,
                at
            }),
        (spec(), trial()).prop_map(|(specimen, trial)| Edit::ClearCurve {
            specimen,
            trial,
            curve: "outline".into()
        }),
        (spec(), trial(), at()).prop_map(|(specimen, t, at)| Edit::RestoreTrial {
            specimen,
            trial: Box::new(Trial::new(&t, "restorer", at)),
        }),
    ]
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(200))]

    /// For every variant: applying an edit then its inverse gives back the document exactly
    /// (equal, and the same bytes on save); applying the inverse's inverse redoes it; a refused
    /// edit changes nothing; the document stays valid throughout.
    #[test]
    fn every_edit_is_undone_exactly(edits in prop::collection::vec(arb_edit(), 1..25)) {
        let mut p = sample_project();
        for e in edits {
            let before = p.clone();
            let d = e.describe();
            match e.apply(&mut p) {
                Ok(inverse) => {
                    let after = p.clone();
                    prop_assert!(p.validate().is_ok(), "{}: {:?}", d, p.validate());
                    let redo = inverse.apply(&mut p).expect("an inverse applies");
                    prop_assert!(p == before, "undo of {} differs", d);
                    prop_assert_eq!(p.to_bytes(), before.to_bytes());
                    redo.apply(&mut p).expect("a redo applies");
                    prop_assert!(p == after, "redo of {} differs", d);
                }
                Err(_) => prop_assert!(p == before, "refused {} changed the project", d),
            }
        }
        let bytes = p.to_bytes();
        let back = Project::from_slice(&bytes, Path::new("mem.json")).unwrap();
        prop_assert!(back == p);
        prop_assert_eq!(back.to_bytes(), bytes);
    }

    /// Any finite f64 survives the file exactly.
    #[test]
    fn floats_round_trip_exactly(x in prop::num::f64::NORMAL | prop::num::f64::SUBNORMAL | prop::num::f64::ZERO, y in -1e3f64..1e3, z in any::<u64>()) {
        let z = f64::from_bits(z);
        prop_assume!(z.is_finite());
        let mut p = sample_project();
        let pos = [x, y, z];
        Edit::SetLandmark {
            specimen: "A".into(), trial: "1".into(), landmark: "eye_R".into(),
            position_mm: pos, method: Method::Surface, at: ts(7),
            pick: Some(PickRecord { origin_mm: [z, x, y], direction: [y, z, x], threshold: x, refined: true, crossing: PickCrossing::Entry }),
        }.apply(&mut p).unwrap();
        let back = Project::from_slice(&p.to_bytes(), Path::new("mem.json")).unwrap();
        let t = back.specimen("A").unwrap().trial("1").unwrap();
        let got = t.position("eye_R").unwrap();
        prop_assert_eq!(got.map(f64::to_bits), pos.map(f64::to_bits));
        let pk = t.landmark("eye_R").unwrap().pick.unwrap();
        prop_assert_eq!((pk.origin_mm.map(f64::to_bits), pk.threshold.to_bits()), ([z, x, y].map(f64::to_bits), x.to_bits()));
    }
}

#[test]
fn file_round_trips_byte_identically_and_reads_well() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("p.json");
    let p = sample_project();
    p.save(&path).unwrap();
    let first = std::fs::read(&path).unwrap();
    let q = Project::load(&path).unwrap();
    assert_eq!(q, p);
    q.save(&path).unwrap();
    assert_eq!(
        std::fs::read(&path).unwrap(),
        first,
        "load → save gives the same bytes"
    );
    assert_eq!(
        std::fs::read(backup_path(&path)).unwrap(),
        first,
        "backup of the first save"
    );
    let text = String::from_utf8(first).unwrap();
    assert!(text.starts_with("{\n  \"format\": \"sutura-project\",\n  \"format_version\": 2,"));
    assert!(text.contains("\"position_mm\": [3.0, 0.2, 0.3],"), "{text}");
    assert!(text.contains("\"world_from_voxel\": [\n"), "{text}");
    assert!(text.contains("[0.036, 0.0, 0.0, 0.0],"), "{text}");
    assert!(text.contains("\"trials\": []"), "{text}");
    assert!(text.ends_with("}\n"));
}

/// A writer that fails once `limit` bytes have gone through.
struct FailAfter<'a> {
    inner: &'a mut dyn Write,
    left: usize,
}

impl Write for FailAfter<'_> {
    fn write(&mut self, buf: &[u8]) -> std::io::Result<usize> {
        if self.left == 0 {
            return Err(std::io::Error::other("simulated failure"));
        }
        let n = buf.len().min(self.left);
        self.left -= n;
        self.inner.write(&buf[..n])
    }

    fn flush(&mut self) -> std::io::Result<()> {
        self.inner.flush()
    }
}

#[test]
fn a_save_failing_at_any_byte_leaves_the_previous_file_intact() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("p.json");
    let old = sample_project();
    old.save(&path).unwrap();
    old.save(&path).unwrap(); // a backup exists too
    let old_bytes = std::fs::read(&path).unwrap();
    let mut new = old.clone();
    Edit::SetGroup {
        specimen: "B".into(),
        key: "horizon".into(),
        value: Some("upper".into()),
    }
    .apply(&mut new)
    .unwrap();
    let new_len = new.to_bytes().len();
    // the same call that `Project::save` makes, with the failing writer in between
    for limit in 0..new_len {
        let r = crate::export::write_atomic_keeping_backup(&path, &backup_path(&path), |w| {
            new.write_to(&mut FailAfter {
                inner: w,
                left: limit,
            })
        });
        assert!(r.is_err(), "limit {limit}");
        assert_eq!(std::fs::read(&path).unwrap(), old_bytes, "limit {limit}");
        assert_eq!(std::fs::read(backup_path(&path)).unwrap(), old_bytes);
    }
    assert_eq!(
        std::fs::read_dir(dir.path()).unwrap().count(),
        2,
        "no temp files left"
    );
    new.save(&path).unwrap();
    assert_eq!(Project::load(&path).unwrap(), new);
    assert_eq!(std::fs::read(backup_path(&path)).unwrap(), old_bytes);
}

#[test]
fn newer_versions_are_refused_and_bad_files_named() {
    let p = sample_project();
    let text = String::from_utf8(p.to_bytes()).unwrap();
    let at = Path::new("x.json");
    // a UTF-8 byte-order mark (as some editors write) is accepted, as in a scheme file
    let with_bom = format!("\u{feff}{text}");
    assert_eq!(Project::from_slice(with_bom.as_bytes(), at).unwrap(), p);
    let newer = text.replace("\"format_version\": 2,", "\"format_version\": 3,");
    let e = Project::from_slice(newer.as_bytes(), at)
        .unwrap_err()
        .to_string();
    assert!(
        e.contains("x.json") && e.contains("newer Sutura") && e.contains("format_version 3"),
        "{e}"
    );

    let cases = [
        (
            text.replace("sutura-project", "other"),
            "not a Sutura project",
        ),
        (
            text.replace("\"format_version\": 2,", "\"format_version\": 0,"),
            "no valid format_version",
        ),
        ("{".to_owned(), "not a readable JSON"),
        (
            text.replace("\"operator\"", "\"operatr\""),
            "unknown field `operatr`",
        ),
        (
            text.replacen("\"id\": \"B\"", "\"id\": \"A\"", 1),
            "specimen 'A' appears twice",
        ),
        (
            text.replace("\"id\": \"eye_L\"", "\"id\": \"nose\""),
            "'nose' is not a landmark",
        ),
        (
            text.replace("\"state\": \"placed\"", "\"state\": \"missing\""),
            "landmark 'tip': is marked missing but has a position",
        ),
        (
            text.replacen("\"state\": \"placed\"", "\"state\": \"estimated\"", 1),
            "is marked estimated but its method is",
        ),
        (
            text.replace("2025-03-01T10:00:01Z", "2025-03-01T11:00:01+01:00"),
            "not a UTC time",
        ),
        (
            text.replace(
                "format_version = 1\\nid = \\\"test-scheme\\\"",
                "format_version = 1\\nid = \\\"changed\\\"",
            ),
            "does not match its recorded SHA-256",
        ),
    ];
    for (bad, want) in cases {
        assert_ne!(bad, text, "{want}: the replacement did not apply");
        let e = Project::from_slice(bad.as_bytes(), at)
            .unwrap_err()
            .to_string();
        assert!(e.starts_with("x.json: ") && e.contains(want), "{want}: {e}");
    }
}

#[test]
fn autosave_newer_than_the_project_is_reported() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("p.json");
    assert_eq!(autosave_status(&path).unwrap(), AutosaveStatus::None);
    let p = sample_project();
    p.save(&path).unwrap();
    p.save_autosave(&path).unwrap();
    assert_eq!(
        autosave_status(&path).unwrap(),
        AutosaveStatus::Stale,
        "same document"
    );
    let mut q = p.clone();
    Edit::RemoveSpecimen {
        specimen: "B".into(),
    }
    .apply(&mut q)
    .unwrap();
    q.save_autosave(&path).unwrap();
    assert!(matches!(
        autosave_status(&path).unwrap(),
        AutosaveStatus::Newer { .. }
    ));
    assert_eq!(Project::load(&autosave_path(&path)).unwrap(), q);
    // saving the project afterwards makes the autosave stale
    std::thread::sleep(std::time::Duration::from_millis(20));
    q.save(&path).unwrap();
    assert_eq!(autosave_status(&path).unwrap(), AutosaveStatus::Stale);
}

#[test]
fn timestamps_are_utc_rfc3339() {
    assert_eq!(
        Timestamp::parse("2025-03-01T11:02:03+01:00")
            .unwrap()
            .as_str(),
        "2025-03-01T10:02:03Z"
    );
    assert!(Timestamp::parse("yesterday").is_err());
    let now = Timestamp::now();
    assert!(
        now.as_str().ends_with('Z') && now.as_str().len() == 20,
        "{now}"
    );
}

#[test]
fn relative_paths() {
    let dir = tempfile::tempdir().unwrap();
    let a = dir.path().join("proj");
    let b = dir.path().join("scans/x");
    std::fs::create_dir_all(&a).unwrap();
    std::fs::create_dir_all(&b).unwrap();
    std::fs::write(b.join("s.nii"), b"").unwrap();
    assert_eq!(
        relative_path(&a, &b.join("s.nii")).unwrap(),
        "../scans/x/s.nii"
    );
    assert_eq!(relative_path(dir.path(), &b).unwrap(), "scans/x");
    let rec = scan("../scans/x/s.nii");
    assert_eq!(
        std::fs::canonicalize(rec.resolve(&a.join("p.json"))).unwrap(),
        std::fs::canonicalize(b.join("s.nii")).unwrap()
    );
    assert!(rec.contains([0.0, 0.0, 0.0]) && !rec.contains([-0.1, 0.0, 0.0]));
    let v = rec.voxel_from_world_point([0.072, 0.036, 0.1]);
    assert!(
        (0..3).all(|a| (v[a] - [2.0, 1.0, 2.0][a]).abs() < 1e-12),
        "{v:?}"
    );
}

#[test]
fn a_second_writer_is_turned_away() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("p.json");
    let first = ProjectLock::acquire(&path).unwrap();
    let e = ProjectLock::acquire(&path).unwrap_err().to_string();
    assert!(
        e.contains("another program is changing this project"),
        "{e}"
    );
    drop(first);
    ProjectLock::acquire(&path).unwrap();
}

/// The fixture was written by the command line at format version 1 (commit "tests: a project
/// file in format version 1"): it reads, and saves as version 2 with nothing else changed.
#[test]
fn version_1_files_are_upgraded() {
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("../../tests/fixtures/project_v1.json");
    let text = std::fs::read_to_string(&path).unwrap();
    assert!(text.contains("\"format_version\": 1,"));
    let p = Project::load(&path).unwrap();
    let s = p.specimen("HDC-002").unwrap();
    assert_eq!(s.groups["locality"], "Harrowdene Clay pit, lower lens");
    assert_eq!(s.trials.len(), 2);
    let t = &s.trials[0];
    assert_eq!(t.operator, "A. Reyes");
    assert_eq!(
        t.landmark("occipital_condyle").unwrap().state,
        LandmarkState::Missing
    );
    assert_eq!(
        t.landmark("crest_top").unwrap().note.as_deref(),
        Some("crest worn; top taken at the highest remaining point")
    );
    assert_eq!(
        t.landmark("endocranium_centre").unwrap().state,
        LandmarkState::Estimated
    );
    assert!(t.landmarks.iter().all(|l| l.pick.is_none()));
    assert_eq!(
        t.curve("dorsal_midline").unwrap().semilandmarks_mm[0].len(),
        8
    );
    let h1 = p.specimen("HDC-001").unwrap();
    assert_eq!(h1.scan.voxel_size_source, VoxelSizeSource::User);
    assert_eq!(
        h1.scan.voxel_size_mm.map(f64::to_bits),
        [0.036f64, 0.036, 0.05].map(f64::to_bits)
    );
    let upgraded = text.replacen("\"format_version\": 1,", "\"format_version\": 2,", 1);
    assert_eq!(String::from_utf8(p.to_bytes()).unwrap(), upgraded);
    // a version 1 file cannot hold a pick record
    let bad = text.replacen(
        "\"method\": \"surface\",",
        "\"method\": \"surface\",\n              \"pick\": null,",
        1,
    );
    assert_ne!(bad, text);
    let e = Project::from_slice(bad.as_bytes(), &path)
        .unwrap_err()
        .to_string();
    assert!(e.contains("upgrading from format_version 1 to 2"), "{e}");
}

/// Temporary files of saves that were killed (their process gone) are removed when the project
/// is next opened or saved; the project, its backup and a live writer's file stay.
#[test]
fn stale_temporary_files_go_on_the_next_load_and_save() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("p.json");
    let p = sample_project();
    p.save(&path).unwrap();
    p.save(&path).unwrap();
    // PIDs on Linux stay below 2^22: these writers are gone
    let stale = [
        ".p.json.tmp-999999991",
        ".p.json.bak.tmp-999999992",
        ".p.json.autosave.tmp-999999993",
    ];
    let mine = format!(".p.json.tmp-{}", std::process::id());
    for n in stale.iter().copied().chain([mine.as_str()]) {
        std::fs::write(dir.path().join(n), "half a save").unwrap();
    }
    Project::load(&path).unwrap();
    for n in stale {
        assert!(!dir.path().join(n).exists(), "{n} removed on load");
    }
    assert!(
        dir.path().join(&mine).exists(),
        "a live writer's file stays"
    );
    std::fs::write(dir.path().join(stale[0]), "again").unwrap();
    p.save(&path).unwrap();
    assert!(!dir.path().join(stale[0]).exists(), "removed on save");
    assert_eq!(Project::load(&path).unwrap(), p);
    assert!(backup_path(&path).exists());
}
