//! The command line on the bundled comparative sample (`sample_volumes/comparative`): the
//! sample is current, and the walk-through's commands write their tables and figures, with the
//! early-burst data classified early burst.

mod common;

use std::path::Path;

fn comparative() -> std::path::PathBuf {
    common::root().join("sample_volumes/comparative")
}

fn run(args: &[&str], cwd: &Path) -> String {
    let (ok, out, err) = common::run_sutura(args, cwd);
    assert!(ok, "sutura {}: {err}", args.join(" "));
    out + &err
}

/// `sutura sample --comparative` writes exactly the bundled files.
#[test]
fn bundled_comparative_sample_is_current() {
    let dir = tempfile::tempdir().unwrap();
    run(&["sample", "--comparative", "-o", "fresh"], dir.path());
    for name in ["tree.nwk", "landmarks.csv", "specimens.csv", "model.json"] {
        assert!(
            std::fs::read(dir.path().join("fresh").join(name)).unwrap()
                == std::fs::read(comparative().join(name)).unwrap(),
            "sample_volumes/comparative/{name} is stale: run `sutura sample --comparative -o sample_volumes/comparative`"
        );
    }
}

#[test]
#[allow(
    clippy::too_many_lines,
    reason = "the walk-through's four commands in order"
)]
fn walk_through_commands_write_their_outputs() {
    let dir = tempfile::tempdir().unwrap();
    let d = comparative();
    let (lm, sp, tree) = (
        d.join("landmarks.csv"),
        d.join("specimens.csv"),
        d.join("tree.nwk"),
    );
    let (lm, sp, tree) = (
        lm.to_str().unwrap(),
        sp.to_str().unwrap(),
        tree.to_str().unwrap(),
    );
    let log = run(
        &[
            "disparity-through-time",
            lm,
            "--specimen-data",
            sp,
            "--bins",
            "130,115,100,90,78",
            "--resamples",
            "199",
            "-o",
            "dtt",
        ],
        dir.path(),
    );
    assert!(log.contains("rarefied to"), "{log}");
    for f in [
        "disparity_through_time.csv",
        "bin_changes.csv",
        "time_specimens.csv",
        "through_time.json",
        "disparity_through_time.svg",
        "disparity_through_time.png",
        "morphospace_by_bin.png",
    ] {
        assert!(
            dir.path().join("dtt").join(f).metadata().unwrap().len() > 0,
            "{f}"
        );
    }
    let csv = std::fs::read_to_string(dir.path().join("dtt/disparity_through_time.csv")).unwrap();
    assert_eq!(csv.lines().count(), 1 + 4 * 3, "{csv}");

    let log = run(
        &[
            "rates",
            lm,
            "--specimen-data",
            sp,
            "--tree",
            tree,
            "--tip-label",
            "taxon",
            "--compare",
            "interval",
            "--simulations",
            "199",
            "--permutations",
            "199",
            "-o",
            "rates",
        ],
        dir.path(),
    );
    assert!(log.contains("Kmult"), "{log}");
    let ratios = std::fs::read_to_string(dir.path().join("rates/rate_ratios.csv")).unwrap();
    assert!(
        ratios.lines().nth(2).unwrap().starts_with("early,late,"),
        "{ratios}"
    );

    let log = run(
        &[
            "models",
            lm,
            "--specimen-data",
            sp,
            "--tree",
            tree,
            "--tip-label",
            "taxon",
            "-o",
            "models",
        ],
        dir.path(),
    );
    assert!(log.contains("best: early burst"), "{log}");

    run(
        &[
            "ancestral-shapes",
            lm,
            "--specimen-data",
            sp,
            "--tree",
            tree,
            "--tip-label",
            "taxon",
            "--colour-by",
            "clade",
            "-o",
            "anc",
        ],
        dir.path(),
    );
    let shapes = std::fs::read_to_string(dir.path().join("anc/ancestral_shapes.csv")).unwrap();
    assert_eq!(shapes.lines().count(), 1 + 47 * 17);
    assert!(dir.path().join("anc/phylomorphospace.svg").exists());
}

/// Clear one-line errors: tips without specimens, a bad tree, a table without specimen data.
#[test]
fn errors_name_the_file_and_the_fault() {
    let dir = tempfile::tempdir().unwrap();
    let d = comparative();
    let lm = d.join("landmarks.csv");
    let sp = d.join("specimens.csv");
    let lm = lm.to_str().unwrap();
    let sp = sp.to_str().unwrap();
    // matched by specimen id, no tip has a specimen
    let (ok, _, err) = common::run_sutura(
        &[
            "models",
            lm,
            "--specimen-data",
            sp,
            "--tree",
            d.join("tree.nwk").to_str().unwrap(),
            "-o",
            "x",
        ],
        dir.path(),
    );
    assert!(
        !ok && err.contains("tree.nwk") && err.contains("have no specimen"),
        "{err}"
    );
    std::fs::write(dir.path().join("bad.nwk"), "(OB01:1,OB02:1\n").unwrap();
    let (ok, _, err) = common::run_sutura(
        &[
            "models",
            lm,
            "--specimen-data",
            sp,
            "--tree",
            "bad.nwk",
            "--tip-label",
            "taxon",
            "-o",
            "x",
        ],
        dir.path(),
    );
    assert!(
        !ok && err.contains("bad.nwk: line 2, column 1") && err.lines().count() == 1,
        "{err}"
    );
    let (ok, _, err) = common::run_sutura(
        &["disparity-through-time", lm, "--bin-count", "3", "-o", "x"],
        dir.path(),
    );
    assert!(!ok && err.contains("--specimen-data"), "{err}");
}
