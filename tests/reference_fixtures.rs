//! The committed answers of the Python reference libraries (`tests/fixtures/reference`, see
//! `tests/common`): each one is whole and was made by the script that is there now, and the
//! comparison that decides drift tolerates the last bits of a number and nothing more.

mod common;

use serde_json::{Value, json};
use sutura_core::landmarks::scheme::sha256_hex;

#[test]
fn every_fixture_is_whole_and_made_by_its_current_script() {
    let dir = common::root().join("tests/fixtures/reference");
    let mut names = Vec::new();
    for e in std::fs::read_dir(&dir).unwrap() {
        let p = e.unwrap().path();
        let name = p.file_name().unwrap().to_string_lossy().into_owned();
        assert!(
            std::path::Path::new(&name)
                .extension()
                .is_some_and(|e| e == "json"),
            "{name}: only fixtures (.json) belong in {}",
            dir.display()
        );
        let v: Value = serde_json::from_slice(&std::fs::read(&p).unwrap())
            .unwrap_or_else(|e| panic!("{name}: {e}"));
        for key in [
            "script",
            "script_sha256",
            "args",
            "inputs",
            "versions",
            "output",
        ] {
            assert!(v.get(key).is_some(), "{name}: no {key}");
        }
        let script = common::root()
            .join("tests/python")
            .join(v["script"].as_str().unwrap());
        let bytes = std::fs::read(&script)
            .unwrap_or_else(|e| panic!("{name}: its script {}: {e}", script.display()));
        assert_eq!(
            v["script_sha256"].as_str().unwrap(),
            sha256_hex(&bytes),
            "{name}: {} changed since the fixture was made: run scripts/refresh_references.sh",
            script.display()
        );
        // the pinned versions it was made with
        assert!(v["versions"]["numpy"].is_string(), "{name}: versions");
        names.push(name);
    }
    assert!(
        names.len() >= 20,
        "only {} fixtures: {names:?}",
        names.len()
    );
}

#[test]
fn comparison_tolerates_the_last_bits_only() {
    let mut d = Vec::new();
    common::compare(
        &json!({"a": [1.0, "x", null], "b": 2}),
        &json!({"a": [1.0 + 1e-13, "x", null], "b": 2}),
        "o",
        common::OUTPUT_TOLERANCE,
        &mut d,
    );
    assert!(d.is_empty(), "{d:?}");
    common::compare(
        &json!({"a": [1.0, "x"], "c": 1}),
        &json!({"a": [1.001, "y"], "b": 2}),
        "o",
        common::OUTPUT_TOLERANCE,
        &mut d,
    );
    assert_eq!(d.len(), 4, "{d:?}");
    // JSON arguments compare as JSON: a last-bit change passes, a real one does not
    d.clear();
    common::compare(
        &json!(["[0.1, 0.2]"]),
        &json!(["[0.1, 0.20000000000000004]"]),
        "args",
        common::ARGUMENT_TOLERANCE,
        &mut d,
    );
    assert!(d.is_empty(), "{d:?}");
    common::compare(
        &json!(["[0.1, 0.2]"]),
        &json!(["[0.1, 0.2001]"]),
        "args",
        common::ARGUMENT_TOLERANCE,
        &mut d,
    );
    assert_eq!(d.len(), 1, "{d:?}");
}
