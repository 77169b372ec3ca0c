//! Checking every specimen's scan against its record, for `project check` and the
//! workstation: one status per specimen (fine, missing, moved, another scan, unreadable), so a
//! problem with one scan never hides the others.

use std::path::{Path, PathBuf};

use super::{ScanRecord, project_dir};
use crate::io::{IoError, Progress};
use crate::landmarks::fingerprint::Mismatch;

/// How many folder entries the search for a moved scan looks at, at most: the project's folder
/// and two levels below it are searched, and a folder of a million files does not stall it.
const MOVED_SEARCH_ENTRIES: usize = 20_000;

/// How a specimen's scan stands against its record.
#[derive(Debug)]
pub enum ScanStatus {
    /// The scan at the recorded path is the one that was digitised.
    Fine,
    /// Nothing at the recorded path.
    Missing { path: PathBuf },
    /// Nothing at the recorded path, but a scan of the same name whose files match the record
    /// lies at `found` (in the project's folder or up to two levels below it).
    Moved { path: PathBuf, found: PathBuf },
    /// The scan at the recorded path is not the one digitised.
    Mismatch(Mismatch),
    /// The scan at the recorded path cannot be read.
    Unreadable(IoError),
}

impl ScanStatus {
    /// A one-word label for tables: `ok`, `MISSING`, `MOVED`, `MISMATCH`, `UNREADABLE`.
    #[must_use]
    pub fn label(&self) -> &'static str {
        match self {
            Self::Fine => "ok",
            Self::Missing { .. } => "MISSING",
            Self::Moved { .. } => "MOVED",
            Self::Mismatch(_) => "MISMATCH",
            Self::Unreadable(_) => "UNREADABLE",
        }
    }

    #[must_use]
    pub fn is_fine(&self) -> bool {
        matches!(self, Self::Fine)
    }
}

impl std::fmt::Display for ScanStatus {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Self::Fine => write!(f, "the scan digitised"),
            Self::Missing { path } => write!(f, "{}: no such file or folder", path.display()),
            Self::Moved { path, found } => write!(
                f,
                "{}: no such file or folder; a scan matching the record is at {}",
                path.display(),
                found.display()
            ),
            Self::Mismatch(m) => write!(f, "{m}"),
            Self::Unreadable(e) => write!(f, "{e}"),
        }
    }
}

impl ScanRecord {
    /// Checks the scan against the record: its files (sizes and header hashes), and with
    /// `full` also the loaded grid, voxels and placement. Never fails: whatever is wrong is the
    /// status.
    #[must_use]
    pub fn status(&self, project_file: &Path, full: bool) -> ScanStatus {
        let path = self.resolve(project_file);
        match std::fs::metadata(&path) {
            Err(e) if e.kind() == std::io::ErrorKind::NotFound => {
                return match self.find_moved(project_file) {
                    Some(found) => ScanStatus::Moved { path, found },
                    None => ScanStatus::Missing { path },
                };
            }
            Err(e) => return ScanStatus::Unreadable(IoError::Os { path, source: e }),
            Ok(_) => {}
        }
        let checked = if full {
            self.open(project_file, &Progress::none()).map(|(_, m)| m)
        } else {
            self.check_files(project_file)
        };
        match checked {
            Ok(None) => ScanStatus::Fine,
            Ok(Some(m)) => ScanStatus::Mismatch(m),
            Err(e) => ScanStatus::Unreadable(e),
        }
    }

    /// A scan with the recorded file name whose files match the record, in the project's
    /// folder or up to two levels below it (breadth first, bounded).
    fn find_moved(&self, project_file: &Path) -> Option<PathBuf> {
        let name = Path::new(&self.path).file_name()?.to_owned();
        let mut level = vec![project_dir(project_file)];
        let mut seen = 0usize;
        for _ in 0..3 {
            let mut next = Vec::new();
            for dir in level {
                let Ok(entries) = std::fs::read_dir(&dir) else {
                    continue;
                };
                for entry in entries.filter_map(Result::ok) {
                    seen += 1;
                    if seen > MOVED_SEARCH_ENTRIES {
                        return None;
                    }
                    let p = entry.path();
                    let is_dir = entry.file_type().is_ok_and(|t| t.is_dir());
                    if entry.file_name() == name
                        && matches!(self.fingerprint.check_files(&p), Ok(None))
                    {
                        return Some(p);
                    }
                    if is_dir {
                        next.push(p);
                    }
                }
            }
            level = next;
        }
        None
    }
}
