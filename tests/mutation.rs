//! Seeded mutation testing of every reader of a user's file: `NIfTI` (`.nii`, `.nii.gz`,
//! `NIfTI`-2), TIFF (classic, Deflate, `BigTIFF`), DICOM (a one-slice series), the project file, the landmark scheme and the
//! landmark table. Each case takes a valid seed file, damages it (bit flips, random bytes,
//! truncation, a header field or a TIFF directory entry set to an extreme, a number in a text
//! file replaced by an extreme, lines dropped or repeated) and reads it the way the command line
//! does; what reads is then used (a scan is sliced, projected, rendered and picked; a table or
//! project is superimposed and its figures drawn).
//!
//! Every case must end (a deadline per case), without a panic, with an error that is one short
//! line without debug formatting, and without the process's peak memory growing beyond what the
//! file can justify (64 MiB plus 1,100 times the file's size: a Deflate stream expands at most
//! about 1,032 times). Counts are printed; a failing input is saved under
//! `target/mutation-finds/` for the corpus.
//!
//! `SUTURA_MUTATION_CASES` (default 2,500) and `SUTURA_MUTATION_SEED` (default 1) set the run;
//! a long run by hand: `SUTURA_MUTATION_CASES=200000 cargo test --release --test mutation --
//! --nocapture`.

mod common;

use std::collections::BTreeMap;
use std::fmt::Write as _;
use std::path::{Path, PathBuf};
use std::sync::mpsc;
use std::time::{Duration, Instant};

use nalgebra::Vector3;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

use sutura_core::analysis::{AnalysisOptions, analyse};
use sutura_core::export::table::LandmarkTable;
use sutura_core::geometry::{Affine3, Plane, WorldPoint};
use sutura_core::io::{self, OpenOptions, Progress};
use sutura_core::landmarks::pick::{PickOptions, pick_along_ray};
use sutura_core::landmarks::{Project, Scheme};
use sutura_core::render::raycast::{self, Bricks};
use sutura_core::render::{Camera, Interpolation, MipOptions, SliceGeometry, SurfaceOptions};
use sutura_core::volume::Volume;

/// The kinds of file mutated.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord)]
enum Kind {
    Nifti,
    NiftiGz,
    Tiff,
    Dicom,
    Project,
    Scheme,
    Csv,
}

impl Kind {
    fn extension(self) -> &'static str {
        match self {
            Self::Nifti => "nii",
            Self::NiftiGz => "nii.gz",
            Self::Tiff => "tif",
            Self::Dicom => "dcm",
            Self::Project => "json",
            Self::Scheme => "toml",
            Self::Csv => "csv",
        }
    }

    fn is_text(self) -> bool {
        matches!(self, Self::Project | Self::Scheme | Self::Csv)
    }
}

/// A seed file: its kind, name and bytes (for `.nii.gz`, the uncompressed `.nii`).
struct Seed {
    kind: Kind,
    name: &'static str,
    bytes: Vec<u8>,
}

/// A small scan with a ball in it, placed obliquely, for the scan seeds.
fn seed_volume() -> Volume {
    let dims = [16usize, 12, 7];
    let mut data = Vec::new();
    for k in 0..dims[2] {
        for j in 0..dims[1] {
            for i in 0..dims[0] {
                let r2 =
                    (i as f64 - 7.5).powi(2) + (j as f64 - 5.5).powi(2) + (k as f64 - 3.0).powi(2);
                data.push(if r2 < 12.0 {
                    30_000u16
                } else {
                    1_000 + (i * 7 + j * 3 + k) as u16
                });
            }
        }
    }
    let lin = nalgebra::Matrix3::new(0.036, 0.002, 0.0, -0.001, 0.036, 0.0, 0.0, 0.003, 0.05);
    let a = Affine3::from_linear_translation(&lin, &Vector3::new(1.0, -2.0, 0.5));
    Volume::from_vec(dims, a, data).unwrap()
}

fn seeds(dir: &Path) -> Vec<Seed> {
    let v = seed_volume();
    let nii = dir.join("seed.nii");
    io::nifti::write(&v, &nii).unwrap();
    let nii_bytes = std::fs::read(&nii).unwrap();
    // the same scan with a NIfTI-2 header (the library's own serialiser)
    let mut h2 = io::nifti::Header::parse(&nii_bytes).unwrap();
    h2.version = io::nifti::Version::Nifti2;
    h2.vox_offset = 544.0;
    let mut nii2 = h2.to_bytes();
    nii2.extend_from_slice(&nii_bytes[352..]);
    let tif = |name: &str, deflate: bool| {
        let p = dir.join(name);
        io::tiff::write_multipage(&v, &p, io::tiff::WriteOptions { deflate }).unwrap();
        std::fs::read(p).unwrap()
    };
    let root = common::root();
    let read = |p: &str| std::fs::read(root.join(p)).unwrap();
    let mut csv = String::from("specimen,trial,group,landmark,x,y,z,state\n");
    for s in 0..5 {
        for (l, p) in [
            [0.0, 0.0, 0.0],
            [1.0, 0.1, 0.0],
            [0.2, 1.1, 0.1],
            [0.4, 0.3, 0.9],
        ]
        .iter()
        .enumerate()
        {
            let w = f64::from(s) * 0.03;
            let _ = writeln!(
                csv,
                "S{s},1,{},L{l},{},{},{},placed",
                ["a", "b"][s as usize % 2],
                p[0] + w,
                p[1] - w * f64::from(l as u8),
                p[2] + 0.5 * w
            );
        }
    }
    vec![
        Seed {
            kind: Kind::Nifti,
            name: "nifti1",
            bytes: nii_bytes.clone(),
        },
        Seed {
            kind: Kind::Nifti,
            name: "nifti2",
            bytes: nii2,
        },
        Seed {
            kind: Kind::NiftiGz,
            name: "nifti1-gz",
            bytes: nii_bytes,
        },
        Seed {
            kind: Kind::Tiff,
            name: "tiff",
            bytes: tif("seed.tif", false),
        },
        Seed {
            kind: Kind::Tiff,
            name: "tiff-deflate",
            bytes: tif("seed-deflate.tif", true),
        },
        // an oblique int16 CT slice pydicom wrote (one file of the `dicom_made` reference
        // series, see tests/python/dicom_make.py)
        Seed {
            kind: Kind::Dicom,
            name: "dicom",
            bytes: read("tests/fixtures/dicom_seed.dcm"),
        },
        Seed {
            kind: Kind::Project,
            name: "project",
            bytes: read("tests/fixtures/project_v1.json"),
        },
        Seed {
            kind: Kind::Scheme,
            name: "scheme",
            bytes: read("sample_volumes/scheme.toml"),
        },
        Seed {
            kind: Kind::Csv,
            name: "csv",
            bytes: csv.into_bytes(),
        },
    ]
}

// ---------------------------------------------------------------------------------------------
// Mutators

/// Extreme values for binary fields, as little-endian bytes of each width.
fn extreme_bytes(rng: &mut ChaCha8Rng, width: usize, float: bool) -> Vec<u8> {
    if float && width == 4 {
        let v: f32 = [
            0.0,
            -0.0,
            -1.0,
            1e-45,
            1e-38,
            3.4e38,
            f32::NAN,
            f32::INFINITY,
            f32::NEG_INFINITY,
            1e20,
            1.6e-31,
            512.0,
        ][rng.random_range(0..12)];
        return v.to_le_bytes().to_vec();
    }
    if float && width == 8 {
        let v: f64 = [
            0.0,
            -1.0,
            5e-324,
            1e-300,
            1e300,
            f64::MAX,
            f64::NAN,
            f64::INFINITY,
            -1e20,
            1e20,
        ][rng.random_range(0..10)];
        return v.to_le_bytes().to_vec();
    }
    let v: u64 = [
        0,
        1,
        2,
        0x7f,
        0xff,
        0x7fff,
        0x8000,
        0xffff,
        0x7fff_ffff,
        0x8000_0000,
        0xffff_ffff,
        u64::MAX,
        i64::MAX as u64,
        1 << 32,
    ][rng.random_range(0..14)];
    v.to_le_bytes()[..width].to_vec()
}

/// `(offset, width, float)` of the NIfTI-1 header fields (nifti1.h).
const NIFTI1_FIELDS: &[(usize, usize, bool)] = &[
    (0, 4, false),
    (40, 2, false),
    (42, 2, false),
    (44, 2, false),
    (46, 2, false),
    (48, 2, false),
    (50, 2, false),
    (52, 2, false),
    (54, 2, false),
    (68, 2, false),
    (70, 2, false),
    (72, 2, false),
    (76, 4, true),
    (80, 4, true),
    (84, 4, true),
    (88, 4, true),
    (108, 4, true),
    (112, 4, true),
    (116, 4, true),
    (123, 1, false),
    (252, 2, false),
    (254, 2, false),
    (256, 4, true),
    (260, 4, true),
    (264, 4, true),
    (268, 4, true),
    (280, 4, true),
    (284, 4, true),
    (292, 4, true),
    (296, 4, true),
    (300, 4, true),
    (312, 4, true),
    (320, 4, true),
    (344, 4, false),
];

/// The same for NIfTI-2 (nifti2.h).
const NIFTI2_FIELDS: &[(usize, usize, bool)] = &[
    (0, 4, false),
    (12, 2, false),
    (14, 2, false),
    (16, 8, false),
    (24, 8, false),
    (32, 8, false),
    (40, 8, false),
    (48, 8, false),
    (104, 8, true),
    (112, 8, true),
    (120, 8, true),
    (128, 8, true),
    (168, 8, false),
    (176, 8, true),
    (184, 8, true),
    (344, 4, false),
    (348, 4, false),
    (352, 8, true),
    (400, 8, true),
    (408, 8, true),
    (440, 8, true),
    (472, 8, true),
    (500, 4, false),
];

/// The entries of a classic little-endian TIFF's directories: `(entry offset, IFD offset)`.
fn tiff_entries(b: &[u8]) -> Vec<(usize, usize)> {
    let u16_at = |o: usize| u16::from_le_bytes([b[o], b[o + 1]]) as usize;
    let u32_at = |o: usize| u32::from_le_bytes(b[o..o + 4].try_into().unwrap()) as usize;
    let mut out = Vec::new();
    let mut ifd = u32_at(4);
    for _ in 0..64 {
        if ifd == 0 || ifd + 2 > b.len() {
            break;
        }
        let n = u16_at(ifd);
        if ifd + 2 + 12 * n + 4 > b.len() {
            break;
        }
        out.extend((0..n).map(|e| (ifd + 2 + 12 * e, ifd)));
        ifd = u32_at(ifd + 2 + 12 * n);
    }
    out
}

fn put(b: &mut [u8], at: usize, v: &[u8]) {
    if at + v.len() <= b.len() {
        b[at..at + v.len()].copy_from_slice(v);
    }
}

/// Damages a binary seed; returns the bytes and a short description.
fn mutate_binary(rng: &mut ChaCha8Rng, seed: &Seed) -> (Vec<u8>, String) {
    let mut b = seed.bytes.clone();
    let len = b.len();
    match rng.random_range(0..6) {
        0 => {
            let n = rng.random_range(1..=8);
            for _ in 0..n {
                let i = rng.random_range(0..len.clamp(1, 1024));
                b[i] ^= 1 << rng.random_range(0..8);
            }
            (b, format!("{n} bit flips in the first KiB"))
        }
        1 => {
            let n = rng.random_range(1..=4);
            for _ in 0..n {
                let i = rng.random_range(0..len);
                b[i] = [0, 0xff, 0x7f, 0x80, rng.random()][rng.random_range(0..5)];
            }
            (b, format!("{n} random bytes"))
        }
        2 => {
            let cut = rng.random_range(0..len);
            b.truncate(cut);
            (b, format!("truncated to {cut} bytes"))
        }
        _ if seed.kind == Kind::Dicom => {
            // a 16- or 32-bit length or value field after the preamble set to an extreme
            let at = rng.random_range(132..len.saturating_sub(4).max(133));
            let width = [2, 4][rng.random_range(0..2)];
            put(&mut b, at, &extreme_bytes(rng, width, false));
            (b, format!("{width} bytes at {at} set to an extreme"))
        }
        _ if seed.kind == Kind::Tiff => {
            let entries = tiff_entries(&b);
            if entries.is_empty() {
                return (b, "no directory".into());
            }
            let (e, ifd) = entries[rng.random_range(0..entries.len())];
            match rng.random_range(0..4) {
                0 => {
                    put(&mut b, e + 4, &extreme_bytes(rng, 4, false));
                    (b, format!("entry at {e}: count extreme"))
                }
                1 => {
                    put(&mut b, e + 8, &extreme_bytes(rng, 4, false));
                    (b, format!("entry at {e}: value/offset extreme"))
                }
                2 => {
                    let t: u16 = [0, 2, 5, 12, 13, 16, 99, 0xffff][rng.random_range(0..8)];
                    put(&mut b, e + 2, &t.to_le_bytes());
                    (b, format!("entry at {e}: type {t}"))
                }
                _ => {
                    put(&mut b, ifd, &extreme_bytes(rng, 2, false));
                    (b, format!("directory at {ifd}: entry count extreme"))
                }
            }
        }
        _ => {
            let fields = if b.get(0..4) == Some(&540i32.to_le_bytes()) {
                NIFTI2_FIELDS
            } else {
                NIFTI1_FIELDS
            };
            let n = rng.random_range(1..=3);
            let mut what = Vec::new();
            for _ in 0..n {
                let (at, width, float) = fields[rng.random_range(0..fields.len())];
                put(&mut b, at, &extreme_bytes(rng, width, float));
                what.push(at.to_string());
            }
            (
                b,
                format!("header fields at {} set to extremes", what.join(",")),
            )
        }
    }
}

/// Damages a text seed.
fn mutate_text(rng: &mut ChaCha8Rng, seed: &Seed) -> (Vec<u8>, String) {
    let text = String::from_utf8_lossy(&seed.bytes).into_owned();
    let extremes = [
        "1e308",
        "-1e308",
        "1e-320",
        "NaN",
        "inf",
        "-0",
        "",
        "99999999999999999999999",
        "0",
        "-1",
        "\"\"",
        "null",
        "[]",
        "{}",
        "1e400",
        "0x10",
        "\u{feff}",
        "é",
        "\"a\"",
    ];
    match rng.random_range(0..6) {
        0 | 1 => {
            // a number replaced by an extreme
            let spans: Vec<(usize, usize)> = {
                let bytes = text.as_bytes();
                let mut v = Vec::new();
                let mut i = 0;
                while i < bytes.len() {
                    if bytes[i].is_ascii_digit() {
                        let s = i;
                        while i < bytes.len()
                            && (bytes[i].is_ascii_digit() || matches!(bytes[i], b'.' | b'e' | b'-'))
                        {
                            i += 1;
                        }
                        v.push((s, i));
                    } else {
                        i += 1;
                    }
                }
                v
            };
            if spans.is_empty() {
                return (text.into_bytes(), "no number".into());
            }
            let (s, e) = spans[rng.random_range(0..spans.len())];
            let x = extremes[rng.random_range(0..extremes.len())];
            let out = format!("{}{x}{}", &text[..s], &text[e..]);
            (out.into_bytes(), format!("number at {s} replaced by {x:?}"))
        }
        2 => {
            let mut lines: Vec<&str> = text.lines().collect();
            if lines.len() > 1 {
                let i = rng.random_range(0..lines.len());
                lines.remove(i);
            }
            (lines.join("\n").into_bytes(), "a line dropped".into())
        }
        3 => {
            let mut lines: Vec<&str> = text.lines().collect();
            let i = rng.random_range(0..lines.len());
            let l = lines[i];
            lines.insert(i, l);
            (lines.join("\n").into_bytes(), "a line repeated".into())
        }
        4 => {
            let mut b = text.into_bytes();
            let i = rng.random_range(0..b.len());
            b[i] = [b'"', b'{', b'}', b',', b'[', b'\n', b'=', 0, 0xff][rng.random_range(0..9)];
            (b, format!("byte {i} replaced"))
        }
        _ => {
            let cut = rng.random_range(0..text.len());
            (
                text.as_bytes()[..cut].to_vec(),
                format!("truncated to {cut} bytes"),
            )
        }
    }
}

// ---------------------------------------------------------------------------------------------
// Using what reads

/// Uses a volume the way the workstation and the command line do: a section, a projection and
/// a surface (small), and a pick from outside the box.
fn exercise_volume(v: &Volume) {
    let dir = Vector3::new(0.4, -0.7, 0.55);
    if let Ok(plane) = Plane::from_normal(v.centre_world(), dir, Vector3::z())
        && let Ok((g, _)) = SliceGeometry::section(v, &plane, None, 0.0, 200_000)
    {
        let _ = sutura_core::render::slice::render_slice(v, &g, Interpolation::Trilinear, None);
    }
    if let Ok(cam) = Camera::fit(v, dir, Vector3::z(), 24, 24) {
        let _ = raycast::mip(v, &cam, MipOptions::default());
        let bricks = Bricks::new(v);
        let p = v.percentiles(&[50.0, 99.5]);
        let _ = raycast::surface(
            v,
            &cam,
            &SurfaceOptions::new(0.5 * (p[0] + p[1])),
            Some(&bricks),
        );
    }
    let c = v.centre_world().0;
    let far = v.spacing_mm().iter().fold(0.0, |a: f64, s| a.max(*s)) * 100.0;
    if let Ok(opts) = PickOptions::iso50(v) {
        let _ = pick_along_ray(v, WorldPoint(c - dir * far), dir, &opts);
    }
}

fn exercise_table(t: &LandmarkTable) {
    let opts = AnalysisOptions {
        resamples: 9,
        ..AnalysisOptions::default()
    };
    if let Ok(a) = analyse(t, &opts) {
        let _ = a.report();
        for f in a.figures() {
            if let Ok(f) = f.figure {
                let _ = f.to_svg();
                let _ = f.to_rgba();
            }
        }
    }
}

/// Reads a mutant as the command line does; `Err` holds the error's text.
fn read(kind: Kind, path: &Path, bytes: &[u8]) -> Result<(), String> {
    match kind {
        Kind::Nifti | Kind::NiftiGz | Kind::Tiff | Kind::Dicom => {
            let v = io::open(path, &OpenOptions::default(), &Progress::none())
                .map_err(|e| e.to_string())?;
            exercise_volume(&v);
            Ok(())
        }
        Kind::Project => {
            let p = Project::from_slice(bytes, path).map_err(|e| e.to_string())?;
            let flat = sutura_core::landmarks::project::points::flatten(&p, Some("group"), false);
            exercise_table(&flat.table);
            Ok(())
        }
        Kind::Scheme => Scheme::load(path).map(|_| ()).map_err(|e| e.to_string()),
        Kind::Csv => {
            let t = LandmarkTable::read_csv(path).map_err(|e| e.to_string())?;
            exercise_table(&t);
            Ok(())
        }
    }
}

/// Whether an error's text is one short line in words: no control characters, at most a few
/// hundred characters, none of the debug shapes of Rust values.
fn message_fault(msg: &str) -> Option<&'static str> {
    if msg.chars().any(char::is_control) {
        return Some("control characters");
    }
    if msg.chars().count() > 500 {
        return Some("longer than 500 characters");
    }
    let mut digits = 0;
    for c in msg.chars() {
        digits = if c.is_ascii_digit() { digits + 1 } else { 0 };
        if digits > 30 {
            return Some("a number written out in full");
        }
    }
    for marker in [
        "Some(",
        "Unknown(",
        "os error 22",
        "Invalid argument",
        "LimitsExceeded",
        "[Unknown",
    ] {
        if msg.contains(marker) {
            return Some("debug formatting or a bare OS error");
        }
    }
    None
}

fn peak_rss_reset() {
    let _ = std::fs::write("/proc/self/clear_refs", "5");
}

/// `VmHWM` and `VmRSS` of this process, in bytes.
fn rss() -> (u64, u64) {
    let status = std::fs::read_to_string("/proc/self/status").unwrap_or_default();
    let field = |name: &str| {
        status
            .lines()
            .find(|l| l.starts_with(name))
            .and_then(|l| l.split_whitespace().nth(1))
            .and_then(|v| v.parse::<u64>().ok())
            .unwrap_or(0)
            * 1024
    };
    (field("VmHWM:"), field("VmRSS:"))
}

#[derive(Default)]
struct Tally {
    cases: usize,
    refused: usize,
    read: usize,
    panics: usize,
    hangs: usize,
    memory: usize,
    bad_messages: usize,
    slowest: Duration,
    /// The longest error texts seen, for the corpus.
    longest: Vec<(usize, String)>,
}

type Job = Box<dyn FnOnce() -> Result<(), String> + Send>;

#[test]
#[allow(
    clippy::too_many_lines,
    reason = "one run over all seeds with its bookkeeping"
)]
fn mutated_inputs_never_panic_hang_or_overallocate() {
    let cases: usize = std::env::var("SUTURA_MUTATION_CASES")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(2_500);
    let seed: u64 = std::env::var("SUTURA_MUTATION_SEED")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(1);
    // a case reads a few kilobytes; even a debug build under load takes well under a second
    let deadline = Duration::from_secs(30);
    let dir = tempfile::tempdir().unwrap();
    let seeds = seeds(dir.path());
    let finds = common::root().join("target/mutation-finds");
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let panics = std::sync::Arc::new(std::sync::Mutex::new(Vec::<String>::new()));
    {
        let panics = panics.clone();
        std::panic::set_hook(Box::new(move |info| {
            panics.lock().unwrap().push(info.to_string());
        }));
    }
    // one worker thread runs the cases; this thread watches the clock
    let (job_tx, job_rx) = mpsc::channel::<Job>();
    let (done_tx, done_rx) = mpsc::channel::<std::thread::Result<Result<(), String>>>();
    std::thread::spawn(move || {
        for job in job_rx {
            let r = std::panic::catch_unwind(std::panic::AssertUnwindSafe(job));
            if done_tx.send(r).is_err() {
                break;
            }
        }
    });
    // the peak-memory check needs the kernel to reset the peak (Linux 4.0 and later)
    peak_rss_reset();
    let (peak, now) = rss();
    let memory_checked = peak > 0 && peak <= now + (8 << 20);
    if !memory_checked {
        eprintln!("note: this system cannot reset the peak memory; the memory check is off");
    }
    let mut tallies: BTreeMap<Kind, Tally> = BTreeMap::new();
    let mut failures: Vec<String> = Vec::new();
    let save = |name: &str, kind: Kind, bytes: &[u8]| -> PathBuf {
        std::fs::create_dir_all(&finds).unwrap();
        let p = finds.join(format!("{name}.{}", kind.extension()));
        std::fs::write(&p, bytes).unwrap();
        p
    };
    for case in 0..cases {
        let s = &seeds[case % seeds.len()];
        let (mut bytes, what) = if s.kind.is_text() {
            mutate_text(&mut rng, s)
        } else {
            mutate_binary(&mut rng, s)
        };
        if s.kind == Kind::NiftiGz {
            // half the time damage the compressed stream itself, else its content
            use std::io::Write;
            let mut enc = flate2::write::GzEncoder::new(Vec::new(), flate2::Compression::fast());
            enc.write_all(&bytes).unwrap();
            bytes = enc.finish().unwrap();
            if rng.random_bool(0.5) {
                let i = rng.random_range(0..bytes.len());
                bytes[i] ^= 1 << rng.random_range(0..8);
            }
        }
        let path = dir.path().join(format!("case.{}", s.kind.extension()));
        std::fs::write(&path, &bytes).unwrap();
        let label = format!("case {case} ({}: {what})", s.name);
        peak_rss_reset();
        let (_, before) = rss();
        let started = Instant::now();
        let (kind, job_path, job_bytes) = (s.kind, path.clone(), bytes.clone());
        job_tx
            .send(Box::new(move || read(kind, &job_path, &job_bytes)))
            .unwrap();
        let t = tallies.entry(s.kind).or_default();
        t.cases += 1;
        let Ok(outcome) = done_rx.recv_timeout(deadline) else {
            t.hangs += 1;
            let p = save(&format!("hang-{case}"), s.kind, &bytes);
            failures.push(format!(
                "{label}: still running after {deadline:?} ({})",
                p.display()
            ));
            break;
        };
        let took = started.elapsed();
        t.slowest = t.slowest.max(took);
        let (peak, _) = rss();
        let allowed = 64 * 1024 * 1024 + 1_100 * bytes.len() as u64;
        if memory_checked && peak.saturating_sub(before) > allowed {
            t.memory += 1;
            let p = save(&format!("memory-{case}"), s.kind, &bytes);
            failures.push(format!(
                "{label}: peak memory grew by {} MiB for a {}-byte file ({})",
                peak.saturating_sub(before) >> 20,
                bytes.len(),
                p.display()
            ));
        }
        match outcome {
            Err(_) => {
                t.panics += 1;
                let p = save(&format!("panic-{case}"), s.kind, &bytes);
                let msg = panics.lock().unwrap().pop().unwrap_or_default();
                failures.push(format!("{label}: panic: {msg} ({})", p.display()));
            }
            Ok(Ok(())) => t.read += 1,
            Ok(Err(msg)) => {
                t.refused += 1;
                if let Some(why) = message_fault(&msg) {
                    t.bad_messages += 1;
                    let p = save(&format!("message-{case}"), s.kind, &bytes);
                    failures.push(format!(
                        "{label}: message with {why}: {msg} ({})",
                        p.display()
                    ));
                }
                let n = msg.chars().count();
                t.longest.push((n, msg));
                t.longest.sort_by_key(|m| std::cmp::Reverse(m.0));
                t.longest.truncate(2);
            }
        }
    }
    eprintln!("mutation run: seed {seed}, {cases} cases");
    eprintln!("kind       cases  refused  read  panics  hangs  memory  messages  slowest");
    for (k, t) in &tallies {
        eprintln!(
            "{:<10} {:>5}  {:>7}  {:>4}  {:>6}  {:>5}  {:>6}  {:>8}  {:>6.0?}",
            format!("{k:?}"),
            t.cases,
            t.refused,
            t.read,
            t.panics,
            t.hangs,
            t.memory,
            t.bad_messages,
            t.slowest
        );
        for (n, m) in &t.longest {
            eprintln!("    longest message ({n} characters): {m}");
        }
    }
    assert!(
        failures.is_empty(),
        "{} failures:\n{}",
        failures.len(),
        failures.join("\n")
    );
    // a run that refuses everything tests nothing past the first check
    for (k, t) in &tallies {
        assert!(
            t.read > 0 || t.cases < 20,
            "{k:?}: no mutant was read at all"
        );
    }
}
