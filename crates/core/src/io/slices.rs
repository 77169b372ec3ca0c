//! Reading a scan a slab of slices at a time, for conversions whose memory must not grow with
//! the scan.
//!
//! A [`SliceReader`] knows a scan's grid, type and placement from its headers and decodes any
//! run of consecutive `k` slices into a caller's buffer (native byte order, `i` fastest, then
//! `j`, then `k`: the memory order of [`Volume`]). [`open_slices`] picks the reader for a path:
//! TIFF folders, multi-page (Big)TIFF files and uncompressed `NIfTI` files are read slab by
//! slab (only the slices asked for are touched), and so are DICOM series (the files of a
//! slab decoded in parallel); `.nii.gz` streams through its gzip member
//! once, front to back; a [`Volume`] already in memory reads from itself ([`VolumeSlices`]).

use super::{IoError, OpenOptions, Progress};
use crate::geometry::Affine3;
use crate::volume::{DType, Rescale, SpacingOrigin, Volume, VolumeSource};
use std::path::{Path, PathBuf};

/// A scan read slab by slab (see the module docs).
pub trait SliceReader: Send {
    /// The scan's path (for messages).
    fn path(&self) -> &Path;
    /// Voxels along `i`, `j`, `k`.
    fn dims(&self) -> [usize; 3];
    fn dtype(&self) -> DType;
    fn world_from_voxel(&self) -> Affine3;
    fn rescale(&self) -> Option<Rescale>;
    /// What the reader did that the user should know (as [`Volume::notes`]).
    fn notes(&self) -> Vec<String>;
    fn spacing_origin(&self) -> SpacingOrigin;
    /// Decodes slices `k0 .. k0 + n` into `dst`, which holds exactly `n` slices' bytes.
    /// Readers that can only go forward refuse a `k0` before their position.
    fn read_slices(
        &mut self,
        k0: usize,
        dst: &mut [u8],
        progress: &Progress<'_>,
    ) -> Result<(), IoError>;

    /// Bytes of one slice.
    fn slice_bytes(&self) -> usize {
        let d = self.dims();
        d[0] * d[1] * self.dtype().size_bytes()
    }
}

/// Slices of a volume in memory (tests, derived volumes, formats read whole).
pub struct VolumeSlices<V> {
    volume: V,
    path: PathBuf,
}

impl<V: std::ops::Deref<Target = Volume> + Send> VolumeSlices<V> {
    /// Reads `volume`; `path` names it in messages.
    pub fn new(volume: V, path: &Path) -> Self {
        Self {
            volume,
            path: path.to_owned(),
        }
    }
}

impl<V: std::ops::Deref<Target = Volume> + Send> SliceReader for VolumeSlices<V> {
    fn path(&self) -> &Path {
        &self.path
    }
    fn dims(&self) -> [usize; 3] {
        self.volume.dims()
    }
    fn dtype(&self) -> DType {
        self.volume.dtype()
    }
    fn world_from_voxel(&self) -> Affine3 {
        *self.volume.world_from_voxel()
    }
    fn rescale(&self) -> Option<Rescale> {
        self.volume.rescale()
    }
    fn notes(&self) -> Vec<String> {
        self.volume.notes.clone()
    }
    fn spacing_origin(&self) -> SpacingOrigin {
        self.volume.spacing_origin
    }
    fn read_slices(
        &mut self,
        k0: usize,
        dst: &mut [u8],
        _progress: &Progress<'_>,
    ) -> Result<(), IoError> {
        let per = self.slice_bytes();
        let start = k0 * per;
        let src: &[u8] = crate::with_voxels!(self.volume.voxels(), |s| bytemuck::cast_slice(s));
        let Some(part) = src.get(start..start + dst.len()) else {
            return Err(IoError::usage(
                &self.path,
                format!("slices from {k0} are outside the scan's {}", self.dims()[2]),
            ));
        };
        dst.copy_from_slice(part);
        Ok(())
    }
}

/// Slices of any [`VolumeSource`]'s full-resolution level, read a slab at a time through its
/// block reads (an OME-Zarr store converted again, with other chunks or another codec).
pub struct SourceSlices<S> {
    source: S,
    path: PathBuf,
    notes: Vec<String>,
}

impl<S: VolumeSource> SourceSlices<S> {
    /// Reads `source`; `path` names it in messages.
    pub fn new(source: S, path: &Path) -> Self {
        let notes = source.notes().to_vec();
        Self {
            source,
            path: path.to_owned(),
            notes,
        }
    }
}

impl<S: VolumeSource> SliceReader for SourceSlices<S> {
    fn path(&self) -> &Path {
        &self.path
    }
    fn dims(&self) -> [usize; 3] {
        self.source.dims()
    }
    fn dtype(&self) -> DType {
        self.source.dtype()
    }
    fn world_from_voxel(&self) -> Affine3 {
        self.source.world_from_voxel()
    }
    fn rescale(&self) -> Option<Rescale> {
        self.source.rescale()
    }
    fn notes(&self) -> Vec<String> {
        self.notes.clone()
    }
    fn spacing_origin(&self) -> SpacingOrigin {
        self.source.spacing_origin()
    }
    fn read_slices(
        &mut self,
        k0: usize,
        dst: &mut [u8],
        progress: &Progress<'_>,
    ) -> Result<(), IoError> {
        let [nx, ny, nz] = self.dims();
        let per = self.slice_bytes();
        let n = dst.len().checked_div(per).unwrap_or(0);
        if n == 0 || n * per != dst.len() || k0 + n > nz {
            return Err(IoError::usage(
                &self.path,
                format!("slices {k0}..{} are outside the scan's {nz}", k0 + n),
            ));
        }
        let block = self
            .source
            .read_block(0, &[0..nx, 0..ny, k0..k0 + n])
            .map_err(|e| IoError::corrupt(&self.path, e.to_string()))?;
        let src: &[u8] = crate::with_voxels!(block.voxels(), |s| bytemuck::cast_slice(s));
        dst.copy_from_slice(src);
        if progress.report((k0 + n) as u64, nz as u64) {
            Ok(())
        } else {
            Err(IoError::Cancelled {
                path: self.path.clone(),
            })
        }
    }
}

/// The slab reader for a scan of any supported format (see the module docs); `voxel_size_mm`
/// in `options` overrides the file's as [`super::open`] does.
pub fn open_slices(path: &Path, options: &OpenOptions) -> Result<Box<dyn SliceReader>, IoError> {
    match super::detect(path)? {
        super::Format::TiffFolder => Ok(Box::new(super::tiff::FolderSlices::open(path, options)?)),
        super::Format::Tiff => Ok(Box::new(super::tiff::PageSlices::open(path, options)?)),
        super::Format::Nifti => super::nifti::open_slices(path, options),
        super::Format::Dicom => Ok(Box::new(super::dicom::DicomSlices::open(path, options)?)),
    }
}
