//! The corpus of malformed and extreme inputs (`tests/corpus/`, described in its README),
//! replayed through the command line with the outcome each must have: the reproducers of the
//! robustness review and the mutants that gave the worst messages. Every run must end within
//! its deadline, never panic or print a library's debug output, and either succeed (writing
//! what it should and saying what it left out) or fail with exit code 1 and one line on stderr
//! that names the file and the fault in words.

mod common;

use std::path::Path;
use std::process::Stdio;
use std::time::{Duration, Instant};

use common::{root, sutura};

/// What a run must do.
#[derive(Clone, Copy, Debug)]
enum Outcome {
    /// Exit 0, and these files in the output folder.
    Writes(&'static [&'static str]),
    /// Exit 0 (nothing written, or nothing to check in the output folder).
    Succeeds,
    /// Exit 1 with one line on stderr.
    Refused,
}

struct Case {
    /// The corpus file (`{file}` in `args`); `{out}` is a fresh output folder.
    file: &'static str,
    args: &'static [&'static str],
    outcome: Outcome,
    /// Phrases stderr must hold.
    stderr: &'static [&'static str],
}

const TABLES: &[&str] = &[
    "aligned_long.csv",
    "aligned_wide.csv",
    "aligned.npy",
    "specimens.csv",
    "pc_scores.csv",
    "pc_variance.csv",
    "pc_loadings.csv",
    "disparity.csv",
    "procrustes_distances.csv",
    "summary.json",
];

const CASES: &[Case] = &[
    // Defect 1: identical specimens panicked in the PC1 shapes figure
    Case {
        file: "superimpose_panic_identical_2d.csv",
        args: &["superimpose", "{file}", "-o", "{out}"],
        outcome: Outcome::Writes(&["summary.json", "disparity.png", "disparity.svg"]),
        stderr: &[
            "not produced: allometry",
            "not produced: pc1_shapes.svg, pc1_shapes.png: no shape variation",
            "not produced: morphospace.svg, morphospace.png: no shape variation",
        ],
    },
    Case {
        file: "project_identical_specimens_panic.json",
        args: &["superimpose", "{file}", "-o", "{out}"],
        outcome: Outcome::Writes(TABLES),
        stderr: &["not produced: pc1_shapes.svg, pc1_shapes.png: no shape variation"],
    },
    // Defect 2: an optional step aborted the analysis
    Case {
        file: "superimpose_abort_equal_centroid_sizes_3d.csv",
        args: &["superimpose", "{file}", "-o", "{out}"],
        outcome: Outcome::Writes(TABLES),
        stderr: &["not produced: allometry"],
    },
    Case {
        file: "superimpose_abort_mirror_triangles_2d.csv",
        args: &["superimpose", "{file}", "-o", "{out}"],
        outcome: Outcome::Writes(&["summary.json", "pc1_shapes.png", "pc1_shapes.svg"]),
        stderr: &[
            "not produced: allometry: all centroid sizes are equal",
            "morphospace.svg, morphospace.png: only one principal component",
        ],
    },
    Case {
        file: "superimpose_abort_group_of_one.csv",
        args: &["superimpose", "{file}", "-o", "{out}"],
        outcome: Outcome::Writes(TABLES),
        stderr: &[
            "not produced: disparity of group Tallis Fissure: undefined for a group of 1 specimen",
            "not produced: group difference test",
        ],
    },
    // Defect 3: a figure that cannot be drawn at ±2 SD is drawn at what the tangent space allows
    Case {
        file: "superimpose_abort_tangent_2d.csv",
        args: &["superimpose", "{file}", "-o", "{out}"],
        outcome: Outcome::Writes(&["pc1_shapes.png", "pc1_shapes.svg", "summary.json"]),
        stderr: &["note: pc1_shapes: drawn at ±1.40 SD instead of ±2 SD"],
    },
    // Defect 4: the full fit names the specimen and the cause
    Case {
        file: "superimpose_abort_mirror_triangles_2d.csv",
        args: &["superimpose", "{file}", "-o", "{out}", "--fit", "full"],
        outcome: Outcome::Refused,
        stderr: &[
            "specimen S00001: 90° from the mean shape",
            "use the partial fit",
        ],
    },
    // Defect 5: extreme voxel sizes and a sheared scan
    Case {
        file: "render_surface_hang_voxel1e20mm.nii",
        args: &["render", "{file}", "--mode", "surface", "-o", "{out}/r.png"],
        outcome: Outcome::Writes(&["r.png"]),
        stderr: &[],
    },
    Case {
        file: "render_surface_hang_zvoxel1.6e-31mm.nii",
        args: &["render", "{file}", "--mode", "surface", "-o", "{out}/r.png"],
        outcome: Outcome::Writes(&["r.png"]),
        stderr: &[],
    },
    Case {
        file: "render_surface_hang_zvoxel1.6e-31mm.nii",
        args: &[
            "render",
            "{file}",
            "--mode",
            "projection",
            "-o",
            "{out}/r.png",
        ],
        outcome: Outcome::Writes(&["r.png"]),
        stderr: &[],
    },
    Case {
        file: "render_surface_hang_voxel1e-45mm.nii",
        args: &["render", "{file}", "--mode", "surface", "-o", "{out}/r.png"],
        outcome: Outcome::Writes(&["r.png"]),
        stderr: &[],
    },
    Case {
        file: "render_surface_hang_voxel1e-45mm.nii",
        args: &["slice", "{file}", "--plane", "k", "-o", "{out}/s.png"],
        outcome: Outcome::Writes(&["s.png"]),
        stderr: &[
            "note: pixels of 1.401e-45 mm would make",
            "to stay within 64 megapixels",
        ],
    },
    Case {
        file: "oblique_slice_23s_5GB_shear512mm.nii",
        args: &[
            "slice",
            "{file}",
            "--normal",
            "1,0.4,0.3",
            "-o",
            "{out}/s.png",
        ],
        outcome: Outcome::Writes(&["s.png"]),
        stderr: &["wrote"],
    },
    Case {
        file: "oblique_slice_23s_5GB_shear512mm.nii",
        args: &[
            "slice",
            "{file}",
            "--plane",
            "k",
            "--pixel",
            "50nm",
            "-o",
            "{out}/s.png",
        ],
        outcome: Outcome::Refused,
        stderr: &[
            "passes the limit of 64 megapixels",
            "raise --max-megapixels",
        ],
    },
    Case {
        file: "render_surface_hang_voxel1e20mm.nii",
        args: &["render", "{file}", "--size", "9000", "-o", "{out}/r.png"],
        outcome: Outcome::Refused,
        stderr: &["--size 9000", "passes the limit of 64 megapixels"],
    },
    // Defect 6: impossible voxel sizes refused at load, naming the field
    Case {
        file: "nifti2_inf_voxel_size_accepted.nii",
        args: &["info", "{file}"],
        outcome: Outcome::Refused,
        stderr: &["sform", "column 2 of srow_x/srow_y/srow_z", "overflows"],
    },
    Case {
        file: "info_voxel_size_0_nonsingular_sform.nii.gz",
        args: &["info", "--json", "{file}"],
        outcome: Outcome::Refused,
        stderr: &["column 3 of srow_x/srow_y/srow_z", "underflows to 0"],
    },
    // Defects 10 and 11: TIFF messages
    Case {
        file: "tiff_dbg_print_tag270_count.tif",
        args: &["info", "{file}"],
        outcome: Outcome::Succeeds,
        stderr: &[],
    },
    Case {
        file: "tiff_18KB_error_message.tif",
        args: &["info", "{file}"],
        outcome: Outcome::Refused,
        stderr: &["sample format tag with 1281 values"],
    },
    Case {
        file: "tiff_os_error_22.tif",
        args: &["info", "{file}"],
        outcome: Outcome::Refused,
        stderr: &["directory offset 281492173357071 lies outside the file"],
    },
    Case {
        file: "tiff_strip_offset_beyond_end.tif",
        args: &["info", "{file}"],
        outcome: Outcome::Refused,
        stderr: &["strip 0 starts at offset 4294967280, beyond the end of the file"],
    },
    Case {
        file: "tiff_strip_cut_short.tif",
        args: &["info", "{file}"],
        outcome: Outcome::Refused,
        stderr: &["truncated: strip 0"],
    },
    Case {
        file: "nifti_gz_claims_16GiB.nii.gz",
        args: &["info", "{file}"],
        outcome: Outcome::Refused,
        stderr: &["truncated: expected 17179869184 bytes of voxel data"],
    },
    Case {
        file: "nifti_rgb_voxels.nii",
        args: &["info", "{file}"],
        outcome: Outcome::Refused,
        stderr: &["unsupported: datatype 128 (RGB voxels)"],
    },
    // DICOM: lengths and sizes a damaged slice claims
    Case {
        file: "dicom_pixel_data_claims_4GiB",
        args: &["info", "{file}"],
        outcome: Outcome::Refused,
        stderr: &[
            "element (7FE0,0010) claims 4294967280 bytes",
            "the file is truncated or damaged",
        ],
    },
    Case {
        file: "dicom_rows_65535_tiny_pixel_data",
        args: &["info", "{file}"],
        outcome: Outcome::Refused,
        stderr: &["the pixel data hold 280 bytes, fewer than the 1834980 of 14 x 65535 samples"],
    },
    // Defect 11: tables, projects and schemes
    Case {
        file: "csv_nan_coordinate.csv",
        args: &["superimpose", "{file}", "-o", "{out}"],
        outcome: Outcome::Refused,
        stderr: &["line 3: base: x is 'NaN' but y and z are given"],
    },
    Case {
        file: "csv_placed_without_coordinates.csv",
        args: &["superimpose", "{file}", "-o", "{out}"],
        outcome: Outcome::Refused,
        stderr: &["line 3: base is marked placed but has no coordinates"],
    },
    Case {
        file: "csv_not_utf8.csv",
        args: &["superimpose", "{file}", "-o", "{out}"],
        outcome: Outcome::Refused,
        stderr: &["line 3: field 2 is not UTF-8 text"],
    },
    Case {
        file: "project_with_bom.json",
        args: &["project", "status", "{file}"],
        outcome: Outcome::Succeeds,
        stderr: &[],
    },
    Case {
        file: "project_placed_without_position.json",
        args: &["project", "status", "{file}"],
        outcome: Outcome::Refused,
        stderr: &["is marked placed but has no position (position_mm)"],
    },
    Case {
        file: "scheme_with_bom.toml",
        args: &["project", "new", "{out}/p.json", "--scheme", "{file}"],
        outcome: Outcome::Writes(&["p.json"]),
        stderr: &[],
    },
    Case {
        file: "scheme_count_written_out.toml",
        args: &["project", "new", "{out}/p.json", "--scheme", "{file}"],
        outcome: Outcome::Refused,
        stderr: &["-1e308 is not a count"],
    },
];

/// Text a library's debug output or a Rust value's debug formatting would leave.
const DEBUG_MARKS: &[&str] = &[
    "panicked",
    "RUST_BACKTRACE",
    "[/root/.cargo",
    "src/decoder",
    "Some(",
    "None ",
    "Unknown(",
    "os error 22",
];

/// Runs `sutura` with a deadline; returns (exit code, stdout, stderr, time).
fn run(args: &[String], deadline: Duration) -> (Option<i32>, String, String, Duration) {
    let started = Instant::now();
    let mut child = sutura()
        .args(args)
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    let out = std::thread::spawn({
        let mut so = child.stdout.take().unwrap();
        move || {
            let mut s = String::new();
            std::io::Read::read_to_string(&mut so, &mut s).ok();
            s
        }
    });
    let err = std::thread::spawn({
        let mut se = child.stderr.take().unwrap();
        move || {
            let mut s = String::new();
            std::io::Read::read_to_string(&mut se, &mut s).ok();
            s
        }
    });
    loop {
        if let Some(status) = child.try_wait().unwrap() {
            return (
                status.code(),
                out.join().unwrap(),
                err.join().unwrap(),
                started.elapsed(),
            );
        }
        if started.elapsed() > deadline {
            let _ = child.kill();
            let _ = child.wait();
            return (None, out.join().unwrap(), err.join().unwrap(), deadline);
        }
        std::thread::sleep(Duration::from_millis(20));
    }
}

/// Checks one run's stderr and exit against the case; returns the faults found.
fn check(case: &Case, code: Option<i32>, stderr: &str, out: &Path) -> Vec<String> {
    let mut faults = Vec::new();
    let name = Path::new(case.file).file_name().unwrap().to_string_lossy();
    match (case.outcome, code) {
        (_, None) => faults.push("did not finish before its deadline".into()),
        (Outcome::Refused, Some(1)) => {
            let lines: Vec<&str> = stderr.lines().collect();
            if lines.len() != 1 {
                faults.push(format!("{} lines on stderr, expected one", lines.len()));
            }
            let line = lines.last().copied().unwrap_or_default();
            if !line.starts_with("sutura: ") {
                faults.push("the error does not start with 'sutura: '".into());
            }
            if !line.contains(name.as_ref()) && !line.contains("--size") {
                faults.push("the error does not name the file".into());
            }
            if line.chars().count() > 500 {
                faults.push(format!(
                    "the error is {} characters long",
                    line.chars().count()
                ));
            }
        }
        (Outcome::Writes(files), Some(0)) => {
            for f in files {
                let p = out.join(f);
                if !p.metadata().is_ok_and(|m| m.len() > 0) {
                    faults.push(format!("{f} not written"));
                }
            }
        }
        (Outcome::Succeeds, Some(0)) => {}
        (want, got) => faults.push(format!("exit {got:?}, expected {want:?}")),
    }
    for phrase in case.stderr {
        if !stderr.contains(phrase) {
            faults.push(format!("stderr lacks {phrase:?}"));
        }
    }
    for mark in DEBUG_MARKS {
        if stderr.contains(mark) {
            faults.push(format!("stderr holds {mark:?}"));
        }
    }
    for line in stderr.lines() {
        if line.chars().count() > 500 {
            faults.push(format!(
                "a stderr line of {} characters",
                line.chars().count()
            ));
        }
    }
    faults
}

#[test]
fn every_corpus_file_gives_its_outcome() {
    let corpus = root().join("tests/corpus");
    let mut faults = Vec::new();
    for (i, case) in CASES.iter().enumerate() {
        let out = tempfile::tempdir().unwrap();
        let file = corpus.join(case.file);
        assert!(file.exists(), "{} is not in the corpus", case.file);
        let args: Vec<String> = case
            .args
            .iter()
            .map(|a| {
                a.replace("{file}", &file.to_string_lossy())
                    .replace("{out}", &out.path().to_string_lossy())
            })
            .collect();
        // generous for a debug build on a busy machine; a hang ran for minutes
        let (code, _, stderr, took) = run(&args, Duration::from_mins(2));
        for f in check(case, code, &stderr, out.path()) {
            faults.push(format!(
                "case {i} ({} {}): {f}\n    stderr: {stderr}",
                case.file, case.args[0]
            ));
        }
        eprintln!("case {i:>2} {:<45} {:>6.2?} {:?}", case.file, took, code);
    }
    assert!(faults.is_empty(), "{}", faults.join("\n"));
}

/// A named pipe given as a scan, project or table is refused at once instead of waiting for a
/// writer forever.
#[test]
fn a_named_pipe_is_refused_not_waited_on() {
    let dir = tempfile::tempdir().unwrap();
    let fifo = dir.path().join("scan.nii");
    let made = std::process::Command::new("mkfifo")
        .arg(&fifo)
        .status()
        .unwrap();
    assert!(made.success());
    let cases: [&[&str]; 3] = [
        &["info", "{fifo}"],
        &["superimpose", "{fifo}", "-o", "{out}"],
        &["project", "status", "{fifo}"],
    ];
    for args in cases {
        let args: Vec<String> = args
            .iter()
            .map(|a| {
                a.replace("{fifo}", &fifo.to_string_lossy())
                    .replace("{out}", &dir.path().join("o").to_string_lossy())
            })
            .collect();
        let (code, _, stderr, _) = run(&args, Duration::from_secs(20));
        assert_eq!(code, Some(1), "{args:?}: {stderr}");
        assert!(
            stderr.contains("a named pipe (FIFO), not a file Sutura can read"),
            "{stderr}"
        );
    }
}

/// The summary of an analysis that left things out lists them with their reasons.
#[test]
fn the_summary_lists_what_was_not_produced() {
    let out = tempfile::tempdir().unwrap();
    let file = root().join("tests/corpus/superimpose_abort_group_of_one.csv");
    let (code, _, stderr, _) = run(
        &[
            "superimpose".into(),
            file.to_string_lossy().into_owned(),
            "-o".into(),
            out.path().to_string_lossy().into_owned(),
        ],
        Duration::from_mins(2),
    );
    assert_eq!(code, Some(0), "{stderr}");
    let summary: serde_json::Value =
        serde_json::from_slice(&std::fs::read(out.path().join("summary.json")).unwrap()).unwrap();
    let not: Vec<&str> = summary["not_produced"]
        .as_array()
        .unwrap()
        .iter()
        .map(|o| o["output"].as_str().unwrap())
        .collect();
    assert!(
        not.contains(&"disparity of group Tallis Fissure"),
        "{not:?}"
    );
    assert!(not.contains(&"group difference test"), "{not:?}");
    let disparity = std::fs::read_to_string(out.path().join("disparity.csv")).unwrap();
    assert!(
        disparity
            .lines()
            .any(|l| l.starts_with("Tallis Fissure,1,,")
                && l.ends_with(
                    "undefined for a group of 1 specimen (a variance needs at least 2)"
                )),
        "{disparity}"
    );
}
