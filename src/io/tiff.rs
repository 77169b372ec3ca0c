//! TIFF loader and writer (folder of slices, multi-page, BigTIFF).
use super::{IoError, OpenOptions, Progress};
use crate::volume::Volume;
use std::path::Path;

/// Opens a folder of single-page TIFF slices.
pub fn open_folder(
    path: &Path,
    _options: &OpenOptions,
    _progress: &Progress<'_>,
) -> Result<Volume, IoError> {
    Err(IoError::unsupported(path, "TIFF folders are not read yet"))
}

/// Opens a single- or multi-page (Big)TIFF file.
pub fn open_file(
    path: &Path,
    _options: &OpenOptions,
    _progress: &Progress<'_>,
) -> Result<Volume, IoError> {
    Err(IoError::unsupported(path, "TIFF files are not read yet"))
}
