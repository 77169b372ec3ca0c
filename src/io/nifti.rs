//! NIfTI-1 / NIfTI-2 loader and writer.
use super::{IoError, OpenOptions, Progress};
use crate::volume::Volume;
use std::path::Path;

/// Opens a `.nii`, `.nii.gz` or `.hdr`/`.img` pair.
pub fn open(
    path: &Path,
    _options: &OpenOptions,
    _progress: &Progress<'_>,
) -> Result<Volume, IoError> {
    Err(IoError::unsupported(path, "NIfTI is not read yet"))
}
