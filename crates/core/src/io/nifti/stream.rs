//! `NIfTI` read a slab of slices at a time ([`SliceReader`]), with the same header checks,
//! placement and rescale as [`super::open`].
//!
//! - Uncompressed voxels of a type Sutura stores (`uint8`, `int16`, `uint16`, `float32`): each
//!   slab is one positioned read (in parallel parts), byte-swapped if the file is big-endian.
//! - gzip: the stream is inflated once, front to back; a slab continues where the last ended
//!   (a reader can only go forward).
//! - Types that [`super::open`] narrows by the range of all values (`int8`, `int32`, ...): the
//!   narrowest type is only known after every voxel is seen, so such files are loaded whole and
//!   served from memory, with a note saying so.

use super::read::{self, Src};
use crate::geometry::Affine3;
use crate::io::slices::{SliceReader, VolumeSlices};
use crate::io::{IoError, OpenOptions, Progress};
use crate::volume::{DType, Rescale, SpacingOrigin};
use flate2::read::MultiGzDecoder;
use rayon::prelude::*;
use std::fs::File;
use std::io::{BufReader, Read};
use std::os::unix::fs::FileExt;
use std::path::{Path, PathBuf};

/// Bytes per positioned read of a slab (one rayon task each).
const PART_BYTES: usize = 8 << 20;

/// The slab reader for a `NIfTI` file (see the module docs).
pub fn open_slices(path: &Path, options: &OpenOptions) -> Result<Box<dyn SliceReader>, IoError> {
    let files = read::locate(path);
    let prefix = read::read_prefix(&files.header)?;
    let h = super::Header::parse(&prefix)
        .map_err(|e| IoError::corrupt(&files.header, e.to_string()))?;
    let data_path = if h.single_file {
        files.header.clone()
    } else if files.data == files.header {
        return Err(IoError::usage(
            &files.header,
            "header says the voxels are in a separate .img file, and none was found beside it",
        ));
    } else {
        files.data.clone()
    };
    let gz = read::is_gzip(&data_path)?;
    let data_len = if gz {
        None
    } else {
        Some(
            std::fs::metadata(&data_path)
                .map_err(|e| IoError::os(&data_path, e))?
                .len(),
        )
    };
    let plan = read::plan(&files.header, &h, options, data_len)?;
    let dtype = match plan.src {
        Src::U8 => DType::U8,
        Src::I16 => DType::I16,
        Src::U16 => DType::U16,
        Src::F32 => DType::F32,
        other => {
            let mut volume = super::open(path, options, &Progress::none())?;
            volume.notes.push(format!(
                "{} voxels are narrowed by the range of all values, so the file was read whole",
                other.name()
            ));
            return Ok(Box::new(VolumeSlices::new(Box::new(volume), path)));
        }
    };
    let reader = if gz {
        let mut dec = read::gz_reader(&data_path)?;
        let skipped = std::io::copy(&mut (&mut dec).take(plan.offset), &mut std::io::sink())
            .map_err(|e| read::gz_error(&data_path, e))?;
        if skipped < plan.offset {
            return Err(IoError::corrupt(
                &data_path,
                format!(
                    "vox_offset {} is beyond the end of the decompressed file ({skipped} bytes)",
                    plan.offset
                ),
            ));
        }
        Data::Gz { dec, next_k: 0 }
    } else {
        Data::Plain(File::open(&data_path).map_err(|e| IoError::os(&data_path, e))?)
    };
    Ok(Box::new(NiftiSlices {
        path: path.to_owned(),
        data_path,
        dims: plan.dims,
        dtype,
        offset: plan.offset,
        swap: h.big_endian != cfg!(target_endian = "big"),
        world_from_voxel: plan.world_from_voxel,
        rescale: plan.rescale,
        notes: plan.notes,
        data: reader,
    }))
}

#[allow(
    clippy::large_enum_variant,
    reason = "one per reader, never moved after opening"
)]
enum Data {
    Plain(File),
    Gz {
        dec: MultiGzDecoder<BufReader<File>>,
        /// The slice the stream is at.
        next_k: usize,
    },
}

struct NiftiSlices {
    path: PathBuf,
    data_path: PathBuf,
    dims: [usize; 3],
    dtype: DType,
    offset: u64,
    swap: bool,
    world_from_voxel: Affine3,
    rescale: Option<Rescale>,
    notes: Vec<String>,
    data: Data,
}

impl NiftiSlices {
    fn truncated(&self, want: u64) -> IoError {
        IoError::corrupt(
            &self.data_path,
            format!(
                "truncated: expected {want} bytes of voxel data after offset {}",
                self.offset
            ),
        )
    }
}

impl SliceReader for NiftiSlices {
    fn path(&self) -> &Path {
        &self.path
    }
    fn dims(&self) -> [usize; 3] {
        self.dims
    }
    fn dtype(&self) -> DType {
        self.dtype
    }
    fn world_from_voxel(&self) -> Affine3 {
        self.world_from_voxel
    }
    fn rescale(&self) -> Option<Rescale> {
        self.rescale
    }
    fn notes(&self) -> Vec<String> {
        self.notes.clone()
    }
    fn spacing_origin(&self) -> SpacingOrigin {
        SpacingOrigin::File
    }

    fn read_slices(
        &mut self,
        k0: usize,
        dst: &mut [u8],
        progress: &Progress<'_>,
    ) -> Result<(), IoError> {
        let per = self.slice_bytes();
        let n = dst.len() / per;
        let total = (self.dims[2] * per) as u64;
        if !dst.len().is_multiple_of(per) || k0 + n > self.dims[2] {
            return Err(IoError::usage(
                &self.path,
                format!(
                    "slab of {} bytes from slice {k0} does not fit the scan",
                    dst.len()
                ),
            ));
        }
        match &mut self.data {
            Data::Plain(file) => {
                let base = self.offset + (k0 * per) as u64;
                let file = &*file;
                let data_path = &self.data_path;
                dst.par_chunks_mut(PART_BYTES)
                    .enumerate()
                    .try_for_each(|(i, part)| {
                        file.read_exact_at(part, base + (i * PART_BYTES) as u64)
                            .map_err(|e| {
                                if e.kind() == std::io::ErrorKind::UnexpectedEof {
                                    IoError::corrupt(
                                        data_path,
                                        format!(
                                            "truncated: voxel data ends before slice {}",
                                            k0 + n
                                        ),
                                    )
                                } else {
                                    IoError::os(data_path, e)
                                }
                            })
                    })?;
            }
            Data::Gz { dec, next_k } => {
                if k0 < *next_k {
                    return Err(IoError::usage(
                        &self.path,
                        format!(
                            "a gzip stream reads forward only: slice {k0} asked after {}",
                            *next_k
                        ),
                    ));
                }
                let skip = ((k0 - *next_k) * per) as u64;
                let skipped = std::io::copy(&mut (&mut *dec).take(skip), &mut std::io::sink())
                    .map_err(|e| read::gz_error(&self.data_path, e))?;
                let got =
                    read::read_full(dec, dst).map_err(|e| read::gz_error(&self.data_path, e))?;
                if skipped < skip || got < dst.len() {
                    let want = total;
                    return Err(self.truncated(want));
                }
                if let Data::Gz { next_k, .. } = &mut self.data {
                    *next_k = k0 + n;
                }
            }
        }
        if self.swap {
            read::swap_in_place(dst, self.dtype.size_bytes());
        }
        if progress.report((k0 + n) as u64, self.dims[2] as u64) {
            Ok(())
        } else {
            Err(IoError::Cancelled {
                path: self.path.clone(),
            })
        }
    }
}
