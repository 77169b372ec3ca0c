//! Names of scans on disk: the order files are listed and stacked in, which names are scans,
//! and the specimen id a scan proposes. Both front ends (file lists, `project new`, the
//! workstation's new-project dialog) and the TIFF folder and DICOM series loaders use these
//! rules, so a folder lists, stacks and names its scans the same way everywhere.
//!
//! A DICOM series is a folder: its files (named `.dcm`, or with any name and the `DICM` marker
//! at byte 128, see [`is_dicom_file`]) are slices, not scans of their own.

use std::cmp::Ordering;
use std::path::{Path, PathBuf};

use super::IoError;

/// The name endings of the scans Sutura reads (lower case): files, and OME-Zarr store folders.
pub const SCAN_SUFFIXES: [&str; 8] = [
    ".ome.zarr",
    ".zarr",
    ".nii.gz",
    ".nii",
    ".hdr",
    ".img",
    ".tiff",
    ".tif",
];

/// Whether a file name is a DICOM file's by its ending (`.dcm`, any case).
#[must_use]
pub fn is_dicom_name(name: &str) -> bool {
    name.to_lowercase().ends_with(".dcm")
}

/// Whether a file is DICOM: named `.dcm`, or carrying the `DICM` marker at byte 128 whatever
/// its name (series are often written without extensions). Reads at most 132 bytes.
#[must_use]
pub fn is_dicom_file(path: &Path) -> bool {
    let name = path
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default();
    is_dicom_name(&name) || super::dicom::has_dicom_marker(path)
}

/// Natural order of names: runs of digits compare by value (`s2` < `s10`, no overflow on long
/// runs), other characters case-insensitively; names equal by those rules (`s02` and `s2`,
/// `A` and `a`) are ordered by their plain text, so the order is total and a sort is stable
/// across platforms.
#[must_use]
pub fn natural_cmp(a: &str, b: &str) -> Ordering {
    let (mut x, mut y) = (a, b);
    loop {
        let (Some(c), Some(d)) = (x.chars().next(), y.chars().next()) else {
            return match (x.is_empty(), y.is_empty()) {
                (true, true) => a.cmp(b),
                (true, false) => Ordering::Less,
                _ => Ordering::Greater,
            };
        };
        if c.is_ascii_digit() && d.is_ascii_digit() {
            let nx = x.bytes().take_while(u8::is_ascii_digit).count();
            let ny = y.bytes().take_while(u8::is_ascii_digit).count();
            let (dx, dy) = (
                x[..nx].trim_start_matches('0'),
                y[..ny].trim_start_matches('0'),
            );
            // digit strings by length, then lexically: their values, without parsing
            let ord = dx.len().cmp(&dy.len()).then_with(|| dx.cmp(dy));
            if ord != Ordering::Equal {
                return ord;
            }
            x = &x[nx..];
            y = &y[ny..];
        } else {
            let ord = c.to_lowercase().cmp(d.to_lowercase());
            if ord != Ordering::Equal {
                return ord;
            }
            x = &x[c.len_utf8()..];
            y = &y[d.len_utf8()..];
        }
    }
}

/// Whether a file name is one of the scan files Sutura reads, by its ending (any case).
#[must_use]
pub fn is_scan_name(name: &str) -> bool {
    let n = name.to_lowercase();
    SCAN_SUFFIXES.iter().any(|e| n.ends_with(e))
}

/// The specimen id a scan proposes: its file name without the scan ending (and without a
/// `_slices` suffix on a folder of slices), characters an id may not hold replaced by `_`.
#[must_use]
pub fn specimen_id_from_scan(scan: &Path) -> String {
    let name = scan
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default();
    let lower = name.to_lowercase();
    let stem = SCAN_SUFFIXES
        .iter()
        .find(|e| lower.ends_with(*e))
        .map_or(name.as_str(), |e| &name[..name.len() - e.len()]);
    let stem = stem.strip_suffix("_slices").unwrap_or(stem);
    let id: String = stem
        .trim_start_matches(|c: char| !c.is_ascii_alphanumeric())
        .chars()
        .map(|c| {
            if c.is_ascii_alphanumeric() || matches!(c, '_' | '.' | '-') {
                c
            } else {
                '_'
            }
        })
        .take(64)
        .collect();
    if id.is_empty() { "specimen".into() } else { id }
}

/// The scans in a folder, in natural order of their names: scan files, and folders that hold
/// TIFF slices or DICOM files. Hidden entries (`.name`) are left out.
pub fn scans_in(dir: &Path) -> Result<Vec<PathBuf>, IoError> {
    let mut out = Vec::new();
    for entry in std::fs::read_dir(dir).map_err(|e| IoError::os(dir, e))? {
        let path = entry.map_err(|e| IoError::os(dir, e))?.path();
        let name = path
            .file_name()
            .map(|n| n.to_string_lossy().into_owned())
            .unwrap_or_default();
        if name.starts_with('.') {
            continue;
        }
        let is_scan = if path.is_dir() {
            let limit = super::Limits::default().max_slices;
            crate::store::is_store(&path)
                || super::tiff::list_slices(&path, limit).is_ok()
                || super::dicom::dicom_files(&path, limit).is_ok_and(|f| !f.is_empty())
        } else {
            is_scan_name(&name) && !name.to_lowercase().ends_with(".img")
        };
        if is_scan {
            out.push(path);
        }
    }
    out.sort_by(|a, b| natural_cmp(&a.to_string_lossy(), &b.to_string_lossy()));
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn digits_compare_by_value_and_letters_without_case() {
        let mut v = vec![
            "s10",
            "s2",
            "S1",
            "slice_0010",
            "slice_0009",
            "a",
            "s02",
            "B",
        ];
        v.sort_by(|a, b| natural_cmp(a, b));
        assert_eq!(
            v,
            [
                "a",
                "B",
                "S1",
                "s02",
                "s2",
                "s10",
                "slice_0009",
                "slice_0010"
            ]
        );
    }

    #[test]
    fn the_order_is_total() {
        assert_eq!(natural_cmp("A", "a"), "A".cmp("a"));
        assert_eq!(natural_cmp("s02", "s2"), "s02".cmp("s2"));
        assert_eq!(natural_cmp("x", "x"), Ordering::Equal);
        assert_eq!(natural_cmp("x", "x1"), Ordering::Less);
        assert_eq!(natural_cmp("é2", "é10"), Ordering::Less);
    }

    #[test]
    fn long_digit_runs_do_not_overflow() {
        let a = "x123456789012345678901234567890";
        let b = "x123456789012345678901234567891";
        assert_eq!(natural_cmp(a, b), Ordering::Less);
    }

    #[test]
    fn specimen_ids_come_from_file_names() {
        for (p, id) in [
            ("a/HDC-002.nii.gz", "HDC-002"),
            ("HDC-001_slices", "HDC-001"),
            ("scan 7.TIF", "scan_7"),
            ("x.hdr", "x"),
            (".nii", "specimen"),
            ("_x-1.tif", "x-1"),
            ("stores/TF-003.ome.zarr", "TF-003"),
            ("TF-004.zarr", "TF-004"),
        ] {
            assert_eq!(specimen_id_from_scan(Path::new(p)), id, "{p}");
        }
    }

    #[test]
    fn scan_names_by_ending() {
        assert!(is_scan_name("A.NII.GZ"));
        assert!(is_scan_name("b.tiff"));
        assert!(!is_scan_name("notes.json"));
    }
}
