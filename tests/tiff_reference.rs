//! TIFF reading checked against outside sources:
//! (1) files written by tifffile in every combination that matters (`tests/python/tiff_write_refs.py`,
//!     run by `scripts/fetch_refdata.sh` into `target/refdata/tifffile`), as tifffile reads
//!     them (`tests/python/tiff_read_refs.py`),
//! (2) the TIFF test images of Pillow's source distribution, classified by tifffile
//!     (`tests/python/tiff_pillow_refs.py`), including Pillow's deliberately malformed files,
//! and a mutation test: truncated and corrupted files must give an error, never a panic.
//! tifffile's answers are the committed fixtures `tiff_*` (see `tests/common`); voxels are
//! compared through the SHA-256 of their little-endian bytes in z-y-x order.

mod common;

use std::path::{Path, PathBuf};
use sutura_core::io::{IoError, Limits, OpenOptions, Progress, tiff};
use sutura_core::landmarks::scheme::sha256_hex;
use sutura_core::volume::{DType, Volume, Voxels};

fn voxel_bytes_le(v: &Volume) -> Vec<u8> {
    let mut out = Vec::with_capacity(v.voxel_bytes());
    match v.voxels() {
        Voxels::U8(b) => out.extend_from_slice(b.as_slice()),
        Voxels::U16(b) => b
            .as_slice()
            .iter()
            .for_each(|x| out.extend(x.to_le_bytes())),
        Voxels::I16(b) => b
            .as_slice()
            .iter()
            .for_each(|x| out.extend(x.to_le_bytes())),
        Voxels::F32(b) => b
            .as_slice()
            .iter()
            .for_each(|x| out.extend(x.to_le_bytes())),
    }
    out
}

fn dtype_of(name: &str) -> DType {
    match name {
        "u8" => DType::U8,
        "u16" => DType::U16,
        "i16" => DType::I16,
        "f32" => DType::F32,
        other => panic!("unknown dtype {other}"),
    }
}

/// Dims in our order (x, y, z) from numpy's (z, y, x).
fn dims_of(shape: &serde_json::Value) -> [usize; 3] {
    let s: Vec<usize> = shape
        .as_array()
        .unwrap()
        .iter()
        .map(|v| usize::try_from(v.as_u64().unwrap()).unwrap())
        .collect();
    [s[2], s[1], s[0]]
}

fn open(path: &Path) -> Result<Volume, IoError> {
    let opts = OpenOptions {
        limits: Limits {
            max_voxel_bytes: 1 << 30,
            ..Limits::default()
        },
        ..OpenOptions::default()
    };
    sutura_core::io::open(path, &opts, &Progress::none())
}

/// The TIFF files and slice folders tifffile wrote into `target/refdata/tifffile`, sorted.
fn tifffile_written() -> Vec<PathBuf> {
    let dir = common::reference_path("tifffile");
    let mut cases: Vec<PathBuf> = std::fs::read_dir(&dir)
        .unwrap()
        .map(|e| e.unwrap().path())
        .filter(|p| p.is_dir() || p.extension().is_some_and(|e| e == "tif"))
        .collect();
    cases.sort();
    cases
}

#[test]
fn matches_files_written_by_tifffile() {
    // reference: tifffile imwrite/imread, every compression × predictor × byte order × layout × dtype
    let paths = tifffile_written();
    let dir = common::reference_path("tifffile");
    let mut r = common::Reference::new("tiff_tifffile_written", "tiff_read_refs.py")
        .dir("files", &dir)
        .input(&dir);
    for p in &paths {
        r = r.path_arg(p);
    }
    let cases = r.run();
    let cases = cases.as_array().unwrap();
    assert_eq!(cases.len(), paths.len());
    assert!(
        cases.len() >= 100,
        "expected the full matrix, got {}",
        cases.len()
    );
    let mut failures = Vec::new();
    let mut lzw_tiles = 0;
    for (case, path) in cases.iter().zip(&paths) {
        let name = case["name"].as_str().unwrap();
        // the tiff crate's streaming LZW reader refuses some of these tiles ("no lzw end code
        // found"); Sutura decodes each chunk itself with weezl, so all must match
        if name.contains("_lzw_") && name.ends_with("_tiles") {
            lzw_tiles += 1;
        }
        let vol = match open(path) {
            Ok(v) => v,
            Err(e) => {
                failures.push(format!("{name}: {e}"));
                continue;
            }
        };
        if vol.dims() != dims_of(&case["shape"])
            || vol.dtype() != dtype_of(case["dtype"].as_str().unwrap())
            || sha256_hex(&voxel_bytes_le(&vol)) != case["voxels_sha256"].as_str().unwrap()
        {
            failures.push(format!("{name}: voxels differ from tifffile's"));
        }
        if let Some(s) = case["spacing_mm"].as_f64() {
            let got = vol.spacing_mm();
            assert!(
                (got[0] - s).abs() < 1e-9 && (got[2] - s).abs() < 1e-9,
                "{name}: {got:?}"
            );
        }
    }
    assert!(
        failures.is_empty(),
        "{} of {} differ:\n{}",
        failures.len(),
        cases.len(),
        failures.join("\n")
    );
    println!(
        "all {} tifffile-written files match, {lzw_tiles} of them LZW-tiled",
        cases.len()
    );
    assert!(
        lzw_tiles >= 16,
        "the matrix lost its LZW tiles: {lzw_tiles}"
    );
    // the resolution tags are read as tifffile reads them: 80 pixels per centimetre = 0.125 mm
    let res = cases.iter().find(|c| c["name"] == "resolution_cm").unwrap();
    assert!((res["spacing_mm"].as_f64().unwrap() - 0.125).abs() < 1e-12);
}

#[test]
#[allow(
    clippy::float_cmp,
    reason = "the written sizes must read back bit for bit"
)]
fn committed_slice_folder_carries_its_voxel_size() {
    // written by our writer: the full 3D voxel size is in each slice's ImageDescription, so the
    // folder opens with the right geometry without a caller-given size (sample: 36 x 36 x 50 µm)
    let scan = Path::new(env!("CARGO_MANIFEST_DIR")).join("sample_volumes/HDC-001_slices");
    let v = sutura_core::io::open(&scan, &OpenOptions::default(), &Progress::none()).unwrap();
    assert_eq!(v.spacing_mm(), [0.036, 0.036, 0.05]);
    assert!(v.notes.is_empty(), "{:?}", v.notes);
}

#[test]
fn consistent_with_tifffile_on_pillow_test_images() {
    // reference: the TIFF images in Pillow's sdist (Tests/images), read by tifffile
    let images = common::reference_path("pillow/Tests/images");
    let entries = common::Reference::new("tiff_pillow_images", "tiff_pillow_refs.py")
        .path_arg(&images)
        .input(&images)
        .run();
    let (mut matched, mut unsupported, mut inconsistent, mut broken, mut known) = (0, 0, 0, 0, 0);
    let mut failures = Vec::new();
    for e in entries.as_array().unwrap() {
        let path = PathBuf::from(e["path"].as_str().unwrap());
        let name = path.file_name().unwrap().to_string_lossy().into_owned();
        let kind = e["kind"].as_str().unwrap();
        let ours = sutura_core::io::tiff::open_file(&path, &limited(), &Progress::none());
        let damaged = !e["damaged"].as_array().unwrap().is_empty();
        if let Some((_, why)) = KNOWN_REFUSALS.iter().find(|(n, _)| *n == name) {
            // a file tifffile reads but the tiff crate refuses; must still be a clean error
            assert!(
                matches!(
                    ours,
                    Err(IoError::Unsupported { .. } | IoError::Corrupt { .. })
                ),
                "{name}: {why}"
            );
            known += 1;
            continue;
        }
        match (kind, &ours) {
            ("ok", Ok(v)) => {
                if v.dims() == dims_of(&e["shape"])
                    && v.dtype() == dtype_of(e["dtype"].as_str().unwrap())
                    && sha256_hex(&voxel_bytes_le(v)) == e["voxels_sha256"].as_str().unwrap()
                {
                    matched += 1;
                } else {
                    failures.push(format!("{name}: voxels differ from tifffile's"));
                }
            }
            ("unsupported", Err(IoError::Unsupported { .. })) => unsupported += 1,
            ("inconsistent", Err(IoError::Inconsistent { .. } | IoError::Unsupported { .. })) => {
                inconsistent += 1;
            }
            ("error", Err(_)) => broken += 1,
            // tifffile worked around a damaged structure; refusing it is also correct
            (_, Err(IoError::Corrupt { .. })) if damaged => broken += 1,
            _ => failures.push(format!(
                "{name}: tifffile says {kind} ({}), we say {:?}",
                e["why"],
                ours.as_ref()
                    .map(|v| (v.dims(), v.dtype()))
                    .map_err(ToString::to_string)
            )),
        }
    }
    println!(
        "Pillow TIFF images: {matched} matched, {unsupported} refused as unsupported, {inconsistent} refused as inconsistent, {broken} malformed refused, {known} known decoder refusals"
    );
    assert!(failures.is_empty(), "{}", failures.join("\n"));
    assert!(matched >= 5, "only {matched} files matched");
    assert!(broken >= 1, "no malformed file was seen");
}

/// Files tifffile reads that tiff 0.11 refuses when it parses the first directory, and why.
const KNOWN_REFUSALS: &[(&str, &str)] = &[
    (
        "10ct_32bit_128.tiff",
        "32-bit float with PhotometricInterpretation 0 (white is zero): the crate reports an unknown photometric interpretation",
    ),
    (
        "old-style-jpeg-compression-no-samplesperpixel.tif",
        "YCbCr without SamplesPerPixel: the crate reports inconsistent sizes before colour can be checked",
    ),
    (
        "tiff_wrong_bits_per_sample_2.tiff",
        "RGB with a BitsPerSample count that does not match: the crate reports inconsistent sizes",
    ),
];

fn limited() -> OpenOptions {
    OpenOptions {
        limits: Limits {
            max_voxel_bytes: 256 << 20,
            ..Limits::default()
        },
        ..OpenOptions::default()
    }
}

#[test]
fn truncated_and_corrupted_files_fail_cleanly() {
    // no outside reference: any Ok or Err is fine, a panic is not (common practice: mutation
    // fuzzing of a parser); files written by tifffile (target/refdata/tifffile)
    let dir = tempfile::tempdir().unwrap();
    let written = common::reference_path("tifffile");
    let sources: Vec<PathBuf> = [
        "bigtiff_u16_none_be",
        "f32_zlib8_float_le_strips",
        "i16_none_none_le_strips",
        "u16_lzw_horizontal_be_tiles",
        "u8_packbits_none_le_strips",
    ]
    .iter()
    .map(|n| written.join(format!("{n}.tif")))
    .collect();
    assert!(sources.iter().all(|p| p.is_file()), "{sources:?}");
    let target = dir.path().join("mutant.tif");
    let mut tried = 0;
    for src in &sources {
        let good = std::fs::read(src).unwrap();
        let len = good.len();
        let step = (len / 97).max(1);
        for cut in (0..len).step_by(step) {
            std::fs::write(&target, &good[..cut]).unwrap();
            let r = tiff::open_file(&target, &limited(), &Progress::none());
            assert!(
                r.is_err() || cut + 64 >= len,
                "{}: truncated at {cut} read fine",
                src.display()
            );
            tried += 1;
        }
        // the directory and tag area is at the start (tifffile) or the end (BigTIFF writers):
        // corrupt the first 512 and last 512 bytes one at a time, and a sample elsewhere
        let positions: Vec<usize> = (0..len.min(512))
            .chain(len.saturating_sub(512)..len)
            .chain((0..len).step_by(step))
            .collect();
        for pos in positions {
            for val in [0x00u8, 0xff, 0x7f] {
                let mut bad = good.clone();
                if bad[pos] == val {
                    continue;
                }
                bad[pos] = val;
                std::fs::write(&target, &bad).unwrap();
                let _ = tiff::open_file(&target, &limited(), &Progress::none());
                tried += 1;
            }
        }
    }
    println!("{tried} mutated files opened without a panic");
}

#[test]
fn absurd_and_zero_dimensions_are_refused() {
    // TIFF 6.0 layout: header, one IFD with ImageWidth/ImageLength/BitsPerSample/StripOffsets/
    // StripByteCounts; written by hand so the header can claim anything
    fn tiny(width: u32, height: u32) -> Vec<u8> {
        let mut f = b"II*\0".to_vec();
        f.extend(8u32.to_le_bytes());
        let entries: [(u16, u16, u32, u32); 7] = [
            (256, 4, 1, width),
            (257, 4, 1, height),
            (258, 3, 1, 16),
            (262, 3, 1, 1),
            (273, 4, 1, 200),
            (278, 4, 1, height),
            (279, 4, 1, 4),
        ];
        f.extend((entries.len() as u16).to_le_bytes());
        for (tag, ty, count, value) in entries {
            f.extend(tag.to_le_bytes());
            f.extend(ty.to_le_bytes());
            f.extend(count.to_le_bytes());
            f.extend(value.to_le_bytes());
        }
        f.extend(0u32.to_le_bytes());
        f.resize(204, 0);
        f
    }
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("x.tif");
    for (w, h) in [(0, 10), (10, 0), (u32::MAX, u32::MAX), (1 << 20, 1 << 20)] {
        std::fs::write(&p, tiny(w, h)).unwrap();
        let e = tiff::open_file(&p, &limited(), &Progress::none()).unwrap_err();
        assert!(
            matches!(e, IoError::Corrupt { .. } | IoError::LimitExceeded { .. }),
            "{w}x{h}: {e}"
        );
        assert!(e.to_string().contains("x.tif"), "{e}");
    }
    // and the same header with sane dimensions but a strip beyond the end of the file
    std::fs::write(&p, tiny(4, 4)).unwrap();
    let e = tiff::open_file(&p, &limited(), &Progress::none()).unwrap_err();
    assert!(matches!(e, IoError::Corrupt { .. }), "{e}");
}
