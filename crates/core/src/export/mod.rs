//! Open, documented file formats in and out: CSV (long and wide), JSON, `NumPy` `.npy`.
//!
//! Every file is written atomically ([`write_atomic`]): to a temporary file in the same folder,
//! flushed to disk, then renamed over the target, so a crash never leaves half a file where a
//! good one stood; [`write_atomic_keeping_backup`] also keeps the replaced file as a backup.
//! The README documents every column written here.
//!
//! [`table`] reads and writes landmark tables (the long CSV that every other tool can make);
//! [`points`] writes named point sets (a project's landmarks) as JSON, `.npy` with an index
//! file, and PLY point sets ([`ply`]).
//!
//! Must not import `gui`, nor `landmarks` (which uses this module to write its files).

pub mod ply;
pub mod points;
pub mod table;

use npyz::WriterBuilder;
use std::io::Write;
use std::path::{Path, PathBuf};

/// Why an export or import failed. Every variant names the file.
#[derive(Debug, thiserror::Error)]
pub enum ExportError {
    #[error("{}: {source}", path.display())]
    Os {
        path: PathBuf,
        #[source]
        source: std::io::Error,
    },
    #[error("{}: {what}", path.display())]
    Format { path: PathBuf, what: String },
}

impl ExportError {
    pub(crate) fn os(path: &Path, source: std::io::Error) -> Self {
        Self::Os {
            path: path.to_owned(),
            source,
        }
    }

    pub(crate) fn format(path: &Path, what: impl Into<String>) -> Self {
        Self::Format {
            path: path.to_owned(),
            what: crate::message::one_line(&what.into(), crate::message::MAX_DETAIL_CHARS),
        }
    }
}

/// Writes a file atomically: temp file in the same folder, fsync, rename, fsync of the folder.
/// The content is produced by `fill`, which may fail; then the target is left untouched.
pub fn write_atomic(
    path: &Path,
    fill: impl FnOnce(&mut dyn Write) -> std::io::Result<()>,
) -> Result<(), ExportError> {
    write_atomic_inner(path, None, |w| fill(w))
}

/// As [`write_atomic`], for writers that also seek (a TIFF encoder goes back to patch offsets):
/// `fill` gets the buffered temporary file itself.
pub fn write_atomic_seekable(
    path: &Path,
    fill: impl FnOnce(&mut std::io::BufWriter<std::fs::File>) -> std::io::Result<()>,
) -> Result<(), ExportError> {
    write_atomic_inner(path, None, fill)
}

/// As [`write_atomic`], and keeps the file it replaces as `backup`: once the new content is
/// safely on disk, the old file is hard-linked (copied where links are not supported) to a
/// temporary name and renamed over `backup`, then the new file is renamed over `path`. At every
/// instant `path` holds either the complete old file or the complete new one, and `backup`
/// either the previous backup or the complete old file.
pub fn write_atomic_keeping_backup(
    path: &Path,
    backup: &Path,
    fill: impl FnOnce(&mut dyn Write) -> std::io::Result<()>,
) -> Result<(), ExportError> {
    write_atomic_inner(path, Some(backup), |w| fill(w))
}

/// The temporary name beside `path` used while writing it: `.NAME.tmp-PID`.
fn temp_name(dir: &Path, path: &Path) -> Result<PathBuf, ExportError> {
    let name = path
        .file_name()
        .ok_or_else(|| ExportError::format(path, "not a file name"))?;
    Ok(dir.join(format!(
        "{}{}",
        temp_prefix(&name.to_string_lossy()),
        std::process::id()
    )))
}

/// `.NAME.tmp-`: what every temporary file of `NAME` starts with, before the writer's PID.
fn temp_prefix(name: &str) -> String {
    format!(".{name}.tmp-")
}

/// Removes the temporary files a killed writer left beside `path` (`.NAME.tmp-PID` and the
/// backup's `.NAME.bak.tmp-PID`, see [`write_atomic_keeping_backup`]) whose process is gone.
/// A writer that still runs keeps its file; so does one whose liveness cannot be told (no
/// `/proc`), since removing a live writer's file would lose its save. Returns the files
/// removed. Call it while holding the lock that keeps writers of `path` out (a project's lock).
pub fn remove_stale_temp_files(path: &Path, backup: Option<&Path>) -> Vec<PathBuf> {
    let dir = match path.parent() {
        Some(d) if !d.as_os_str().is_empty() => d.to_owned(),
        _ => PathBuf::from("."),
    };
    let prefixes: Vec<String> = [Some(path), backup]
        .into_iter()
        .flatten()
        .filter_map(|p| p.file_name())
        .map(|n| temp_prefix(&n.to_string_lossy()))
        .collect();
    let Ok(entries) = std::fs::read_dir(&dir) else {
        return Vec::new();
    };
    let proc_fs = Path::new("/proc/self").exists();
    let mut removed = Vec::new();
    for entry in entries.filter_map(Result::ok) {
        let name = entry.file_name().to_string_lossy().into_owned();
        let Some(pid) = prefixes
            .iter()
            .find_map(|p| name.strip_prefix(p.as_str()))
            .and_then(|rest| rest.parse::<u32>().ok())
        else {
            continue;
        };
        let alive = pid == std::process::id()
            || !proc_fs
            || Path::new("/proc").join(pid.to_string()).exists();
        let is_file = entry.file_type().is_ok_and(|t| t.is_file());
        if !alive && is_file && std::fs::remove_file(entry.path()).is_ok() {
            removed.push(entry.path());
        }
    }
    removed
}

fn write_atomic_inner(
    path: &Path,
    backup: Option<&Path>,
    fill: impl FnOnce(&mut std::io::BufWriter<std::fs::File>) -> std::io::Result<()>,
) -> Result<(), ExportError> {
    let dir = match path.parent() {
        Some(d) if !d.as_os_str().is_empty() => d.to_owned(),
        _ => PathBuf::from("."),
    };
    let tmp = temp_name(&dir, path)?;
    let result = (|| {
        let file = std::fs::File::create(&tmp)?;
        let mut w = std::io::BufWriter::with_capacity(1 << 20, file);
        fill(&mut w)?;
        let file = w
            .into_inner()
            .map_err(std::io::IntoInnerError::into_error)?;
        file.sync_all()?;
        drop(file);
        if let Some(backup) = backup
            && path.exists()
        {
            keep_backup(path, backup)?;
        }
        std::fs::rename(&tmp, path)?;
        if let Ok(d) = std::fs::File::open(&dir) {
            let _ = d.sync_all(); // best effort: not every file system syncs folders
        }
        Ok(())
    })();
    if result.is_err() {
        let _ = std::fs::remove_file(&tmp);
    }
    result.map_err(|e| ExportError::os(path, e))
}

/// Puts a copy of `path` at `backup` atomically (hard link, else a synced copy, then rename).
fn keep_backup(path: &Path, backup: &Path) -> std::io::Result<()> {
    let dir = match backup.parent() {
        Some(d) if !d.as_os_str().is_empty() => d.to_owned(),
        _ => PathBuf::from("."),
    };
    let tmp = temp_name(&dir, backup).map_err(std::io::Error::other)?;
    let _ = std::fs::remove_file(&tmp);
    let linked = std::fs::hard_link(path, &tmp).is_ok();
    if !linked {
        std::fs::copy(path, &tmp)?;
        std::fs::File::open(&tmp)?.sync_all()?;
    }
    if let Err(e) = std::fs::rename(&tmp, backup) {
        let _ = std::fs::remove_file(&tmp);
        return Err(e);
    }
    Ok(())
}

/// Writes an f64 array of the given shape (C order) as a `NumPy` `.npy` file.
pub fn write_npy_f64(path: &Path, shape: &[u64], data: &[f64]) -> Result<(), ExportError> {
    let n: u64 = shape.iter().product();
    if n != data.len() as u64 {
        return Err(ExportError::format(
            path,
            format!(
                "shape {shape:?} holds {n} values but {} were given",
                data.len()
            ),
        ));
    }
    write_atomic(path, |w| {
        let mut writer = npyz::WriteOptions::<f64>::new()
            .default_dtype()
            .shape(shape)
            .writer(w)
            .begin_nd()?;
        writer.extend(data.iter().copied())?;
        writer.finish()
    })
}

/// Writes pretty JSON atomically.
pub fn write_json<T: serde::Serialize>(path: &Path, value: &T) -> Result<(), ExportError> {
    write_atomic(path, |w| {
        serde_json::to_writer_pretty(&mut *w, value).map_err(std::io::Error::other)?;
        w.write_all(b"\n")
    })
}

/// Writes rows as CSV atomically, with a header row.
pub fn write_csv(path: &Path, header: &[&str], rows: &[Vec<String>]) -> Result<(), ExportError> {
    write_atomic(path, |w| {
        let mut c = csv::Writer::from_writer(w);
        c.write_record(header).map_err(std::io::Error::other)?;
        for r in rows {
            c.write_record(r).map_err(std::io::Error::other)?;
        }
        c.flush()
    })
}

/// Formats a float for CSV: shortest representation that reads back exactly; empty for NaN.
#[must_use]
pub fn num(v: f64) -> String {
    if v.is_nan() {
        String::new()
    } else {
        format!("{v}")
    }
}

#[cfg(test)]
#[allow(
    clippy::float_cmp,
    reason = "these tests check values that are exact by construction"
)]
mod tests {
    use super::*;

    #[test]
    fn atomic_write_leaves_old_file_on_failure() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("a.json");
        std::fs::write(&p, "old").unwrap();
        let r = write_atomic(&p, |w| {
            w.write_all(b"half")?;
            Err(std::io::Error::other("disk on fire"))
        });
        assert!(r.is_err());
        assert_eq!(std::fs::read_to_string(&p).unwrap(), "old");
        assert_eq!(
            std::fs::read_dir(dir.path()).unwrap().count(),
            1,
            "temp file removed"
        );
        write_atomic(&p, |w| w.write_all(b"new")).unwrap();
        assert_eq!(std::fs::read_to_string(&p).unwrap(), "new");
    }

    #[test]
    fn atomic_write_keeps_the_previous_version() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("p.json");
        let bak = dir.path().join("p.json.bak");
        write_atomic_keeping_backup(&p, &bak, |w| w.write_all(b"one")).unwrap();
        assert!(!bak.exists(), "nothing to back up the first time");
        write_atomic_keeping_backup(&p, &bak, |w| w.write_all(b"two")).unwrap();
        write_atomic_keeping_backup(&p, &bak, |w| w.write_all(b"three")).unwrap();
        assert_eq!(std::fs::read_to_string(&p).unwrap(), "three");
        assert_eq!(std::fs::read_to_string(&bak).unwrap(), "two");
        // a failed write touches neither the file nor its backup
        let r = write_atomic_keeping_backup(&p, &bak, |w| {
            w.write_all(b"fo")?;
            Err(std::io::Error::other("full"))
        });
        assert!(r.is_err());
        assert_eq!(std::fs::read_to_string(&p).unwrap(), "three");
        assert_eq!(std::fs::read_to_string(&bak).unwrap(), "two");
        assert_eq!(
            std::fs::read_dir(dir.path()).unwrap().count(),
            2,
            "no temp files left"
        );
    }

    /// Temporary files of killed writers (dead PIDs) are removed; a live writer's stay, and so
    /// do files that only look similar.
    #[test]
    fn stale_temp_files_of_dead_writers_are_removed() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("p.json");
        let bak = dir.path().join("p.json.bak");
        let mut child = std::process::Command::new("sleep")
            .arg("30")
            .spawn()
            .unwrap();
        // PIDs on Linux stay below 2^22 (pid_max), so these writers are gone
        let dead = [".p.json.tmp-999999991", ".p.json.bak.tmp-999999992"];
        let alive = [
            format!(".p.json.tmp-{}", std::process::id()),
            format!(".p.json.tmp-{}", child.id()),
        ];
        let others = [".p.json.tmp-notapid", ".q.json.tmp-999999993", "p.json"];
        for n in dead
            .iter()
            .copied()
            .chain(alive.iter().map(String::as_str))
            .chain(others)
        {
            std::fs::write(dir.path().join(n), "x").unwrap();
        }
        let mut removed = remove_stale_temp_files(&p, Some(&bak));
        removed.sort();
        let names: Vec<String> = removed
            .iter()
            .map(|r| r.file_name().unwrap().to_string_lossy().into_owned())
            .collect();
        assert_eq!(names, vec![dead[1].to_owned(), dead[0].to_owned()]);
        for n in alive.iter().map(String::as_str).chain(others) {
            assert!(dir.path().join(n).exists(), "{n} kept");
        }
        child.kill().unwrap();
        child.wait().unwrap();
        assert_eq!(
            remove_stale_temp_files(&p, Some(&bak)).len(),
            1,
            "the child's, once it is gone"
        );
    }

    #[test]
    fn npy_header_is_numpy_v1() {
        // NumPy format spec (numpy.lib.format, "NPY format version 1.0"): magic, version,
        // little-endian header length, then a dict with descr '<f8', C order, shape.
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("a.npy");
        write_npy_f64(&p, &[2, 3], &[1.0, 2.0, 3.0, 4.0, 5.0, 6.0]).unwrap();
        let b = std::fs::read(&p).unwrap();
        assert_eq!(&b[..6], b"\x93NUMPY");
        let hlen = u16::from_le_bytes([b[8], b[9]]) as usize;
        let header = std::str::from_utf8(&b[10..10 + hlen]).unwrap();
        assert!(header.contains("'descr': '<f8'"), "{header}");
        assert!(header.contains("'fortran_order': False"), "{header}");
        assert!(header.replace(' ', "").contains("'shape':(2,3"), "{header}");
        assert_eq!((10 + hlen) % 16, 0, "data aligned to 16 bytes");
        let last = f64::from_le_bytes(b[b.len() - 8..].try_into().unwrap());
        assert_eq!(last, 6.0);
        assert!(write_npy_f64(&p, &[4], &[1.0]).is_err());
    }
}
