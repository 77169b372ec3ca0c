//! The slices of a folder: which files count, and in what order.

use crate::io::IoError;
use std::cmp::Ordering;
use std::path::{Path, PathBuf};

/// The `.tif`/`.tiff` files (any case) of a folder, hidden files (`.name`) left out, in natural
/// order of their names. Fails on an empty folder and on more files than `max_slices`.
pub fn list_slices(dir: &Path, max_slices: u64) -> Result<Vec<PathBuf>, IoError> {
    let entries = std::fs::read_dir(dir).map_err(|e| IoError::os(dir, e))?;
    let mut files = Vec::new();
    for entry in entries {
        let entry = entry.map_err(|e| IoError::os(dir, e))?;
        let name = entry.file_name();
        let name = name.to_string_lossy();
        if name.starts_with('.') {
            continue;
        }
        let lower = name.to_lowercase();
        #[allow(
            clippy::case_sensitive_file_extension_comparisons,
            reason = "`lower` is already lowercased"
        )]
        if !(lower.ends_with(".tif") || lower.ends_with(".tiff")) {
            continue;
        }
        let path = entry.path();
        if !path.is_file() {
            continue;
        }
        if files.len() as u64 >= max_slices {
            return Err(IoError::LimitExceeded {
                path: dir.to_owned(),
                what: "number of TIFF slices in the folder".into(),
                limit: max_slices.to_string(),
            });
        }
        files.push(path);
    }
    if files.is_empty() {
        return Err(IoError::usage(
            dir,
            "the folder holds no .tif or .tiff files",
        ));
    }
    files.sort_by(|a, b| {
        let a = a.file_name().unwrap_or_default().to_string_lossy();
        let b = b.file_name().unwrap_or_default().to_string_lossy();
        natural_cmp(&a, &b)
    });
    Ok(files)
}

/// Natural order: runs of digits compare by value (`s2` < `s10`), the rest by character; ties
/// (`s02` vs `s2`) are broken by the plain string order so the order is total.
#[must_use]
pub fn natural_cmp(a: &str, b: &str) -> Ordering {
    let (mut x, mut y) = (a.as_bytes(), b.as_bytes());
    loop {
        match (x.first(), y.first()) {
            (None, None) => return a.cmp(b),
            (None, Some(_)) => return Ordering::Less,
            (Some(_), None) => return Ordering::Greater,
            (Some(c), Some(d)) if c.is_ascii_digit() && d.is_ascii_digit() => {
                let nx = x.iter().take_while(|c| c.is_ascii_digit()).count();
                let ny = y.iter().take_while(|c| c.is_ascii_digit()).count();
                let (dx, dy) = (trim_zeros(&x[..nx]), trim_zeros(&y[..ny]));
                // compare digit strings by length, then lexically: no overflow on long runs
                let ord = dx.len().cmp(&dy.len()).then_with(|| dx.cmp(dy));
                if ord != Ordering::Equal {
                    return ord;
                }
                x = &x[nx..];
                y = &y[ny..];
            }
            (Some(c), Some(d)) => {
                if c != d {
                    return c.cmp(d);
                }
                x = &x[1..];
                y = &y[1..];
            }
        }
    }
}

fn trim_zeros(d: &[u8]) -> &[u8] {
    let n = d.iter().take_while(|&&c| c == b'0').count();
    &d[n..]
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn digits_compare_by_value() {
        let mut v = vec!["s10", "s2", "s1", "slice_0010", "slice_0009", "a", "s02"];
        v.sort_by(|a, b| natural_cmp(a, b));
        assert_eq!(
            v,
            ["a", "s1", "s02", "s2", "s10", "slice_0009", "slice_0010"]
        );
    }

    #[test]
    fn long_digit_runs_do_not_overflow() {
        let a = "x123456789012345678901234567890";
        let b = "x123456789012345678901234567891";
        assert_eq!(natural_cmp(a, b), Ordering::Less);
    }

    #[test]
    fn lists_only_visible_tiffs() {
        let dir = tempfile::tempdir().unwrap();
        for n in ["b10.TIF", "b9.tiff", ".hidden.tif", "notes.txt", "b1.tif"] {
            std::fs::write(dir.path().join(n), b"x").unwrap();
        }
        let files = list_slices(dir.path(), 100).unwrap();
        let names: Vec<_> = files
            .iter()
            .map(|p| p.file_name().unwrap().to_string_lossy().into_owned())
            .collect();
        assert_eq!(names, ["b1.tif", "b9.tiff", "b10.TIF"]);
        assert!(matches!(
            list_slices(dir.path(), 2),
            Err(IoError::LimitExceeded { .. })
        ));
    }
}
