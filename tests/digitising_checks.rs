//! The digitising checks on the bundled sample project: the clean project raises no flag; a
//! swapped bilateral pair and a landmark moved by 1 mm are flagged, each with its reason, and
//! nothing else changes.

mod common;

use sutura_core::analysis::checks::{FlagKind, check_project, check_trial};
use sutura_core::landmarks::Project;
use sutura_core::landmarks::project::{Edit, Method, Timestamp};

fn sample() -> Project {
    Project::load(&common::root().join("sample_volumes/sample_project.json")).unwrap()
}

fn set(p: &mut Project, specimen: &str, landmark: &str, position_mm: [f64; 3]) {
    Edit::SetLandmark {
        specimen: specimen.into(),
        trial: "1".into(),
        landmark: landmark.into(),
        position_mm,
        method: Method::Typed,
        pick: None,
        at: Timestamp::parse("2026-01-01T00:00:00Z").unwrap(),
    }
    .apply(p)
    .unwrap();
}

#[test]
fn clean_sample_raises_no_flag() {
    let checks = check_project(&sample());
    assert!(checks.len() >= 10);
    for c in &checks {
        assert!(c.not_checked.is_none(), "{c:?}");
        assert!(
            c.flags.is_empty(),
            "{}/{}: {:?}",
            c.specimen,
            c.trial,
            c.flags
        );
    }
}

#[test]
fn swapped_pair_is_flagged() {
    let mut p = sample();
    let t = p.specimen("HDC-003").unwrap().trial("1").unwrap().clone();
    let (l, r) = (
        t.position("orbit_anterior_L").unwrap(),
        t.position("orbit_anterior_R").unwrap(),
    );
    set(&mut p, "HDC-003", "orbit_anterior_L", r);
    set(&mut p, "HDC-003", "orbit_anterior_R", l);
    let before = p.clone();
    let c = check_trial(&p, "HDC-003", "1");
    assert!(p == before, "checks never change data");
    let swaps: Vec<_> = c
        .flags
        .iter()
        .filter(|f| f.kind == FlagKind::SwappedPair)
        .collect();
    assert_eq!(swaps.len(), 1, "{:?}", c.flags);
    assert_eq!(swaps[0].items, ["orbit_anterior_L", "orbit_anterior_R"]);
    assert!(
        swaps[0].reason.contains("look swapped"),
        "{}",
        swaps[0].reason
    );
    // the swapped points are explained by the swap, not flagged again as outliers
    assert!(
        c.flags.iter().all(|f| f.kind != FlagKind::OutlyingLandmark),
        "{:?}",
        c.flags
    );
}

#[test]
fn point_moved_by_one_millimetre_is_flagged() {
    for (specimen, landmark, shift) in [
        ("TF-003", "crest_top", [0.0, 0.0, 1.0]),
        ("HDC-002", "jaw_joint_L", [1.0, 0.0, 0.0]),
        ("TF-001", "orbit_centre_R", [0.0, -1.0, 0.0]),
    ] {
        let mut p = sample();
        let at = p
            .specimen(specimen)
            .unwrap()
            .trial("1")
            .unwrap()
            .position(landmark)
            .unwrap();
        set(
            &mut p,
            specimen,
            landmark,
            [at[0] + shift[0], at[1] + shift[1], at[2] + shift[2]],
        );
        let c = check_trial(&p, specimen, "1");
        let hit = c
            .flags
            .iter()
            .any(|f| f.kind == FlagKind::OutlyingLandmark && f.items == [landmark]);
        assert!(hit, "{specimen} {landmark}: {:?}", c.flags);
        for f in &c.flags {
            assert!(
                f.kind == FlagKind::OutlyingMeasurement || f.items == [landmark],
                "{specimen}: only the moved landmark (and measurements using it): {f:?}"
            );
        }
    }
}

/// `sutura project check` prints the flags, and they do not change its exit code.
#[test]
fn project_check_prints_flags() {
    let dir = tempfile::tempdir().unwrap();
    let src = common::root().join("sample_volumes");
    // the project names its scans relative to itself: link them beside the edited copy
    for e in std::fs::read_dir(&src).unwrap() {
        let e = e.unwrap();
        let name = e.file_name().to_string_lossy().into_owned();
        if name.ends_with(".nii.gz") || name.ends_with("_slices") {
            std::os::unix::fs::symlink(e.path(), dir.path().join(&name)).unwrap();
        }
    }
    let mut p = sample();
    let at = p
        .specimen("TF-003")
        .unwrap()
        .trial("1")
        .unwrap()
        .position("crest_top")
        .unwrap();
    set(&mut p, "TF-003", "crest_top", [at[0], at[1], at[2] + 1.0]);
    let path = dir.path().join("moved.json");
    p.save(&path).unwrap();
    let (ok, out, err) =
        common::run_sutura(&["project", "check", path.to_str().unwrap()], dir.path());
    assert!(ok, "{err}");
    // the point, and the two measurements that use it
    assert!(out.contains("digitising checks: 3 flag(s)"), "{out}");
    assert!(
        out.contains("TF-003           trial 1    crest_top lies"),
        "{out}"
    );
    assert!(
        out.contains("crest_height = ") && out.contains("profile_angle = "),
        "{out}"
    );
}
