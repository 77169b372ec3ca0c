//! TIFF scans read a slab of slices at a time ([`SliceReader`]): the same page decoding as the
//! whole-scan loaders, into the caller's slab instead of one buffer for the scan.
//!
//! - [`FolderSlices`]: the folder's files are listed and the first probed when opened; each
//!   slab decodes its files in parallel, checking each against the first.
//! - [`PageSlices`]: the directory chain is walked once when opened (every page's shape and,
//!   for the layouts our chunk reader covers, its chunks' byte ranges); a slab decodes its pages
//!   in parallel by positioned reads from one handle, or, for pages the crate must decode, in
//!   runs that each seek to their first page.

use super::chunks::{self, Scratch};
use super::page::{self, PageInfo, Shape};
use super::{FileDecoder, file_name, placement};
use crate::geometry::Affine3;
use crate::io::slices::SliceReader;
use crate::io::{IoError, OpenOptions, Progress};
use crate::volume::{DType, Rescale, SpacingOrigin};
use rayon::prelude::*;
use std::path::{Path, PathBuf};

/// What both readers know once opened.
struct Header {
    path: PathBuf,
    shape: Shape,
    depth: usize,
    spacing_mm: [f64; 3],
    notes: Vec<String>,
    origin: SpacingOrigin,
}

impl Header {
    fn new(
        path: &Path,
        options: &OpenOptions,
        first: &PageInfo,
        depth: usize,
        described: Result<Option<[f64; 3]>, String>,
    ) -> Result<Self, IoError> {
        let dims = [
            u64::from(first.shape.width),
            u64::from(first.shape.height),
            depth as u64,
        ];
        options
            .limits
            .check(path, dims, first.shape.dtype.size_bytes() as u64)?;
        let (spacing_mm, notes, origin) = placement(path, options, described, first.resolution)?;
        Ok(Self {
            path: path.to_owned(),
            shape: first.shape,
            depth,
            spacing_mm,
            notes,
            origin,
        })
    }

    fn dims(&self) -> [usize; 3] {
        [
            self.shape.width as usize,
            self.shape.height as usize,
            self.depth,
        ]
    }

    /// Checks a slab request; returns the number of slices.
    fn check(&self, k0: usize, dst: &[u8]) -> Result<usize, IoError> {
        let per = self.shape.bytes();
        let n = dst.len() / per;
        if !dst.len().is_multiple_of(per) || k0 + n > self.depth {
            return Err(IoError::usage(
                &self.path,
                format!(
                    "a slab of {} bytes from slice {k0} does not fit slices of {per} bytes in 0..{}",
                    dst.len(),
                    self.depth
                ),
            ));
        }
        Ok(n)
    }
}

macro_rules! header_accessors {
    () => {
        fn path(&self) -> &Path {
            &self.header.path
        }
        fn dims(&self) -> [usize; 3] {
            self.header.dims()
        }
        fn dtype(&self) -> DType {
            self.header.shape.dtype
        }
        fn world_from_voxel(&self) -> Affine3 {
            Affine3::from_spacing(self.header.spacing_mm)
        }
        fn rescale(&self) -> Option<Rescale> {
            None
        }
        fn notes(&self) -> Vec<String> {
            self.header.notes.clone()
        }
        fn spacing_origin(&self) -> SpacingOrigin {
            self.header.origin
        }
    };
}

fn cancelled(path: &Path) -> IoError {
    IoError::Cancelled {
        path: path.to_owned(),
    }
}

/// A folder of single-page TIFF slices, read slab by slab.
pub struct FolderSlices {
    header: Header,
    files: Vec<PathBuf>,
}

impl FolderSlices {
    /// Lists the folder and probes its first slice.
    pub fn open(path: &Path, options: &OpenOptions) -> Result<Self, IoError> {
        let files = super::list_slices(path, options.limits.max_slices)?;
        let (mut dec, walk) = page::open_decoder(&files[0])?;
        let first = page::probe(&mut dec, &files[0])?;
        let described = page::described_voxel_size(&mut dec, &walk, &files[0])?;
        let header = Header::new(path, options, &first, files.len(), described)?;
        Ok(Self { header, files })
    }
}

impl SliceReader for FolderSlices {
    header_accessors!();

    fn read_slices(
        &mut self,
        k0: usize,
        dst: &mut [u8],
        progress: &Progress<'_>,
    ) -> Result<(), IoError> {
        let n = self.header.check(k0, dst)?;
        let shape = self.header.shape;
        let first_name = file_name(&self.files[0]);
        let path = &self.header.path;
        dst.par_chunks_mut(shape.bytes())
            .zip(self.files[k0..k0 + n].par_iter())
            .try_for_each_init(Scratch::default, |scratch, (dst, file)| {
                if progress.is_cancelled() {
                    return Err(cancelled(path));
                }
                let (mut dec, _) = page::open_decoder(file)?;
                let info = page::probe(&mut dec, file)?;
                if info.shape != shape {
                    return Err(IoError::inconsistent(
                        file,
                        format!(
                            "{}: {}, expected {shape} like {first_name}",
                            file_name(file),
                            info.shape
                        ),
                    ));
                }
                page::decode(&mut dec, &info, file, dst, scratch)
            })?;
        if progress.report((k0 + n) as u64, self.header.depth as u64) {
            Ok(())
        } else {
            Err(cancelled(path))
        }
    }
}

/// A multi-page (Big)TIFF whose pages are the slices, read slab by slab.
pub struct PageSlices {
    header: Header,
    infos: Vec<PageInfo>,
    /// Open on the file; its handle serves the positioned reads.
    dec: FileDecoder,
}

impl PageSlices {
    /// Walks the directory chain once (see the module docs).
    pub fn open(path: &Path, options: &OpenOptions) -> Result<Self, IoError> {
        let (dec, infos, described) = super::walk_pages(path, options)?;
        let header = Header::new(path, options, &infos[0], infos.len(), described)?;
        Ok(Self { header, infos, dec })
    }
}

impl SliceReader for PageSlices {
    header_accessors!();

    fn read_slices(
        &mut self,
        k0: usize,
        dst: &mut [u8],
        progress: &Progress<'_>,
    ) -> Result<(), IoError> {
        let n = self.header.check(k0, dst)?;
        let shape = self.header.shape;
        let path = &self.header.path;
        let infos = &self.infos[k0..k0 + n];
        if infos.iter().all(|i| i.chunks.is_some()) {
            let file = self.dec.inner().get_ref();
            dst.par_chunks_mut(shape.bytes())
                .zip(infos.par_iter())
                .enumerate()
                .try_for_each_init(Scratch::default, |scratch, (offset, (dst, info))| {
                    if progress.is_cancelled() {
                        return Err(cancelled(path));
                    }
                    if let Some(plan) = &info.chunks {
                        chunks::decode_page(file, plan, shape, path, dst, scratch)
                            .map_err(|e| page::with_page(e, path, k0 + offset))?;
                    }
                    Ok(())
                })?;
        } else {
            let all = &self.infos;
            let runs = (rayon::current_num_threads() * 2).clamp(1, n);
            let per_run = n.div_ceil(runs);
            dst.par_chunks_mut(shape.bytes() * per_run)
                .enumerate()
                .try_for_each_init(Scratch::default, |scratch, (run, dst_run)| {
                    let start = k0 + run * per_run;
                    // every directory was checked in the walk at opening
                    let (mut dec, _) = page::open_decoder(path)?;
                    page::catch(path, || dec.seek_to_image(start))
                        .map_err(|e| page::with_page(e, path, start))?;
                    for (offset, dst) in dst_run.chunks_mut(shape.bytes()).enumerate() {
                        let index = start + offset;
                        if progress.is_cancelled() {
                            return Err(cancelled(path));
                        }
                        if offset > 0 {
                            page::catch(path, || dec.next_image())
                                .map_err(|e| page::with_page(e, path, index))?;
                        }
                        page::decode(&mut dec, &all[index], path, dst, scratch)
                            .map_err(|e| page::with_page(e, path, index))?;
                    }
                    Ok(())
                })?;
        }
        if progress.report((k0 + n) as u64, self.header.depth as u64) {
            Ok(())
        } else {
            Err(cancelled(path))
        }
    }
}
