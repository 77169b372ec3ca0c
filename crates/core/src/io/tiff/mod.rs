//! TIFF scans: a folder of single-page slices, or one multi-page (Big)TIFF whose pages are the
//! z slices; and writers for both.
//!
//! Reading goes in two steps. [`page`] reads each page's directory (through the `tiff` crate's
//! tag API) into a [`page::PageInfo`]: its size and sample type, checked against what Sutura
//! stores (one sample per pixel of `u8`, `u16`, `i16` or `f32`), and, for every layout
//! [`chunks`] covers (uncompressed, LZW or Deflate strips and tiles, with or without a
//! predictor), the byte ranges of its chunks. Then every page is decoded in parallel straight
//! into its own disjoint part of one [`VoxelBuffer`](crate::volume::VoxelBuffer): by [`chunks`]
//! (positioned reads, inflate or LZW into the destination, byte order and predictor undone in
//! place), or, for the rest (`PackBits`, white-is-zero), by the crate's decoder, which writes
//! native-endian samples into the same destination.
//!
//! Every page must match the first in width, height and sample type. Voxel size: the caller's,
//! else the full 3D size that Sutura's writers record as JSON in the first page's
//! `ImageDescription` (`{"voxel_size_mm":[x,y,z]}`), else the resolution tags if present and
//! plausible (slice spacing taken equal to the pixel width, with a note), else 1 mm with a note.
//!
//! Submodules: [`page`] (one page: probe and decode), [`chunks`] (our own strip and tile
//! decoder), [`folder`] (listing and natural order), [`write`] (writers).

mod chunks;
mod folder;
mod ifd;
mod page;
mod stream;
mod write;

pub use folder::list_slices;
pub use stream::{FolderSlices, PageSlices};
pub use write::{WriteOptions, write_multipage, write_stack, write_stack_with};

use super::{IoError, OpenOptions, Progress};
use crate::geometry::Affine3;
use crate::volume::{DType, SpacingOrigin, Volume, VoxelBuffer, Voxels};
use chunks::Scratch;
use page::{PageInfo, Resolution};
use rayon::prelude::*;
use std::fs::File;
use std::io::BufReader;
use std::path::Path;
use std::sync::atomic::{AtomicU64, Ordering};

/// Opens a folder of single-page TIFF slices (`.tif`/`.tiff`, hidden files ignored) in natural
/// order of their names (`s2` before `s10`).
pub fn open_folder(
    path: &Path,
    options: &OpenOptions,
    progress: &Progress<'_>,
) -> Result<Volume, IoError> {
    let files = list_slices(path, options.limits.max_slices)?;
    let first_path = &files[0];
    let (mut first_dec, walk) = page::open_decoder(first_path)?;
    let first = page::probe(&mut first_dec, first_path)?;
    let described = page::described_voxel_size(&mut first_dec, &walk, first_path)?;
    drop(first_dec);
    let dims = [
        u64::from(first.shape.width),
        u64::from(first.shape.height),
        files.len() as u64,
    ];
    let mut voxels = allocate(path, &options.limits, dims, first.shape.dtype)?;
    let slice_bytes = first.shape.bytes();
    let total = files.len() as u64;
    let done = AtomicU64::new(0);
    let first_name = file_name(first_path);
    bytes_mut(&mut voxels)
        .par_chunks_mut(slice_bytes)
        .zip(files.par_iter())
        .try_for_each_init(Scratch::default, |scratch, (dst, file)| {
            if progress.is_cancelled() {
                return Err(IoError::Cancelled {
                    path: path.to_owned(),
                });
            }
            let (mut dec, _) = page::open_decoder(file)?;
            let info = page::probe(&mut dec, file)?;
            if info.shape != first.shape {
                return Err(IoError::inconsistent(
                    file,
                    format!(
                        "{}: {}, expected {} like {first_name}",
                        file_name(file),
                        info.shape,
                        first.shape
                    ),
                ));
            }
            page::decode(&mut dec, &info, file, dst, scratch)?;
            let n = done.fetch_add(1, Ordering::Relaxed) + 1;
            if progress.report(n, total) {
                Ok(())
            } else {
                Err(IoError::Cancelled {
                    path: path.to_owned(),
                })
            }
        })?;
    finish(path, options, dims, voxels, described, first.resolution)
}

/// Opens a single- or multi-page (Big)TIFF file; each page is a z slice.
pub fn open_file(
    path: &Path,
    options: &OpenOptions,
    progress: &Progress<'_>,
) -> Result<Volume, IoError> {
    let (mut dec, infos, described) = walk_pages(path, options)?;
    let shape = infos[0].shape;
    let dims = [
        u64::from(shape.width),
        u64::from(shape.height),
        infos.len() as u64,
    ];
    let mut voxels = allocate(path, &options.limits, dims, shape.dtype)?;
    let page_bytes = shape.bytes();
    let total = infos.len() as u64;
    let done = AtomicU64::new(0);
    let report = || {
        let n = done.fetch_add(1, Ordering::Relaxed) + 1;
        if progress.report(n, total) {
            Ok(())
        } else {
            Err(IoError::Cancelled {
                path: path.to_owned(),
            })
        }
    };
    let dst_all = bytes_mut(&mut voxels);
    if infos.iter().all(|i| i.chunks.is_some()) {
        // Every page decoded by us: positioned reads from one shared handle, pages in parallel.
        let file = dec.inner().get_ref();
        dst_all
            .par_chunks_mut(page_bytes)
            .zip(infos.par_iter())
            .enumerate()
            .try_for_each_init(Scratch::default, |scratch, (index, (dst, info))| {
                if progress.is_cancelled() {
                    return Err(IoError::Cancelled {
                        path: path.to_owned(),
                    });
                }
                if let Some(plan) = &info.chunks {
                    chunks::decode_page(file, plan, shape, path, dst, scratch)
                        .map_err(|e| page::with_page(e, path, index))?;
                }
                report()
            })?;
    } else {
        drop(dec);
        // Some pages need the crate's decoder: runs of consecutive pages, each run with its own
        // handle and decoder that walks the chain once to its first page and then page by page.
        let runs = (rayon::current_num_threads() * 4).clamp(1, infos.len());
        let per_run = infos.len().div_ceil(runs);
        dst_all
            .par_chunks_mut(page_bytes * per_run)
            .enumerate()
            .try_for_each_init(Scratch::default, |scratch, (run, dst_run)| {
                let start = run * per_run;
                // every directory was checked in the walk above
                let (mut dec, _) = page::open_decoder(path)?;
                page::catch(path, || dec.seek_to_image(start))
                    .map_err(|e| page::with_page(e, path, start))?;
                for (offset, dst) in dst_run.chunks_mut(page_bytes).enumerate() {
                    let index = start + offset;
                    if progress.is_cancelled() {
                        return Err(IoError::Cancelled {
                            path: path.to_owned(),
                        });
                    }
                    if offset > 0 {
                        page::catch(path, || dec.next_image())
                            .map_err(|e| page::with_page(e, path, index))?;
                    }
                    page::decode(&mut dec, &infos[index], path, dst, scratch)
                        .map_err(|e| page::with_page(e, path, index))?;
                    report()?;
                }
                Ok(())
            })?;
    }
    let resolution = infos[0].resolution;
    finish(path, options, dims, voxels, described, resolution)
}

/// One sequential walk over a multi-page file's directory chain: every page's shape (all
/// equal, checked), the byte ranges of uncompressed pages, and the voxel size the first page
/// describes. The crate refuses cyclic chains; the count is capped by the limits. The decoder
/// is returned on the last page; its file handle serves positioned reads.
fn walk_pages(
    path: &Path,
    options: &OpenOptions,
) -> Result<(FileDecoder, Vec<PageInfo>, page::Described), IoError> {
    let (mut dec, mut walk) = page::open_decoder(path)?;
    let first = page::probe(&mut dec, path)?;
    let described = page::described_voxel_size(&mut dec, &walk, path)?;
    let mut infos = vec![first];
    while dec.more_images() {
        if infos.len() as u64 >= options.limits.max_axis {
            return Err(IoError::LimitExceeded {
                path: path.to_owned(),
                what: "number of pages".into(),
                limit: options.limits.max_axis.to_string(),
            });
        }
        let index = infos.len();
        page::next_image(&mut dec, &mut walk, path)?;
        let info = page::probe(&mut dec, path).map_err(|e| page::with_page(e, path, index))?;
        if info.shape != infos[0].shape {
            return Err(IoError::inconsistent(
                path,
                format!(
                    "page {index}: {}, expected {} like page 0",
                    info.shape, infos[0].shape
                ),
            ));
        }
        infos.push(info);
    }
    Ok((dec, infos, described))
}

fn file_name(p: &Path) -> String {
    p.file_name().map_or_else(
        || p.display().to_string(),
        |n| n.to_string_lossy().into_owned(),
    )
}

/// Checks the limits, then allocates zeroed voxels of `dtype`.
fn allocate(
    path: &Path,
    limits: &super::Limits,
    dims: [u64; 3],
    dtype: DType,
) -> Result<Voxels, IoError> {
    let n = limits.check(path, dims, dtype.size_bytes() as u64)?;
    let os = |e| IoError::os(path, e);
    Ok(match dtype {
        DType::U8 => Voxels::U8(VoxelBuffer::zeroed(n).map_err(os)?),
        DType::U16 => Voxels::U16(VoxelBuffer::zeroed(n).map_err(os)?),
        DType::I16 => Voxels::I16(VoxelBuffer::zeroed(n).map_err(os)?),
        DType::F32 => Voxels::F32(VoxelBuffer::zeroed(n).map_err(os)?),
    })
}

fn bytes_mut(v: &mut Voxels) -> &mut [u8] {
    match v {
        Voxels::U8(b) => b.as_bytes_mut(),
        Voxels::U16(b) => b.as_bytes_mut(),
        Voxels::I16(b) => b.as_bytes_mut(),
        Voxels::F32(b) => b.as_bytes_mut(),
    }
}

fn finish(
    path: &Path,
    options: &OpenOptions,
    dims: [u64; 3],
    voxels: Voxels,
    described: Result<Option<[f64; 3]>, String>,
    resolution: Option<Resolution>,
) -> Result<Volume, IoError> {
    let (spacing, mut notes, origin) = placement(path, options, described, resolution)?;
    // dims passed the limits check, so they fit in usize
    let dims = dims.map(|d| usize::try_from(d).unwrap_or(usize::MAX));
    let mut vol = Volume::new(dims, Affine3::from_spacing(spacing), voxels, None)
        .map_err(|e| IoError::volume(path, &e))?;
    vol.notes.append(&mut notes);
    vol.spacing_origin = origin;
    Ok(vol)
}

/// The voxel size, the notes on where it came from, and its origin: the caller's size, else
/// the description's, else the resolution tags (`voxel_size`).
fn placement(
    path: &Path,
    options: &OpenOptions,
    described: Result<Option<[f64; 3]>, String>,
    resolution: Option<Resolution>,
) -> Result<([f64; 3], Vec<String>, SpacingOrigin), IoError> {
    Ok(match (options.voxel_size_mm, described) {
        (None, Ok(Some(s))) => (s, Vec::new(), SpacingOrigin::File),
        (given, described) => {
            let (s, note) = voxel_size(path, given, resolution)?;
            let why = described.err().filter(|_| given.is_none());
            let origin = if given.is_some() {
                SpacingOrigin::Caller
            } else {
                SpacingOrigin::Guessed
            };
            (s, why.into_iter().chain(note).collect(), origin)
        }
    })
}

/// Resolutions of a screen or a drawing program's default, not of a scanner (common practice:
/// image editors write 72 or 96 pixels per inch when they know nothing better).
const DEFAULT_DPI: [f64; 2] = [72.0, 96.0];

/// The voxel size in mm and a note saying where it came from.
fn voxel_size(
    path: &Path,
    given_mm: Option<[f64; 3]>,
    resolution: Option<Resolution>,
) -> Result<([f64; 3], Option<String>), IoError> {
    if let Some(s) = given_mm {
        if s.iter().all(|v| v.is_finite() && *v > 0.0) {
            return Ok((s, None));
        }
        return Err(IoError::usage(
            path,
            format!(
                "voxel size {} x {} x {} mm is not positive and finite",
                s[0], s[1], s[2]
            ),
        ));
    }
    if let Some(r) = resolution {
        // TIFF 6.0, ResolutionUnit: 2 = inch, 3 = centimetre; the resolutions are pixels per unit.
        let mm_per_unit = match r.unit {
            2 => Some(25.4),
            3 => Some(10.0),
            _ => None,
        };
        let plausible = |px_per_unit: f64| {
            px_per_unit.is_finite()
                && px_per_unit > 0.0
                && !(r.unit == 2 && DEFAULT_DPI.contains(&px_per_unit))
        };
        if let Some(mm) = mm_per_unit
            && plausible(r.x)
            && plausible(r.y)
        {
            let sx = mm / r.x;
            let sy = mm / r.y;
            // between 1 nm and 1 m per pixel (common practice: anything else is a bogus tag)
            if (1e-6..=1e3).contains(&sx) && (1e-6..=1e3).contains(&sy) {
                return Ok((
                    [sx, sy, sx],
                    Some(format!(
                        "voxel size {sx} x {sy} x {sx} mm from the TIFF resolution tags; TIFF stores no slice spacing, so it was taken equal to the pixel width"
                    )),
                ));
            }
        }
    }
    Ok((
        [1.0; 3],
        Some("voxel size unknown (no usable TIFF resolution tags): 1 mm assumed; give the real voxel size".into()),
    ))
}

/// A decoder over a buffered file.
type FileDecoder = tiff::decoder::Decoder<BufReader<File>>;

#[cfg(test)]
mod tests;
