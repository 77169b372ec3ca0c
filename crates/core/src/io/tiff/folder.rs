//! The slices of a folder: which files count, and in what order.

use crate::io::IoError;
use crate::io::names::natural_cmp;
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

#[cfg(test)]
mod tests {
    use super::*;

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
