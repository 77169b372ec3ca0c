//! Reading and writing scans.
//!
//! [`open`] detects the format of a path (a folder of TIFF slices, a single- or multi-page
//! (Big)TIFF, a NIfTI-1/2 `.nii`, `.nii.gz` or `.hdr`/`.img` pair, a folder of DICOM slices or
//! a file of one) and hands it to the loader in [`tiff`], [`nifti`] or [`dicom`]. Loaders check every header against [`Limits`] before allocating, report
//! progress through a [`Progress`] callback, and fail with an [`IoError`] that names the file and
//! what is wrong with it. Writers produce NIfTI-1 and TIFF stacks that read back exactly.
//! [`slices`] reads any of these formats a slab of slices at a time, for conversions whose
//! memory must not grow with the scan.
//!
//! Must not import `render` or `gui`.

pub mod dicom;
pub mod names;
pub mod nifti;
pub mod slices;
pub mod tiff;

use crate::volume::{Volume, VolumeError};
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicBool, Ordering};

/// What went wrong, sorted by who is at fault. Every variant names the file.
#[derive(Debug, thiserror::Error)]
pub enum IoError {
    /// The operating system could not read or write the file.
    #[error("{}: {source}", path.display())]
    Os {
        path: PathBuf,
        #[source]
        source: std::io::Error,
    },
    /// The file is damaged or is not what its name says (truncated, bad header, bad data).
    #[error("{}: {what}", path.display())]
    Corrupt { path: PathBuf, what: String },
    /// The file is valid but uses a feature Sutura does not read.
    #[error("{}: unsupported: {what}", path.display())]
    Unsupported { path: PathBuf, what: String },
    /// The header asks for more than the decode limits allow.
    #[error("{}: {what} exceeds Sutura's limit of {limit}: the header is damaged, or the scan is larger than Sutura opens", path.display())]
    LimitExceeded {
        path: PathBuf,
        what: String,
        limit: String,
    },
    /// The files of one scan do not agree with each other (a slice of another size or type).
    #[error("{}: {what}", path.display())]
    Inconsistent { path: PathBuf, what: String },
    /// The caller asked for something that cannot be done (no such format, empty folder).
    #[error("{}: {what}", path.display())]
    Usage { path: PathBuf, what: String },
    /// The load was cancelled through the progress callback.
    #[error("{}: loading cancelled", path.display())]
    Cancelled { path: PathBuf },
}

impl IoError {
    pub(crate) fn os(path: &Path, source: std::io::Error) -> Self {
        Self::Os {
            path: path.to_owned(),
            source,
        }
    }

    pub(crate) fn corrupt(path: &Path, what: impl Into<String>) -> Self {
        Self::Corrupt {
            path: path.to_owned(),
            what: detail(what),
        }
    }

    pub(crate) fn unsupported(path: &Path, what: impl Into<String>) -> Self {
        Self::Unsupported {
            path: path.to_owned(),
            what: detail(what),
        }
    }

    pub(crate) fn inconsistent(path: &Path, what: impl Into<String>) -> Self {
        Self::Inconsistent {
            path: path.to_owned(),
            what: detail(what),
        }
    }

    pub(crate) fn usage(path: &Path, what: impl Into<String>) -> Self {
        Self::Usage {
            path: path.to_owned(),
            what: detail(what),
        }
    }

    pub(crate) fn volume(path: &Path, e: &VolumeError) -> Self {
        Self::corrupt(path, e.to_string())
    }
}

/// An error of the atomic writer (`export::write_atomic`) as an error of the file written.
impl From<crate::export::ExportError> for IoError {
    fn from(e: crate::export::ExportError) -> Self {
        match e {
            crate::export::ExportError::Os { path, source } => Self::os(&path, source),
            crate::export::ExportError::Format { path, what } => Self::usage(&path, what),
        }
    }
}

/// What is wrong inside a file, as one bounded line (see [`crate::message`]).
fn detail(what: impl Into<String>) -> String {
    crate::message::one_line(&what.into(), crate::message::MAX_DETAIL_CHARS)
}

/// Decode limits: a header that claims more is refused before anything is allocated.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Limits {
    /// Largest voxel buffer, in bytes. Default 64 GiB: more than any micro-CT scan on a
    /// workstation, far less than a corrupt header's 2^63.
    pub max_voxel_bytes: u64,
    /// Largest extent of one axis, in voxels. Default 65,536.
    pub max_axis: u64,
    /// Largest number of files (slices) in a folder. Default 65,536.
    pub max_slices: u64,
}

impl Default for Limits {
    fn default() -> Self {
        Self {
            max_voxel_bytes: 64 << 30,
            max_axis: 1 << 16,
            max_slices: 1 << 16,
        }
    }
}

impl Limits {
    /// Checks dims and voxel size against the limits; returns the voxel count.
    pub fn check(
        &self,
        path: &Path,
        dims: [u64; 3],
        bytes_per_voxel: u64,
    ) -> Result<usize, IoError> {
        for (axis, &n) in dims.iter().enumerate() {
            if n == 0 {
                return Err(IoError::corrupt(
                    path,
                    format!("axis {axis} has zero extent"),
                ));
            }
            if n > self.max_axis {
                return Err(IoError::LimitExceeded {
                    path: path.to_owned(),
                    what: format!("axis {axis} extent {n}"),
                    limit: self.max_axis.to_string(),
                });
            }
        }
        let bytes = dims[0]
            .checked_mul(dims[1])
            .and_then(|v| v.checked_mul(dims[2]))
            .and_then(|v| v.checked_mul(bytes_per_voxel));
        match bytes {
            Some(b) if b <= self.max_voxel_bytes => usize::try_from(dims[0] * dims[1] * dims[2])
                .map_err(|_| IoError::LimitExceeded {
                    path: path.to_owned(),
                    what: "voxel count".into(),
                    limit: usize::MAX.to_string(),
                }),
            _ => Err(IoError::LimitExceeded {
                path: path.to_owned(),
                what: format!(
                    "{}x{}x{} voxels of {bytes_per_voxel} bytes",
                    dims[0], dims[1], dims[2]
                ),
                limit: if self.max_voxel_bytes.is_multiple_of(1 << 30) {
                    format!("{} GiB", self.max_voxel_bytes >> 30)
                } else {
                    format!("{} bytes", self.max_voxel_bytes)
                },
            }),
        }
    }
}

/// Receives progress as `(done, total)` in loader-defined units (slices, bytes). Return `false`
/// to cancel the load.
pub type ProgressFn<'a> = dyn Fn(u64, u64) -> bool + Sync + 'a;

/// A progress sink shared by parallel decode workers; remembers a cancel.
pub struct Progress<'a> {
    callback: Option<&'a ProgressFn<'a>>,
    cancelled: AtomicBool,
}

impl<'a> Progress<'a> {
    #[must_use]
    pub fn new(callback: Option<&'a ProgressFn<'a>>) -> Self {
        Self {
            callback,
            cancelled: AtomicBool::new(false),
        }
    }

    /// No reporting.
    #[must_use]
    pub fn none() -> Self {
        Self::new(None)
    }

    /// Reports progress; returns `false` once the callback has asked to cancel.
    pub fn report(&self, done: u64, total: u64) -> bool {
        if self.cancelled.load(Ordering::Relaxed) {
            return false;
        }
        if let Some(cb) = self.callback
            && !cb(done, total)
        {
            self.cancelled.store(true, Ordering::Relaxed);
            return false;
        }
        true
    }

    #[must_use]
    pub fn is_cancelled(&self) -> bool {
        self.cancelled.load(Ordering::Relaxed)
    }
}

/// Options for [`open`].
#[derive(Clone, Debug, Default)]
pub struct OpenOptions {
    pub limits: Limits,
    /// Voxel size in mm to use where the file has none (TIFF). `None`: the file's own
    /// resolution tags if present, else 1 mm with a note saying so.
    pub voxel_size_mm: Option<[f64; 3]>,
    /// The `SeriesInstanceUID` of the DICOM series to read from a folder that holds several.
    /// `None`: the folder's only series (or the series of the DICOM file given).
    pub dicom_series: Option<String>,
}

/// The formats [`open`] recognises.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Format {
    TiffFolder,
    Tiff,
    Nifti,
    /// A folder of DICOM slices, or one DICOM file (read with the rest of its series).
    Dicom,
}

impl Format {
    /// Whether the file records its voxel size and placement in full (`NIfTI`, DICOM), so that a
    /// voxel size given by the user overrides rather than supplies it.
    #[must_use]
    pub fn records_placement(self) -> bool {
        matches!(self, Self::Nifti | Self::Dicom)
    }
}

/// Checks that `path` is a regular file (following links) without opening it: opening a named
/// pipe waits for a writer forever, and a device or socket is no document. Every reader of a
/// user's file (scan, project, scheme, landmark table) calls this first.
pub fn require_regular_file(path: &Path) -> std::io::Result<std::fs::Metadata> {
    use std::os::unix::fs::FileTypeExt;
    let meta = std::fs::metadata(path)?;
    if meta.is_file() {
        return Ok(meta);
    }
    let t = meta.file_type();
    let what = if meta.is_dir() {
        "a folder"
    } else if t.is_fifo() {
        "a named pipe (FIFO)"
    } else if t.is_socket() {
        "a socket"
    } else if t.is_block_device() || t.is_char_device() {
        "a device"
    } else {
        "not a regular file"
    };
    Err(std::io::Error::new(
        std::io::ErrorKind::InvalidInput,
        format!("{what}, not a file Sutura can read"),
    ))
}

/// Tells the format of a path from the file system and the first bytes of the file.
pub fn detect(path: &Path) -> Result<Format, IoError> {
    let meta = std::fs::metadata(path).map_err(|e| IoError::os(path, e))?;
    if meta.is_dir() {
        // TIFF slices first (the older rule); a folder with no TIFF but DICOM files is DICOM
        let limit = Limits::default().max_slices;
        if tiff::list_slices(path, limit).is_err()
            && dicom::dicom_files(path, limit).is_ok_and(|f| !f.is_empty())
        {
            return Ok(Format::Dicom);
        }
        return Ok(Format::TiffFolder);
    }
    require_regular_file(path).map_err(|e| IoError::os(path, e))?;
    let mut magic = [0u8; 4];
    {
        use std::io::Read;
        let mut f = std::fs::File::open(path).map_err(|e| IoError::os(path, e))?;
        let n = f.read(&mut magic).map_err(|e| IoError::os(path, e))?;
        if n < 4 {
            return Err(IoError::corrupt(
                path,
                format!("file is only {n} bytes long"),
            ));
        }
    }
    let name = path
        .file_name()
        .map(|n| n.to_string_lossy().to_lowercase())
        .unwrap_or_default();
    // the DICOM marker first: a DICOM file's free preamble may hold a TIFF header
    if dicom::has_dicom_marker(path) {
        return Ok(Format::Dicom);
    }
    if matches!(&magic, b"II*\0" | b"MM\0*" | b"II+\0" | b"MM\0+") {
        return Ok(Format::Tiff);
    }
    if names::is_dicom_name(&name) {
        return Ok(Format::Dicom);
    }
    #[allow(
        clippy::case_sensitive_file_extension_comparisons,
        reason = "`name` is already lowercased"
    )]
    let nifti_name = name.ends_with(".nii")
        || name.ends_with(".hdr")
        || name.ends_with(".img")
        || name.ends_with(".nii.gz");
    if magic[..2] == [0x1f, 0x8b] || nifti_name {
        return Ok(Format::Nifti);
    }
    // a NIfTI header starts with sizeof_hdr = 348 (NIfTI-1) or 540 (NIfTI-2), either byte order
    let le = u32::from_le_bytes(magic);
    let be = u32::from_be_bytes(magic);
    if [348, 540].contains(&le) || [348, 540].contains(&be) {
        return Ok(Format::Nifti);
    }
    Err(IoError::usage(
        path,
        "not a scan Sutura reads (expected a TIFF, a folder of TIFF slices, NIfTI .nii/.nii.gz/.hdr, or DICOM)",
    ))
}

/// Opens a scan of any supported format.
pub fn open(
    path: &Path,
    options: &OpenOptions,
    progress: &Progress<'_>,
) -> Result<Volume, IoError> {
    match detect(path)? {
        Format::TiffFolder => tiff::open_folder(path, options, progress),
        Format::Tiff => tiff::open_file(path, options, progress),
        Format::Nifti => nifti::open(path, options, progress),
        Format::Dicom => dicom::open(path, options, progress),
    }
}
