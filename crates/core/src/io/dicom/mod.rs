//! DICOM series: a folder of CT slices, one file per slice, read with `dicom-object` and
//! `dicom-pixeldata`.
//!
//! - **Which files.** The visible regular files of the folder named `.dcm` (any case) or
//!   carrying the Part 10 marker (`DICM` at byte 128), whatever their name. DICOM files without
//!   pixel data (a DICOMDIR, a report) are left out with a note. Given a DICOM file instead of
//!   a folder, the series that file belongs to is read from its folder.
//! - **Which series.** Files are grouped by `SeriesInstanceUID`. One series is read: the only
//!   one, or the one [`OpenOptions::dicom_series`](super::OpenOptions) names; with several and
//!   no choice the error lists them (UID, description, slice count).
//! - **Order and spacing.** Slices are ordered by `ImagePositionPatient` projected on the slice
//!   normal (the cross product of `ImageOrientationPatient`'s row and column directions); the
//!   slice step comes from those positions, never from `SliceThickness`. Steps that differ from
//!   the series' median step by more than [`series::SPACING_TOLERANCE`] of it (at least
//!   [`series::MIN_TOLERANCE_MM`]) are refused: a gap (a step that is a whole multiple: slices
//!   missing) or uneven spacing, naming the two files; so are two slices at one position, a
//!   position off the line through the others, mixed image sizes, sample types,
//!   orientations, pixel spacings or rescales, and missing orientation or position. A
//!   constant in-plane drift of the positions (gantry tilt) is kept as a shear of the
//!   placement, with a note.
//! - **Frame.** DICOM places voxels in the patient frame LPS (+x toward the patient's left,
//!   +y posterior, +z head), in mm. Sutura's world frame is the one its `NIfTI` reader uses: the
//!   `NIfTI` sform/qform taken as they are, which by the NIfTI-1 standard is RAS (+x right,
//!   +y anterior, +z head). So a DICOM series is placed in RAS: `world_from_voxel` is the LPS
//!   placement with its x and y rows negated (the convention of nibabel and of DICOM-to-NIfTI
//!   converters), and a series and its `NIfTI` conversion open at the same world coordinates.
//!   Voxel `i` runs along a row (increasing column), `j` down the columns (increasing row),
//!   `k` along the slice normal: column `i` of the LPS placement is the row direction times
//!   `PixelSpacing`\[1\], column `j` the column direction times `PixelSpacing`\[0\], column `k` the
//!   step from the first slice's position to the last's over the slice count, and the origin
//!   is the first slice's `ImagePositionPatient`.
//! - **Values.** 8- and 16-bit samples, unsigned and signed, uncompressed (implicit and
//!   explicit VR little endian, explicit big endian) or encapsulated in what the crates decode
//!   in pure Rust (RLE lossless, JPEG baseline, extended and lossless); JPEG 2000, JPEG-LS and
//!   the deflated syntax are refused as unsupported. 8-bit unsigned stays `u8`, 16-bit stays
//!   `u16`/`i16`, 8-bit signed is widened to `i16`; with fewer bits stored than allocated,
//!   signed samples are sign-extended from their highest stored bit and unsigned ones keep
//!   their stored bits only. `RescaleSlope` and
//!   `RescaleIntercept` become the volume's [`Rescale`](crate::volume::Rescale).
//! - **Safety.** Each file's lengths are checked against its size before the parser reads it
//!   (see [`walk`]), decoded pixels are checked against the header, and a compressed frame may
//!   not claim more than 1024 times its own bytes; parser and decoder panics become errors.
//!
//! [`open`] reads a series whole; [`DicomSlices`] reads it a slab of slices at a time.

mod file;
pub mod series;
mod walk;

#[cfg(test)]
mod tests;

pub use series::{SeriesSummary, dicom_files, list_series};

use super::slices::SliceReader;
use super::{IoError, OpenOptions, Progress};
use crate::geometry::Affine3;
use crate::volume::{DType, Rescale, SpacingOrigin, Volume, VoxelBuffer, Voxels};
use rayon::prelude::*;
use std::path::Path;

/// Whether a file is DICOM by its first bytes (the `DICM` marker at byte 128).
#[must_use]
pub fn has_dicom_marker(path: &Path) -> bool {
    file::has_marker(path)
}

/// A DICOM series read slab by slab: headers are read when opened, each slab's files are
/// decoded in parallel.
#[derive(Debug)]
pub struct DicomSlices {
    series: series::Series,
}

impl DicomSlices {
    /// Finds, checks and orders the series at `path` (see the module docs).
    pub fn open(path: &Path, options: &OpenOptions) -> Result<Self, IoError> {
        Ok(Self {
            series: series::open_series(path, options)?,
        })
    }

    /// The files of the series, in slice order.
    pub fn files(&self) -> impl Iterator<Item = &Path> {
        self.series.slices.iter().map(|s| s.path.as_path())
    }

    /// Reads the whole series into a volume.
    pub fn into_volume(mut self, progress: &Progress<'_>) -> Result<Volume, IoError> {
        let [nx, ny, nz] = self.series.dims;
        let n = nx * ny * nz;
        let path = self.series.path.clone();
        let voxels = match self.series.dtype {
            DType::U8 => {
                let mut b = VoxelBuffer::<u8>::zeroed(n).map_err(|e| IoError::os(&path, e))?;
                self.read_slices(0, b.as_bytes_mut(), progress)?;
                Voxels::U8(b)
            }
            DType::U16 => {
                let mut b = VoxelBuffer::<u16>::zeroed(n).map_err(|e| IoError::os(&path, e))?;
                self.read_slices(0, b.as_bytes_mut(), progress)?;
                Voxels::U16(b)
            }
            DType::I16 | DType::F32 => {
                let mut b = VoxelBuffer::<i16>::zeroed(n).map_err(|e| IoError::os(&path, e))?;
                self.read_slices(0, b.as_bytes_mut(), progress)?;
                Voxels::I16(b)
            }
        };
        let s = self.series;
        let mut v = Volume::new(s.dims, s.world_from_voxel, voxels, s.rescale)
            .map_err(|e| IoError::volume(&path, &e))?;
        v.notes = s.notes;
        v.spacing_origin = s.spacing_origin;
        Ok(v)
    }
}

impl SliceReader for DicomSlices {
    fn path(&self) -> &Path {
        &self.series.path
    }
    fn dims(&self) -> [usize; 3] {
        self.series.dims
    }
    fn dtype(&self) -> DType {
        self.series.dtype
    }
    fn world_from_voxel(&self) -> Affine3 {
        self.series.world_from_voxel
    }
    fn rescale(&self) -> Option<Rescale> {
        self.series.rescale
    }
    fn notes(&self) -> Vec<String> {
        self.series.notes.clone()
    }
    fn spacing_origin(&self) -> SpacingOrigin {
        self.series.spacing_origin
    }
    fn read_slices(
        &mut self,
        k0: usize,
        dst: &mut [u8],
        progress: &Progress<'_>,
    ) -> Result<(), IoError> {
        let per = self.slice_bytes();
        let depth = self.series.dims[2];
        let n = dst.len() / per;
        let path = &self.series.path;
        if !dst.len().is_multiple_of(per) || k0 + n > depth {
            return Err(IoError::usage(
                path,
                format!(
                    "a slab of {} bytes from slice {k0} does not fit slices of {per} bytes in 0..{depth}",
                    dst.len()
                ),
            ));
        }
        let cancelled = || IoError::Cancelled { path: path.clone() };
        let done = std::sync::atomic::AtomicU64::new(k0 as u64);
        dst.par_chunks_mut(per)
            .zip(self.series.slices[k0..k0 + n].par_iter())
            .try_for_each(|(dst, header)| {
                if progress.is_cancelled() {
                    return Err(cancelled());
                }
                file::read_pixels(header, dst)?;
                let d = done.fetch_add(1, std::sync::atomic::Ordering::Relaxed) + 1;
                if progress.report(d, depth as u64) {
                    Ok(())
                } else {
                    Err(cancelled())
                }
            })
    }
}

/// Reads the DICOM series at `path` (a folder, or a file of the series) whole.
pub fn open(
    path: &Path,
    options: &OpenOptions,
    progress: &Progress<'_>,
) -> Result<Volume, IoError> {
    DicomSlices::open(path, options)?.into_volume(progress)
}
